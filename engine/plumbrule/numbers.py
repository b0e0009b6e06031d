"""Numbers as words on a page: every formatter the text, the messages and the report use.

Only the look of a number lives here; no value is computed. Cells keep full precision
(their number formats are in :mod:`plumbrule.workbook.cells`).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np


def is_number(v: Any) -> bool:
    """A finite real number (not text, not a bool, not blank)."""
    if v is None or isinstance(v, (str, bool, np.bool_)):
        return False
    try:
        return math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def readable(v: Any) -> str:
    """A number for reading: thousands separators, about four significant digits
    (1,480,000 / 1,235 / 12.35 / 1.235e-05); text as given, blank for None/NaN."""
    if isinstance(v, str):
        return v
    if v is None or isinstance(v, (bool, np.bool_)):
        return "" if v is None else str(v)
    try:
        v = float(v)
    except (TypeError, ValueError):
        return str(v)
    if not math.isfinite(v):
        return "" if v != v else ("inf" if v > 0 else "-inf")
    if v == 0:
        return "0"
    if v.is_integer() and abs(v) < 1e15:
        return f"{int(v):,}"
    a = abs(v)
    if a >= 1e9 or a < 1e-4:
        return f"{v:.3e}"
    if a >= 1000:
        return f"{v:,.0f}"
    return f"{v:.4g}"


def written(v: float) -> str:
    """A number as a reader would write it in a sentence: 1,480,000 / 1,234.5 / 0.0123
    (at most two decimals above 1)."""
    if not np.isfinite(v):
        return str(v)
    if v == int(v) and abs(v) < 1e15:
        return f"{int(v):,}"
    if abs(v) >= 1:
        return f"{v:,.2f}".rstrip("0").rstrip(".")
    return f"{v:.4g}"


def money(v: Any, blank: str = "") -> str:
    """Whole currency units with thousands separators; ``blank`` for a non-number."""
    return f"{float(v):,.0f}" if is_number(v) else blank


def p_value(v: Any) -> str:
    """'< 0.001' or three decimals; blank for a non-number."""
    if not is_number(v):
        return ""
    return "< 0.001" if v < 0.001 else f"{v:.3f}"


def signed_pct(x: float) -> str:
    """A signed percentage already in percent units: '+3.25 %', '-12.4 %'."""
    return f"{x:+.2f} %" if abs(x) < 10 else f"{x:+.1f} %"

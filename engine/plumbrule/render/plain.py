"""One engine value → a plain Python value, shared by every surface.

The engine's tables hold numpy scalars, NaN, pandas timestamps and NaT; cells,
JSON and workbook writers all need plain values with "missing" as None (an
empty cell, JSON null), never 0 or "nan".
"""

from __future__ import annotations

import datetime as _dt
import math
from typing import Any


def plain_value(value: Any) -> Any:
    """numpy scalars unwrapped; NaN, ±inf, NaT → None; pandas/numpy datetimes →
    datetime.datetime (time zone dropped); everything else unchanged."""
    import numpy as np
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, int):
        return value
    if isinstance(value, np.datetime64):
        return None if np.isnat(value) else value.astype("datetime64[us]").item()
    if hasattr(value, "to_pydatetime"):        # pandas Timestamp / NaT
        if value != value:
            return None
        if getattr(value, "tzinfo", None) is not None:
            value = value.tz_localize(None)
        return value.to_pydatetime()
    if isinstance(value, (_dt.datetime, _dt.date, _dt.time)):
        return value
    try:
        import pandas as pd
        if pd.isna(value):
            return None
    except (TypeError, ValueError):
        pass
    return value

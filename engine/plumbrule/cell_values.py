"""What a single spreadsheet cell holds, without numpy or pandas: the blank test and the
error values. Light on purpose — the settings registry (and so every command's start,
`plumbrule --version` included) needs these and nothing heavier."""

from __future__ import annotations

from typing import Any

ERROR_TEXTS = frozenset({
    "#N/A", "#VALUE!", "#DIV/0!", "#REF!", "#NAME?", "#NUM!", "#NULL!", "#SPILL!",
    "#CALC!", "#GETTING_DATA", "#FIELD!", "#BLOCKED!", "#CONNECT!", "#BUSY!", "#UNKNOWN!",
})

# What a COM bridge passes for an error cell (xlwings on Windows): 0x800A07xx codes.
COM_ERROR_CODES = {
    -2146826281: "#DIV/0!", -2146826246: "#N/A", -2146826259: "#NAME?",
    -2146826288: "#NULL!", -2146826252: "#NUM!", -2146826265: "#REF!",
    -2146826273: "#VALUE!",
}

_MISSING_TYPES = ("NaTType", "NAType")          # pandas' NaT and NA, known by their type


def error_text(v: Any) -> str | None:
    """The spreadsheet error a single cell holds ('#N/A', '#DIV/0!', …), as text, whether it
    arrived as text or as a COM error code; None for any other cell."""
    if isinstance(v, str) and v.strip() in ERROR_TEXTS:
        return v.strip()
    if type(v) is int and v in COM_ERROR_CODES:
        return COM_ERROR_CODES[v]
    return None


def is_blank(v: Any) -> bool:
    """True for a cell a user sees as empty: None, NaN, NaT, NA or text of only spaces.
    The one blank-cell test of the package."""
    if v is None:
        return True
    if isinstance(v, str):
        return not v.strip()
    if isinstance(v, float):                      # numpy's float64 too
        return v != v
    t = type(v)
    if t.__name__ in _MISSING_TYPES:
        return True
    if t.__module__ == "numpy" and t.__name__.startswith("float"):   # float32, float16
        return bool(v != v)
    return False

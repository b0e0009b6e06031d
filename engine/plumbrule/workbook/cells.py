"""Writing values into cells safely, and the number formats of plumbrule's sheets.

Text from the data (column names, category levels, notes) is always written as
text: openpyxl would otherwise store a string starting with '=' as a formula and
'#N/A' as an error value. Numbers keep full precision; only the number format
rounds what is shown.
"""

from __future__ import annotations

import datetime as _dt
import math
from typing import Any, Callable, Mapping, Sequence

import numpy as np

from plumbrule.render.plain import plain_value

MONEY = '#,##0;-#,##0'
MONEY_CENTS = '#,##0.00;-#,##0.00'
PERCENT = '0.0%'
INTEGER = '0'
DATE = 'yyyy-mm-dd'
DATETIME = 'yyyy-mm-dd hh:mm:ss'
RATIO = '0.000'

# Our own look: a slate title, a pale header band, thin rules. Built lazily (openpyxl
# is imported only when a workbook is written).
TITLE_COLOUR = "1F3A4D"
HEADER_FILL = "E3ECEF"


def sig3(value: Any) -> str | None:
    """A number format showing ``value`` to 3 significant digits (None for non-numbers)."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.number)):
        return None                      # text, dates, blanks keep their own format
    v = abs(float(value))
    if not math.isfinite(v) or v == 0:
        return "0"
    if v == round(v) and v < 1e9:
        return "#,##0"                   # whole numbers: every digit is significant
    if v >= 1e9 or v < 1e-4:
        return "0.00E+00"
    mag = math.floor(math.log10(v))
    decimals = max(0, 2 - mag)
    return "#,##0" if decimals == 0 else "0." + "0" * decimals


def plain(value: Any) -> Any:
    """A cell value: numpy scalars unwrapped; NaN, ±inf, NaT and None → None (blank)."""
    return plain_value(value)


_ILLEGAL = None


def clean_text(text: str) -> str:
    """Drop the control characters an xlsx cannot hold."""
    global _ILLEGAL
    if _ILLEGAL is None:
        from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
        _ILLEGAL = ILLEGAL_CHARACTERS_RE
    return _ILLEGAL.sub("", text)


def put(ws, row: int, col: int, value: Any, number_format: str | None = None,
        style: Any = None):
    """Write one value; text is stored as text (never a formula or error value).

    Returns the cell. ``style`` is a NamedStyle name or None.
    """
    v = plain(value)
    if isinstance(v, (list, tuple, dict, set)):
        v = ", ".join(map(str, v)) if not isinstance(v, dict) else str(v)
    if v is not None and not isinstance(v, (bool, int, float, _dt.datetime, _dt.date, _dt.time)):
        v = str(v)
    cell = ws.cell(row=row, column=col)
    if isinstance(v, str):
        cell.value = clean_text(v)[:32767]
        cell.data_type = "s"     # '=HYPERLINK(...)' and '#N/A' stay text
    else:
        cell.value = v
    if number_format:
        cell.number_format = number_format
    elif isinstance(v, _dt.datetime):
        cell.number_format = DATETIME if (v.hour or v.minute or v.second) else DATE
    elif isinstance(v, _dt.date):
        cell.number_format = DATE
    if style is not None:
        cell.style = style
    return cell


def put_formula(ws, row: int, col: int, formula: str, number_format: str | None = None):
    """Write a formula of ours (starts with '=')."""
    cell = ws.cell(row=row, column=col, value=formula)
    cell.data_type = "f"
    if number_format:
        cell.number_format = number_format
    return cell


Formats = Mapping[str, "str | Callable[[Any], str]"]


def write_frame(ws, frame, top: int, left: int = 1, formats: Formats | None = None,
                labels: Mapping[str, str] | None = None, header: bool = True,
                max_rows: int | None = None) -> int:
    """Write a DataFrame with a header row at (top, left); returns the next free row.

    ``formats`` maps a column to a number format or to a function value → format
    (e.g. :func:`sig3`). ``labels`` renames headers on screen. Cells are built
    directly (one style array per number format), the same values :func:`put` writes.
    """
    formats = formats or {}
    labels = labels or {}
    cols = list(frame.columns)
    r = top
    if header:
        for j, c in enumerate(cols):
            put(ws, r, left + j, labels.get(c, c), style="plumb_header")
        r += 1
    body = frame if max_rows is None else frame.iloc[:max_rows]
    styles = _StyleCache(ws)
    for j, c in enumerate(cols):
        fmt = formats.get(c)
        _write_column(ws, body[c].tolist(), r, left + j, fmt, styles)
    return r + len(body)


class _StyleCache:
    """One openpyxl style array per number format (what ``cell.number_format = f`` makes)."""

    def __init__(self, ws):
        self.ws = ws
        self.arrays: dict[str | None, Any] = {}

    def get(self, fmt: str | None):
        if fmt not in self.arrays:
            from openpyxl.cell.cell import Cell
            probe = Cell(self.ws)
            if fmt:
                probe.number_format = fmt
            self.arrays[fmt] = probe._style
        return self.arrays[fmt]


def _write_column(ws, values: list, top: int, col: int, fmt, styles: _StyleCache) -> None:
    from copy import copy
    from openpyxl.cell.cell import Cell
    cells = ws._cells
    fixed = None if callable(fmt) else fmt
    for i, v in enumerate(values):
        v = plain(v)
        if v is None:
            continue
        if isinstance(v, str):
            kind, v = "s", clean_text(v)[:32767]
        elif isinstance(v, bool):
            kind = "b"
        elif isinstance(v, (int, float)):
            kind = "n"
        elif isinstance(v, (_dt.datetime, _dt.date, _dt.time)):
            put(ws, top + i, col, v, fixed if not callable(fmt) else None)
            continue
        else:
            kind, v = "s", clean_text(str(v))[:32767]
        f = fmt(v) if callable(fmt) else fixed
        cell = Cell(ws, row=top + i, column=col)
        cell._value = v
        cell.data_type = kind
        cell._style = copy(styles.get(f if kind in "nb" or not callable(fmt) else None))
        cells[(top + i, col)] = cell


def write_pairs(ws, pairs: Sequence[tuple[str, Any]], top: int, left: int = 1,
                formats: Mapping[str, Any] | None = None) -> int:
    """Two columns (label, value); returns the next free row."""
    formats = formats or {}
    for i, (label, value) in enumerate(pairs):
        put(ws, top + i, left, label, style="plumb_label")
        fmt = formats.get(label)
        put(ws, top + i, left + 1, value, fmt(value) if callable(fmt) else fmt)
    return top + len(pairs)


def title(ws, row: int, text: str, col: int = 1) -> int:
    put(ws, row, col, text, style="plumb_title")
    return row + 1


def note(ws, row: int, text: str, col: int = 1) -> int:
    put(ws, row, col, text, style="plumb_note")
    return row + 1


def define_name(book, name: str, sheet: str, ref: str) -> None:
    """Workbook-level defined name → an absolute reference on ``sheet`` ('B4' or 'B4:C9')."""
    from openpyxl.utils.cell import absolute_coordinate, quote_sheetname
    from openpyxl.workbook.defined_name import DefinedName
    value = f"{quote_sheetname(sheet)}!{absolute_coordinate(ref)}"
    if name in book.defined_names:
        del book.defined_names[name]
    book.defined_names[name] = DefinedName(name, attr_text=value)


def ensure_styles(book) -> None:
    """Register plumbrule's named styles once per workbook (our own look)."""
    from openpyxl.styles import Alignment, Border, Font, NamedStyle, PatternFill, Side
    have = set(book.style_names)
    thin = Side(style="thin", color="9FB3BD")
    specs = {
        "plumb_title": NamedStyle("plumb_title", font=Font(bold=True, size=13, color=TITLE_COLOUR)),
        "plumb_header": NamedStyle("plumb_header", font=Font(bold=True, color=TITLE_COLOUR),
                                   fill=PatternFill("solid", fgColor=HEADER_FILL),
                                   border=Border(bottom=thin),
                                   alignment=Alignment(wrap_text=True, vertical="top")),
        "plumb_label": NamedStyle("plumb_label", font=Font(color=TITLE_COLOUR)),
        "plumb_note": NamedStyle("plumb_note", font=Font(italic=True, color="4A5A63")),
    }
    for name, style in specs.items():
        if name not in have:
            book.add_named_style(style)

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
    t = type(v)
    if t is str:
        # what cell.value = text does for text already clean (check_string passes it)
        cell._value = clean_text(v)[:32767]
        cell.data_type = "s"     # '=HYPERLINK(...)' and '#N/A' stay text
    elif t is float or t is int or v is None:
        cell._value = v          # as cell.value = v types a number or a blank
        cell.data_type = "n"
    elif t is bool:
        cell._value = v
        cell.data_type = "b"
    else:
        cell.value = v
    if number_format:
        set_format(cell, number_format)
    elif isinstance(v, _dt.datetime):
        cell.number_format = DATETIME if (v.hour or v.minute or v.second) else DATE
    elif isinstance(v, _dt.date):
        cell.number_format = DATE
    if style is not None:
        _named_style(cell, style)
    return cell


_PER_BOOK: Any = None     # book → {memo name: {key: value}}, forgotten with the book


def book_memo(book, name: str) -> dict:
    """The memo ``name`` of one workbook (empty at first): what openpyxl would look up or hash
    again on every cell, kept once per book and dropped when the book is."""
    global _PER_BOOK
    if _PER_BOOK is None:
        import weakref
        _PER_BOOK = weakref.WeakKeyDictionary()
    return _PER_BOOK.setdefault(book, {}).setdefault(name, {})


def set_format(cell, number_format: str) -> None:
    """``cell.number_format = number_format``, the format's id looked up once per book
    (openpyxl registers it in the book's list on every assignment)."""
    known = book_memo(cell.parent.parent, "formats")      # number format → its id
    fid = known.get(number_format)
    if fid is None:
        cell.number_format = number_format
        known[number_format] = cell._style.numFmtId
        return
    if cell._style is None:
        from openpyxl.styles.cell_style import StyleArray
        cell._style = StyleArray()
    cell._style.numFmtId = fid


def _named_style(cell, name: str) -> None:
    """``cell.style = name``: openpyxl looks the name up and copies the named style's array
    on every call; the array is the same each time in one book, so it is kept."""
    from copy import copy
    known = book_memo(cell.parent.parent, "named")   # named style → the array a cell takes
    array = known.get(name)
    if array is None:
        cell.style = name
        known[name] = copy(cell._style)
    else:
        cell._style = copy(array)


def set_look(cell, collection: str, field: str, key: tuple, make: Callable[[], Any]):
    """``cell.<look> = make()``: openpyxl hashes the new style object against the book's
    collection on every assignment (the largest cost of styling a cell); the id it ends
    with depends only on ``key`` in one book, so it is looked up once per book."""
    book = cell.parent.parent
    known = book_memo(book, "looks")           # (collection, look) → id in that collection
    sid = known.get((collection, key))
    if sid is None:
        sid = known[(collection, key)] = getattr(book, collection).add(make())
    if cell._style is None:
        from openpyxl.styles.cell_style import StyleArray
        cell._style = StyleArray()
    setattr(cell._style, field, sid)
    return cell


def set_font(cell, **kw):
    """``cell.font = Font(**kw)``; returns the cell."""
    from openpyxl.styles import Font
    return set_look(cell, "_fonts", "fontId", tuple(sorted(kw.items())), lambda: Font(**kw))


def set_fill(cell, colour: str):
    """``cell.fill = PatternFill("solid", fgColor=colour)``; returns the cell."""
    from openpyxl.styles import PatternFill
    return set_look(cell, "_fills", "fillId", (colour,),
                     lambda: PatternFill("solid", fgColor=colour))


def set_alignment(cell, **kw):
    """``cell.alignment = Alignment(**kw)``; returns the cell."""
    from openpyxl.styles import Alignment
    return set_look(cell, "_alignments", "alignmentId", tuple(sorted(kw.items())),
                     lambda: Alignment(**kw))


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


def write_values(ws, values: list, top: int, col: int, number_format: str | None = None) -> None:
    """``put(ws, top + i, col, v, number_format)`` for each value, the cells built directly."""
    if isinstance(values, np.ndarray) and values.dtype.kind in "fiub":
        values = values.tolist()        # plain floats, ints and bools, as plain() makes them
    _write_column(ws, values, top, col, number_format, _StyleCache(ws), blanks=True)


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


def _write_column(ws, values: list, top: int, col: int, fmt, styles: _StyleCache,
                  blanks: bool = False) -> None:
    """The cells of one column from ``top`` down; a blank is skipped, or with ``blanks``
    written as put writes it (an empty cell)."""
    from openpyxl.cell.cell import Cell
    from openpyxl.styles.cell_style import StyleArray
    cells = ws._cells
    fixed = None if callable(fmt) else fmt
    new = Cell.__new__
    isfinite = math.isfinite
    for i, v in enumerate(values):
        t = type(v)
        # the common plain types first (what plain() returns them as), without its checks
        if t is float or t is _F64:
            v = float(v)
            if not isfinite(v):
                v = None
            kind = "n"
        elif t is str:
            kind, v = "s", clean_text(v)[:32767]
        elif t is int:
            kind = "n"
        else:
            v = plain(v)
            if v is None:
                pass
            elif isinstance(v, str):
                kind, v = "s", clean_text(v)[:32767]
            elif isinstance(v, bool):
                kind = "b"
            elif isinstance(v, (int, float)):
                kind = "n"
            elif isinstance(v, (_dt.datetime, _dt.date, _dt.time)):
                put(ws, top + i, col, v, fixed if not callable(fmt) else None)
                continue
            else:
                if isinstance(v, (list, tuple, set)):
                    v = ", ".join(map(str, v))
                kind, v = "s", clean_text(str(v))[:32767]
        if v is None:
            if blanks:
                put(ws, top + i, col, None, fixed)
            continue
        f = fmt(v) if callable(fmt) else fixed
        # Cell(ws, row=, column=) with its value, type and style array set: the slots
        # filled directly (the constructor's descriptor calls cost more than the cell)
        cell = new(Cell)
        cell.parent = ws
        cell.row = top + i
        cell.column = col
        cell._value = v
        cell._hyperlink = None
        cell._comment = None
        cell.data_type = kind
        array = styles.get(f if kind in "nb" or not callable(fmt) else None)
        cell._style = None if array is None else StyleArray(array)
        cells[(top + i, col)] = cell


_F64 = np.float64


def merge(ws, start_row: int, start_column: int, end_row: int, end_column: int) -> None:
    """``ws.merge_cells(...)`` with the same result, faster. openpyxl gives each covered
    cell the first cell's protection and each edge cell the first cell's border sides by
    building and hashing a style object per cell (milliseconds a merge); the ids those end
    with depend only on the ids the cells had, so they are looked up once per book."""
    from openpyxl.cell.cell import MergedCell
    from openpyxl.styles.borders import Border
    from openpyxl.styles.cell_style import StyleArray
    from openpyxl.utils import get_column_letter
    from openpyxl.worksheet.merge import MergedCellRange
    book = ws.parent
    # (border id, first cell's border id, side) → border id
    known = book_memo(book, "merge borders")
    borders = book._borders
    cells = ws._cells
    coord = (f"{get_column_letter(start_column)}{start_row}:"
             f"{get_column_letter(end_column)}{end_row}")
    mcr = MergedCellRange(ws, coord)   # openpyxl's own: the last cell's border onto the first
    ranges = ws.merged_cells.ranges
    if any(r.title for r in ranges):
        ws.merged_cells.add(mcr)
    elif not any(r.min_row <= mcr.min_row <= mcr.max_row <= r.max_row
                 and r.min_col <= mcr.min_col <= mcr.max_col <= r.max_col for r in ranges):
        ranges.add(mcr)     # MultiCellRange.add: not when a range holds it (plain comparisons)
    start = mcr.start_cell
    for r in range(start_row, end_row + 1):
        for c in range(start_column, end_column + 1):
            if (r, c) != (start_row, start_column):
                cells[(r, c)] = MergedCell(ws, row=r, column=c)
    for name in ("top", "left", "right", "bottom"):     # MergedCellRange.format
        first = start._style.borderId if start._style is not None else 0
        side = getattr(borders[first], name)
        if side and side.style is None:
            continue
        border = None
        for key in getattr(mcr, name):
            cell = cells[key]
            if cell._style is None:
                cell._style = StyleArray()
            bid = cell._style.borderId
            new = known.get((bid, first, name))
            if new is None:
                if border is None:
                    border = Border(**{name: side})
                new = known[(bid, first, name)] = borders.add(borders[bid] + border)
            cell._style.borderId = new
    if start._style is None:
        start._style = StyleArray()
    protection = start._style.protectionId     # every covered cell takes the first's
    for r in range(start_row, end_row + 1):
        for c in range(start_column, end_column + 1):
            cell = cells[(r, c)]
            if cell._style is None:
                cell._style = StyleArray()
            cell._style.protectionId = protection


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


# --- printing ------------------------------------------------------------------

DEFAULT_WIDTH = 8.43        # a column's width (characters) when the sheet does not set one
LINE_HEIGHT = 15.0          # points per line of 11-point text (the default row height)
PORTRAIT_CHARS = 95         # character widths an A4/Letter portrait page holds at 100 %
FOOTER_LEFT = "&A"          # the sheet's name
FOOTER_RIGHT = "page &P of &N"


def column_width(ws, col: int) -> float:
    """The width of column ``col`` in characters, as a spreadsheet shows it."""
    from openpyxl.utils import get_column_letter
    letter = get_column_letter(col)
    dims = ws.column_dimensions
    if letter in dims and dims[letter].customWidth and dims[letter].width:
        return float(dims[letter].width)
    for d in dims.values():        # a dimension may span columns (min..max)
        if d.min and d.max and d.min <= col <= d.max and d.customWidth and d.width:
            return float(d.width)
    return DEFAULT_WIDTH


def text_lines(text: str, width: float) -> int:
    """Lines ``text`` takes when wrapped in ``width`` characters of 11-point text (words
    kept whole: a line is charged 10 % for the space a wrap at a word leaves)."""
    per_line = max(4.0, width * 0.9)
    return sum(max(1, math.ceil(len(part) / per_line)) for part in str(text).split("\n"))


class Looks:
    """A sheet's fonts and alignments read by style id, and alignments set by id: the cell
    properties (``cell.font``, ``cell.alignment = Alignment(...)``) build and hash a style
    object on every use; the ids they end with are the same."""

    def __init__(self, book):
        self.book = book
        self.scales: dict[int, tuple[float, float]] = {}
        self.aligns: dict[int, tuple] = {}
        self.ids: dict[tuple, int] = {}

    def font(self, cell) -> tuple[float, float]:
        """(how much wider than 11-point regular text the characters are, the line height)."""
        fid = cell._style.fontId if cell._style is not None else 0
        got = self.scales.get(fid)
        if got is None:
            font = self.book._fonts[fid]
            size = float(font.sz) if font is not None and font.sz else 11.0
            scale = max(1.0, size / 11.0) * (1.1 if font is not None and font.b else 1.0)
            got = self.scales[fid] = (scale, LINE_HEIGHT * max(1.0, size / 11.0))
        return got

    def alignment(self, cell) -> tuple:
        """(horizontal, indent, wrap_text, vertical) of the cell's alignment."""
        aid = cell._style.alignmentId if cell._style is not None else 0
        got = self.aligns.get(aid)
        if got is None:
            a = self.book._alignments[aid]
            got = self.aligns[aid] = (a.horizontal, a.indent, a.wrap_text, a.vertical)
        return got

    def align(self, cell, horizontal, indent, wrap_text, vertical) -> None:
        """``cell.alignment = Alignment(horizontal=…, indent=…, wrap_text=…, vertical=…)``."""
        key = (horizontal, indent, wrap_text, vertical)
        aid = self.ids.get(key)
        if aid is None:
            from openpyxl.styles import Alignment
            aid = self.ids[key] = self.book._alignments.add(Alignment(
                horizontal=horizontal, indent=indent, wrap_text=wrap_text, vertical=vertical))
        if cell._style is None:
            from openpyxl.styles.cell_style import StyleArray
            cell._style = StyleArray()
        cell._style.alignmentId = aid


def fit_for_print(ws, last_col: int | None = None, landscape: bool | None = None,
                  title_rows: str | None = None, min_chars: float = 90,
                  area: bool = True, last_row: int | None = None) -> int:
    """Lay the sheet out for print and set its page: every text that would run past its
    column is wrapped — alone on its row, across the printed columns (merged); in a table,
    in its own cell — with a row height that shows every line; the print area covers the
    used rows and the printed columns; one page wide, landscape when wider than a portrait
    page; ``title_rows`` (e.g. '1:1') repeated on every page; a footer with the sheet name
    and the page number. The printed columns run to ``last_col`` (default: the last column
    a table uses, widened to hold ``min_chars`` characters). Returns ``last_col``."""
    looks = Looks(ws.parent)
    rows: dict[int, list] = {}
    for (r, _c), cell in ws._cells.items():
        v = cell._value
        if v is not None and v != "":
            rows.setdefault(r, []).append(cell)
    merged = {(r, c) for rng in ws.merged_cells.ranges
              for r in range(rng.min_row, rng.max_row + 1)
              for c in range(rng.min_col, rng.max_col + 1)}
    merged_width: dict[tuple[int, int], float] = {}
    for rng in ws.merged_cells.ranges:
        merged_width[(rng.min_row, rng.min_col)] = sum(
            column_width(ws, k) for k in range(rng.min_col, rng.max_col + 1))
    widths: dict[int, float] = {}

    def width(c: int) -> float:
        if c not in widths:
            widths[c] = column_width(ws, c)
        return widths[c]

    def spills(cell) -> bool:
        return isinstance(cell._value, str) and (cell.row, cell.column) not in merged \
            and len(cell._value) * looks.font(cell)[0] > width(cell.column) * 0.9

    def tail(cs) -> Any:
        """The row's last cell when it is text that may run on to the right: a note alone
        on its row, or the value of a label/value pair."""
        if len(cs) > 2:
            return None
        last = max(cs, key=lambda c: c.column)
        return last if spills(last) else None

    if last_col is None:
        used = []
        for cs in rows.values():
            t = tail(cs)
            used += [c.column + (0 if c is not t else -1) for c in cs]
        used += [rng.max_col for rng in ws.merged_cells.ranges]
        last_col = max(max(used, default=1), 1)
        while sum(width(k) for k in range(1, last_col + 1)) < min_chars:
            last_col += 1
    span = sum(width(k) for k in range(1, last_col + 1))
    dims = ws.row_dimensions
    for r, cs in rows.items():
        dim = dims.get(r)        # (looking up ws.row_dimensions[r] would add a row entry)
        height = dim.height if dim is not None else None
        need = height or 0.0
        run_on = tail(cs)
        for cell in cs:
            text = cell._value
            if not isinstance(text, str):
                continue
            key = (cell.row, cell.column)
            if key in merged_width:
                w = merged_width[key]
            elif key in merged:
                continue
            elif cell is run_on and cell.column < last_col:
                merge(ws, r, cell.column, r, last_col)
                w = span - sum(width(k) for k in range(1, cell.column))
            else:
                w = width(cell.column)
            scale, line = looks.font(cell)
            w = w / scale
            if len(text) > w * 0.9 or "\n" in text:
                lines = text_lines(text, w)
                horizontal, indent, _, _ = looks.alignment(cell)
                looks.align(cell, horizontal, indent, True, "top")
            else:
                lines = 1       # text_lines: one part, no longer than a line
            need = max(need, lines * line)
        if need > (height or LINE_HEIGHT):
            dims[r].height = need
            for cell in cs:       # a label beside wrapped text reads from the top with it
                horizontal, indent, wrap, vertical = looks.alignment(cell)
                if vertical != "top":
                    looks.align(cell, horizontal, indent, wrap, "top")
    from openpyxl.utils import get_column_letter
    if area:
        ws.print_area = f"A1:{get_column_letter(last_col)}{last_row or max(ws.max_row, 1)}"
    if landscape is None:
        landscape = span > PORTRAIT_CHARS
    ws.page_setup.orientation = "landscape" if landscape else "portrait"
    ws.page_setup.fitToWidth = 1
    ws.page_setup.fitToHeight = 0
    ws.sheet_properties.pageSetUpPr.fitToPage = True
    if title_rows:
        ws.print_title_rows = title_rows
    ws.oddFooter.left.text = FOOTER_LEFT
    ws.oddFooter.right.text = FOOTER_RIGHT
    return last_col

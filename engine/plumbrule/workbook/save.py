"""Saving plumbrule's result book: openpyxl's package, each sheet's cell rows written in one pass.

openpyxl serialises every cell through an incremental XML tree (tens of microseconds a cell);
the result sheets hold a row per sale, so at 100,000 sales that was the largest share of
``plumbrule run``. :func:`save_book` lets openpyxl write everything but the rows of
``<sheetData>``, and writes those itself as text: the same bytes openpyxl writes (same
attributes in the same order, same escaping, the number text of ``safe_string``, style ids
taken from the book in the same order), checked against openpyxl's own writer in
tests/workbook/test_save.py. A sheet holding a cell this writer does not produce (a comment,
a hyperlink, rich text, an array or data-table formula, ISO dates) is left to openpyxl whole.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any
from xml.etree.ElementTree import _escape_attrib, _escape_cdata  # type: ignore[attr-defined]

_PLACEHOLDER = b"<sheetData />"
_UNSTYLED = (0,) * 9                 # a cell's style array with nothing set
_INFINITE = (float("inf"), float("-inf"))


def save_book(book, target, compress: bool = True) -> None:
    """Write ``book`` (an openpyxl Workbook) to ``target`` (a path or a binary file object)
    as openpyxl's ``save`` does; ``compress`` False stores the parts uncompressed (a package
    only read back in this process, by the graft, need not be deflated twice)."""
    import datetime as _dt
    from zipfile import ZIP_DEFLATED, ZIP_STORED, ZipFile
    archive = ZipFile(target, "w", ZIP_DEFLATED if compress else ZIP_STORED, allowZip64=True)
    book.properties.modified = _dt.datetime.now(tz=_dt.timezone.utc).replace(tzinfo=None)
    _writer_class()(book, archive).save()


def to_bytes(book, compress: bool = True) -> bytes:
    """``book`` saved (see :func:`save_book`) into memory."""
    import io
    buf = io.BytesIO()
    save_book(book, buf, compress)
    return buf.getvalue()


_CLASS: Any = None


def _writer_class():
    """openpyxl's ExcelWriter whose worksheets' rows go through :func:`sheet_rows` (built on
    first use: openpyxl is imported only when a book is written)."""
    global _CLASS
    if _CLASS is not None:
        return _CLASS
    import io
    from openpyxl.drawing.spreadsheet_drawing import SpreadsheetDrawing
    from openpyxl.worksheet._writer import WorksheetWriter
    from openpyxl.writer.excel import ExcelWriter
    from openpyxl.xml.functions import Element

    class _SheetWriter(WorksheetWriter):
        fast_rows: str | None = None

        def write_dimensions(self):
            from openpyxl.worksheet.dimensions import SheetDimension
            self.xf.send(SheetDimension(dimension(self.ws)).to_tree())

        def write_rows(self):
            self.fast_rows = sheet_rows(self.ws)
            if self.fast_rows is None:
                materialize(self.ws)
                super().write_rows()
            else:                   # a placeholder, replaced by the rows once written
                self.xf.send(Element("sheetData"))

    class _BookWriter(ExcelWriter):
        def write_worksheet(self, ws):   # ExcelWriter.write_worksheet with _SheetWriter
            ws._drawing = SpreadsheetDrawing()
            ws._drawing.charts = ws._charts
            ws._drawing.images = ws._images
            # in memory, not through a named temporary file (four file system calls a
            # sheet); the member's entry as ZipFile.write gives a file just written
            writer = _SheetWriter(ws, out=io.BytesIO())
            writer.write()
            data = writer.out.getvalue()
            if writer.fast_rows is not None:
                at = data.index(_PLACEHOLDER)
                data = b"".join((data[:at], writer.fast_rows.encode("utf-8"),
                                 data[at + len(_PLACEHOLDER):]))
            ws._rels = writer._rels
            self._archive.writestr(_member(ws.path[1:], self._archive), data)
            self.manifest.append(ws)

    _CLASS = _BookWriter
    return _CLASS


_NUMBERS = "_plumb_numbers"      # a worksheet's number columns kept as text (number_column)


def number_column(ws, values, top: int, col: int) -> None:
    """Column ``col`` from row ``top`` down holding ``values`` (a float or integer numpy
    array), unstyled, as ``cells.write_values`` writes them (a non-finite value is an
    empty cell), but kept as the text of each value and written straight into the sheet's
    XML: no cell object per value. For blocks nothing else reads (the chart data)."""
    numbers = ws.__dict__.setdefault(_NUMBERS, {})
    numbers[col] = (top, values.tolist())       # plain floats or ints


def materialize(ws) -> None:
    """The number columns of ``ws`` as cells (for openpyxl's own writer)."""
    numbers = ws.__dict__.pop(_NUMBERS, None)
    if not numbers:
        return
    from plumbrule.workbook.cells import write_values
    for col, (top, values) in numbers.items():
        write_values(ws, values, top, col)


def dimension(ws) -> str:
    """``ws.calculate_dimension()`` counting the number columns' cells too."""
    from openpyxl.utils import get_column_letter
    rows = [r for r, _ in ws._cells]
    cols = [c for _, c in ws._cells]
    for col, (top, values) in getattr(ws, _NUMBERS, {}).items():
        if values:
            cols.append(col)
            rows += (top, top + len(values) - 1)
    if not rows:
        return "A1:A1"
    return (f"{get_column_letter(min(cols))}{min(rows)}:"
            f"{get_column_letter(max(cols))}{max(rows)}")


def _member(name: str, archive):
    """The zip entry ``ZipFile.write`` makes for a private file written now (openpyxl
    wrote each sheet to a named temporary file, mode 0600, and stored that)."""
    import time
    from zipfile import ZipInfo
    info = ZipInfo(name, time.localtime(time.time())[:6])
    info.external_attr = 0o100600 << 16
    info.compress_type = archive.compression
    return info


def sheet_rows(ws) -> str | None:
    """The ``<sheetData>`` element of worksheet ``ws`` as openpyxl writes it, or None when a
    cell needs openpyxl's own writer (comments, hyperlinks, rich text, array formulas, ISO
    dates)."""
    from openpyxl.compat import safe_string
    from openpyxl.utils import get_column_letter
    book = ws.parent
    if book.iso_dates:
        return None
    styles = book._cell_styles
    sattrs: dict[tuple, str] = {}       # a style's ' s="id"' by its values (ids as the book's
    cells = ws._cells                   # list keys them, in first-use order)
    rows: dict[int, list] = defaultdict(list)
    for key in sorted(cells):
        rows[key[0]].append(cells[key])
    letters: dict[int, str] = {}
    numbers: dict[int, list] = defaultdict(list)     # row → [(column, cell text or None)]
    for col, (top, values) in sorted(getattr(ws, _NUMBERS, {}).items()):
        letter = letters[col] = get_column_letter(col)
        for r, v in enumerate(values, start=top):
            # as a number cell is written (below); a non-finite value is an empty cell
            numbers[r].append((col, None if v != v or v in _INFINITE else
                               f'<c r="{letter}{r}" t="n"><v>{"%.16g" % v}</v></c>'))
    for r in numbers.keys() - rows.keys():
        rows[r] = []
    dims = ws.row_dimensions
    for r in dims.keys() - rows.keys():     # empty rows that carry a height or a style
        rows[r] = []
    out = ["<sheetData>"]
    add = out.append
    for r, row in sorted(rows.items()):
        attrs = {"r": f"{r}"}
        attrs.update(dims.get(r, {}))
        add("<row" + "".join(f' {k}="{_escape_attrib(v)}"' for k, v in attrs.items()) + ">")
        rtext = str(r)
        texts = numbers.get(r)
        if texts:       # cells and number-column texts in column order
            row = [c for _, c in sorted([(c.column, c) for c in row] + texts,
                                        key=lambda item: item[0])]
        for cell in row:
            if cell is None:
                continue
            if type(cell) is str:
                add(cell)
                continue
            if cell._comment is not None or getattr(cell, "_hyperlink", None):
                return None
            value = cell._value
            style = cell._style
            if style is None:
                if value is None:
                    continue
                sattr = ""
            else:
                key = tuple(style)
                known = sattrs.get(key)
                if known is None:
                    # openpyxl: a style with every field 0 is no style (any(style))
                    known = sattrs[key] = (f' s="{styles.add(style)}"' if key != _UNSTYLED
                                           else "")
                sattr = known
                if value is None and not sattr:
                    continue
            col = cell.column
            letter = letters.get(col)
            if letter is None:
                letter = letters[col] = get_column_letter(col)
            head = f'<c r="{letter}{rtext}"{sattr}'
            kind = cell.data_type
            t = type(value)
            if kind == "n" and (t is float or t is int):
                # safe_string's text for a number: %.16g, nothing for NaN and infinities
                if value != value or value in _INFINITE:
                    add(f'{head} t="n"><v /></c>')
                else:
                    add(f'{head} t="n"><v>{"%.16g" % value}</v></c>')
                continue
            if kind == "s":
                if value is None or value == "":
                    add(head + ' t="inlineStr" />')
                elif t is not str:
                    return None         # rich text
                else:
                    stripped = value.strip()
                    space = ' xml:space="preserve"' if stripped and value != stripped else ""
                    add(f'{head} t="inlineStr"><is><t{space}>{_escape_cdata(value)}</t></is></c>')
                continue
            if kind == "f":
                if value is None or value == "":
                    add(head + " />")
                elif t is not str:
                    return None         # an array or data-table formula
                else:
                    add(f"{head}><f>{_escape_cdata(value[1:])}</f><v /></c>")
                continue
            if kind == "d":
                value = _excel_date(value, book.epoch)
                kind = "n"
            head += f' t="{_escape_attrib(kind)}"'
            if value is None or value == "":
                add(head + " />")
                continue
            text = safe_string(value)
            add(f"{head}><v>{_escape_cdata(text)}</v></c>" if text else f"{head}><v /></c>")
        add("</row>")
    add("</sheetData>")
    return "".join(out)


def _excel_date(value, epoch):
    """A date cell's serial number, as openpyxl's cell writer computes it."""
    from openpyxl.utils.datetime import to_excel
    if hasattr(value, "tzinfo") and value.tzinfo is not None:
        raise TypeError("Excel does not support timezones in datetimes. "
                        "The tzinfo in the datetime/time object must be set to None.")
    return to_excel(value, epoch)

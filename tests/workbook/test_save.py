"""The result book's fast save (workbook/save.py) writes the very bytes openpyxl's own
writer writes: every part of the demo's result book, and a sheet of awkward cells (the
reference is openpyxl's ``Workbook.save`` in the same process)."""

from __future__ import annotations

import datetime as dt
import io
import zipfile

import pytest

from plumbrule.workbook.save import sheet_rows, to_bytes


def _parts(data: bytes) -> dict[str, bytes]:
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        # the modified time in the core properties is the clock's, not the content's
        return {n: z.read(n) for n in z.namelist() if n != "docProps/core.xml"}


def _openpyxl_bytes(book) -> bytes:
    from plumbrule.workbook.save import materialize
    for ws in book.worksheets:      # number columns (chart data) as the cells they stand for
        materialize(ws)
    buf = io.BytesIO()
    book.save(buf)
    return buf.getvalue()


def _result_book(path):
    from plumbrule.workbook import run as R
    from plumbrule.workbook.read import read_inputs
    from plumbrule.workbook.stamp import make_stamp
    inputs = read_inputs(path)
    analysis, valuation, settings, comparison = R._analyse(inputs)
    stamp = make_stamp(analysis, inputs.sales_hash, source=path.name,
                       now=dt.datetime(2026, 1, 2, 3, 4, 5))
    book = R._result_book(inputs, with_sales=True)
    R.write_results(book, analysis, valuation, stamp, comparison, R._value_roll(
        inputs, analysis, settings))
    return book


def test_the_demo_result_book_is_byte_for_byte_openpyxls(filled):
    # two books built alike: style ids are numbered as the cells are written, so each
    # writer gets a book nobody has saved yet
    book = _result_book(filled)
    ours = _parts(to_bytes(book))
    # every sheet went through the fast rows (none was left to openpyxl's writer)
    assert all(sheet_rows(ws) is not None for ws in book.worksheets)
    theirs = _parts(_openpyxl_bytes(_result_book(filled)))
    assert ours.keys() == theirs.keys()
    sheets = [n for n in theirs if n.startswith("xl/worksheets/sheet")]
    assert len(sheets) >= 10
    for name in theirs:
        assert ours[name] == theirs[name], name


def _awkward(book):
    from openpyxl.styles import Alignment, Border, Font, Side
    ws = book.active
    ws["A1"] = "a & <b> \"q\" 'x' ²"
    ws["B1"] = 1 / 3
    ws["C1"] = True
    ws["D1"] = "=SUM(B1:B2)&\"<>\""
    ws["E1"] = " leading space"
    ws["F1"] = dt.datetime(2024, 1, 2, 3, 4, 5)
    ws["G1"] = dt.date(2024, 1, 2)
    ws["H1"], ws["I1"], ws["J1"] = 3, -0.0, 1e-300
    ws["A2"].number_format = "0.00"         # styled, no value
    ws["B2"] = ""
    ws["C2"] = float("nan")
    ws["D2"] = 10 ** 20
    ws["E2"] = "   "
    ws["A3"] = "x\ny\r\tz"
    ws["A3"].data_type = "s"
    ws.row_dimensions[3].height = 20
    ws.row_dimensions[40].height = 30       # an empty row with a height
    ws["A5"].alignment = Alignment(wrap_text=True)
    ws["B5"] = "#N/A"
    ws["B5"].data_type = "s"
    ws["A6"] = "bordered"
    ws["A6"].border = Border(bottom=Side(style="thin"))
    ws["A6"].font = Font(bold=True)
    ws.merge_cells("A6:C6")
    return book


def test_awkward_cells_are_written_as_openpyxl_writes_them():
    from openpyxl import Workbook
    ours = _parts(to_bytes(_awkward(Workbook())))
    theirs = _parts(_openpyxl_bytes(_awkward(Workbook())))
    assert ours == theirs


@pytest.mark.parametrize("make", ["comment", "hyperlink", "iso"])
def test_cells_it_does_not_write_are_left_to_openpyxl(make):
    from openpyxl import Workbook
    from openpyxl.comments import Comment

    def build():
        book = Workbook()
        ws = book.active
        ws["A1"] = "text"
        if make == "comment":
            ws["A1"].comment = Comment("a note", "plumbrule")
        elif make == "hyperlink":
            ws["A1"].hyperlink = "https://example.org/"
        else:
            book.iso_dates = True
            ws["B1"] = dt.date(2024, 1, 2)
        return book
    assert sheet_rows(build().active) is None
    assert _parts(to_bytes(build())) == _parts(_openpyxl_bytes(build()))


def _merged(use_ours: bool) -> bytes:
    from openpyxl import Workbook
    from openpyxl.styles import Border, Protection, Side
    from plumbrule.workbook.cells import ensure_styles, merge, put
    book = Workbook()
    ensure_styles(book)
    ws = book.active
    put(ws, 1, 1, "a note across the page")                  # plain text
    put(ws, 2, 2, "Effect on the price", style="plumb_header")   # bottom border: openpyxl's way
    put(ws, 3, 1, "locked off")
    ws.cell(3, 1).protection = Protection(locked=False)
    put(ws, 4, 1, "first")
    put(ws, 4, 3, "last cell taken")                         # the range's last cell holds a value
    ws.cell(5, 1).border = Border(left=Side(style="thin"))
    put(ws, 6, 2, "one cell")
    thin = Side(style="thin")
    ws.cell(10, 1).border = Border(left=thin, right=thin, top=thin, bottom=Side(style="thick"))
    ws.cell(12, 3).border = Border(right=Side(style="double"))   # folded into the first cell
    # (8, 1, 9, 3): its first cell empty; (10, 1, 12, 3): bordered all round
    ranges = [(1, 1, 1, 7), (2, 2, 2, 4), (3, 1, 3, 5), (4, 1, 4, 3), (5, 1, 5, 2),
              (6, 2, 6, 2), (8, 1, 9, 3), (10, 1, 12, 3)]
    for r in ranges:
        if use_ours:
            merge(ws, *r)
        else:
            ws.merge_cells(start_row=r[0], start_column=r[1], end_row=r[2], end_column=r[3])
    return to_bytes(book)


def test_merge_leaves_the_sheet_as_openpyxls_merge_cells():
    assert _parts(_merged(True)) == _parts(_merged(False))


def _column(use_block: bool, number_format) -> bytes:
    import numpy as np
    from openpyxl import Workbook
    from plumbrule.workbook.cells import put, write_values
    values = [1.5, np.float64(2.25), np.int64(3), None, float("nan"), "=text", True,
              dt.date(2024, 5, 6), dt.datetime(2024, 5, 6, 7, 8), [1, 2], np.nan]
    book = Workbook()
    ws = book.active
    if use_block:
        write_values(ws, values, 3, 2, number_format)
    else:
        for i, v in enumerate(values):
            put(ws, 3 + i, 2, v, number_format)
    return to_bytes(book)


@pytest.mark.parametrize("number_format", [None, "0.000"])
def test_write_values_writes_what_put_writes(number_format):
    # the last value blank: the sheet's dimension still reaches its row, as with put
    assert _parts(_column(True, number_format)) == _parts(_column(False, number_format))


def _numbers(direct: bool, writer) -> bytes:
    import numpy as np
    from openpyxl import Workbook
    from plumbrule.workbook.cells import put, write_values
    from plumbrule.workbook.save import number_column
    columns = [np.array([1.5, np.nan, 0.1 + 0.2, -0.0, 1e-300, np.inf, 123456789.123456789]),
               np.array([3, -7, 10 ** 17], dtype=np.int64), np.array([np.nan, 2.0])]
    book = Workbook()
    ws = book.active
    put(ws, 1, 2, "title")                  # cells of their own beside the number columns
    put(ws, 4, 4, "between")
    put(ws, 2, 9, "header")
    for j, values in enumerate(columns):
        col = 2 + 3 * j
        if direct:
            number_column(ws, values, 3, col)
        else:
            write_values(ws, values, 3, col)
    return writer(book)


@pytest.mark.parametrize("writer", [to_bytes, _openpyxl_bytes])
def test_number_columns_are_the_cells_write_values_writes(writer):
    # the reference: the same values written as cells, saved by openpyxl's own writer
    # (dimension, blank rows and a trailing non-finite value included)
    assert _parts(_numbers(True, writer)) == _parts(_numbers(False, _openpyxl_bytes))

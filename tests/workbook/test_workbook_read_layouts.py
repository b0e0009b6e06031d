"""Reading a workbook's Sales laid out as users lay them out: an Excel table with its totals
row switched on, a Sales sheet with title rows above the header, hidden rows.

Spreadsheet fact used (Office Open XML, ECMA-376 Part 1, from memory): a table's
totalsRowCount="1" makes the last row of its range the totals row. Behaviour users rely
on: a totals row is never a sale; row numbers stay the sheet's. Invented sales (Wrenfield).
"""

import openpyxl
from openpyxl.worksheet.table import Table

from plumbrule.intake import totals_rows
from plumbrule.workbook.read import read_inputs

SALES = [["W-1", 312000, 1480], ["W-2", 298500, 1390], ["W-3", 355000, 1710]]


def _table_book(path, totals_row):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws.append(["Sale ID", "Sale price", "Living area"])
    for r in SALES:
        ws.append(r)
    ws.append(["Total", 965500, 4580])                  # 312000+298500+355000, 1480+1390+1710
    ws.add_table(Table(displayName="Sales", ref="A1:C5",
                       totalsRowCount=1 if totals_row else None))
    wb.save(path)
    return path


def test_an_excel_tables_totals_row_never_reaches_the_sales(tmp_path):
    inputs = read_inputs(_table_book(tmp_path / "t.xlsx", totals_row=True))
    assert inputs.sales.frame.index.tolist() == [2, 3, 4]
    assert inputs.sales.frame["Sale ID"].tolist() == ["W-1", "W-2", "W-3"]


def test_a_total_typed_as_a_table_row_is_found_by_its_label(tmp_path):
    # The same row inside the table's body (totals row switched off) is data to calamine;
    # the totals rule lists it for the caller to set aside.
    inputs = read_inputs(_table_book(tmp_path / "t.xlsx", totals_row=False))
    assert inputs.sales.frame.index.tolist() == [2, 3, 4, 5]
    log = totals_rows(inputs.sales, ["Sale price", "Living area"])
    assert log[["row", "column", "reason"]].to_dict("records") == [
        {"row": 5, "column": "Sale ID", "reason": "'Total' marks a totals row, not a sale"}]


def test_a_sales_sheet_with_title_rows_and_hidden_rows(tmp_path):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws["A1"] = "Wrenfield Township sales 2025"
    ws.append([])
    ws.append(["Sale ID", "Sale price", "Living area"])        # row 3
    for r in SALES:
        ws.append(r)
    ws.row_dimensions[5].hidden = True
    path = tmp_path / "s.xlsx"
    wb.save(path)
    inputs = read_inputs(path)
    assert (inputs.sales.header_row, inputs.sales.frame.index.tolist()) == (3, [4, 5, 6])
    assert inputs.sales.hidden_rows == (5,)
    # The copy of the sales for the results starts at the header, on its sheet row.
    assert inputs.sales_values[0] == ["Sale ID", "Sale price", "Living area"]

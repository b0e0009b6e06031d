"""The header row of a real sales sheet: found below title rows, notes and blank rows, or
given as a sheet row (the header_row setting). Row numbers stay the sheet's.

Behaviour users rely on (plumbrule's intake contract, docs/workbook.md "Header rows"): a
sale on sheet row 7 is row 7 in every table and message, whatever sits above the header.
The sheets are invented (Wrenfield, an invented town).
"""

import pytest

from plumbrule.errors import IntakeError
from plumbrule.intake import clean, find_header, read_table, table_from_values

HEADER = ["Sale ID", "Nbhd", "Sale price", "Living area"]
SALES = [["W-101", "Millrace", 312000, 1480],
         ["W-102", "Millrace", "$298,500", 1390],
         ["W-103", "Upper Wren", 355000, 1710]]


def _titled():
    """Title, note, blank row, then the header on sheet row 4 and sales on rows 5-7."""
    return [["Wrenfield Township - residential sales 2025", None, None, None],
            ["Prices as recorded at the county; see the Notes tab", None, None, None],
            [None, None, None, None],
            HEADER] + [list(r) for r in SALES]


def test_header_below_title_rows_keeps_the_sheets_row_numbers():
    t = table_from_values(_titled())
    assert (t.header_row, t.columns) == (4, HEADER)
    assert t.frame.index.tolist() == [5, 6, 7]
    cd = clean(t, numeric=["Sale price", "Living area"], categorical=["Nbhd"])
    assert cd.data.loc[6, "Sale price"] == 298500.0


def test_a_row_on_the_sheet_is_named_by_its_sheet_row_below_titles():
    rows = _titled()
    rows[6][3] = "approx 1700"                        # sheet row 7
    with pytest.raises(IntakeError, match=r"^Column 'Living area', row 7: 'approx 1700' is not "
                                          r"a number\."):
        clean(table_from_values(rows), numeric=["Living area"])


def test_the_first_row_is_the_header_when_it_qualifies():
    t = table_from_values([HEADER] + SALES)
    assert (t.header_row, t.frame.index.tolist()) == (1, [2, 3, 4])


def test_block_rows_count_from_the_blocks_first_sheet_row():
    # A block that starts on sheet row 10 (the user's selection): title on 10, header on 11.
    t = table_from_values([["Wrenfield sales"]] + [HEADER] + SALES, header_row=10)
    assert (t.header_row, t.frame.index.tolist()) == (11, [12, 13, 14])


def test_a_title_with_two_cells_is_not_a_header_that_spans_the_sales():
    rows = [["Wrenfield sales", None, "Prepared March 2025", None], HEADER] + SALES
    assert table_from_values(rows).header_row == 2


def test_numbers_and_dates_typed_as_text_are_values_not_names():
    # In a CSV every cell is text: a row of '312000', '3/14/2025' is a sale, not a header.
    rows = [["Wrenfield sales", None, None], ["Sale ID", "Sale price", "Sale date"],
            ["W-1", "312000", "3/14/2025"], ["W-2", "$298,500", "3/20/2025"]]
    import numpy as np
    assert find_header(np.array(rows, dtype=object)) == 1
    block = np.array([["312000", "3/14/2025"], ["298500", "3/20/2025"]], dtype=object)
    assert find_header(block) == 0        # no row qualifies: the first non-blank one


def test_a_column_filled_below_but_not_named_keeps_the_row_from_being_the_header():
    rows = [["Wrenfield sales", None, None, None],
            ["Sale ID", "Sale price", None, "Living area"],
            ["W-1", 312000, "x", 1480], ["W-2", 298500, "y", 1390]]
    # No row qualifies, so the first row is tried, and the message says how to fix it.
    with pytest.raises(IntakeError, match=r"^Header row \(sheet row 1\): columns B, C, D have no "
                                          r"name but hold values\. Give every column a header, "
                                          r"or set header_row \(--header-row\) to the sheet row "
                                          r"of the headers\.$") as err:
        table_from_values(rows)
    assert err.value.row == 1
    with pytest.raises(IntakeError, match=r"^Header row \(sheet row 2\): column C has no name but "
                                          r"holds values\. Give every column a header, or set "
                                          r"header_row") as err:
        table_from_values(rows, header_at=2)
    assert err.value.row == 2


def test_header_at_overrides_a_notes_row_that_looks_like_a_header():
    # A notes row of words across every column reads as the header; the setting fixes it.
    rows = [["Source: county", "Town: Wrenfield", "Prices in USD", "Areas in sq ft"],
            HEADER] + SALES
    assert table_from_values(rows).header_row == 1
    t = table_from_values(rows, header_at=2)
    assert (t.header_row, t.columns, t.frame.index.tolist()) == (2, HEADER, [3, 4, 5])


def test_header_at_outside_the_block_or_on_an_empty_row_names_the_setting():
    with pytest.raises(IntakeError, match=r"^header_row is 12, but the sheet's cells run from row "
                                          r"1 to row 7\. Set header_row \(--header-row\) to the "
                                          r"sheet row of the headers\.$") as err:
        table_from_values(_titled(), header_at=12)
    assert (err.value.setting, err.value.row) == ("header_row", 12)
    with pytest.raises(IntakeError, match=r"^header_row is 3, but sheet row 3 is empty\."):
        table_from_values(_titled(), header_at=3)


def test_csv_with_title_lines_and_the_header_row_setting(tmp_path):
    path = tmp_path / "wrenfield.csv"
    path.write_text("Wrenfield sales 2025\n\nSale ID,Sale price,Living area\n"
                    "W-1,312000,1480\nW-2,\"$298,500\",1390\n")
    t = read_table(path)
    assert (t.header_row, t.frame.index.tolist()) == (3, [4, 5])
    assert read_table(path, header_row=3).columns == ["Sale ID", "Sale price", "Living area"]
    with pytest.raises(IntakeError, match=r"^header_row is 2, but sheet row 2 is empty"):
        read_table(path, header_row=2)


def test_xlsx_title_rows_above_a_block_that_starts_lower_down(tmp_path):
    import openpyxl
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws["B2"] = "Wrenfield Township sales"          # the used area starts at B2
    for j, h in enumerate(HEADER):
        ws.cell(4, 2 + j, h)
    for i, r in enumerate(SALES):
        for j, v in enumerate(r):
            ws.cell(5 + i, 2 + j, v)
    path = tmp_path / "w.xlsx"
    wb.save(path)
    t = read_table(path)
    assert (t.header_row, t.first_column, t.frame.index.tolist()) == (4, 2, [5, 6, 7])
    assert read_table(path, header_row=4).columns == HEADER


def test_csv_title_lines_may_be_short_but_no_sale_line_wider_than_the_header(tmp_path):
    path = tmp_path / "wrenfield.csv"
    path.write_text("Wrenfield sales 2025\nSale ID,Sale price\nW-1,312000\nW-2,298500,extra\n")
    with pytest.raises(IntakeError, match=r"^File 'wrenfield\.csv' cannot be read as CSV \(line 4 "
                                          r"has 3 cells, the header line 2\)\. Save it as CSV") \
            as err:
        read_table(path)
    assert err.value.row == 4


def test_sales_above_a_row_of_words_are_not_skipped_as_titles():
    # A header with a column left unnamed, then sales, then a row of words: the words are
    # not the header (rows with numbers sit above them), so the first row is tried.
    rows = [["Sale ID", "Sale price", None], ["W-1", 312000, 1480], ["W-2", 298500, 1390],
            ["unknown", "unknown", "pending"]]
    with pytest.raises(IntakeError, match=r"^Header row \(sheet row 1\): column C has no name"):
        table_from_values(rows)


def test_a_workbook_without_settings_is_read_from_its_first_sheet_of_sales(tmp_path):
    """A cover sheet of notes comes first; the first sheet whose header row is words is the
    sales, unless --sheet names another."""
    import openpyxl
    from plumbrule.intake import read_table
    book = openpyxl.Workbook()
    cover = book.active
    cover.title = "Cover"
    cover.append(["Wrenfield assessor's office"])
    cover.append(["Prepared 2025-04-01"])
    sales = book.create_sheet("Register")
    sales.append(["Sale price", "Living area"])
    sales.append([210000, 1500])
    sales.append([250000, 1800])
    path = tmp_path / "register.xlsx"
    book.save(path)
    table = read_table(path)
    assert table.sheet == "Register" and table.columns == ["Sale price", "Living area"]
    assert read_table(path, sheet="Cover").sheet == "Cover"

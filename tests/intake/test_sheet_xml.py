"""What an xlsx sheet says beyond its values: rows hidden or filtered out, and formula
cells the file holds no saved result for.

Spreadsheet facts used (Office Open XML, ECMA-376 Part 1, from memory: the row element
carries hidden="1" for a hidden row, and a filter saves the rows it hides the same way; a
cell's formula is <f>, its saved result <v>). openpyxl writes formulas with an empty <v/>:
it never computes them, as a program that does not compute formulas would save them.
The sheets are invented (Wrenfield, an invented town).
"""

import zipfile

import openpyxl
import pytest

from plumbrule.errors import IntakeError
from plumbrule.intake import clean, hidden_rows_log, read_table
from plumbrule.screening import LOG_COLUMNS


def _book(path, hide=(), formulas=False):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws["A1"] = "Wrenfield sales 2025"
    ws.append([])
    ws.append(["Sale ID", "Sale price", "Living area", "Condition"])         # row 3
    for i, (p, a) in enumerate([(312000, 1480), (298500, 1390), (355000, 1710),
                                (340000, 1650)], start=4):
        cond = f'=IF(C{i}>1500,"Good","Fair")' if formulas else "Good"
        ws.append([f"W-{i}", p, a, cond])
    for r in hide:
        ws.row_dimensions[r].hidden = True
    wb.save(path)
    return path


def _rewrite(path, old, new):
    """The same workbook with one piece of the sheet XML replaced."""
    with zipfile.ZipFile(path) as z:
        parts = {n: z.read(n) for n in z.namelist()}
    xml = parts["xl/worksheets/sheet1.xml"].decode()
    assert old in xml
    parts["xl/worksheets/sheet1.xml"] = xml.replace(old, new).encode()
    with zipfile.ZipFile(path, "w") as z:
        for n, data in parts.items():
            z.writestr(n, data)
    return path


def test_hidden_rows_are_carried_by_their_sheet_rows(tmp_path):
    t = read_table(_book(tmp_path / "w.xlsx", hide=(1, 5, 7)))
    assert t.header_row == 3
    assert t.hidden_rows == (5, 7)           # the hidden title row 1 is not a sale
    log = hidden_rows_log(t)
    assert list(log.columns) == LOG_COLUMNS
    assert log[["row", "rule", "reason"]].to_dict("records") == [
        {"row": 5, "rule": "hidden row", "reason": "hidden or filtered out in the sheet"},
        {"row": 7, "rule": "hidden row", "reason": "hidden or filtered out in the sheet"}]


def test_hidden_rows_whatever_the_order_of_the_rows_attributes(tmp_path):
    path = _rewrite(_book(tmp_path / "w.xlsx", hide=(6,)), '<row r="6" hidden="1">',
                    '<row hidden="1" spans="1:4" r="6">')
    assert read_table(path).hidden_rows == (6,)


def test_no_hidden_rows_in_a_plain_sheet_or_a_csv(tmp_path):
    assert read_table(_book(tmp_path / "w.xlsx")).hidden_rows == ()
    (tmp_path / "w.csv").write_text("Sale ID,Sale price\nW-1,312000\n")
    t = read_table(tmp_path / "w.csv")
    assert t.hidden_rows == () and hidden_rows_log(t).empty


def test_formulas_with_no_saved_values_are_refused_by_column(tmp_path):
    t = read_table(_book(tmp_path / "w.xlsx", formulas=True))
    assert t.unsaved_formula_columns == ("Condition",)
    with pytest.raises(IntakeError, match=r"^Column 'Condition' holds formulas with no saved "
                                          r"values: open the workbook in a spreadsheet program "
                                          r"and save it, then run again\.$") as err:
        clean(t, numeric=["Sale price"], categorical=["Condition"])
    assert err.value.column == "Condition"
    # A column not used is not in the way.
    assert clean(t, numeric=["Sale price", "Living area"]).data.index.tolist() == [4, 5, 6, 7]


def test_formulas_with_saved_values_are_read_as_their_values(tmp_path):
    # As a spreadsheet program saves it: the formula and its result (t="str", <v>Fair</v>).
    path = _book(tmp_path / "w.xlsx", formulas=True)
    path = _rewrite(path, '<c r="D4"><f>IF(C4&gt;1500,"Good","Fair")</f><v /></c>',
                    '<c r="D4" t="str"><f>IF(C4&gt;1500,"Good","Fair")</f><v>Fair</v></c>')
    t = read_table(path)
    assert t.unsaved_formula_columns == ("Condition",)      # rows 5-7 still have none
    for r in (5, 6, 7):
        formula = f'IF(C{r}&gt;1500,"Good","Fair")'
        value = "Good" if r in (6, 7) else "Fair"
        path = _rewrite(path, f'<c r="D{r}"><f>{formula}</f><v /></c>',
                        f'<c r="D{r}" t="str"><f>{formula}</f><v>{value}</v></c>')
    t = read_table(path)
    assert t.unsaved_formula_columns == ()
    assert clean(t, categorical=["Condition"]).data["Condition"].tolist() == [
        "Fair", "Fair", "Good", "Good"]


def test_error_cells_still_read_in_the_same_scan(tmp_path):
    path = _book(tmp_path / "w.xlsx", hide=(5,))
    path = _rewrite(path, '<c r="C6" t="n"><v>1710</v></c>',
                    '<c r="C6" t="e"><f>1/0</f><v>#DIV/0!</v></c>')
    t = read_table(path)
    assert t.hidden_rows == (5,) and t.unsaved_formula_columns == ()
    assert clean(t, numeric=["Living area"]).dropped.to_dict("records") == [
        {"row": 6, "column": "Living area", "reason": "error value #DIV/0!"}]

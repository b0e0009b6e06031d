"""Grafting result sheets into a user's package (plumbrule.workbook.graft): the
user's parts stay byte for byte, ours arrive with their formats, whatever XML
style the user's file was written in."""

from __future__ import annotations

import io
import re
import zipfile

import pytest

from workbook_snapshot import rezip, snapshot
from plumbrule.workbook.graft import graft
from plumbrule.workbook.package import MARK_NAME, mark_text


def _user_book(path):
    from openpyxl import Workbook
    from openpyxl.styles import Font
    wb = Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws.append(["Sale price", "Note"])
    ws.append([125000, "=HYPERLINK(\"x\")"])
    ws["B2"].data_type = "s"
    ws["A2"].number_format = "#,##0.00"
    ws["A1"].font = Font(bold=True)
    mine = wb.create_sheet("Mine")
    mine["A1"] = "=Sales!A2*2"
    wb.save(path)
    return path


def _result_bytes(with_cf=True):
    from openpyxl import Workbook
    from openpyxl.formatting.rule import CellIsRule
    from openpyxl.styles import PatternFill
    from openpyxl.workbook.defined_name import DefinedName
    wb = Workbook()
    ws = wb.active
    ws.title = "Model"
    ws["A1"] = "R²"
    ws["B1"] = 0.9018845068039398
    ws["B1"].number_format = "0.000"
    ws["B2"] = 1234.5
    ws["B2"].number_format = '#,##0;-#,##0'
    if with_cf:
        ws.conditional_formatting.add("B1:B2", CellIsRule(
            operator="greaterThan", formula=["0.5"], fill=PatternFill("solid", bgColor="FFC7CE")))
    wb.defined_names["plumb_r_squared"] = DefinedName("plumb_r_squared", attr_text="'Model'!$B$1")
    ws.defined_names[MARK_NAME] = DefinedName(MARK_NAME, attr_text=mark_text("Model"), hidden=True)
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


def _prefixed(data: bytes) -> bytes:
    """The same XML with the main namespace on an 'x:' prefix (as some generators write)."""
    text = data.decode()
    text = text.replace('xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"',
                        'xmlns:x="http://schemas.openxmlformats.org/spreadsheetml/2006/main"', 1)
    text = re.sub(r"<(/?)(?![\w]+:)(\w+)([\s/>])", r"<\1x:\2\3", text)
    return text.encode()


@pytest.mark.parametrize("style", ["default namespace", "x: prefix"])
def test_graft_keeps_the_users_parts_and_adds_formatted_results(tmp_path, style):
    from openpyxl import load_workbook
    user = _user_book(tmp_path / "user.xlsx")
    if style == "x: prefix":
        user = rezip(user, tmp_path / "prefixed.xlsx",
                     replace={"xl/workbook.xml": _prefixed, "xl/styles.xml": _prefixed})
    before = snapshot(user)
    with zipfile.ZipFile(user) as z:
        parts = {n: z.read(n) for n in z.namelist()}
    out = tmp_path / "out.xlsx"
    graft(user, _result_bytes(), out, replace=(), sheet_names=["Model"])
    after = snapshot(out)
    assert after["sheetnames"] == ["Sales", "Mine", "Model"]
    for name in ("Sales", "Mine"):
        assert after[name] == before[name]
    with zipfile.ZipFile(out) as z:
        for name in ("xl/worksheets/sheet1.xml", "xl/worksheets/sheet2.xml", "xl/theme/theme1.xml"):
            assert z.read(name) == parts[name]
    wb = load_workbook(out)
    assert wb["Model"]["B1"].number_format == "0.000"
    assert wb["Model"]["B2"].number_format == "#,##0;-#,##0"
    assert wb["Sales"]["A2"].number_format == "#,##0.00"
    assert wb["Sales"]["B2"].data_type == "s"
    (sheet, ref), = list(wb.defined_names["plumb_r_squared"].destinations)
    assert (sheet, ref) == ("Model", "$B$1")
    rule = wb["Model"].conditional_formatting
    fills = [r.dxf.fill.bgColor.rgb for cf in rule for r in cf.rules]
    assert fills and fills[0].endswith("FFC7CE")


def test_grafting_again_replaces_and_does_not_grow(tmp_path):
    user = _user_book(tmp_path / "user.xlsx")
    once, twice = tmp_path / "once.xlsx", tmp_path / "twice.xlsx"
    graft(user, _result_bytes(), once, replace=(), sheet_names=["Model"])
    graft(once, _result_bytes(), twice, replace=("Model",), sheet_names=["Model"])
    with zipfile.ZipFile(once) as a, zipfile.ZipFile(twice) as b:
        assert a.namelist() == b.namelist()
        for n in a.namelist():
            assert a.read(n) == b.read(n), n           # same bytes: styles reused, ids stable


def test_restyle_maps_every_cell_row_and_column_style():
    # the ids written by the result book's writer (r then s) and any other attribute order
    # (openpyxl's writer, a hand-made part) both follow the merged styles; expected output
    # written out by hand
    from plumbrule.workbook.graft import _restyle_sheet
    xf = {0: 0, 1: 5, 2: 9}
    ours = (b'<cols><col min="1" max="1" style="2"/></cols><sheetData>'
            b'<row r="1" s="1" customFormat="1"><c r="A1" s="2" t="n"><v>1</v></c>'
            b'<c r="B1" t="inlineStr"><is><t>a s="1" b</t></is></c></row>'
            b'<row r="2"><c r="A2" s="1"/><c t="n" s="2" r="B2"><v>2</v></c></row></sheetData>')
    want = (b'<cols><col min="1" max="1" style="9"/></cols><sheetData>'
            b'<row r="1" s="5" customFormat="1"><c r="A1" s="9" t="n"><v>1</v></c>'
            b'<c r="B1" t="inlineStr"><is><t>a s="1" b</t></is></c></row>'
            b'<row r="2"><c r="A2" s="5"/><c t="n" s="9" r="B2"><v>2</v></c></row></sheetData>')
    assert _restyle_sheet(ours, xf, {}) == want
    plain = ours.replace(b'<c t="n" s="2" r="B2">', b'<c r="B2" s="2" t="n">')
    assert _restyle_sheet(plain, xf, {}) == want.replace(b'<c t="n" s="9" r="B2">',
                                                         b'<c r="B2" s="9" t="n">')

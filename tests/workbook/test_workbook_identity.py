"""plumbrule replaces only what it wrote, proven by the mark each result sheet carries,
never by a sheet's name or by the hint ``plumb_sheets``: a user's sheet named like a
result sheet, a copied or edited hint, a renamed result sheet, any valid spelling of
workbook.xml and a protected structure never cost the user a sheet, a name or a part."""

from __future__ import annotations

import re
import shutil
import xml.etree.ElementTree as ET
import zipfile

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from workbook_snapshot import rezip, snapshot, refused_run
from xml_dialect import NS_MAIN, NS_R, rewrite
from plumbrule.cli.main import main
from plumbrule.workbook import RESULT_SHEETS

EDITED = {"[Content_Types].xml", "xl/workbook.xml", "xl/_rels/workbook.xml.rels",
          "xl/styles.xml"}


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    """The demo workbook after one run."""
    from plumbrule.cli.demo import write_demo_book
    from plumbrule.workbook.run import run_book
    path = write_demo_book(tmp_path_factory.mktemp("ran"))
    run_book(path, backup=False)
    return path


@pytest.fixture
def book(ran, tmp_path):
    return shutil.copyfile(ran, tmp_path / "book.xlsx")


def _parts(path):
    with zipfile.ZipFile(path) as z:
        names = z.namelist()
        assert len(names) == len(set(names)), "duplicate part names"
        return {n: z.read(n) for n in names}


def _sheets(path):
    """[(name, sheetId, part)] from workbook.xml and its rels, parsed as XML."""
    with zipfile.ZipFile(path) as z:
        wb = ET.fromstring(z.read("xl/workbook.xml"))
        rels = ET.fromstring(z.read("xl/_rels/workbook.xml.rels"))
    # part names as in the zip: rels targets are absolute or relative to xl/
    target = {r.get("Id"): r.get("Target") for r in rels}
    target = {k: v[1:] if v.startswith("/") else "xl/" + v for k, v in target.items()}
    return [(s.get("name"), s.get("sheetId"), target[s.get(f"{{{NS_R}}}id")])
            for s in wb.iter(f"{{{NS_MAIN}}}sheet")]


def test_a_sheet_of_the_users_named_report_is_never_replaced(book, capsys):
    # The user deletes plumbrule's Report and makes their own; plumb_sheets still lists
    # "Report" (docs/workbook.md: a sheet of yours named like a result sheet is never replaced).
    from openpyxl import load_workbook
    wb = load_workbook(book)
    del wb["Report"]
    wb.create_sheet("Report")["A1"] = "my own report"
    wb.save(book)
    refused_run(book, capsys, "'Report'", "did not write", "rename", "nothing was written")


def _hint(text):
    """workbook.xml with the hidden name plumb_sheets set to ``text``."""
    def edit(data):
        new, n = re.subn(rb'(<definedName name="plumb_sheets"[^>]*>)[^<]*(</definedName>)',
                         lambda m: m.group(1) + text.encode() + m.group(2), data)
        assert n == 1
        return new
    return edit


@pytest.mark.parametrize("hint", ['"Sales|Subjects"', '"Report|Model|Screening|Validation|'
                                                      'Valuation|Chart data|Sales"'])
def test_a_copied_or_edited_sheet_list_deletes_nothing(book, tmp_path, hint):
    src = rezip(book, tmp_path / "hinted.xlsx", replace={"xl/workbook.xml": _hint(hint)})
    before = snapshot(src, only=("Sales", "Subjects", "Comps", "Settings"))
    assert main(["run", str(src), "--no-backup"]) == 0
    after = snapshot(src, only=("Sales", "Subjects", "Comps", "Settings"))
    for name in ("Sales", "Subjects", "Comps", "Settings"):
        assert after[name] == before[name], name
    assert [n for n in after["sheetnames"] if n not in RESULT_SHEETS] == [
        n for n in before["sheetnames"] if n not in RESULT_SHEETS]
    assert [n for n in after["sheetnames"] if n in RESULT_SHEETS] == list(RESULT_SHEETS)


def test_a_result_sheet_renamed_in_workbook_xml_only_is_kept_as_it_was(book, tmp_path):
    # A tool renames "Model" to "Model 2024" in workbook.xml and keeps the part names:
    # that sheet is the user's now; the new Model goes into a part of its own.
    src = rezip(book, tmp_path / "renamed.xlsx", replace={
        "xl/workbook.xml": lambda d: d.replace(b'<sheet name="Model"',
                                               b'<sheet name="Model 2024"')})
    before = _parts(src)
    model_part = next(p for n, _, p in _sheets(src) if n == "Model 2024")
    assert main(["run", str(src), "--no-backup"]) == 0
    after = _parts(src)
    names = [n for n, _, _ in _sheets(src)]
    assert "Model 2024" in names and "Model" in names
    assert next(p for n, _, p in _sheets(src) if n == "Model 2024") == model_part
    assert after[model_part] == before[model_part]
    parts = [p for _, _, p in _sheets(src)]
    assert len(parts) == len(set(parts))


def _lock_structure(data):
    return re.sub(rb"(<workbookPr\b[^>]*/>)", rb'\1<workbookProtection lockStructure="1"/>',
                  data, count=1)


def test_a_book_with_a_protected_structure_is_not_given_new_sheets(book, tmp_path, capsys):
    src = rezip(book, tmp_path / "locked.xlsx", replace={"xl/workbook.xml": _lock_structure})
    original = src.read_bytes()
    assert main(["run", str(src)]) == 0
    out = capsys.readouterr().out
    assert "protected workbook structure" in out and "locked.results.xlsx" in out
    assert src.read_bytes() == original
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.xlsx", "locked.results.xlsx",
                                                          "locked.xlsx"]


# --- workbook.xml in other dialects -------------------------------------------------

def _print_area_on(data, sheet, ref):
    """workbook.xml with a print area local to ``sheet`` (parsed and written as XML)."""
    root = ET.fromstring(data)
    names = [s.get("name") for s in root.iter(f"{{{NS_MAIN}}}sheet")]
    block = root.find(f"{{{NS_MAIN}}}definedNames")
    el = ET.SubElement(block, f"{{{NS_MAIN}}}definedName",
                       {"name": "_xlnm.Print_Area", "localSheetId": str(names.index(sheet))})
    el.text = f"'{sheet}'!{ref}"
    return root


def _local_names(path):
    """{(name, sheet name): text} of every sheet-local defined name."""
    with zipfile.ZipFile(path) as z:
        root = ET.fromstring(z.read("xl/workbook.xml"))
    sheets = [s.get("name") for s in root.iter(f"{{{NS_MAIN}}}sheet")]
    return {(d.get("name"), sheets[int(d.get("localSheetId"))]): d.text
            for d in root.iter(f"{{{NS_MAIN}}}definedName") if d.get("localSheetId")}


DIALECTS = {
    "open-close": dict(self_close=False),
    "single quotes": dict(quote="'"),
    "x: prefix": dict(prefixes={NS_MAIN: "x", NS_R: "r"}),
    "all at once": dict(prefixes={NS_MAIN: "s", NS_R: "rel"}, quote="'", self_close=False,
                        order="reversed"),
}


@pytest.mark.parametrize("dialect", list(DIALECTS))
def test_a_rerun_reads_any_spelling_of_workbook_xml(book, tmp_path, dialect):
    src = rezip(book, tmp_path / "dialect.xlsx", replace={
        "xl/workbook.xml": lambda d: rewrite(_print_area_on(d, "Sales", "$A$1:$D$20"),
                                             **DIALECTS[dialect])})
    before = _parts(src)
    assert main(["run", str(src), "--no-backup"]) == 0
    sheets = _sheets(src)
    ids = [i for _, i, _ in sheets]
    assert len(ids) == len(set(ids)), ids                       # sheetIds unique
    assert [n for n, _, _ in sheets].count("Report") == 1
    names = _local_names(src)
    assert names[("_xlnm.Print_Area", "Sales")] == "'Sales'!$A$1:$D$20"
    assert names[("_xlnm.Print_Area", "Report")].startswith("'Report'!")
    # the user's print area stays; every printed result sheet brings its own
    assert sorted(k[1] for k in names if k[0] == "_xlnm.Print_Area") == sorted(
        ("Read me", "Sales", "xlwings.conf", "Report", "Model", "Screening", "Validation",
         "Valuation"))
    assert names[("_xlnm.Print_Titles", "Sales")] == "'Sales'!$1:$1"   # from the template
    after = _parts(src)
    user = [p for n, _, p in sheets if n not in RESULT_SHEETS]
    # Read me, Sales, Subjects, Comps, Settings, Models, Roll, xlwings.conf
    assert len(user) == 8
    for part in user:
        assert after[part] == before[part], part


# --- fuzz: dialects of workbook.xml, a small book, graft directly --------------------

def _small_user_book(path):
    from openpyxl import Workbook
    from openpyxl.workbook.defined_name import DefinedName
    wb = Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws.append(["Sale price", "Note"])
    ws.append([125000, "a & b < c"])
    mine = wb.create_sheet("Mine & co")
    mine["A1"] = "=Sales!A2*2"
    mine.print_area = "A1:B2"
    wb.defined_names["my_total"] = DefinedName("my_total", attr_text="'Mine & co'!$A$1")
    wb.save(path)
    return path


def _small_result_bytes():
    import io
    from openpyxl import Workbook
    from openpyxl.workbook.defined_name import DefinedName
    from plumbrule.workbook.run import _record_sheets
    wb = Workbook()
    wb.active.title = "Subjects"                     # a stand-in sheet, never grafted
    for name in ("Report", "Model"):
        ws = wb.create_sheet(name)
        ws["A1"] = name
        ws["B1"] = 0.5
    wb["Report"].print_area = "A1:B3"
    wb.defined_names["plumb_r_squared"] = DefinedName("plumb_r_squared", attr_text="'Model'!$B$1")
    _record_sheets(wb, ["Report", "Model"])
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


@pytest.fixture(scope="module")
def grafted_once(tmp_path_factory):
    from plumbrule.workbook.graft import graft
    folder = tmp_path_factory.mktemp("fuzz")
    user = _small_user_book(folder / "user.xlsx")
    once = folder / "once.xlsx"
    graft(user, _small_result_bytes(), once, replace=(), sheet_names=["Report", "Model"])
    return once


_PREFIX = st.sampled_from(["", "x", "main", "s"])
_RPREFIX = st.sampled_from(["r", "rel", "x"])


@settings(max_examples=12, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(main_p=_PREFIX, r_p=_RPREFIX, quote=st.sampled_from(['"', "'"]), self_close=st.booleans(),
       order=st.sampled_from(["as is", "reversed", "sorted"]), space=st.sampled_from([" ", "\n  "]))
def test_fuzz_a_rerun_keeps_every_user_part_byte_for_byte(grafted_once, tmp_path_factory,
                                                           main_p, r_p, quote, self_close,
                                                           order, space):
    from openpyxl import load_workbook
    from plumbrule.workbook.graft import graft
    if main_p == r_p:
        r_p = "r" if main_p != "r" else "rel"
    folder = tmp_path_factory.mktemp("d")
    src = rezip(grafted_once, folder / "src.xlsx", replace={"xl/workbook.xml": lambda d: rewrite(
        d, prefixes={NS_MAIN: main_p, NS_R: r_p}, quote=quote, self_close=self_close,
        order=order, space=space)})
    before, sheets_before = _parts(src), _sheets(src)
    out = folder / "out.xlsx"
    graft(src, _small_result_bytes(), out, replace=("Report", "Model"),
          sheet_names=["Report", "Model"])
    after, sheets_after = _parts(out), _sheets(out)
    ours = {p for n, _, p in sheets_before if n in ("Report", "Model")}
    for name, data in before.items():
        if name in EDITED or name.startswith(tuple(sorted(ours))) or "/_rels/plumbrule-" in name:
            continue
        assert after[name] == data, name                   # the user's parts, byte for byte
    assert [n for n, _, _ in sheets_after] == ["Sales", "Mine & co", "Report", "Model"]
    assert [i for _, i, _ in sheets_after][:2] == [i for _, i, _ in sheets_before][:2]
    assert len({i for _, i, _ in sheets_after}) == 4
    names = _local_names(out)
    assert names[("_xlnm.Print_Area", "Mine & co")] == "'Mine & co'!$A$1:$B$2"
    assert names[("_xlnm.Print_Area", "Report")] == "'Report'!$A$1:$B$3"
    assert {k for k in names if k[0] == "plumb_result"} == {("plumb_result", "Report"),
                                                              ("plumb_result", "Model")}
    # the user's own <sheet> elements are carried as they were spelled
    with zipfile.ZipFile(src) as a, zipfile.ZipFile(out) as b:
        old, new = a.read("xl/workbook.xml"), b.read("xl/workbook.xml")
    for el in re.findall(rb"<(?:\w+:)?sheet\b[^>]*?(?:/>|>\s*</(?:\w+:)?sheet>)", old)[:2]:
        assert el in new
    wb = load_workbook(out)
    assert wb.defined_names["my_total"].attr_text == "'Mine & co'!$A$1"
    assert wb["Model"]["B1"].value == 0.5


@pytest.mark.spreadsheet
def test_the_marks_survive_a_save_in_libreoffice(book, tmp_path):
    """A book saved by LibreOffice Calc between runs is still updated in place: the marks
    (sheet-local names) come through, so the result sheets are replaced, not doubled."""
    import subprocess
    soffice = shutil.which("soffice") or shutil.which("libreoffice")
    if soffice is None:
        pytest.skip("LibreOffice is not installed")
    from plumbrule.workbook.run import run_book
    profile = f"-env:UserInstallation=file://{tmp_path / 'profile'}"
    subprocess.run([soffice, "--headless", "--norestore", profile, "--convert-to", "xlsx",
                    "--outdir", str(tmp_path / "lo"), str(book)], check=True,
                   capture_output=True, timeout=180)
    saved = tmp_path / "lo" / "book.xlsx"
    res = run_book(saved, backup=False)
    assert res.in_place and res.unsupported == ()
    names = [n for n, _, _ in _sheets(saved)]
    assert [n for n in names if n in RESULT_SHEETS] == list(RESULT_SHEETS)
    assert len(names) == len(set(names))

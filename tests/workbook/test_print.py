"""Print layout of the template and the result sheets, read back from the sheet XML, and
``plumbrule report --pdf`` without LibreOffice (the LibreOffice renders are in
test_libreoffice.py)."""

import shutil
import zipfile

import openpyxl
import pytest

from print_layout import clipped, print_bounds, width

PRINTED_RESULTS = ("Report", "Model", "Screening", "Validation", "Valuation")


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    from plumbrule.cli.demo import write_demo_book
    from plumbrule.workbook.run import run_book
    path = write_demo_book(tmp_path_factory.mktemp("printed"))
    run_book(path, backup=False)
    return path


@pytest.fixture(scope="module")
def template():
    from plumbrule.workbook.template import packaged_template
    return openpyxl.load_workbook(packaged_template())


def _one_page_wide(ws):
    ps = ws.page_setup
    assert ws.sheet_properties.pageSetUpPr.fitToPage, ws.title
    assert (ps.fitToWidth, ps.fitToHeight) == (1, 0), ws.title   # 0: as many pages as needed


@pytest.mark.parametrize("sheet", ["Read me", "Sales", "Subjects", "Comps", "Settings",
                                   "xlwings.conf"])
def test_template_sheets_print_one_page_wide_without_clipped_text(template, sheet):
    ws = template[sheet]
    _one_page_wide(ws)
    assert clipped(ws) == []
    assert ws.oddFooter.left.text == "&A"         # the sheet's name on every page


def test_template_tables_repeat_their_header_row_and_wide_ones_print_landscape(template):
    for sheet in ("Sales", "Subjects", "Comps", "Settings"):
        assert template[sheet].print_title_rows == "$1:$1", sheet
        assert not template[sheet].print_area, sheet     # every row the user fills prints
    for sheet in ("Sales", "Settings"):
        assert template[sheet].page_setup.orientation == "landscape", sheet
    assert template["Read me"].page_setup.orientation == "portrait"


def test_read_me_steps_are_wrapped_inside_the_page(template):
    # the issue: the steps and cautions overlapped and were cut at the right edge
    ws = template["Read me"]
    assert print_bounds(ws)[1] == 1
    long_rows = [c for c in ws["A"] if isinstance(c.value, str) and len(c.value) > 100]
    assert len(long_rows) >= 5
    for c in long_rows:
        assert c.alignment.wrap_text and ws.row_dimensions[c.row].height >= 30, c.coordinate


def test_settings_descriptions_wrap_in_their_column(template):
    # the issue: Settings printed three pages wide
    ws = template["Settings"]
    assert sum(width(ws, k) for k in range(1, 5)) <= 150
    helps = [ws.cell(row=r, column=4) for r in range(2, ws.max_row + 1)]
    assert any(ws.row_dimensions[c.row].height for c in helps if len(c.value or "") > 80)


@pytest.mark.parametrize("sheet", PRINTED_RESULTS)
def test_result_sheets_print_one_page_wide_without_clipped_text(ran, sheet):
    ws = openpyxl.load_workbook(ran)[sheet]
    _one_page_wide(ws)
    assert ws.print_area, sheet
    assert clipped(ws) == []
    assert ws.page_setup.orientation == "landscape"


def test_the_settings_line_of_the_stamp_wraps_within_the_printed_columns(ran):
    # the issue: one cell 60 columns wide that printed 13 pages
    ws = openpyxl.load_workbook(ran)["Model"]
    last_row, last_col = print_bounds(ws)
    assert last_col <= 12
    cell = next(c for row in ws.iter_rows(max_row=last_row) for c in row
                if isinstance(c.value, str) and c.value.startswith("response="))
    assert cell.alignment.wrap_text
    assert any(cell.coordinate in rng for rng in ws.merged_cells.ranges)


def test_covariance_matrix_is_wide_enough_to_show_its_numbers(ran):
    # the issue: the covariance matrix showed ###; '-1.234E-05' needs 10 character widths
    wb = openpyxl.load_workbook(ran)
    (sheet, ref), = wb.defined_names["plumb_coef_cov"].destinations
    ws = wb[sheet]
    cells = ws[ref.replace("$", "")]
    for c in cells[0]:
        assert width(ws, c.column) >= 11, c.coordinate
    # below the printed area: the live block's input, not reading matter
    assert cells[0][0].row > print_bounds(ws)[0]


def test_neither_sales_nor_chart_data_is_in_the_default_print_selection(ran):
    # a spreadsheet prints the selected sheets by default; the run keeps the user's tab
    # (here the template's Read me) and selects none of its own
    wb = openpyxl.load_workbook(ran)
    selected = [ws.title for ws in wb.worksheets if ws.sheet_view.tabSelected]
    assert selected == ["Read me"] and wb.active.title == "Read me"
    assert wb["Chart data"].sheet_state == "hidden"     # a spreadsheet never prints it


def test_print_copy_hides_other_sheets_and_leaves_the_book_alone(ran, tmp_path):
    from plumbrule.workbook.pdf import print_copy, sheet_names
    before = ran.read_bytes()
    copy = print_copy(ran, ["Model"], tmp_path / "copy.xlsx")
    assert ran.read_bytes() == before
    states = dict(sheet_names(copy))
    assert [n for n, s in states.items() if s != "hidden"] == ["Model"]
    wb = openpyxl.load_workbook(copy)
    assert wb["Model"].print_area and not wb["Report"].print_area  # hidden sheets'
    with zipfile.ZipFile(ran) as a, zipfile.ZipFile(copy) as b:     # areas would print
        for name in a.namelist():
            if name != "xl/workbook.xml":
                assert a.read(name) == b.read(name), name


def test_report_pdf_without_libreoffice_says_how_to_install_it(ran, monkeypatch, capsys):
    from plumbrule.cli.main import main
    from plumbrule.workbook import pdf
    monkeypatch.setattr(pdf, "find_soffice", lambda: None)
    assert main(["report", str(ran), "--pdf"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "LibreOffice" in err and "apt-get install libreoffice-calc" in err
    assert not ran.with_suffix(".pdf").exists()


def test_report_refuses_a_book_without_results_and_a_pdf_over_the_book(tmp_path, capsys):
    from plumbrule.cli.main import main
    from plumbrule.workbook.template import packaged_template
    book = shutil.copyfile(packaged_template(), tmp_path / "fresh.xlsx")
    assert main(["report", str(book)]) == 2
    assert "Run plumbrule run fresh.xlsx first" in capsys.readouterr().err
    assert main(["report", str(book), "--pdf", str(tmp_path / "out.txt")]) == 2
    assert "must end in .pdf" in capsys.readouterr().err


def _column_a(ws):
    return {c.value: c.row for c in ws["A"] if isinstance(c.value, str)}


def test_model_sheet_leads_with_the_effects_in_words_then_detail_then_fit(ran):
    # issue 14: not a block of fit figures followed by a coefficient table
    from foreign_labels import FOREIGN_LABELS
    ws = openpyxl.load_workbook(ran)["Model"]
    rows = _column_a(ws)
    order = [rows["What each feature does to the price"], rows["The coefficients in detail"],
             rows["How closely the model fits"], rows["Checks, question by question"]]
    assert order == sorted(order)
    words = [ws.cell(row=r, column=2).value for r in range(order[0] + 3, order[1] - 1)]
    import re
    good = [w for w in words if w.endswith("% for Good against Average")]
    # the demo's Good coefficient b read as 100·(e^b − 1) percent, two significant figures
    assert len(good) == 1 and re.fullmatch(r"[+-]\d+(\.\d)?% for Good against Average", good[0])
    assert any(w and w.endswith("per 1% of Living area") for w in words)
    texts = [c.value.lower() for row in ws.iter_rows() for c in row if isinstance(c.value, str)]
    for lab in FOREIGN_LABELS:
        assert not [t for t in texts if lab.lower() in t], lab
    assert not [t for t in texts if "omnibus" in t]


def test_model_sheet_checks_come_question_by_question_with_a_verdict_each(ran):
    ws = openpyxl.load_workbook(ran)["Model"]
    rows = _column_a(ws)
    bands = ["The data", "The shape of the relationship", "The spread of errors",
             "Independence", "Normality", "Collinearity", "Influence"]
    at = [rows[b] for b in bands]
    assert at == sorted(at)
    for b in bands:
        assert ws.cell(row=rows[b], column=2).value in ("ok", "watch", "fails", "n/a")
        assert ws.cell(row=rows[b], column=3).value      # its sentence
    # the statistics sit below their question
    k2 = rows.get("Normality: D'Agostino–Pearson K²", 0)
    assert rows["Normality"] < k2 < rows["Collinearity"]

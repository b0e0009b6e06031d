"""Real-spreadsheet tests: LibreOffice opens, recalculates and prints plumbrule's books.

LibreOffice (headless) converts each workbook to xlsx, which makes it load the
file and recalculate every formula; openpyxl then reads the values LibreOffice
computed (data_only=True). The engine's numbers are the reference: the live
block must reproduce plumb_estimate / plumb_pi_low / plumb_pi_high (1e-9 relative,
the issue's tolerance), also after a feature is changed. A private LibreOffice
profile per test session keeps parallel runs apart; every call is time-limited.
"""

import shutil
import subprocess
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

pytestmark = pytest.mark.spreadsheet

SOFFICE = shutil.which("soffice") or shutil.which("libreoffice")
if SOFFICE is None:
    pytest.skip("LibreOffice (soffice) is not installed", allow_module_level=True)

PAIRS = (("plumb_live_estimate", "plumb_estimate"), ("plumb_live_pi_low", "plumb_pi_low"),
         ("plumb_live_pi_high", "plumb_pi_high"))


@pytest.fixture(scope="session")
def office(tmp_path_factory):
    profile = tmp_path_factory.mktemp("lo-profile")

    def convert(book: Path, fmt: str, outdir: Path) -> Path:
        outdir.mkdir(parents=True, exist_ok=True)
        done = subprocess.run(
            [SOFFICE, f"-env:UserInstallation={profile.as_uri()}", "--headless", "--norestore",
             "--convert-to", fmt, "--outdir", str(outdir), str(book)],
            capture_output=True, text=True, timeout=240)
        out = outdir / (book.stem + "." + fmt.split(":")[0])
        assert done.returncode == 0 and out.exists(), (done.stdout, done.stderr)
        return out
    return convert


def _named(wb, name):
    (sheet, ref), = wb.defined_names[name].destinations
    return wb[sheet][ref.replace("$", "")].value


@pytest.fixture(scope="module")
def demo_book(tmp_path_factory):
    """The demo workbook through the real run path (plumbrule demo = fill + run)."""
    from plumbrule.cli.demo import write_demo_book
    from plumbrule.workbook.run import run_book
    folder = tmp_path_factory.mktemp("demo")
    path = write_demo_book(folder)
    result = run_book(path, backup=False)
    return path, result


@pytest.fixture(scope="module")
def linear_book(tmp_path_factory):
    """A price-scale model with robust (HC3) errors and no date trend, also run by plumbrule."""
    from plumbrule.workbook.fill import fill_template
    from plumbrule.workbook.run import run_book
    rng = np.random.default_rng(8)
    n = 140
    area = rng.normal(1500, 300, n).round()
    hood = rng.choice(["North", "South", "West"], n)
    price = (25000 + 95 * area + np.select([hood == "South", hood == "West"], [9000, -4000], 0)
             + rng.normal(0, 1, n) * (4000 + 9 * area)).round(-2)
    sales = pd.DataFrame({"Price": price, "Area": area, "Hood": hood})
    subjects = pd.DataFrame({"Subject": ["Plot 9"], "Area": [1650.0], "Hood": ["West"]})
    path = tmp_path_factory.mktemp("linear") / "linear.xlsx"
    fill_template(path, sales, subjects, (), {"response": "Price", "predictors": "Area,Hood",
                                              "categorical": "Hood", "robust_se": "HC3",
                                              "date_column": "", "id_column": ""})
    return path, run_book(path, backup=False)


def _bent_book(tmp_path_factory, name, trend):
    """The simulated bent market (tests/simulated_market.py, our own invention) with a
    non-linear trend, filled into the template and run by plumbrule."""
    from simulated_market import SETTINGS, bent_market
    from plumbrule.workbook.fill import fill_template
    from plumbrule.workbook.run import run_book
    sales = bent_market(n=300, seed=4, noise=0.08)
    subjects = pd.DataFrame({"Subject": ["Unit 4"], "Living area": [1750.0], "Age": [30.0],
                             "Sale date": [pd.NaT]})
    path = tmp_path_factory.mktemp(name) / f"{name}.xlsx"
    fill_template(path, sales, subjects, (), {**SETTINGS, **trend, "id_column": "",
                                              "categorical": "",
                                              "valuation_date": "2026-03-01"})
    return path, run_book(path, backup=False)


@pytest.fixture(scope="module")
def piecewise_book(tmp_path_factory):
    return _bent_book(tmp_path_factory, "piecewise",
                      {"trend": "piecewise", "trend_knots": "2024-07-01,2025-07-01"})


@pytest.fixture(scope="module")
def periods_book(tmp_path_factory):
    return _bent_book(tmp_path_factory, "periods",
                      {"trend": "periods", "trend_period": "quarter"})


@pytest.fixture(scope="module")
def results_copy_book(tmp_path_factory):
    """A book with a part openpyxl cannot carry (sparklines): plumbrule leaves it alone
    and writes BOOK.results.xlsx, the other kind of result workbook."""
    from workbook_snapshot import rezip, sheet_part
    from plumbrule.cli.demo import write_demo_book
    from plumbrule.workbook.run import run_book
    folder = tmp_path_factory.mktemp("copy")
    src = write_demo_book(folder)
    ext = ('<extLst><ext uri="{05C60535-1F16-4fd2-B633-F4F36F0B64E0}" xmlns:x14="http://'
           'schemas.microsoft.com/office/spreadsheetml/2009/9/main"><x14:sparklineGroups/>'
           '</ext></extLst>')
    book = rezip(src, folder / "book.xlsx", replace={sheet_part(src, "Sales"): lambda d: d.replace(
        b"</worksheet>", (ext + "</worksheet>").encode())})
    result = run_book(book, backup=False)
    assert result.written.name == "book.results.xlsx"
    return result.written, result


def test_template_opens_and_converts(office, tmp_path):
    from plumbrule.workbook.template import packaged_template
    out = office(packaged_template(), "xlsx", tmp_path)
    wb = openpyxl.load_workbook(out)
    for sheet in ("Sales", "Subjects", "Comps", "Settings"):
        assert sheet in wb.sheetnames


@pytest.mark.parametrize("which", ["demo_book", "linear_book", "results_copy_book",
                                   "piecewise_book", "periods_book"])
def test_live_formulas_equal_the_engine_after_recalculation(which, office, tmp_path, request):
    path, result = request.getfixturevalue(which)
    out = office(path, "xlsx", tmp_path)
    wb = openpyxl.load_workbook(out, data_only=True)
    assert {"Report", "Model", "Valuation"} <= set(wb.sheetnames)   # nothing lost in repair
    formulas = openpyxl.load_workbook(path)["Valuation"]
    computed = wb["Valuation"]
    for row in formulas.iter_rows():
        for c in row:
            if c.data_type == "f":                 # every live formula got a proper value
                v = computed[c.coordinate].value
                assert isinstance(v, (int, float)) or v == "ok", (c.coordinate, c.value, v)
    engine = result.valuation.estimates.iloc[0]
    for live, static in PAIRS:
        got, want = _named(wb, live), _named(wb, static)
        assert isinstance(got, float), (live, got)            # computed, not an error value
        assert got == pytest.approx(want, rel=1e-9), live
        assert got == pytest.approx(engine[static.replace("plumb_", "")], rel=1e-9), live


def test_changed_feature_recalculates_to_the_engine_value(demo_book, office, tmp_path):
    from plumbrule.demo.town import demo_subjects
    from plumbrule.valuation.estimates import valuate
    path, result = demo_book
    wb = openpyxl.load_workbook(path)
    ws = wb["Valuation"]
    inputs = {}
    live = False          # the input cells are in the live block, below the adjustment grid
    for row in ws.iter_rows(min_col=1, max_col=2):   # the first match is the input cell;
        live = live or row[0].value == "Try a subject"
        if live and row[0].value in ("Condition", "Age"):   # 'Age' is also a term below
            inputs.setdefault(row[0].value, row[1])
    inputs["Condition"].value = "Poor"
    inputs["Age"].value = 60
    edited = tmp_path / "edited.xlsx"
    wb.save(edited)
    out = office(edited, "xlsx", tmp_path / "out")
    got = openpyxl.load_workbook(out, data_only=True)
    moved = demo_subjects().assign(Condition="Poor", Age=60)
    ref = valuate(result.analysis, moved).estimates.iloc[0]
    for live, static in PAIRS:
        assert _named(got, live) == pytest.approx(ref[static.replace("plumb_", "")], rel=1e-9)
    assert _named(got, "plumb_live_estimate") < result.valuation.estimates["estimate"].iloc[0]


def test_report_exports_to_pdf_with_its_charts(demo_book, office, tmp_path):
    path, _ = demo_book
    pdf = office(path, "pdf", tmp_path)
    assert pdf.stat().st_size > 50_000
    gs = shutil.which("gs")
    if gs is None:      # .ci/run installs it; without it the chart text cannot be read back
        pytest.skip("ghostscript (gs) is not installed: the PDF's text is not checked")
    text = subprocess.run([gs, "-q", "-dNOPAUSE", "-dBATCH", "-sDEVICE=txtwrite",
                           "-sOutputFile=-", str(pdf)], capture_output=True, text=True,
                          timeout=240).stdout
    assert "Valuation of 14 Lantern Row" in text and "not an appraisal" in text
    # chart titles are drawn by the chart renderer: their text proves the charts printed
    assert "Normal quantile plot of residuals" in text
    assert "before and after screening" in text
    png = tmp_path / "page.png"
    subprocess.run([gs, "-q", "-dNOPAUSE", "-dBATCH", "-sDEVICE=png16m", "-r40",
                    "-dFirstPage=1", "-dLastPage=1", f"-sOutputFile={png}", str(pdf)],
                   check=True, timeout=240)
    assert png.stat().st_size > 1000


def test_libreoffice_keeps_every_report_chart(demo_book, office, tmp_path):
    import re
    import zipfile
    path, _ = demo_book

    def charts(book):
        with zipfile.ZipFile(book) as z:
            return sorted(n for n in z.namelist()
                          if re.fullmatch(r"xl/charts/[\w-]*chart\d+\.xml", n))
    before = charts(path)
    # 4 model charts + a box plot per screened column with more than 10 distinct values (the
    # demo's living area, lot size and age; its bathrooms take 9 values and get none)
    assert len(before) >= 7
    assert len(charts(office(path, "xlsx", tmp_path))) == len(before)


@pytest.mark.parametrize("which", ["piecewise_book", "periods_book"])
def test_changed_valuation_date_recalculates_to_the_engine_value(which, office, tmp_path,
                                                                 request):
    """A valuation date in an earlier segment / quarter: LibreOffice's MIN, MAX, DATE and
    comparisons give the engine's value at that date (1e-9)."""
    import datetime as dt
    from plumbrule.valuation.estimates import valuate
    path, result = request.getfixturevalue(which)
    wb = openpyxl.load_workbook(path)
    ws = wb["Valuation"]
    cell = next(row[1] for row in ws.iter_rows(min_col=1, max_col=2)
                if row[0].value == "Valuation date")
    cell.value = dt.datetime(2024, 11, 20)
    edited = tmp_path / "edited.xlsx"
    wb.save(edited)
    got = openpyxl.load_workbook(office(edited, "xlsx", tmp_path / "out"), data_only=True)
    subject = result.valuation.subjects.data.drop(columns=["Sale date"], errors="ignore")
    ref = valuate(result.analysis, subject, settings={"valuation_date": "2024-11-20"})
    e = ref.estimates.iloc[0]
    for live, static in PAIRS:
        assert _named(got, live) == pytest.approx(e[static.replace("plumb_", "")], rel=1e-9)
    assert _named(got, "plumb_live_estimate") != pytest.approx(
        result.valuation.estimates["estimate"].iloc[0], rel=1e-6)     # the date mattered


# --- printing: pages per sheet, and plumbrule report --pdf ----------------------------
# Limits set just above what LibreOffice 7.4 prints on A4 (measured: template 7 pages, demo
# Report 12 (with the grid, the market charts and the candidate models compared), Model 4,
# Screening 2, Validation 3, Valuation 2; 2,000 sales: Report 11, Screening 4, Validation 11,
# Sales 36; the Report, Model, … and Comparison sheets together 31. Before the print
# layout: template 14 pages, demo 95, a 2,000-sale book 193; Settings alone 6, Model 20,
# Validation 14 and 36).
# They are the layout's promise, not a reference value: a sheet that no longer fits one
# page wide or lost its wrapping grows past them.

TEMPLATE_PAGES = {"Read me": 1, "Sales": 1, "Subjects": 1, "Comps": 1, "Settings": 3,
                  "xlwings.conf": 1}
DEMO_PAGES = {"Report": 12, "Model": 4, "Screening": 3, "Validation": 4, "Valuation": 3}


def _pdf_text(pdf: Path) -> str:
    gs = shutil.which("gs")
    if gs is None:      # .ci/run installs it; without it the PDF's text cannot be read back
        pytest.skip("ghostscript (gs) is not installed: the PDF's text is not checked")
    return subprocess.run([gs, "-q", "-dNOPAUSE", "-dBATCH", "-sDEVICE=txtwrite",
                           "-sOutputFile=-", str(pdf)], capture_output=True, text=True,
                          timeout=240).stdout


def _within(pages: dict, limits: dict) -> None:
    over = {k: (pages.get(k), v) for k, v in limits.items() if not 1 <= pages.get(k, 0) <= v}
    assert not over, f"pages (got, limit): {over}; all: {pages}"


def test_template_sheets_print_within_their_page_limits():
    from plumbrule.workbook.pdf import pages_per_sheet
    from plumbrule.workbook.template import packaged_template
    _within(pages_per_sheet(packaged_template()), TEMPLATE_PAGES)


def test_demo_result_sheets_print_within_their_page_limits(demo_book):
    from plumbrule.workbook.pdf import pages_per_sheet
    path, _ = demo_book
    pages = pages_per_sheet(path, list(DEMO_PAGES) + ["Sales"])
    _within(pages, DEMO_PAGES)
    assert pages["Sales"] <= 10       # 360 sales one page wide, header repeated


def test_a_2000_sale_book_prints_within_its_page_limits(tmp_path):
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_comps, demo_sales, demo_subjects
    from plumbrule.workbook.fill import fill_template
    from plumbrule.workbook.pdf import pages_per_sheet
    from plumbrule.workbook.run import run_book
    sales = demo_sales(n=2000)
    book = fill_template(tmp_path / "big.xlsx", sales, demo_subjects(), demo_comps(sales),
                         {k: v for k, v in demo_settings().items() if v is not None})
    run_book(book, backup=False)
    pages = pages_per_sheet(book, list(BIG_PAGES))
    _within(pages, BIG_PAGES)


BIG_PAGES = {"Report": 12, "Model": 4, "Screening": 6, "Validation": 13, "Valuation": 3,
             "Sales": 45}


def test_report_pdf_has_the_report_its_charts_and_leaves_the_book_alone(demo_book, tmp_path):
    from plumbrule.cli.main import main
    from plumbrule.workbook.pdf import page_count
    path, _ = demo_book
    before = path.read_bytes()
    out = tmp_path / "report.pdf"
    assert main(["report", str(path), "--pdf", str(out)]) == 0
    assert path.read_bytes() == before
    pages = page_count(out)
    assert 3 <= pages <= DEMO_PAGES["Report"]
    text = _pdf_text(out)
    assert "not an appraisal" in text and "14 Lantern Row" in text
    # chart titles are drawn by the chart renderer: their text proves the charts printed
    assert "Normal quantile plot of residuals" in text
    assert "Screening: the sales set aside" not in text      # only the Report
    assert "page 1 of" in text                               # our footer


def test_report_pdf_all_prints_every_result_sheet(demo_book, tmp_path):
    from plumbrule.cli.main import main
    from plumbrule.workbook.pdf import page_count
    path, _ = demo_book
    out = tmp_path / "all.pdf"
    assert main(["report", str(path), "--all", "--pdf", str(out)]) == 0
    text = _pdf_text(out)
    for title in ("Screening: the sales set aside", "Validation and the sales-ratio study",
                  "Audit stamp", "Estimates for the subjects"):
        assert title in text, title
    # the result sheets within their limits, and the Comparison sheet (the demo's candidates)
    assert page_count(out) <= sum(DEMO_PAGES.values()) + 6

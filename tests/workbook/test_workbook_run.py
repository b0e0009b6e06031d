"""``plumbrule run`` on a workbook: the result sheets, the defined names, number
formats, text that stays text, and reruns that replace only plumbrule's sheets."""

from __future__ import annotations

import datetime as dt
import shutil

import numpy as np
import pandas as pd
import pytest

from workbook_snapshot import snapshot
from plumbrule.cli.main import main
from plumbrule.workbook import INPUT_SHEETS, OPTIONAL_INPUT_SHEETS, RESULT_SHEETS

NOW = dt.datetime(2026, 1, 5, 12, 0, tzinfo=dt.timezone.utc)
HEADLINE_NAMES = ["plumb_estimate", "plumb_pi_low", "plumb_pi_high", "plumb_r_squared",
                  "plumb_cod", "plumb_prd", "plumb_prb", "plumb_n_used"]


@pytest.fixture(scope="module")
def ran(filled, tmp_path_factory):
    """The demo workbook after one `plumbrule run` (through the CLI)."""
    book = tmp_path_factory.mktemp("ran") / "book.xlsx"
    shutil.copyfile(filled, book)
    assert main(["run", str(book)]) == 0
    return book


def _value(book, name):
    dn = book.defined_names[name]
    (sheet, ref), = list(dn.destinations)
    return book[sheet][ref.replace("$", "")]


def test_run_writes_the_result_sheets_after_the_inputs(ran):
    from openpyxl import load_workbook
    book = load_workbook(ran)
    names = book.sheetnames
    assert names[:8] == ["Read me", *INPUT_SHEETS, *OPTIONAL_INPUT_SHEETS, "xlwings.conf"]
    assert [n for n in names if n in RESULT_SHEETS][:5] == list(RESULT_SHEETS[:5])
    assert book.active.title == "Read me"      # the user's choice of tab is not changed
    assert not any(ws.sheet_view.tabSelected for ws in book.worksheets if ws.title != "Read me")


def test_headline_names_hold_the_engine_numbers(ran):
    # Independent computation: the same sales and settings through the engine's API
    # (what `plumbrule fit`/`value` print), and R² from statsmodels' OLS on that design.
    from openpyxl import load_workbook
    import statsmodels.api as sm
    from plumbrule.analysis import analyze
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_comps, demo_sales, demo_subjects
    from plumbrule.valuation.estimates import valuate
    sales = demo_sales()
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    a = analyze(sales, settings)
    v = valuate(a, demo_subjects(), demo_comps(sales))
    book = load_workbook(ran)
    assert set(HEADLINE_NAMES) <= set(book.defined_names)
    est = v.estimates.iloc[0]
    for name, want in [("plumb_estimate", est["estimate"]), ("plumb_pi_low", est["pi_low"]),
                       ("plumb_pi_high", est["pi_high"])]:
        assert _value(book, name).value == pytest.approx(want, rel=1e-12), name
    m = a.final_model          # the model the workbook describes (refitted on every sale)
    ols = sm.OLS(m.y, np.column_stack([np.ones(len(m.y)), m.x])).fit()
    assert _value(book, "plumb_r_squared").value == pytest.approx(ols.rsquared, rel=1e-10)
    assert _value(book, "plumb_n_used").value == int(ols.nobs)
    study = a.tables.ratio_study.iloc[0]
    for m in ("cod", "prd", "prb"):
        assert _value(book, f"plumb_{m}").value == pytest.approx(study[m], rel=1e-12), m


def test_cod_and_prd_follow_from_the_listed_holdout_ratios(ran):
    # IAAO Standard on Ratio Studies (2013): COD = 100 * mean|r - median| / median,
    # PRD = mean ratio / (sum of estimates / sum of prices). Recomputed from the
    # Validation sheet's own list of held-out sales, so a reader can audit it.
    from openpyxl import load_workbook
    book = load_workbook(ran)
    ws = book["Validation"]
    header = None
    rows = []
    for r in ws.iter_rows(values_only=True):
        if header is None and r[:2] == ("sheet row", "ID"):
            header = list(r)
            take = [header.index(h) for h in ("sheet row", "sale price", "estimate", "ratio")]
            continue
        if header is not None:
            if r[0] is None:
                break
            rows.append([r[i] for i in take])
    frame = pd.DataFrame(rows, columns=["row", "price", "estimate", "ratio"])
    assert len(frame) > 20
    med = frame["ratio"].median()
    cod = 100 * (frame["ratio"] - med).abs().mean() / med
    prd = frame["ratio"].mean() / (frame["estimate"].sum() / frame["price"].sum())
    assert _value(book, "plumb_cod").value == pytest.approx(cod, rel=1e-9)
    assert _value(book, "plumb_prd").value == pytest.approx(prd, rel=1e-9)


def test_numbers_carry_number_formats(ran):
    from openpyxl import load_workbook
    book = load_workbook(ran)
    assert "#,##0" in _value(book, "plumb_estimate").number_format          # money
    r2 = _value(book, "plumb_r_squared")
    assert r2.number_format == "0.000" and 0.1 <= r2.value < 1               # 3 significant digits
    assert _value(book, "plumb_n_used").number_format == "0"
    assert _value(book, "plumb_prd").number_format == "0.000"


def test_audit_stamp_on_the_model_sheet(ran):
    from openpyxl import load_workbook
    from plumbrule import __version__
    ws = load_workbook(ran)["Model"]
    pairs = {r[0]: r[1] for r in ws.iter_rows(min_col=1, max_col=2, values_only=True) if r[0]}
    assert pairs["plumbrule version"] == __version__
    assert len(pairs["Sales data hash (SHA-256)"]) == 64
    n_sales = 363                                      # demo_sales(): 360 ordinary + 3 unusual
    # holdout sales are not set aside (issue 14); the model that values is refitted on the
    # training and held-out sales together (final_fit = all), so used + set aside = all sales
    assert (pairs["Sales used in the fit"] + pairs["Sales set aside or dropped"]) == n_sales
    assert 0 < pairs["Sales held out to test the model"] < pairs["Sales used in the fit"]
    assert "holdout=0.3" in pairs["Settings used"]
    dt.datetime.fromisoformat(pairs["Run at (UTC)"])


def _add_user_content_and_sales(path, n_new=24):
    """What a user does between runs: a sheet of their own and more sales."""
    from openpyxl import load_workbook
    from openpyxl.comments import Comment
    from openpyxl.styles import Font, PatternFill
    from openpyxl.workbook.defined_name import DefinedName
    from openpyxl.worksheet.datavalidation import DataValidation
    book = load_workbook(path)
    ws = book.create_sheet("My notes", 1)
    ws["A1"] = "Estimate plus 10 %"
    ws["B1"] = "=plumb_estimate*1.1"
    ws["A2"] = "Total of the first prices"
    ws["B2"] = "=SUM(Sales!B2:B20)"
    ws["A1"].font = Font(bold=True, color="FF8800AA")
    ws["B2"].fill = PatternFill("solid", fgColor="FFEEDD00")
    ws["B2"].number_format = "#,##0.0"
    ws["A2"].comment = Comment("my own note", "me")
    dv = DataValidation(type="list", formula1='"yes,no"')
    dv.add("C1")
    ws.add_data_validation(dv)
    ws["C1"] = "yes"
    book.defined_names["my_total"] = DefinedName("my_total", attr_text="'My notes'!$B$2")
    sales = book["Sales"]
    last = sales.max_row
    for i in range(n_new):                    # repeat some sales with a later date
        src = 2 + i * 7
        for j in range(1, sales.max_column + 1):
            cell = sales.cell(row=last + 1 + i, column=j, value=sales.cell(row=src, column=j).value)
            cell.number_format = sales.cell(row=src, column=j).number_format
        sales.cell(row=last + 1 + i, column=1, value=f"Q-NEW-{i}")
    table = sales.tables["Sales"]
    table.ref = f"A1:K{last + n_new}"
    table.autoFilter.ref = table.ref
    book.save(path)


def test_rerun_after_new_sales_replaces_only_the_result_sheets(ran, tmp_path):
    book = shutil.copyfile(ran, tmp_path / "book.xlsx")
    _add_user_content_and_sales(book)
    before = snapshot(book)
    assert main(["run", str(book)]) == 0
    after = snapshot(book)
    kept = [n for n in before["sheetnames"] if n not in RESULT_SHEETS]
    for name in kept:
        assert after[name] == before[name], f"sheet {name!r} changed"
    assert [n for n in after["sheetnames"] if n not in RESULT_SHEETS] == kept
    for name, text in before["names"].items():
        if not name.startswith("plumb_"):
            assert after["names"][name] == text
    # the user's formula, comment and validation are still there
    notes = after["My notes"]
    assert notes["cells"]["B1"][0] == repr("=plumb_estimate*1.1")
    assert notes["cells"]["A2"][-1].startswith("my own note")
    assert [v[:3] for v in notes["validations"]] == [("C1", "list", '"yes,no"')]
    # the results followed the new sales: 24 more rows in the data behind the fit
    from openpyxl import load_workbook

    def stamp(path):
        ws = load_workbook(path)["Model"]
        return {r[0]: r[1] for r in ws.iter_rows(min_col=1, max_col=2, values_only=True)}
    old, new = stamp(ran), stamp(book)
    assert (new["Sales used in the fit"] + new["Sales set aside or dropped"]) == 363 + 24
    assert new["Sales data hash (SHA-256)"] != old["Sales data hash (SHA-256)"]
    assert (book.parent / "book.xlsx.bak").exists()


def test_running_twice_gives_the_same_workbook(filled, tmp_path):
    from plumbrule.workbook.run import run_book
    book = shutil.copyfile(filled, tmp_path / "book.xlsx")
    run_book(book, now=NOW)
    first_bytes = book.read_bytes()
    first = snapshot(book)
    res = run_book(book, now=NOW)
    assert snapshot(book) == first
    assert res.backup is not None and res.backup.read_bytes() == first_bytes   # BOOK.xlsx.bak


def test_no_backup_flag_and_setting(filled, tmp_path, capsys):
    from openpyxl import load_workbook
    from plumbrule.workbook.fill import set_settings
    book = shutil.copyfile(filled, tmp_path / "book.xlsx")
    assert main(["run", str(book), "--no-backup"]) == 0
    assert not (tmp_path / "book.xlsx.bak").exists()
    wb = load_workbook(book)
    set_settings(wb, {"backup": False})
    wb.save(book)
    assert main(["run", str(book), "--json"]) == 0
    assert not (tmp_path / "book.xlsx.bak").exists()
    import json
    out = json.loads(capsys.readouterr().out.strip().splitlines()[-1])
    assert out["in_place"] is True and out["backup"] is None
    assert set(out["headline"]) >= {"estimate", "pi_low", "pi_high", "r_squared", "cod", "prd",
                                    "prb", "n_used"}


def test_text_from_the_data_stays_text(tmp_path):
    """A level '=HYPERLINK(...)', a header '=Size', a note '#N/A': never formulas or errors."""
    from openpyxl import load_workbook
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_sales
    from plumbrule.workbook.fill import fill_template
    link = '=HYPERLINK("http://example.com","click")'
    sales = demo_sales().rename(columns={"Living area": "=Size"})
    sales["Neighbourhood"] = sales["Neighbourhood"].replace({"Millbank": link})
    sales.loc[sales.index[:5], "Notes"] = "#N/A"
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    settings.update(
        predictors=settings["predictors"].replace("Living area", "=Size"),
        log_predictors="=Size,Lot size",
        trim_percentiles="1,99",
        ratio_by="Neighbourhood",
    )
    # intake reads '=Size' as a name; the settings name it with a leading '='
    book = fill_template(tmp_path / "text.xlsx", sales, None, (), settings)
    assert main(["run", str(book), "--no-backup"]) == 0
    wb = load_workbook(book)
    seen = {"link": 0, "size": 0}
    for name in RESULT_SHEETS[1:]:
        if name not in wb.sheetnames:
            continue
        for row in wb[name].iter_rows():
            for c in row:
                if isinstance(c.value, str) and "HYPERLINK" in c.value:
                    assert c.data_type == "s", (name, c.coordinate)
                    seen["link"] += 1
                if isinstance(c.value, str) and "=Size" in c.value:
                    assert c.data_type == "s", (name, c.coordinate)
                    seen["size"] += 1
                assert c.data_type != "e", (name, c.coordinate, c.value)
    assert seen["link"] > 0 and seen["size"] > 0
    # and a spreadsheet reader sees text, not a computed value (python-calamine)
    from python_calamine import CalamineWorkbook
    cal = CalamineWorkbook.from_path(str(book))
    texts = {v for name in ("Model", "Screening", "Validation") for r in
             cal.get_sheet_by_name(name).to_python() for v in r if isinstance(v, str)}
    assert "=Size" in texts and link in texts


def _parts(path):
    import zipfile
    with zipfile.ZipFile(path) as z:
        return {n: z.read(n) for n in z.namelist()}


EDITED = {"[Content_Types].xml", "xl/workbook.xml", "xl/_rels/workbook.xml.rels", "xl/styles.xml"}


def test_every_other_part_of_the_book_is_copied_byte_for_byte(filled, tmp_path):
    """Only the four parts that list sheets, names and formats are edited; the rest of
    the user's package (sheets, tables, theme, properties) is carried unchanged."""
    from plumbrule.workbook.run import run_book
    book = shutil.copyfile(filled, tmp_path / "book.xlsx")
    before = _parts(book)
    run_book(book, backup=False, now=NOW)
    after = _parts(book)
    for name, data in before.items():
        if name not in EDITED and not name.endswith("calcChain.xml"):
            assert after[name] == data, name
    # a rerun changes nothing but the time stamp: same parts, same bytes, styles do not grow
    run_book(book, backup=False, now=NOW)
    assert _parts(book) == after


@pytest.mark.spreadsheet
def test_a_book_saved_by_libreoffice_is_updated_and_still_opens(filled, tmp_path):
    """A book written by another program (LibreOffice Calc: shared strings, its own
    styles and prefixes) keeps its data, and LibreOffice opens the updated file."""
    import subprocess
    soffice = shutil.which("soffice") or shutil.which("libreoffice")
    if soffice is None:
        pytest.skip("LibreOffice is not installed")
    from python_calamine import CalamineWorkbook
    src = tmp_path / "src"
    src.mkdir()
    shutil.copyfile(filled, src / "book.xlsx")
    profile = f"-env:UserInstallation=file://{tmp_path / 'profile'}"

    def convert(path, out):
        subprocess.run([soffice, "--headless", "--norestore", profile, "--convert-to", "xlsx",
                        "--outdir", str(out), str(path)], check=True, capture_output=True,
                       timeout=180)
        return out / path.name
    lo = convert(src / "book.xlsx", tmp_path / "lo")
    values = {n: CalamineWorkbook.from_path(str(lo)).get_sheet_by_name(n).to_python()
              for n in ("Sales", "Settings", "Subjects")}
    assert main(["run", str(lo), "--no-backup"]) == 0
    cal = CalamineWorkbook.from_path(str(lo))
    for name, block in values.items():
        assert cal.get_sheet_by_name(name).to_python() == block, name
    again = convert(lo, tmp_path / "lo2")
    from openpyxl import load_workbook
    wb = load_workbook(again, data_only=True)
    assert _value(wb, "plumb_n_used").value > 100
    assert "Model" in wb.sheetnames and "Sales" in wb.sheetnames


def test_moved_result_sheets_and_local_names_survive_a_rerun(ran, tmp_path):
    """A user who drags Report to the front, sets a print area on Sales and leaves Sales
    as the active tab finds all three as they were (sheet-local names follow their sheet)."""
    from openpyxl import load_workbook
    from plumbrule.workbook.run import run_book
    book = shutil.copyfile(ran, tmp_path / "book.xlsx")
    wb = load_workbook(book)
    wb.move_sheet("Report", offset=-wb.sheetnames.index("Report"))
    wb["Sales"].print_area = "A1:D20"
    for ws in wb.worksheets:
        ws.sheet_view.tabSelected = ws.title == "Sales"
    wb.active = wb.sheetnames.index("Sales")
    wb.save(book)
    run_book(book, backup=False)
    wb = load_workbook(book)
    assert wb.sheetnames[:8] == ["Read me", *INPUT_SHEETS, *OPTIONAL_INPUT_SHEETS, "xlwings.conf"]
    assert wb.active.title == "Sales"
    assert wb["Sales"].print_area == "'Sales'!$A$1:$D$20"
    assert "Report" in wb.sheetnames


def test_a_bad_cell_in_the_sales_is_named_and_nothing_is_written(filled, tmp_path, capsys):
    from openpyxl import load_workbook
    from workbook_snapshot import folder_state
    book = shutil.copyfile(filled, tmp_path / "book.xlsx")
    wb = load_workbook(book)
    wb["Sales"]["C17"] = "approx 1200"           # Living area, sheet row 17
    wb.save(book)
    before = folder_state(tmp_path)
    assert main(["run", str(book)]) == 2
    err = capsys.readouterr().err
    assert "'Living area', row 17" in err and "approx 1200" in err
    assert folder_state(tmp_path) == before


def test_a_plain_sales_sheet_without_a_table_works(tmp_path):
    """No Excel tables at all: Sales is read from the sheet (first non-empty row is the
    header) and Settings from its first two columns."""
    from openpyxl import Workbook
    from plumbrule.demo.town import DEMO_SETTINGS, demo_sales
    from plumbrule.workbook.run import run_book
    sales = demo_sales()
    wb = Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws.append(list(sales.columns))
    for row in sales.itertuples(index=False):
        ws.append([v.to_pydatetime() if hasattr(v, "to_pydatetime") else v for v in row])
    st = wb.create_sheet("Settings")
    for k, v in DEMO_SETTINGS.items():
        st.append([k, v])
    book = tmp_path / "plain.xlsx"
    wb.save(book)
    res = run_book(book, backup=False)
    assert res.in_place and res.headline["n_used"] == len(sales)
    assert res.valuation is None                      # no Subjects sheet: nothing to value


def test_run_refuses_a_book_with_unreadable_cells_listing_each_and_writes_nothing(tmp_path,
                                                                                    capsys):
    """Three mistyped prices: `run` names every cell (column, sheet row, ID) in one pass, exits
    2 and leaves the workbook byte for byte as it was (no result sheet, no backup)."""
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_sales
    from plumbrule.workbook.fill import fill_template
    sales = demo_sales().astype({"Sale price": object})
    for i, text in ((4, "$14O,000"), (40, "n/a?"), (100, "1.2.3")):
        sales.loc[i, "Sale price"] = text
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    book = fill_template(tmp_path / "typos.xlsx", sales, None, (), settings)
    before = book.read_bytes()
    assert main(["run", str(book)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[0] == "plumbrule: 3 cells cannot be read; nothing was written."
    assert err[1].startswith("  Column 'Sale price', row 6 (ID Q-2404): '$14O,000' is not a "
                             "number")
    assert len(err) == 4
    assert book.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["typos.xlsx"]


def _block(ws, heading):
    """The rows of the table under ``heading`` (column A), header first, up to a blank row."""
    rows = list(ws.iter_rows(values_only=True))
    top = next(i for i, r in enumerate(rows) if r[0] == heading)
    i = top + 1
    while rows[i][0] is None or (isinstance(rows[i][0], str) and rows[i][1] is None):
        i += 1                                  # the one-line explanation
    out = []
    while i < len(rows) and rows[i][0] is not None:
        out.append(rows[i])
        i += 1
    return out


def test_time_adjusted_prices_and_market_index_are_on_the_sheets(ran):
    """The Screening sheet lists each sale used with its price carried to the valuation
    date, P·exp(b·(m(v) − m(d))) for the demo's log model with a linear trend, b the trend
    coefficient of statsmodels' OLS on the final model's design (reference library); the
    Model sheet's market index is exp(b·(m(d) − m(v))) at the months' middle days."""
    from openpyxl import load_workbook
    import statsmodels.api as sm
    from plumbrule.analysis import analyze
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_sales
    a = analyze(demo_sales(), {k: v for k, v in demo_settings().items() if v is not None})
    m = a.final_model
    b = sm.OLS(m.y, sm.add_constant(m.x)).fit().params[-1]    # the trend is the last term
    dates = pd.to_datetime(m.data["Sale date"])
    v = pd.Timestamp(a.settings.valuation_date)
    months = (v - dates).dt.days.to_numpy() / (365.2425 / 12)
    want = m.data["Sale price"].to_numpy() * np.exp(b * months)
    book = load_workbook(ran)
    rows = _block(book["Screening"], "Sales used, priced at the valuation date")
    head = list(rows[0])
    got = np.array([r[head.index("time adjusted price")] for r in rows[1:]], dtype=float)
    assert [r[head.index("sheet row")] for r in rows[1:]] == list(m.rows)
    np.testing.assert_allclose(got, want, rtol=1e-9)
    index = _block(book["Model"], "Market index (1.000 = prices at the valuation date)")
    head = list(index[0])
    last = index[-1]
    assert last[0] == "valuation date" and last[head.index("index")] == pytest.approx(1.0)
    first = index[1]
    mid = pd.Timestamp(first[head.index("date")])
    assert first[head.index("index")] == pytest.approx(
        np.exp(b * (mid - v).days / (365.2425 / 12)), rel=1e-9)

"""The worksheet functions, called with the cells Excel hands over through xlwings.

Reference: the engine itself. A worksheet function must show exactly the table
``analysis.analyze`` / ``value.valuate`` return for the same cells (it computes
nothing of its own), with Excel's cell rules applied: empty cells for missing values
(never 0 or "nan"), Python floats, text under 255 characters, one error cell instead
of a traceback. Data: the invented Quillford sales (demo_data), dressed as sheet
cells: floats, text, None, bools, datetimes and error values ("#N/A" text and the
COM error code xlwings passes on Windows for #DIV/0!).
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pandas as pd
import pytest

from plumbrule.excel import functions as sf
from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS, demo_comps, demo_sales, demo_subjects
from plumbrule.intake import COM_ERROR_CODES
from plumbrule.excel.cache import SheetCache
from plumbrule.valuation.estimates import valuate
from sheet_cells import expected_cells

RESPONSE = DEMO_SETTINGS["response"]
PREDICTORS = DEMO_SETTINGS["predictors"]
DIV0 = next(code for code, text in COM_ERROR_CODES.items() if text == "#DIV/0!")
CELL_TYPES = (float, str, bool, dt.datetime, dt.date, type(None))
# The demo model's other settings (categories, logs, date) as a settings range.
MODEL = [[k, v] for k, v in DEMO_SETTINGS.items() if k not in ("response", "predictors")]


def sheet_cells(frame: pd.DataFrame) -> list[list]:
    """A frame as xlwings passes a range with ndim=2: header row, then rows of cells."""
    rows = [list(frame.columns)]
    for rec in frame.itertuples(index=False):
        row = []
        for v in rec:
            if isinstance(v, pd.Timestamp):
                v = None if pd.isna(v) else v.to_pydatetime()
            elif isinstance(v, (np.floating, np.integer)):
                v = float(v)
            elif isinstance(v, float) and math.isnan(v):
                v = None
            elif v == "":
                v = None
            row.append(v)
        rows.append(row)
    return rows


@pytest.fixture(scope="module")
def sales_cells():
    frame = demo_sales()
    frame["Garage"] = np.where(np.arange(len(frame)) % 3 == 0, True, False)  # bool cells
    cells = sheet_cells(frame)
    cells[5][2] = "#N/A"            # Living area, sheet row 6 (header = row 1): error text
    cells[9][3] = DIV0              # Lot size, sheet row 10: the COM code for #DIV/0!
    cells[12][1] = "$" + f"{cells[12][1]:,.0f}"    # a price typed as text: "$151,500"
    return cells


@pytest.fixture(scope="module")
def settings_cells():
    """A Settings range as on the sheet: header row, name/value pairs, a blank line."""
    rows = [["setting", "value"]]
    rows += [[k, v] for k, v in DEMO_SETTINGS.items() if k not in ("response", "predictors")]
    rows += [[None, None], ["holdout", 0.3], ["trim_percentiles", "1,99"], ["seed", 11.0]]
    return rows


@pytest.fixture(scope="module")
def engine(sales_cells, settings_cells):
    """What the engine returns for the same cells and settings (the reference)."""
    settings = dict(DEMO_SETTINGS, holdout=0.3, trim_percentiles="1,99", seed=11)
    return analyze([list(r) for r in sales_cells], settings)


@pytest.fixture(autouse=True)
def fresh_cache(monkeypatch):
    monkeypatch.setattr(sf, "CACHE", SheetCache())


def call(fn, cells, *args):
    return fn([list(r) for r in cells], *args)   # each call gets its own copy, as in Excel


def assert_excel_safe(cells):
    assert isinstance(cells, list) and cells, cells
    for row in cells:
        for v in row:
            assert type(v) in CELL_TYPES, (type(v), v)
            if isinstance(v, float):
                assert math.isfinite(v)
            if isinstance(v, str):
                assert len(v) < 255 and v.lower() != "nan"


# --- every function against the engine's tables ---------------------------------------

def test_coefs_match_the_engine(sales_cells, settings_cells, engine):
    out = call(sf.PLUMB_COEFS, sales_cells, RESPONSE, PREDICTORS, settings_cells)
    assert_excel_safe(out)
    assert out == expected_cells(engine.tables.coefficients)
    assert out[0][:3] == ["term", "estimate", "std_error"]
    assert out[1][0] == "intercept" and out[1][-1] is None      # no VIF for the intercept


def test_fit_is_two_columns_measure_value(sales_cells, settings_cells, engine):
    out = call(sf.PLUMB_FIT, sales_cells, RESPONSE, PREDICTORS, settings_cells)
    assert_excel_safe(out)
    rec = engine.tables.fit.iloc[0]
    assert out[0] == ["measure", "value"] and len(out) == len(rec) + 1
    got = dict(out[1:])
    assert got["r_squared"] == float(rec["r_squared"])
    assert got["n_used"] == float(rec["n_used"]) and got["n_holdout"] == float(rec["n_holdout"])
    assert got["n_dropped"] == 2.0         # the #N/A and #DIV/0! rows


def test_checks_match_the_engine(sales_cells, settings_cells, engine):
    out = call(sf.PLUMB_CHECKS, sales_cells, RESPONSE, PREDICTORS, settings_cells)
    assert_excel_safe(out)
    assert out == expected_cells(engine.tables.checks)
    assert {r[out[0].index("verdict")] for r in out[1:]} <= {"ok", "watch", "fails", "n/a"}


def test_screen_lists_rules_and_missing_rows(sales_cells, settings_cells, engine):
    out = call(sf.PLUMB_SCREEN, sales_cells, RESPONSE, PREDICTORS, settings_cells)
    assert_excel_safe(out)
    header = out[0]
    assert header[:6] == ["row", "column", "value", "rule", "limit", "reason"]
    rows = {(r[0], r[header.index("rule")]) for r in out[1:]}
    log = engine.tables.screen_log
    assert {(float(r), rule) for r, rule in zip(log["row"], log["rule"], strict=False)} <= rows
    assert (6.0, "missing value") in rows and (10.0, "missing value") in rows
    assert len(out) - 1 == len(log) + 2
    assert [r[0] for r in out[1:]] == sorted(r[0] for r in out[1:])


def test_ratios_match_the_engine(sales_cells, settings_cells, engine):
    out = call(sf.PLUMB_RATIOS, sales_cells, RESPONSE, PREDICTORS, settings_cells)
    assert_excel_safe(out)
    assert out == expected_cells(engine.tables.ratio_study)
    assert "cod" in out[0] and "prd" in out[0] and "prb" in out[0]


def test_ratios_without_holdout_use_cross_validation(sales_cells):
    out = call(sf.PLUMB_RATIOS, sales_cells, RESPONSE, PREDICTORS, MODEL)
    ref = analyze([list(r) for r in sales_cells], DEMO_SETTINGS)
    assert out == expected_cells(ref.tables.ratio_study)


def test_ratios_without_holdout_or_folds_follow_the_engine(sales_cells):
    block = MODEL + [["folds", 0]]
    out = call(sf.PLUMB_RATIOS, sales_cells, RESPONSE, PREDICTORS, block)
    ref = analyze([list(r) for r in sales_cells], dict(DEMO_SETTINGS, folds=0))
    assert out == expected_cells(ref.tables.ratio_study)


@pytest.fixture(scope="module")
def subject_cells():
    return sheet_cells(demo_subjects())


def test_value_matches_valuate(sales_cells, settings_cells, engine, subject_cells):
    cells = settings_cells + [["valuation_date", dt.datetime(2026, 1, 15)]]
    out = call(sf.PLUMB_VALUE, sales_cells, RESPONSE, PREDICTORS, subject_cells, cells)
    assert_excel_safe(out)
    ref = valuate(engine, subject_cells, settings=engine.settings.replace(
        valuation_date=dt.date(2026, 1, 15)))
    assert out == expected_cells(ref.estimates)
    assert out[1][out[0].index("subject")] == "14 Lantern Row"


def test_grid_and_reconcile_match_valuate(sales_cells, settings_cells, engine, subject_cells):
    comps = demo_comps(demo_sales())
    cells = settings_cells + [["valuation_date", "2026-01-15"]]
    as_range = [[float(c)] for c in comps]                        # a column of row numbers
    out = call(sf.PLUMB_GRID, sales_cells, RESPONSE, PREDICTORS, subject_cells, as_range, cells)
    assert_excel_safe(out)
    settings = engine.settings.replace(valuation_date=dt.date(2026, 1, 15))
    ref = valuate(engine, subject_cells, comps=comps, settings=settings)
    assert out == expected_cells(ref.grid)
    as_text = ",".join(map(str, comps))
    assert call(sf.PLUMB_GRID, sales_cells, RESPONSE, PREDICTORS, subject_cells, as_text,
                cells) == out
    rec = call(sf.PLUMB_RECONCILE, sales_cells, RESPONSE, PREDICTORS, subject_cells, as_text,
               cells)
    assert rec[0] == ["measure", "value"]
    assert dict(rec[1:])["value"] == float(ref.reconciled["value"].iloc[0])


def test_grid_without_comps_says_what_to_give(sales_cells, subject_cells):
    out = call(sf.PLUMB_GRID, sales_cells, RESPONSE, PREDICTORS, subject_cells, None, MODEL)
    assert isinstance(out, str) and out.startswith("plumbrule: ") and "comps" in out


def test_info_reports_versions_and_cache_state(sales_cells):
    import plumbrule
    call(sf.PLUMB_COEFS, sales_cells, RESPONSE, PREDICTORS, MODEL)
    call(sf.PLUMB_FIT, sales_cells, RESPONSE, PREDICTORS, MODEL)
    info = dict(sf.PLUMB_INFO()[1:])
    assert info["plumbrule"] == plumbrule.__version__
    assert info["numpy"] == np.__version__ and info["pandas"] == pd.__version__
    assert info["cache_entries"] == 1.0 and info["cache_misses"] == 1.0
    assert info["cache_hits"] == 1.0


# --- arguments as a user gives them ----------------------------------------------------

def test_predictors_as_a_range_of_header_cells(sales_cells):
    text = call(sf.PLUMB_COEFS, sales_cells, RESPONSE, PREDICTORS, MODEL)
    header_range = [[p for p in PREDICTORS.split(",")]]
    assert call(sf.PLUMB_COEFS, sales_cells, RESPONSE, header_range, MODEL) == text


def test_response_and_predictors_may_come_from_the_settings_range(sales_cells):
    block = [["response", RESPONSE], ["predictors", "Living area,Age"]]
    via_settings = call(sf.PLUMB_COEFS, sales_cells, None, "", block)
    via_args = call(sf.PLUMB_COEFS, sales_cells, RESPONSE, "Living area,Age", None)
    assert via_settings == via_args and via_args[2][0] == "Living area"


def test_arguments_override_the_settings_range(sales_cells):
    block = [["response", RESPONSE], ["predictors", "Age"]]
    out = call(sf.PLUMB_COEFS, sales_cells, None, "Living area", block)
    assert [r[0] for r in out[1:]] == ["intercept", "Living area"]


# --- errors a user can act on ------------------------------------------------------------

@pytest.mark.parametrize("response, predictors, settings, expected", [
    (RESPONSE, "Living aera", None, r"^plumbrule: Argument 'predictors': there is no column "
                                    r"'Living aera'\. Did you mean 'Living area'\?$"),
    ("Price", "Age", None, r"^plumbrule: Argument 'response': there is no column 'Price'"),
    (RESPONSE, "Age", [["log_respons", True]], r"^plumbrule: Setting 'log_respons' is not "
                                               r"one plumbrule knows\. Did you mean "
                                               r"'log_response'\?"),
    (RESPONSE, "Age", [["confidence", 2]], r"^plumbrule: Setting 'confidence': 2 is outside"),
    (RESPONSE, "Age", [["holdout", "#N/A"]], r"^plumbrule: Setting 'holdout': the cell holds "
                                             r"the error value #N/A"),
    (RESPONSE, "Age", [["seed", 1], ["Seed", 2]], r"^plumbrule: Setting 'Seed' appears twice"),
    (RESPONSE, "Age", [["seed"]], r"^plumbrule: The settings range needs two columns"),
    (RESPONSE, "Age", [[None, 0.3]], r"^plumbrule: Settings range, line 1: the value '0.3' "
                                     r"has no setting name"),
    (RESPONSE, "Age", [["#N/A", 0.3]], r"^plumbrule: Settings range, line 1: the name cell "
                                       r"holds the error value #N/A"),
    (RESPONSE, "Age", [["Log Respons", True]], r"^plumbrule: Setting 'Log Respons' is not one"),
])
def test_bad_arguments_give_one_line_in_one_cell(sales_cells, response, predictors, settings,
                                                 expected):
    import re
    out = call(sf.PLUMB_COEFS, sales_cells, response, predictors, settings)
    assert isinstance(out, str) and re.search(expected, out), out
    assert "\n" not in out and "Traceback" not in out and len(out) < 255


def test_a_bad_cell_is_named_by_column_and_row(sales_cells):
    cells = [list(r) for r in sales_cells]
    cells[17][cells[0].index("Living area")] = "approx 1200"
    out = sf.PLUMB_FIT(cells, RESPONSE, PREDICTORS, MODEL)     # cells[17] is sheet row 18
    assert out == ("plumbrule: Column 'Living area', row 18: 'approx 1200' is not a number. "
                   "Enter a number or leave the cell blank.")


def test_empty_or_missing_sales_block():
    assert sf.PLUMB_COEFS(None, RESPONSE, PREDICTORS).startswith("plumbrule: Argument 'sales'")
    assert sf.PLUMB_COEFS([[None]], RESPONSE, PREDICTORS).startswith("plumbrule: ")


def test_unexpected_errors_are_one_line_too(sales_cells, monkeypatch):
    import plumbrule.analysis as analysis

    def broken(*a, **k):
        raise ZeroDivisionError("float division by zero\n  somewhere deep")
    monkeypatch.setattr(analysis, "analyze", broken)
    out = call(sf.PLUMB_CHECKS, sales_cells, RESPONSE, PREDICTORS, MODEL)
    assert out == ("plumbrule: internal error (ZeroDivisionError): float division by zero "
                   "somewhere deep \u2014 please report")
    long = sf.error_cell(RuntimeError("x" * 1000))
    assert len(long) < 255 and long.endswith("please report")


def test_errors_are_cached_but_fixed_data_recovers(sales_cells):
    cells = [list(r) for r in sales_cells]
    cells[17][cells[0].index("Age")] = "old"
    first = sf.PLUMB_COEFS([list(r) for r in cells], RESPONSE, PREDICTORS, MODEL)
    again = sf.PLUMB_FIT([list(r) for r in cells], RESPONSE, PREDICTORS, MODEL)
    assert first == again and "row 18" in first
    assert sf.CACHE.stats().misses == 1 and sf.CACHE.stats().hits == 1
    cells[17][cells[0].index("Age")] = 30.0
    assert isinstance(sf.PLUMB_COEFS(cells, RESPONSE, PREDICTORS, MODEL), list)


# --- Excel's cell rules ------------------------------------------------------------------

def test_missing_values_are_empty_cells_never_zero_or_nan():
    frame = pd.DataFrame({"a": [1.5, np.nan, np.inf], "b": ["x", None, np.nan],
                          "c": pd.to_datetime(["2025-01-02", None, "2025-03-04"]),
                          "d": np.array([1, 2, 3], dtype=np.int64), "e": [True, False, True]})
    cells = sf.frame_cells(frame)
    assert cells[0] == ["a", "b", "c", "d", "e"]
    assert cells[1] == [1.5, "x", dt.datetime(2025, 1, 2), 1.0, True]
    assert cells[2] == [None, None, None, 2.0, False]
    assert cells[3][0] is None and type(cells[3][3]) is float
    assert_excel_safe(cells)


def test_long_text_is_cut_below_255_characters():
    text = "a" * 300
    assert sf.text_cell(text) == "a" * 253 + "\u2026" and len(sf.text_cell(text)) == 254
    assert sf.text_cell("short") == "short"
    cells = sf.frame_cells(pd.DataFrame({"note": [text], "b" * 400: [1.0]}))
    assert all(len(c) < 255 for c in cells[0] + [cells[1][0]])


def test_arrays_never_exceed_the_sheet(monkeypatch):
    # Excel's grid is 1,048,576 rows × 16,384 columns; scaled down here to keep it fast.
    monkeypatch.setattr(sf, "MAX_ROWS", 10)
    monkeypatch.setattr(sf, "MAX_COLUMNS", 3)
    cells = sf.frame_cells(pd.DataFrame(np.arange(100.0).reshape(25, 4), columns=list("abcd")))
    assert len(cells) == 10 and all(len(r) == 3 for r in cells)
    assert cells[-1][0].startswith("\u2026 17 more rows not shown")
    assert cells[-2] == [28.0, 29.0, 30.0]      # header + 8 rows + the note = 10


def test_sheet_functions_import_without_excel():
    import importlib
    import xlwings
    mod = importlib.import_module("plumbrule.sheet_functions")
    assert callable(mod.PLUMB_COEFS) and xlwings.__version__


# --- recalculation: growing data and the cache ------------------------------------------

def test_added_sales_change_the_results(sales_cells):
    base = call(sf.PLUMB_COEFS, sales_cells[:-40], RESPONSE, PREDICTORS, MODEL)
    grown = call(sf.PLUMB_COEFS, sales_cells, RESPONSE, PREDICTORS, MODEL)
    assert base != grown
    ref = analyze([list(r) for r in sales_cells], DEMO_SETTINGS)
    assert grown == expected_cells(ref.tables.coefficients)
    fit_small = dict(call(sf.PLUMB_FIT, sales_cells[:-40], RESPONSE, PREDICTORS, MODEL)[1:])
    fit_big = dict(call(sf.PLUMB_FIT, sales_cells, RESPONSE, PREDICTORS, MODEL)[1:])
    assert fit_big["n_used"] == fit_small["n_used"] + 40
    assert sf.CACHE.stats().misses == 2 and sf.CACHE.stats().hits == 2


def test_unchanged_values_hit_the_cache(sales_cells, settings_cells):
    outs = [call(fn, sales_cells, RESPONSE, PREDICTORS, settings_cells)
            for fn in (sf.PLUMB_COEFS, sf.PLUMB_FIT, sf.PLUMB_CHECKS, sf.PLUMB_SCREEN,
                       sf.PLUMB_RATIOS, sf.PLUMB_COEFS)]
    st = sf.CACHE.stats()
    assert (st.misses, st.hits, st.entries) == (1, 5, 1)     # one fit for six cells
    assert outs[0] == outs[-1]


def test_one_changed_cell_anywhere_is_a_new_fit(sales_cells):
    call(sf.PLUMB_COEFS, sales_cells, RESPONSE, PREDICTORS, MODEL)
    cells = [list(r) for r in sales_cells]
    cells[200][1] = cells[200][1] + 1000.0       # one price, mid-table
    out = sf.PLUMB_COEFS(cells, RESPONSE, PREDICTORS, MODEL)
    assert sf.CACHE.stats().misses == 2
    assert out == expected_cells(analyze(cells, DEMO_SETTINGS).tables.coefficients)


def test_true_and_one_are_different_cells(sales_cells):
    # == would call TRUE and 1 equal; intake reads them as the labels 'TRUE' and '1'.
    cells = [list(r) for r in sales_cells]
    g = cells[0].index("Garage")
    settings = [r for r in MODEL if r[0] != "categorical"] + [
        ["categorical", "Condition,Neighbourhood,Garage"]]
    preds = PREDICTORS + ",Garage"
    a = sf.PLUMB_COEFS([list(r) for r in cells], RESPONSE, preds, settings)
    cells[4][g] = 1.0 if cells[4][g] is True else 0.0
    b = sf.PLUMB_COEFS(cells, RESPONSE, preds, settings)
    assert sf.CACHE.stats().misses == 2 and a != b


def test_valuation_settings_reuse_the_fit(sales_cells, subject_cells):
    for day in ("2026-01-15", "2026-06-30"):
        out = call(sf.PLUMB_VALUE, sales_cells, RESPONSE, PREDICTORS, subject_cells,
                   MODEL + [["valuation_date", day]])
        assert isinstance(out, list), out
    assert sf.CACHE.stats().misses == 1            # one fit, two valuation dates


def test_cache_is_bounded_by_count_and_memory():
    cache = SheetCache(max_entries=2)
    for i in range(3):
        cache.get_or_compute([["x"], [float(i)]], "k", lambda rows: rows[1][0])
    st = cache.stats()
    assert (st.entries, st.evictions) == (2, 1)
    assert cache.get_or_compute([["x"], [2.0]], "k", lambda rows: -1) == 2.0   # newest kept
    assert cache.get_or_compute([["x"], [0.0]], "k", lambda rows: -1) == -1    # oldest gone
    small = SheetCache(max_entries=10, max_bytes=1)
    for i in range(3):
        small.get_or_compute([["x"], [float(i)]], "k", lambda rows: np.zeros(1000))
    assert small.stats().entries == 1                  # always keeps the newest one


# --- the demo workbook's own ranges, as the worked session in docs/excel.md uses them ----

def test_the_worked_session_on_the_demo_workbook(tmp_path):
    """Sales[#All], Subjects[#All], Comps[Sales row] and Settings[#All] as cells, read back
    from the demo workbook by python-calamine (blank cells arrive as '', dates as dates)."""
    from python_calamine import CalamineWorkbook
    from plumbrule.cli.demo import write_demo_book
    book = CalamineWorkbook.from_path(str(write_demo_book(tmp_path)))

    def block(name):
        return book.get_sheet_by_name(name).to_python(skip_empty_area=True)
    sales, subjects, comps, settings = (block(n) for n in ("Sales", "Subjects", "Comps",
                                                           "Settings"))
    assert settings[0][:2] == ["Setting", "Value"] and len(settings[0]) == 4
    comp_rows = [[r[0]] for r in comps[1:]]
    # The reference: the engine on the same cells, with the Settings sheet's filled values.
    raw = {r[0]: r[1] for r in settings[1:] if r[1] not in ("", None)}
    ref = analyze([list(r) for r in sales], raw)
    out = sf.PLUMB_COEFS([list(r) for r in sales], "", "", settings)
    assert out == expected_cells(ref.tables.coefficients)
    assert sf.CACHE.stats().misses == 1
    val = valuate(ref, subjects, comps=[int(r[0]) for r in comp_rows])
    assert sf.PLUMB_GRID(sales, "", "", subjects, comp_rows, settings) == \
        expected_cells(val.grid)
    assert sf.PLUMB_VALUE(sales, "", "", subjects, settings) == \
        expected_cells(valuate(ref, subjects).estimates)
    assert sf.CACHE.stats().misses == 1       # one fit behind every cell of the session


def test_true_and_one_read_alike_in_a_numeric_column(sales_cells):
    # Intake reads TRUE as 1 in a column used as a number, so the cache may reuse the
    # fit; the engine itself confirms the swapped block gives the same table.
    cells = [list(r) for r in sales_cells]
    g = cells[0].index("Garage")
    preds = PREDICTORS + ",Garage"
    first = sf.PLUMB_COEFS([list(r) for r in cells], RESPONSE, preds, MODEL)
    cells[4][g] = 1.0 if cells[4][g] is True else 0.0
    again = sf.PLUMB_COEFS([list(r) for r in cells], RESPONSE, preds, MODEL)
    assert sf.CACHE.stats().misses == 1 and again == first
    ref = analyze(cells, dict(DEMO_SETTINGS, predictors=preds))
    assert again == expected_cells(ref.tables.coefficients)


def test_a_whole_column_reference_reads_only_the_rows_with_sales(sales_cells):
    """A:K hands over 1,048,576 rows, nearly all empty: the trailing empty rows are not
    rows at all (not 'missing values'), and the result is the used rows' result."""
    from plumbrule.intake.table import table_from_values
    rows = [list(r) for r in sales_cells]
    width = len(rows[0])
    whole = rows + [[None] * width for _ in range(1_048_576 - len(rows))]
    assert len(table_from_values(whole).frame) == len(rows) - 1
    got = call(sf.PLUMB_COEFS, whole, RESPONSE, PREDICTORS, None)
    assert got == call(sf.PLUMB_COEFS, rows, RESPONSE, PREDICTORS, None)
    screen = call(sf.PLUMB_SCREEN, whole, RESPONSE, PREDICTORS, None)
    assert not any("empty row" in str(c) for r in screen for c in r)


def test_text_and_date_columns_render_as_cell_by_cell():
    """frame_cells' column-wise paths (short text and blanks kept, naive dates through
    numpy) give what the independent reference expects, and what cell() gives one by
    one: text over 254 characters is cut, NaN and NaT are empty cells, a text column
    holding a number falls back to the cell-by-cell path, a zoned date keeps its wall
    time. Reference: tests/sheet_cells.py and Excel's 255-character limit for array text."""
    frame = pd.DataFrame({
        "text": pd.Series(["a", None, "x" * 300], dtype=object),
        "long": ["p", "q", "z" * 255],                # the default text dtype, no blank
        "mixed": ["b", np.nan, "c"],
        "when": pd.to_datetime(["2024-01-02 03:04:05.123456", None, "1950-06-01 00:00:00.000000"]),
        "zoned": pd.to_datetime(["2024-01-02 23:30"] * 3).tz_localize("America/Chicago"),
    })
    out = sf.frame_cells(frame)
    assert out[1:] == [[sf.cell(v) for v in rec] for rec in frame.itertuples(index=False)]
    assert out[3][0] == "x" * 253 + "\u2026" and out[2][0] is None
    assert out[3][1] == "z" * 253 + "\u2026"
    assert out[2][2] is None and out[2][3] is None
    assert out[1][3] == dt.datetime(2024, 1, 2, 3, 4, 5, 123456)
    assert type(out[1][3]) is dt.datetime and out[1][4] == dt.datetime(2024, 1, 2, 23, 30)
    short = frame.drop(columns=["zoned"]).assign(
        text=pd.Series(["a", None, "y"], dtype=object), long=["p", "q", "z"])
    assert sf.frame_cells(short)[1:] == expected_cells(short)[1:]

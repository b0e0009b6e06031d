"""The Report sheet: sections a reader acts on, number formats, and native charts
whose data are the engine's numbers.

References: statsmodels OLS (reference library) for fitted values; scipy.stats.norm
with Blom's plotting positions (i − 3/8)/(n + 1/4) (Blom 1958, Statistical
Estimates and Transformed Beta-Variables) for the normal quantile plot; pandas'
default quantile (linear interpolation), the definition the screening issue
fixes, for the box-plot five-number summaries.
"""

import re

import numpy as np
import openpyxl
import pandas as pd
import pytest
from foreign_labels import FOREIGN_LABELS as FOREIGN  # tests/reference/foreign_labels.txt
import statsmodels.api as sm
from openpyxl.chart import BarChart, ScatterChart
from scipy.stats import norm

from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS, demo_comps, demo_sales, demo_subjects
from plumbrule.valuation.estimates import valuate
from plumbrule.workbook import report
from plumbrule.workbook.cells import MONEY, PERCENT, sig3
from plumbrule.workbook.stamp import make_stamp
from sheet_reading import chart_title as _title, chart_values as _values

SETTINGS = {**DEMO_SETTINGS, "valuation_date": "2026-01-15", "trim_percentiles": "1,99",
            "holdout": 0.3}


def _write(analysis, valuation):
    wb = openpyxl.Workbook()
    wb.active.title = "Report"
    report.write_report(wb, analysis, valuation, make_stamp(analysis, "f00d", "test.xlsx"))
    return wb


@pytest.fixture(scope="module")
def demo():
    sales = demo_sales()
    analysis = analyze(sales, SETTINGS)
    valuation = valuate(analysis, demo_subjects(), comps=demo_comps(sales))
    return analysis, valuation, _write(analysis, valuation)


def _texts(ws):
    return [c.value for row in ws.iter_rows() for c in row if isinstance(c.value, str)]


def _find(ws, label):
    for row in ws.iter_rows():
        for c in row:
            if c.value == label:
                return c
    raise KeyError(label)


def test_sections_and_cautions_a_reader_needs(demo):
    _, _, wb = demo
    text = "\n".join(_texts(wb["Report"]))
    for heading in ("The model in one sentence", "Headline numbers", "The valuation",
                    "What the checks found", "Sales set aside", "Sales-ratio study",
                    "Charts", "Cautions", "Audit stamp"):
        assert heading in text
    # the cautions the brief requires, verbatim in substance
    assert "not an appraisal" in text and "USPAP" in text and "local rules" in text
    assert "licensed appraiser" in text
    assert "sha-256" in text.lower() and "f00d" in text          # the audit stamp
    for label in FOREIGN:
        assert label.lower() not in text.lower(), label


def test_model_sentence_names_every_predictor_and_the_fit(demo):
    analysis, _, wb = demo
    sentence = _find(wb["Report"], "The model in one sentence").offset(1, 0).value
    for col in analysis.spec.predictors:
        assert col in sentence
    assert "logarithm of Sale price" in sentence
    assert f"{int(analysis.tables.fit['n_used'].iloc[0]):,} sales" in sentence
    assert f"{analysis.tables.fit['r_squared'].iloc[0]:.1%}" in sentence


def test_headline_numbers_carry_money_and_percent_formats(demo):
    analysis, valuation, wb = demo
    ws = wb["Report"]
    est = _find(ws, "Estimate for 14 Lantern Row").offset(0, 1)
    assert est.value == pytest.approx(valuation.estimates["estimate"].iloc[0], rel=1e-15)
    assert est.number_format == MONEY
    pi = _find(ws, "95% prediction interval for one sale")
    assert pi.offset(0, 1).value == valuation.estimates["pi_low"].iloc[0]
    assert pi.offset(0, 2).value == valuation.estimates["pi_high"].iloc[0]
    r2 = _find(ws, "Share of variation explained (R²)").offset(0, 1)
    assert r2.number_format == PERCENT
    assert r2.value == analysis.tables.fit["r_squared"].iloc[0]     # unrounded


def test_check_statistics_show_three_significant_digits(demo):
    analysis, _, wb = demo
    ws = wb["Report"]
    checks = analysis.tables.checks
    for _, c in checks.iterrows():
        cell = _find(ws, c["check"])
        shown = cell.offset(0, 2)
        if np.isfinite(c["statistic"]):
            assert shown.value == c["statistic"]
            assert shown.number_format == sig3(c["statistic"])
        assert cell.offset(0, 1).value == c["verdict"]
        assert cell.offset(0, 6).value == c["note"]
    # sig3 shows 3 significant digits: 1.39 → '0.00', 14.6 → '0.0', 0.0716 → '0.0000'
    assert (sig3(1.3912), sig3(14.61), sig3(0.07163), sig3(233.4)) == \
        ("0.00", "0.0", "0.0000", "#,##0")


def test_charts_are_native_with_the_expected_series(demo):
    analysis, _, wb = demo
    charts = wb["Report"]._charts
    titles = [_title(c) for c in charts]
    assert titles[:4] == ["Estimate against sale price", "Residuals against estimate",
                          "Normal quantile plot of residuals",
                          "Standardized coefficients (blue raises the price, red lowers it)"]
    assert isinstance(charts[0], ScatterChart) and isinstance(charts[3], BarChart)
    screened = analysis.tables.screen_summary
    cols = screened.loc[screened["kind"] == "column", "item"].tolist()
    # a box only where it says something: Bathrooms (9 distinct half-steps) gets none
    # (more than 10 distinct values: a rule of thumb, common practice, no source)
    boxed = [c for c in cols if demo_sales()[c].nunique() > 10]
    assert "Bathrooms" in cols and "Bathrooms" not in boxed
    assert titles[4:4 + len(boxed)] == [f"{c}: before and after screening" for c in boxed]
    # the demo has a sale date: the market over the sale dates (issue 13 §1)
    assert titles[4 + len(boxed):] == [
        "Market index over the sale dates (1.000 at the valuation date)",
        "Residuals by sale date, with each period's mean"]
    names = [[s.tx.v for s in c.series] for c in charts]
    assert names[0] == ["Sales used", "Holdout sales", "Estimate = price"]
    for chart in charts:
        for s in chart.series:
            refs = [s.val.numRef.f] if s.val is not None else [s.xVal.numRef.f, s.yVal.numRef.f]
            assert all(r.startswith("'Chart data'!") for r in refs)
    assert wb["Chart data"].sheet_state == "hidden"


def test_estimate_chart_data_are_the_fitted_values(demo):
    analysis, valuation, wb = demo
    s = wb["Report"]._charts[0].series[0]
    price, est = _values(wb, s.xVal.numRef.f), _values(wb, s.yVal.numRef.f)
    model = analysis.final_model      # the model the Report describes (refitted on all sales)
    res = sm.OLS(model.y, sm.add_constant(model.x)).fit()            # reference fit
    smear = float(np.mean(np.exp(res.resid)))
    np.testing.assert_allclose(est, np.exp(res.fittedvalues) * smear, rtol=1e-9)
    np.testing.assert_allclose(price, np.exp(model.y), rtol=1e-12)
    assert smear == pytest.approx(valuation.estimates["retransform_factor"].iloc[0], rel=1e-9)


def test_normal_quantile_plot_uses_blom_positions(demo):
    analysis, _, wb = demo
    s = wb["Report"]._charts[2].series[0]
    theo, z = _values(wb, s.xVal.numRef.f), _values(wb, s.yVal.numRef.f)
    n = len(analysis.tables.residuals)
    i = np.arange(1, n + 1)
    np.testing.assert_allclose(theo, norm.ppf((i - 0.375) / (n + 0.25)), rtol=1e-12)
    np.testing.assert_array_equal(z, np.sort(analysis.tables.residuals
                                             ["standardized_residual"]))


def test_standardized_coefficient_bars_follow_the_table(demo):
    analysis, _, wb = demo
    chart = wb["Report"]._charts[3]
    vals = _values(wb, chart.series[0].val.numRef.f)
    coef = analysis.tables.coefficients.dropna(subset=["std_beta"])
    np.testing.assert_allclose(np.sort(vals), np.sort(coef["std_beta"]), rtol=1e-15)
    assert list(np.abs(vals)) == sorted(np.abs(vals))            # largest drawn at the top
    red = {p.idx for p in chart.series[0].dPt}
    assert red == set(np.flatnonzero(vals < 0))                  # negative bars coloured


def test_box_plot_traces_pandas_five_numbers_before_and_after(demo):
    analysis, _, wb = demo
    chart = wb["Report"]._charts[4]            # Living area, the first column screened
    before = _values(wb, chart.series[0].xVal.numRef.f)
    after = _values(wb, chart.series[1].xVal.numRef.f)
    sales = demo_sales()["Living area"]
    q = sales.quantile([0, 0.25, 0.5, 0.75, 1]).to_numpy()
    assert sorted(set(before)) == sorted(set(q))
    kept = sales.drop(index=[r - 2 for r in analysis.tables.screen_log["row"]])
    assert sorted(set(after)) == sorted(set(kept.quantile([0, 0.25, 0.5, 0.75, 1])))
    # the limits drawn are the ones used (issue 14): no IQR fence ran, so none is drawn; the
    # percentile trim ran, so its two limits are, as the screen log records them
    log = analysis.tables.screen_log
    hit = log[(log["rule"] == "percentile trim") & (log["column"] == "Living area")]
    assert [s.tx.v for s in chart.series[2:]] == ["percentile trim limits"]
    drawn = _values(wb, chart.series[2].xVal.numRef.f)
    assert sorted(drawn) == pytest.approx(sorted(hit["limit"].unique()))
    assert len(drawn) == 2 and drawn.min() > sales.min() and drawn.max() < sales.max()
    assert "Before screening (363 sales)" == chart.series[0].tx.v


def test_box_plot_draws_the_iqr_fence_when_that_rule_ran():
    # Reference: numpy quartiles of log(area) (the model logs living area), 1.5·IQR fences
    sales = demo_sales()
    analysis = analyze(sales, {**DEMO_SETTINGS, "iqr_fence": 1.5})
    wb = _write(analysis, None)
    chart = wb["Report"]._charts[4]
    q1, q3 = np.percentile(np.log(sales["Living area"]), [25, 75])
    fences = _values(wb, chart.series[2].xVal.numRef.f)
    assert fences[:2] == pytest.approx(np.exp([q1 - 1.5 * (q3 - q1), q3 + 1.5 * (q3 - q1)]))
    assert chart.series[2].tx.v == "1.5×IQR fences (on the logarithm)"


def test_large_books_plot_an_even_sample_and_say_so():
    rng = np.random.default_rng(5)
    n = 6000
    area = rng.normal(1600, 300, n)
    sales = pd.DataFrame({"Price": 20000 + 100 * area + rng.normal(0, 15000, n),
                          "Area": area})
    analysis = analyze(sales, response="Price", predictors="Area")
    wb = _write(analysis, None)
    charts = wb["Report"]._charts
    scatter = charts[0]
    assert "(2,000 of 6,000 sales, evenly spaced)" in _title(scatter)
    assert len(_values(wb, scatter.series[0].xVal.numRef.f)) == 2000
    qq = _values(wb, charts[2].series[0].yVal.numRef.f)
    assert len(qq) == 2000 and np.all(np.diff(qq) >= 0)
    ordered = np.sort(analysis.tables.residuals["standardized_residual"])
    assert qq[0] == ordered[0] and qq[-1] == ordered[-1]           # the extremes are kept
    text = "\n".join(_texts(wb["Report"]))
    assert "No subject was valued" in text
    assert "the ratios use cross-validated estimates" in text   # no holdout: folds instead


def test_text_from_the_data_is_never_a_formula():
    rng = np.random.default_rng(2)
    n = 80
    hood = rng.choice(["=HYPERLINK(\"http://x\")", "#N/A", "Plain"], n)
    area = rng.normal(1500, 200, n)
    sales = pd.DataFrame({"Price": 10000 + 90 * area + rng.normal(0, 9000, n), "Area": area,
                          "Hood": hood})
    analysis = analyze(sales, response="Price", predictors="Area,Hood", categorical="Hood")
    wb = _write(analysis, None)
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for c in row:
                if isinstance(c.value, str) and re.match(r"[=#]", c.value):
                    assert c.data_type == "s", (ws.title, c.coordinate, c.value)


def test_a_failing_check_is_put_before_the_reader_first():
    """Two nearly equal predictors: VIF far above 10, which the checks mark 'fails'
    (VIF > 10 fails: common practice, no source); the report lists it first."""
    rng = np.random.default_rng(4)
    n = 120
    a = rng.normal(1500, 300, n)
    b = a + rng.normal(0, 10, n)
    sales = pd.DataFrame({"Price": 50 * a + 50 * b + rng.normal(0, 9000, n), "A": a, "B": b})
    analysis = analyze(sales, response="Price", predictors="A,B")
    vif = analysis.tables.coefficients["vif"].max()
    assert vif > 10
    ws = _write(analysis, None)["Report"]
    first = _find(ws, "Before relying on the value").offset(1, 0).value
    assert first.startswith("• Multicollinearity: largest VIF fails")


# --- issue 14: the Report a client or review appraiser can read ----------------------------

def test_title_names_the_job_and_the_assignment_block_shows_blank_as_blank(demo):
    analysis, valuation, wb = demo
    ws = wb["Report"]
    assert ws["A1"].value == "Valuation of 14 Lantern Row, effective 15 January 2026"
    labels = {ws.cell(r, 1).value: ws.cell(r, 2).value for r in range(2, 12)}
    assert labels["Effective date"] == "15 January 2026"
    for blank in ("Client", "Intended use", "Prepared by", "Property rights"):
        assert labels[blank] in (None, "")
    a2 = analyze(demo_sales(), {**SETTINGS, "client": "Quillford Building Society",
                                "property_rights": "Fee simple"})
    ws2 = _write(a2, valuate(a2, demo_subjects()))["Report"]
    got = {ws2.cell(r, 1).value: ws2.cell(r, 2).value for r in range(2, 12)}
    assert got["Client"] == "Quillford Building Society"
    assert got["Property rights"] == "Fee simple" and got["Prepared by"] in (None, "")


def test_time_stamp_reads_in_local_time():
    from plumbrule.workbook.stamp import readable_time
    import datetime as dt
    text = readable_time("2026-01-05T09:30:00+00:00")
    local = dt.datetime(2026, 1, 5, 9, 30, tzinfo=dt.timezone.utc).astimezone()
    assert text.startswith(f"{local.day} {local:%B %Y}, {local:%H:%M} (UTC")


def test_set_aside_counts_only_sales_set_aside(demo):
    analysis, _, wb = demo
    fit = analysis.tables.fit.iloc[0]
    stamp = make_stamp(analysis, "f00d", "test.xlsx")
    assert stamp.rows_held_out == int(fit["n_holdout"]) > 0
    # every sale is used, set aside (screened or dropped) or held out; holdout is not set aside
    assert stamp.rows_set_aside == int(fit["n_screened"]) + int(fit["n_dropped"])
    # the model that values is refitted on training and holdout (final_fit = all)
    assert stamp.rows_used == int(fit["n_used"]) == int(fit["n_training"]) + stamp.rows_held_out
    assert int(fit["n_training"]) + stamp.rows_set_aside + stamp.rows_held_out == 363


def test_sales_are_named_with_price_and_date_not_sheet_rows(demo):
    analysis, _, wb = demo
    ws = wb["Report"]
    row = _find(ws, "Sales set aside").row
    heads = [ws.cell(row + 2, c).value for c in range(1, 8)]
    assert heads[:3] == ["Sale", "Sale price", "Sale date"]
    log = analysis.tables.screen_log
    first = ws.cell(row + 3, 1).value
    assert first == log["sale"].iloc[0] == f"row {log['row'].iloc[0]}"   # no ID, no label
    assert ws.cell(row + 3, 2).value == pytest.approx(log["sale_price"].iloc[0])
    assert ws.cell(row + 3, 3).value == log["sale_date"].iloc[0].date()
    with_ids = analyze(demo_sales(), {**SETTINGS, "id_column": "Sale ID"})
    ws2 = _write(with_ids, None)["Report"]
    r2 = _find(ws2, "Sales set aside").row
    assert ws2.cell(r2 + 3, 1).value == with_ids.tables.screen_log["sale"].iloc[0]
    assert ws2.cell(r2 + 3, 1).value.startswith("Q-")     # the demo's IDs name the sales
    texts = _texts(ws)
    assert not any(t == "Sheet row" for t in texts)
    resid = _find(ws, "The sales the model misses most (largest studentized residuals): check "
                      "each is an ordinary sale recorded correctly.").row
    res = analysis.tables.residuals
    top = res.loc[res["studentized_residual"].abs().idxmax()]
    assert ws.cell(resid + 2, 1).value == top["sale"]
    assert ws.cell(resid + 2, 2).value == pytest.approx(top["sale_price"])


def test_thresholds_read_in_words_on_the_report(demo):
    _, _, wb = demo
    texts = " ".join(_texts(wb["Report"]))
    assert "common practice, no source" not in texts
    assert "a rule of thumb" in texts


def test_the_grid_is_on_the_report_two_comparables_a_band(demo):
    _, valuation, wb = demo
    ws = wb["Report"]
    top = _find(ws, "Adjustment grid").row
    heads = [ws.cell(top + 2, c).value for c in range(1, 7)]
    assert heads == ["", "Subject", "Comparable 1", "Adjustment", "Comparable 2",
                     "Adjustment"]
    wide = valuation.grid_table
    lines = [ws.cell(top + 3 + i, 1).value for i in range(len(wide))]
    assert lines == wide["line"].tolist()
    net = top + 3 + wide["line"].tolist().index("net adjustment")
    assert ws.cell(net, 4).value == wide.loc[wide["line"] == "net adjustment",
                                             "comp_1_adjustment"].iloc[0]
    assert "Comparable 3" in _texts(ws)


def test_gap_warning_on_the_report():
    sales = demo_sales()
    analysis = analyze(sales, {**SETTINGS, "reconcile_gap": 0.001})
    valuation = valuate(analysis, demo_subjects(), comps=demo_comps(sales))
    assert bool(valuation.reconciled["gap_warning"].iloc[0])
    texts = _texts(_write(analysis, valuation)["Report"])
    warn = [t for t in texts if t.startswith("The two values disagree")]
    assert len(warn) == 1 and "largest adjustments" in warn[0]


def test_a_caution_every_subject_carries_is_said_once_in_a_mass_run():
    sales = demo_sales()
    analysis = analyze(sales, SETTINGS)
    many = pd.concat([demo_subjects()] * 40, ignore_index=True)
    many["Subject"] = [f"{i} Lantern Row" for i in range(40)]
    valuation = valuate(analysis, many)
    wb = _write(analysis, valuation)
    texts = _texts(wb["Report"])
    assert wb["Report"]["A1"].value == "Valuation of 40 properties, effective 15 January 2026"
    note = "months after the last sale used"
    assert sum(note in t for t in texts) == 1
    from plumbrule.cli.value import render_valuation
    assert render_valuation(valuation, analysis).count(note) == 1


def test_market_charts_draw_the_engine_market_index_and_residuals(demo):
    """The market-index chart draws the engine's market_index rows (date as a day number,
    index and its interval); the residuals chart each sale's residual at its sale date and
    the table's mean residual per period (issue 13 §1)."""
    analysis, _, wb = demo
    charts = {_title(c): c for c in wb["Report"]._charts}
    index = analysis.tables.market_index
    rows = index[~index["extrapolated"]]
    days = (rows["date"].to_numpy("datetime64[D]") - np.datetime64("1899-12-30")).astype(float)
    mi = charts["Market index over the sale dates (1.000 at the valuation date)"]
    assert np.array_equal(_values(wb, mi.series[0].xVal.numRef.f), days)
    for s, col in zip(mi.series, ("index", "ci_low", "ci_high"), strict=True):
        assert np.allclose(_values(wb, s.yVal.numRef.f), rows[col].to_numpy(), rtol=1e-12)
    rc = charts["Residuals by sale date, with each period's mean"]
    model = analysis.final_model
    assert np.allclose(_values(wb, rc.series[0].yVal.numRef.f), model.fit.resid, rtol=1e-12)
    sold = (model.data["Sale date"].to_numpy("datetime64[D]")
            - np.datetime64("1899-12-30")).astype(float)
    assert np.array_equal(_values(wb, rc.series[0].xVal.numRef.f), sold)
    means = index[index["sales"] > 0]["mean_residual"].to_numpy()
    assert np.allclose(_values(wb, rc.series[1].yVal.numRef.f), means, rtol=1e-12)

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


def _title(chart):
    return "".join(r.t for p in chart.title.tx.rich.p for r in (p.r or []))


def _values(wb, ref):
    sheet, cells = ref.rsplit("!", 1)
    ws = wb[sheet.strip("'")]
    return np.array([c.value for row in ws[cells.replace("$", "")] for c in row], dtype=float)


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
    assert titles[4:] == [f"{c}: before and after screening" for c in cols]
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
    # the fences drawn are the rule's (1.5·IQR without a fence setting) on the logarithm the
    # model takes of living area, in square feet: numpy quartiles of log(area)
    q1, q3 = np.percentile(np.log(sales), [25, 75])
    fences = _values(wb, chart.series[2].xVal.numRef.f)
    assert fences[:2] == pytest.approx(np.exp([q1 - 1.5 * (q3 - q1), q3 + 1.5 * (q3 - q1)]))
    assert chart.series[2].tx.v == "1.5×IQR fences (on the logarithm)"
    assert "Before screening (363 sales)" == chart.series[0].tx.v


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

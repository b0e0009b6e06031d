"""The "try a subject" block: its native formulas give the engine's valuation.

The formulas are evaluated in Python by tests/formula_eval.py (spreadsheet
semantics of the few functions the block uses); tests/workbook/test_libreoffice.py checks
the same cells in a real spreadsheet. References: statsmodels OLS
get_prediction().summary_frame() (reference library) for the estimate and the
prediction interval; plumbrule.value.valuate for the engine's own figures.
"""

import datetime as dt

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

from formula_eval import Evaluator
from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS, demo_sales, demo_subjects
from plumbrule.valuation.estimates import valuate
from plumbrule.workbook import live
from sheet_reading import input_cell as _input_cell, named_value as _named

VDATE = "2026-01-15"


def _book(analysis, valuation):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Valuation"
    nxt = live.write_live_block(ws, analysis, valuation, 4)
    return wb, ws, nxt


@pytest.fixture(scope="module")
def demo():
    analysis = analyze(demo_sales(), {**DEMO_SETTINGS, "valuation_date": VDATE})
    valuation = valuate(analysis, demo_subjects())
    return analysis, valuation


@pytest.fixture(scope="module")
def robust_linear():
    rng = np.random.default_rng(11)
    n = 150
    area = rng.normal(1500, 300, n).round()
    hood = rng.choice(["North", "South", "=HYPERLINK(\"x\")"], n)
    price = 30000 + 90 * area + np.where(hood == "South", 12000, 0) + \
        rng.normal(0, 1, n) * (5000 + 8 * area)
    sales = pd.DataFrame({"Price": price, "Area": area, "Hood": hood})
    analysis = analyze(sales, response="Price", predictors="Area,Hood", categorical="Hood",
                       robust_se="HC3")
    subject = pd.DataFrame({"Subject": ["S1"], "Area": [1720.0], "Hood": ["South"]})
    return analysis, valuate(analysis, subject), subject


def _statsmodels_prediction(model, x0, cov_type="nonrobust"):
    """get_prediction on the same design: (mean, obs_ci_lower, obs_ci_upper) on the model scale."""
    exog = sm.add_constant(model.x, has_constant="add")
    res = sm.OLS(model.y, exog).fit(cov_type=cov_type, use_t=True)
    frame = res.get_prediction(np.column_stack([np.ones(len(x0)), x0])).summary_frame(alpha=0.05)
    return frame["mean"].iloc[0], frame["obs_ci_lower"].iloc[0], frame["obs_ci_upper"].iloc[0]


def test_log_model_block_equals_engine_and_statsmodels(demo):
    analysis, valuation = demo
    wb, ws, _ = _book(analysis, valuation)
    ev = Evaluator(ws)
    e = valuation.estimates.iloc[0]
    got = [_named(wb, n, ev) for n in live.NAMES]
    # the engine's own figures (plumbrule.value): the same numbers to rounding
    np.testing.assert_allclose(got, [e["estimate"], e["pi_low"], e["pi_high"]], rtol=1e-12)
    # statsmodels as the outside reference: exp of the log-scale bounds, the mean estimate
    # exp(prediction) × Duan's smearing factor mean(exp(residuals)) (Duan 1983, JASA 78:605)
    model = analysis.model
    subj = demo_subjects().assign(**{"Sale date": pd.Timestamp(VDATE)})
    x0 = model.encoding.design(subj.set_index(pd.Index([2])), "subject row")
    mean, lo, hi = _statsmodels_prediction(model, x0)
    smear = np.mean(np.exp(model.fit.resid))
    np.testing.assert_allclose(got, [np.exp(mean) * smear, np.exp(lo), np.exp(hi)], rtol=1e-9)


def test_changing_a_feature_moves_the_value_as_the_engine_says(demo):
    analysis, valuation = demo
    wb, ws, _ = _book(analysis, valuation)
    _input_cell(ws, "Condition").value = "Excellent"
    _input_cell(ws, "Living area").value = 2100
    _input_cell(ws, "Valuation date").value = dt.datetime(2025, 6, 30)
    ev = Evaluator(ws)
    got = [_named(wb, n, ev) for n in live.NAMES]
    moved = demo_subjects().assign(Condition="Excellent", **{"Living area": 2100})
    again = valuate(analysis, moved, settings={"valuation_date": "2025-06-30"})
    e = again.estimates.iloc[0]
    np.testing.assert_allclose(got, [e["estimate"], e["pi_low"], e["pi_high"]], rtol=1e-12)
    assert got[0] > valuation.estimates["estimate"].iloc[0]   # bigger, better house


def test_robust_linear_block_uses_the_robust_covariance(robust_linear):
    analysis, valuation, subject = robust_linear
    wb, ws, _ = _book(analysis, valuation)
    ev = Evaluator(ws)
    got = [_named(wb, n, ev) for n in live.NAMES]
    e = valuation.estimates.iloc[0]
    np.testing.assert_allclose(got, [e["estimate"], e["pi_low"], e["pi_high"]], rtol=1e-12)
    # statsmodels HC3 with t quantiles: obs interval = mean ± t·sqrt(x0'V_HC3 x0 + s²)
    model = analysis.model
    x0 = model.encoding.design(subject.set_index(pd.Index([2])), "subject row")
    mean, lo, hi = _statsmodels_prediction(model, x0, cov_type="HC3")
    np.testing.assert_allclose(got, [mean, lo, hi], rtol=1e-9)
    classical = _statsmodels_prediction(model, x0)
    assert abs(got[1] - classical[1]) > 1.0          # robust and classical differ here


def test_block_uses_only_functions_both_spreadsheets_evaluate(demo):
    analysis, valuation = demo
    wb, ws, _ = _book(analysis, valuation)
    import re
    used = set()
    for row in ws.iter_rows():
        for c in row:
            if c.data_type == "f":
                assert isinstance(c.value, str), "no array formulas"
                used |= set(re.findall(r"([A-Z]+)\(", c.value))
    assert used <= {"SUMPRODUCT", "SQRT", "LN", "EXP", "IF", "MAX", "COUNTIF"}
    assert {"SUMPRODUCT", "LN", "EXP", "SQRT", "IF"} <= used


def test_categories_get_a_drop_down_of_levels_and_text_stays_text(robust_linear):
    analysis, valuation, subject = robust_linear
    wb, ws, _ = _book(analysis, valuation)
    cell = _input_cell(ws, "Hood")
    assert cell.value == "South" and cell.data_type == "s"
    lists = [dv for dv in ws.data_validations.dataValidation if dv.type == "list"]
    assert len(lists) == 1 and cell.coordinate in lists[0].sqref
    ref = lists[0].formula1.replace("$", "")
    levels = [c.value for row in ws[ref] for c in row]
    assert sorted(levels) == sorted(dict(analysis.model.encoding.levels)["Hood"])
    hostile = [c for row in ws[ref] for c in row if str(c.value).startswith("=")]
    assert hostile and all(c.data_type == "s" for c in hostile)   # a level, not a formula


def test_without_subjects_the_block_starts_from_the_first_sale(demo):
    analysis, _ = demo
    wb, ws, nxt = _book(analysis, None)
    ev = Evaluator(ws)
    first = analysis.model.data.iloc[[0]]
    ref = valuate(analysis, first.drop(columns=["Sale price"]))
    got = _named(wb, "plumb_live_estimate", ev)
    assert nxt > ws.max_row           # the next free row is below the block
    # both use the analysis' valuation_date setting
    assert got == pytest.approx(ref.estimates["estimate"].iloc[0], rel=1e-12)


def test_block_starts_from_the_subject_as_the_engine_typed_it(demo):
    """A subject typed with a text number ('1,840') starts the block at 1840, the value the
    engine valued; the block's estimate is the engine's."""
    analysis, _ = demo
    frame = demo_subjects().drop(columns=["Sale date"]).astype(object)
    frame.loc[frame.index[0], "Living area"] = "1,840"
    valuation = valuate(analysis, frame)
    wb = openpyxl.Workbook()
    ws = wb.active
    live.write_live_block(ws, analysis, valuation, 1)
    assert _input_cell(ws, "Living area").value == 1840.0
    got = _named(wb, "plumb_live_estimate", Evaluator(ws))
    assert got == pytest.approx(valuation.estimates["estimate"].iloc[0], rel=1e-12)


def test_no_intercept_median_retransform_block_equals_statsmodels():
    """Log price through the origin, median estimate (factor 1): exp(x0·b) and the
    exp'd observation interval of statsmodels' get_prediction on the same design."""
    rng = np.random.default_rng(21)
    n = 90
    area = rng.uniform(800, 2500, n)
    rooms = rng.integers(2, 7, n).astype(float)
    price = np.exp(1.55 * np.log(area) + 0.05 * rooms + rng.normal(0, 0.1, n))
    sales = pd.DataFrame({"Price": price, "Area": area, "Rooms": rooms})
    analysis = analyze(sales, response="Price", predictors="Area,Rooms", log_response=True,
                       log_predictors="Area", no_intercept=True, retransform="median")
    subject = pd.DataFrame({"Area": [1300.0], "Rooms": [4.0]})
    valuation = valuate(analysis, subject)
    wb, ws, _ = _book(analysis, valuation)
    got = [_named(wb, n, Evaluator(ws)) for n in live.NAMES]
    model = analysis.model
    res = sm.OLS(model.y, model.x).fit()                      # no constant column
    x0 = np.array([[np.log(1300.0), 4.0]])
    f = res.get_prediction(x0).summary_frame(alpha=0.05)
    want = np.exp([f["mean"].iloc[0], f["obs_ci_lower"].iloc[0], f["obs_ci_upper"].iloc[0]])
    np.testing.assert_allclose(got, want, rtol=1e-9)
    e = valuation.estimates.iloc[0]
    np.testing.assert_allclose(got, [e["estimate"], e["pi_low"], e["pi_high"]], rtol=1e-12)


# --- piecewise and period trends (tests/simulated_market.py: a market of our own invention)

def _bent(**trend):
    from simulated_market import SETTINGS, bent_market
    a = analyze(bent_market(n=400, seed=3, noise=0.08), {**SETTINGS, **trend,
                                                         "valuation_date": "2026-03-01"})
    subject = pd.DataFrame({"Subject": ["S"], "Living area": [1750.0], "Age": [30.0]})
    return a, valuate(a, subject), subject


@pytest.mark.parametrize("trend", [
    {"trend": "piecewise", "trend_knots": "2024-07-01,2025-07-01"},
    {"trend": "piecewise", "trend_knots": "every 6 months"},
    {"trend": "periods", "trend_period": "quarter"},
    {"trend": "periods", "trend_period": "month"},
])
def test_nonlinear_trend_block_equals_the_engine(trend):
    analysis, valuation, subject = _bent(**trend)
    wb, ws, _ = _book(analysis, valuation)
    got = [_named(wb, n, Evaluator(ws)) for n in live.NAMES]
    e = valuation.estimates.iloc[0]
    np.testing.assert_allclose(got, [e["estimate"], e["pi_low"], e["pi_high"]], rtol=1e-12)
    # statsmodels as the outside reference, on the engine's design of the subject at the date
    model = analysis.final_model
    x0 = model.encoding.design(subject.assign(**{"Sale date": pd.Timestamp("2026-03-01")})
                               .set_index(pd.Index([2])), "subject row")
    mean, lo, hi = _statsmodels_prediction(model, x0)
    np.testing.assert_allclose(got[1:], [np.exp(lo), np.exp(hi)], rtol=1e-9)


@pytest.mark.parametrize("trend", [
    {"trend": "piecewise", "trend_knots": "2024-07-01,2025-07-01"},
    {"trend": "periods", "trend_period": "quarter"},
])
@pytest.mark.parametrize("when", ["2023-02-10", "2024-07-01", "2024-12-31", "2025-07-15"])
def test_nonlinear_trend_block_follows_the_valuation_date(trend, when):
    """A valuation date in each segment or period (and on a knot): the block's cells move
    as the engine's valuation at that date does."""
    analysis, valuation, subject = _bent(**trend)
    wb, ws, _ = _book(analysis, valuation)
    _input_cell(ws, "Valuation date").value = dt.datetime.fromisoformat(when)
    got = [_named(wb, n, Evaluator(ws)) for n in live.NAMES]
    e = valuate(analysis, subject, settings={"valuation_date": when}).estimates.iloc[0]
    np.testing.assert_allclose(got, [e["estimate"], e["pi_low"], e["pi_high"]], rtol=1e-12)

"""The final value from all the evidence: ``final_fit`` = all (default) | training.

After validation the model that values subjects, fills the grid and is described on the
Model sheet is refitted on every screened sale (training and holdout); the holdout estimates,
the validation table and the ratio study stay those of the training fit (out-of-sample).
Reference: statsmodels OLS get_prediction().summary_frame() (reference library) on a design
built here by hand, fitted on the rows the setting names; tests/formula_eval.py for the live
block's spreadsheet formulas.
"""

import datetime as dt

import numpy as np
import openpyxl
import pandas as pd
import pandas.testing as pdt
import pytest
import statsmodels.api as sm

from formula_eval import Evaluator
from plumbrule.analysis import analyze
from plumbrule.valuation.estimates import valuate
from plumbrule.workbook import live

HOODS = ("North", "South", "East")
VDATE = dt.date(2025, 9, 30)
SETTINGS = dict(response="Price", predictors="Area,Age,Hood", categorical="Hood",
                reference_levels="Hood=North", date_column="Sold", holdout=0.3, folds=0,
                valuation_date=VDATE.isoformat())
SUBJECTS = pd.DataFrame({"Subject": ["A", "B"], "Area": [1500.0, 2100.0], "Age": [12.0, 40.0],
                         "Hood": ["South", "North"]})


def _sales(n=160, seed=5):
    """Invented sales: area, age, a three-level neighbourhood, a sale date, a rising market."""
    rng = np.random.default_rng(seed)
    area = rng.normal(1600, 350, n).round()
    age = rng.integers(0, 80, n).astype(float)
    hood = rng.choice(HOODS, n, p=[0.5, 0.3, 0.2])
    days = rng.integers(0, 700, n)
    price = (40000 + 95 * area - 600 * age + np.select([hood == "South", hood == "East"],
                                                       [15000, -9000], 0)
             + 300 * days / 30 + rng.normal(0, 12000, n))
    return pd.DataFrame({"Price": price, "Area": area, "Age": age, "Hood": hood,
                         "Sold": pd.Timestamp("2024-01-01") + pd.to_timedelta(days, unit="D")})


def _design(frame, dates, origin):
    """Constant, Area, Age, East and South indicators, months since ``origin`` (by hand)."""
    months = (pd.to_datetime(pd.Series(list(dates))) - origin).dt.days.to_numpy() / (365.2425 / 12)
    return np.column_stack([np.ones(len(frame)), frame["Area"], frame["Age"],
                            frame["Hood"].eq("East"), frame["Hood"].eq("South"),
                            months]).astype(float)


def _statsmodels_values(data):
    """statsmodels' estimate and 95 % prediction interval for SUBJECTS, fitted on ``data``
    (sheet-row index) with the trend counted from ``data``'s earliest sale."""
    origin = data["Sold"].min()
    res = sm.OLS(data["Price"].to_numpy(float), _design(data, data["Sold"], origin)).fit()
    x0 = _design(SUBJECTS, [pd.Timestamp(VDATE)] * len(SUBJECTS), origin)
    frame = res.get_prediction(x0).summary_frame(alpha=0.05)
    return res, frame


@pytest.fixture(scope="module")
def sales():
    s = _sales()
    s.index = s.index + 2           # sheet rows under a header on row 1
    return s


@pytest.fixture(scope="module")
def both(sales):
    return {how: analyze(sales.reset_index(drop=True), {**SETTINGS, "final_fit": how})
            for how in ("all", "training")}


def test_all_values_with_a_fit_on_every_screened_sale(sales, both):
    a = both["all"]
    assert len(a.holdout) > 20 and a.refitted
    # every screened sale: here nothing is screened, so every sale of the table
    assert sorted(a.final_model.data.index) == sorted(sales.index)
    res, want = _statsmodels_values(sales)
    est = valuate(a, SUBJECTS).estimates
    np.testing.assert_allclose(est["estimate"], want["mean"], rtol=1e-9)
    np.testing.assert_allclose(est["pi_low"], want["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(est["pi_high"], want["obs_ci_upper"], rtol=1e-9)
    np.testing.assert_allclose(est["ci_low"], want["mean_ci_lower"], rtol=1e-9)
    # the Model sheet's coefficient table is the final fit's (statsmodels' params, same order)
    np.testing.assert_allclose(a.tables.coefficients["estimate"], res.params, rtol=1e-9)
    fit = a.tables.fit.iloc[0]
    assert fit["n_used"] == len(sales) and fit["final_fit"] == "all"
    assert fit["n_training"] == len(sales) - len(a.holdout) == a.model.fit.n
    assert fit["r_squared"] == pytest.approx(res.rsquared, rel=1e-10)


def test_training_values_with_the_training_fit(sales, both):
    t = both["training"]
    assert not t.refitted and t.final_model is t.model
    train = sales.drop(index=t.holdout.index)
    res, want = _statsmodels_values(train)
    est = valuate(t, SUBJECTS).estimates
    np.testing.assert_allclose(est["estimate"], want["mean"], rtol=1e-9)
    np.testing.assert_allclose(est["pi_low"], want["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(est["pi_high"], want["obs_ci_upper"], rtol=1e-9)
    np.testing.assert_allclose(t.tables.coefficients["estimate"], res.params, rtol=1e-9)
    assert t.tables.fit["final_fit"].iloc[0] == "training"
    assert t.tables.fit["n_used"].iloc[0] == len(train)


def test_out_of_sample_tables_do_not_depend_on_the_setting(both):
    a, t = both["all"], both["training"]
    assert list(a.holdout.index) == list(t.holdout.index)
    for name in ("validation", "ratio_study", "holdout_estimates"):
        pdt.assert_frame_equal(a.tables.table(name), t.tables.table(name), check_exact=True)
    # and the holdout estimates are the training fit's predictions (statsmodels on the
    # training rows), never the refit's, which has seen those sales
    train = a.model.data
    origin = train["Sold"].min()
    res = sm.OLS(train["Price"].to_numpy(float), _design(train, train["Sold"], origin)).fit()
    want = res.predict(_design(a.holdout, a.holdout["Sold"], origin))
    np.testing.assert_allclose(a.tables.holdout_estimates["estimate"], want, rtol=1e-9)


def test_the_refit_changes_the_value(both):
    # a test that cannot fail is a defect: the two settings must value differently here
    ea = valuate(both["all"], SUBJECTS).estimates["estimate"]
    et = valuate(both["training"], SUBJECTS).estimates["estimate"]
    assert not np.allclose(ea, et, rtol=1e-6)


def test_without_a_holdout_there_is_no_refit(sales):
    res = analyze(sales.reset_index(drop=True), {**SETTINGS, "holdout": None, "folds": 5})
    assert res.final_model is res.model and not res.refitted
    assert res.tables.fit["final_fit"].iloc[0] == "all"
    assert res.tables.fit["n_used"].iloc[0] == res.tables.fit["n_training"].iloc[0]


def test_grid_and_suggestions_use_the_final_coefficients(sales, both):
    a = both["all"]
    comps = [int(r) for r in a.holdout.index[:3]]       # held-out sales: in the final fit
    v = valuate(a, SUBJECTS.iloc[:1], comps=comps)
    grid = v.grid
    b_area = float(a.final_model.fit.coef[list(a.final_model.fit.names).index("Area")])
    area = grid[grid["feature"] == "Area"].set_index("comp_row")
    for r in comps:
        want = b_area * (1500.0 - sales.loc[r, "Area"])      # price model: b·(x_subj − x_comp)
        assert area.loc[r, "adjustment"] == pytest.approx(want, rel=1e-9)
    totals = grid[grid["kind"] == "total"].set_index("comp_row")["flags"]
    assert not any("not used in the fit" in str(f) for f in totals)   # they are in the fit
    t = both["training"]
    flags = valuate(t, SUBJECTS.iloc[:1], comps=comps).grid
    flags = flags[flags["kind"] == "total"]["flags"]
    assert all("held out" in str(f) for f in flags)


def test_live_block_formulas_agree_with_the_valuation(both):
    # tests/formula_eval.py evaluates the block's native formulas as a spreadsheet would
    a = both["all"]
    v = valuate(a, SUBJECTS.iloc[:1])
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Valuation"
    live.write_live_block(ws, a, v, 4)
    ev = Evaluator(ws)
    got = []
    for name in live.NAMES:
        (_, ref), = wb.defined_names[name].destinations
        got.append(ev.value(ref))
    e = v.estimates.iloc[0]
    np.testing.assert_allclose(got, [e["estimate"], e["pi_low"], e["pi_high"]], rtol=1e-12)


def test_each_sheet_says_which_sales_its_model_used(sales, both):
    """The Model sheet's sentence names the final fit's sales; the Validation sheet's line
    the training sales (the counts are the engine's own: len(sales), the holdout)."""
    from plumbrule.render.wording import validation_text
    from plumbrule.workbook.sheets import model_sentence
    a, t = both["all"], both["training"]
    n, h = len(sales), len(a.holdout)
    assert f"Model fitted on all {n:,} screened sales" in model_sentence(a)
    assert f"the {n - h:,} training sales and the {h:,} held-out sales" in model_sentence(a)
    assert f"Model fitted on the {n - h:,} training sales" in model_sentence(t)
    for res in (a, t):
        assert validation_text(res.tables.fit.iloc[0]).startswith(
            f"Held-out accuracy of the model fitted on the {n - h:,} training sales")

"""The "try a subject" block with curves: its native formulas (truncated cubes, a square,
band indicators) give the engine's valuation, evaluated by tests/formula_eval.py here and by
LibreOffice in tests/workbook/test_curves_libreoffice.py. The engine's valuate is the
reference, and statsmodels' get_prediction on the same design for the interval."""

import numpy as np
import openpyxl
import pandas as pd
import pytest
import statsmodels.api as sm

from formula_eval import Evaluator
from plumbrule.analysis import analyze
from plumbrule.valuation.estimates import valuate
from plumbrule.workbook import live
from sheet_reading import input_cell as _input_cell, named_value as _named

CURVES = "Age=spline:4; Living area=square; Lot size=bands:6000,9000"


def curved_sales(n=400, seed=21):
    """Our own market: an age effect levelling off past 60, a size effect that flattens and
    a lot-size step."""
    rng = np.random.default_rng(seed)
    area = rng.normal(1600, 350, n).clip(700, 3200).round()
    lot = rng.uniform(3000, 15000, n).round(-1)
    age = rng.integers(1, 90, n).astype(float)
    logp = (11.2 + 0.0009 * area - 1.5e-7 * area ** 2 + 0.05 * (lot >= 9000)
            - 0.008 * age + 0.008 * age ** 2 / 120 + rng.normal(0, 0.1, n))
    return pd.DataFrame({"Price": np.round(np.exp(logp), -2), "Living area": area,
                         "Lot size": lot, "Age": age})


SETTINGS = dict(response="Price", predictors="Living area,Lot size,Age", log_response=True,
                curves=CURVES, folds=0)
SUBJECT = pd.DataFrame({"Subject": ["4 Ferry Lane"], "Living area": [1900.0],
                        "Lot size": [9500.0], "Age": [72.0]})


@pytest.fixture(scope="module")
def curved():
    a = analyze(curved_sales(), SETTINGS)
    return a, valuate(a, SUBJECT)


def test_block_with_curves_equals_the_engine(curved):
    a, v = curved
    wb = openpyxl.Workbook()
    ws = wb.active
    live.write_live_block(ws, a, v, 4)
    ev = Evaluator(ws)
    est = v.estimates.iloc[0]
    for name, key in (("plumb_live_estimate", "estimate"), ("plumb_live_pi_low", "pi_low"),
                      ("plumb_live_pi_high", "pi_high")):
        assert _named(wb, name, ev) == pytest.approx(float(est[key]), rel=1e-9), name
    # the prediction interval against statsmodels on the same design (reference library)
    x0 = a.encoding.design(a.encoding.new_rows(SUBJECT))
    exog = sm.add_constant(a.model.x)
    frame = sm.OLS(a.model.y, exog).fit().get_prediction(
        np.column_stack([[1.0], x0])).summary_frame(alpha=0.05)
    assert _named(wb, "plumb_live_pi_low", ev) == pytest.approx(
        np.exp(frame["obs_ci_lower"].iloc[0]), rel=1e-9)


@pytest.mark.parametrize("age,lot,area", [(3.0, 4000.0, 900.0), (45.0, 6000.0, 1600.0),
                                          (88.0, 14000.0, 3000.0)])
def test_changed_inputs_follow_the_curves(curved, age, lot, area):
    a, v = curved
    wb = openpyxl.Workbook()
    ws = wb.active
    live.write_live_block(ws, a, v, 4)
    _input_cell(ws, "Age").value = age
    _input_cell(ws, "Lot size").value = lot          # a break point exactly: the upper band
    _input_cell(ws, "Living area").value = area
    ev = Evaluator(ws)
    other = SUBJECT.assign(Age=[age], **{"Lot size": [lot], "Living area": [area]})
    want = valuate(a, other).estimates.iloc[0]
    assert _named(wb, "plumb_live_estimate", ev) == pytest.approx(float(want["estimate"]),
                                                                  rel=1e-9)
    assert _named(wb, "plumb_live_pi_high", ev) == pytest.approx(float(want["pi_high"]),
                                                                 rel=1e-9)


def test_model_sheet_shows_each_curve_table_and_chart(tmp_path):
    from plumbrule.workbook.fill import fill_template
    from plumbrule.workbook.run import run_book
    path = fill_template(tmp_path / "c.xlsx", curved_sales(), SUBJECT, (),
                         {"response": "Price", "predictors": "Living area,Lot size,Age",
                          "log_response": True, "curves": CURVES, "folds": 0,
                          "date_column": "", "id_column": "", "categorical": ""})
    result = run_book(path, backup=False)
    ws = openpyxl.load_workbook(path)["Model"]
    assert len(ws._charts) == 3
    rows = list(ws.iter_rows(max_col=4, values_only=True))
    tab = result.analysis.tables.curves
    age = tab[tab["predictor"] == "Age"]
    start = rows.index(("Age", "effect on price (%)", "CI low", "CI high"))
    shown = rows[start + 1: start + 1 + len(age)]
    # the sheet renders the engine's table (the xlsx keeps 15 significant digits)
    np.testing.assert_allclose([r[0] for r in shown], age["value"], rtol=1e-14)
    np.testing.assert_allclose([r[1] for r in shown], age["effect"], rtol=1e-14)
    # the median sale's value is the reference: its effect is zero at the reference row
    band = tab[(tab["predictor"] == "Lot size")].set_index("band")
    assert band.loc["6,000 to under 9,000", "effect"] == 0.0

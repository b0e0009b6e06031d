"""The adjustment grid and the reconciled value, against hand-worked examples.

The sales are built so that least squares returns known round coefficients: the
noise is made exactly orthogonal to the design (so OLS recovers the generating
coefficients) while the two comparables carry chosen prices. Every expected
number below is worked out by hand from those coefficients and written out.
The 15 % net / 25 % gross limits are common practice, no source.
"""

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from plumbrule.analysis import analyze
from plumbrule.errors import SpecError
from plumbrule.model.fitted import fit_model
from plumbrule.valuation.estimates import valuate

DAYS = 365.2425 / 12      # the mean Gregorian month plumbrule's trend is measured in


def _exact(x, beta, comp_targets, n_comp, seed):
    """y = x·beta + e with xᵀe = 0 (OLS returns beta exactly) and e on the first
    n_comp rows fixed to comp_targets (so the comparables have chosen prices)."""
    rng = np.random.default_rng(seed)
    xc, xo = x[:n_comp], x[n_comp:]
    e_o = -xo @ np.linalg.solve(xo.T @ xo, xc.T @ comp_targets)
    w = rng.normal(0, 1, len(xo))
    w -= xo @ np.linalg.lstsq(xo, w, rcond=None)[0]          # noise orthogonal to the design
    e_o = e_o + w * 0.05 * np.abs(x @ beta).mean() / np.sqrt(np.mean(w ** 2))
    return x @ beta + np.concatenate([comp_targets, e_o])


# --- a price (level) model: price = 50,000 + 100·Area + 5,000·[Hood = B] -------------

def _level_sales():
    rng = np.random.default_rng(5)
    area = np.concatenate([[1400.0, 1700.0], rng.uniform(1000, 2400, 40).round()])
    hood = np.array(["A", "B"] + list(rng.choice(["A", "B"], 40)))
    x = np.column_stack([np.ones(42), area, hood == "B"]).astype(float)
    beta = np.array([50_000.0, 100.0, 5_000.0])
    # comps: row 2 model value 190,000 → sold 200,000; row 3 model 225,000 → sold 240,000
    y = _exact(x, beta, np.array([10_000.0, 15_000.0]), 2, seed=1)
    return pd.DataFrame({"Price": y, "Area": area, "Hood": hood})


LEVEL = dict(response="Price", predictors="Area,Hood", categorical="Hood",
             reference_levels="Hood=A")
SUBJECT = pd.DataFrame({"Subject": ["7 Elm"], "Area": [1500.0], "Hood": ["B"]})


@pytest.fixture(scope="module")
def level():
    return analyze(_level_sales(), LEVEL)


def _feature(grid, row, feature, col="adjustment"):
    return grid.loc[(grid["comp_row"] == row) & (grid["feature"] == feature), col].iloc[0]


def test_level_model_recovers_the_round_coefficients(level):
    np.testing.assert_allclose(level.fit.coef, [50_000, 100, 5_000], rtol=1e-9)
    price = level.clean.data["Price"]
    assert price[2] == pytest.approx(200_000) and price[3] == pytest.approx(240_000)


def test_level_grid_hand_worked(level):
    v = valuate(level, SUBJECT, comps=[2, 3])
    g = v.grid
    # Hand-worked. Subject: 1,500 sq ft in B.
    # Comp row 2: 1,400 sq ft in A, sold 200,000.
    #   Area  100 × (1,500 − 1,400) = +10,000;  Hood  B vs A = +5,000
    #   net +15,000 = 7.5 %; gross 15,000 = 7.5 %; adjusted 215,000
    # Comp row 3: 1,700 sq ft in B, sold 240,000.
    #   Area  100 × (1,500 − 1,700) = −20,000;  Hood 0
    #   net −20,000 = −8.333 %; gross 20,000 = 8.333 %; adjusted 220,000
    assert _feature(g, 2, "Area") == pytest.approx(10_000, rel=1e-9)
    assert _feature(g, 2, "Area", "difference") == pytest.approx(100)
    assert _feature(g, 2, "Hood") == pytest.approx(5_000, rel=1e-9)
    assert _feature(g, 3, "Area") == pytest.approx(-20_000, rel=1e-9)
    assert _feature(g, 3, "Hood") == pytest.approx(0, abs=1e-6)
    tot = g[g["kind"] == "total"].set_index("comp_row")
    assert tot.loc[2, "net_adjustment"] == pytest.approx(15_000, rel=1e-9)
    assert tot.loc[2, "net_pct"] == pytest.approx(0.075, rel=1e-9)
    assert tot.loc[3, "gross_adjustment"] == pytest.approx(20_000, rel=1e-9)
    assert tot.loc[3, "gross_pct"] == pytest.approx(20_000 / 240_000, rel=1e-9)
    assert tot.loc[2, "adjusted_price"] == pytest.approx(215_000, rel=1e-9)
    assert tot.loc[3, "adjusted_price"] == pytest.approx(220_000, rel=1e-9)
    # Weights ∝ 1/gross %: 1/0.075 = 13.333…, 1/0.08333… = 12 → 10/19 and 9/19.
    assert tot.loc[2, "weight"] == pytest.approx(10 / 19, rel=1e-9)
    rec = v.reconciled.iloc[0]
    # Value = (10 × 215,000 + 9 × 220,000) / 19 = 4,130,000 / 19 = 217,368.42
    assert rec["value"] == pytest.approx(4_130_000 / 19, rel=1e-9)
    assert (rec["range_low"], rec["range_high"], rec["spread"]) == pytest.approx(
        (215_000, 220_000, 5_000), rel=1e-9)
    assert rec["weights"] == "row 2: 0.526; row 3: 0.474"
    assert tot["flags"].tolist() == ["", ""]          # 7.5 % and 8.3 %: under both limits


def test_equal_weights_and_limits(level):
    v = valuate(level, SUBJECT, comps=[2, 3],
                settings={"comp_weights": "equal", "net_adjustment_limit": 0.08,
                          "gross_adjustment_limit": 0.08})
    # (215,000 + 220,000) / 2 = 217,500
    assert v.reconciled["value"].iloc[0] == pytest.approx(217_500, rel=1e-9)
    flags = v.grid[v.grid["kind"] == "total"].set_index("comp_row")["flags"]
    assert flags[2] == ""
    assert "net adjustment -8.3% exceeds 8% of the sale price" in flags[3]
    assert "gross adjustment 8.3% exceeds 8%" in flags[3]


def test_zero_gross_comp_takes_all_the_weight(level):
    same = pd.DataFrame({"Area": [1400.0], "Hood": ["A"]})       # identical to comp row 2
    v = valuate(level, same, comps=[2, 3])
    tot = v.grid[v.grid["kind"] == "total"].set_index("comp_row")
    assert tot.loc[2, "gross_adjustment"] == 0
    assert (tot.loc[2, "weight"], tot.loc[3, "weight"]) == (1.0, 0.0)
    assert v.reconciled["value"].iloc[0] == pytest.approx(200_000, rel=1e-9)


# --- a log model: log price = 11 + 0.6·log(Area) + 0.1·[Hood = B] + 0.005·months ---------

def _log_sales():
    rng = np.random.default_rng(9)
    n = 50
    area = np.concatenate([[1400.0, 1700.0], rng.uniform(1000, 2400, n - 2).round()])
    hood = np.array(["A", "B"] + list(rng.choice(["A", "B"], n - 2)))
    days = np.concatenate([[0, 365], rng.integers(1, 700, n - 2)])
    x = np.column_stack([np.ones(n), np.log(area), hood == "B", days / DAYS]).astype(float)
    beta = np.array([11.0, 0.6, 0.1, 0.005])
    targets = np.log([200_000.0, 240_000.0]) - x[:2] @ beta
    y = _exact(x, beta, targets, 2, seed=2)
    date = pd.Timestamp("2024-01-01") + pd.to_timedelta(days, unit="D")
    return pd.DataFrame({"Price": np.exp(y), "Area": area, "Hood": hood, "Sold": date})


LOG = dict(response="Price", predictors="Area,Hood", categorical="Hood",
           reference_levels="Hood=A", log_response=True, log_predictors="Area",
           date_column="Sold", valuation_date="2025-12-31")


@pytest.fixture(scope="module")
def logm():
    return analyze(_log_sales(), LOG)


def test_log_grid_hand_worked(logm):
    np.testing.assert_allclose(logm.fit.coef, [11, 0.6, 0.1, 0.005], rtol=1e-9)
    v = valuate(logm, SUBJECT, comps=[2, 3])
    g = v.grid
    # Hand-worked, comp row 2 (1,400 sq ft, A, sold 2024-01-01 for 200,000); valuation
    # 2025-12-31 is 730 days = 730 / 30.436875 = 23.98406 months later.
    #   e_area = 0.6 × ln(1500/1400) = 0.6 × 0.0689929 = 0.0413957
    #   e_hood = 0.1 (B vs A);  e_market = 0.005 × 23.98406 = 0.1199203
    #   E = 0.2613160;  net = 200,000 × (e^E − 1) = 59,727.61;  adjusted 259,727.61
    #   shares P·e_f·(e^E − 1)/E: area 9,461.60, hood 22,856.46, market 27,409.55
    #   stand-alone P·(e^e_f − 1): area 8,452.89, hood 21,034.18, market 25,481.40
    assert _feature(g, 2, "Area", "model_difference") == pytest.approx(np.log(1500 / 1400))
    assert _feature(g, 2, "Area", "difference") == pytest.approx(100)
    assert _feature(g, 2, "market conditions", "difference") == pytest.approx(23.98406, rel=1e-6)
    for feature, share, alone in [("Area", 9_461.60, 8_452.89), ("Hood", 22_856.46, 21_034.18),
                                  ("market conditions", 27_409.55, 25_481.40)]:
        assert _feature(g, 2, feature) == pytest.approx(share, abs=0.01)
        assert _feature(g, 2, feature, "adjustment_alone") == pytest.approx(alone, abs=0.01)
    tot = g[g["kind"] == "total"].set_index("comp_row")
    assert tot.loc[2, "net_adjustment"] == pytest.approx(59_727.61, abs=0.01)
    assert tot.loc[2, "adjusted_price"] == pytest.approx(259_727.61, abs=0.01)
    # Comp row 3 (1,700 sq ft, B, sold 2024-12-31 for 240,000), 365 days = 11.99203 months:
    #   e_area = 0.6 × ln(1500/1700) = −0.0750979; e_hood = 0; e_market = 0.0599602
    #   E = −0.0151377; net = 240,000 × (e^E − 1) = −3,605.69; adjusted 236,394.31
    #   shares: area −17,887.76, market 14,282.07 → gross 32,169.83 = 13.404 %
    assert _feature(g, 3, "Area") == pytest.approx(-17_887.76, abs=0.01)
    assert _feature(g, 3, "market conditions") == pytest.approx(14_282.07, abs=0.01)
    assert tot.loc[3, "net_adjustment"] == pytest.approx(-3_605.69, abs=0.01)
    assert tot.loc[3, "gross_adjustment"] == pytest.approx(32_169.83, abs=0.01)
    # The parts add up to the net adjustment exactly (the documented allocation).
    parts = g[g["kind"] != "total"].groupby("comp_row")["adjustment"].sum()
    np.testing.assert_allclose(parts.to_numpy(), tot["net_adjustment"].to_numpy(), rtol=1e-12)
    # Comp row 2: net 29.9 % > 15 % and gross 29.9 % > 25 % (common practice, no source).
    assert "net adjustment +29.9% exceeds 15%" in tot.loc[2, "flags"]
    assert "gross adjustment 29.9% exceeds 25%" in tot.loc[2, "flags"]
    assert tot.loc[3, "flags"] == ""
    # Weights ∝ 1/gross %: 1/0.298638 and 1/0.134041.
    w2 = (1 / 0.2986380) / (1 / 0.2986380 + 1 / 0.1340410)
    assert tot.loc[2, "weight"] == pytest.approx(w2, rel=1e-5)


def test_log_adjusted_price_is_median_times_comp_residual(logm):
    # Identity of the log grid: P·exp(x_s b − x_c b) = exp(x_s b) · P / exp(x_c b).
    v = valuate(logm, SUBJECT, comps=[2, 3])
    median = v.estimates["median_estimate"].iloc[0]
    resid = pd.Series(logm.fit.resid, index=logm.model.data.index)
    tot = v.grid[v.grid["kind"] == "total"].set_index("comp_row")
    np.testing.assert_allclose(tot["adjusted_price"], median * np.exp(resid[[2, 3]]), rtol=1e-10)


# --- which comparables ---------------------------------------------------------------

def test_comp_row_errors(level):
    with pytest.raises(SpecError, match=r"row 99 is not a row of the sales table \(its rows run "
                                        r"2 to 43\)"):
        valuate(level, SUBJECT, comps=[2, 99])
    with pytest.raises(SpecError, match="row 3 is listed twice"):
        valuate(level, SUBJECT, comps=[3, 2, 3])
    with pytest.raises(SpecError, match="11 comparables were given; use at most 10"):
        valuate(level, SUBJECT, comps=list(range(2, 13)))
    with pytest.raises(SpecError, match="'x' is not a sheet row number"):
        valuate(level, SUBJECT, comps=["x"])
    two = pd.concat([SUBJECT, SUBJECT])
    with pytest.raises(SpecError, match="Comparables belong to one subject, but 2 subjects"):
        valuate(level, two, comps=[2])


def test_dropped_comp_names_the_reason():
    data = _level_sales().astype({"Area": object})
    data.loc[5, "Area"] = None                                   # sheet row 7
    a = analyze(data, LEVEL)
    with pytest.raises(SpecError, match=r"row 7 was dropped from the sales \(column 'Area' "
                                        r"blank\)"):
        valuate(a, SUBJECT, comps=[7])


def test_set_aside_comp_is_kept_with_a_note(level):
    # Contract with screening: a clean row outside Analysis.final_model.data (the model
    # that values) was set aside.
    kept = level.clean.data.drop(index=[10])
    model = fit_model(level.spec, kept)
    a = replace(level, model=model, final_model=model)
    v = valuate(a, SUBJECT, comps=[2, 10])
    flags = v.grid[v.grid["kind"] == "total"].set_index("comp_row")["flags"]
    assert "not used in the fit" in flags[10] and flags[2] == ""


def test_comps_from_settings(level):
    a = analyze(_level_sales(), {**LEVEL, "comps": "2,3"})
    v = valuate(a, SUBJECT)
    assert v.reconciled["value"].iloc[0] == pytest.approx(4_130_000 / 19, rel=1e-9)


def test_comp_sold_after_the_valuation_date_is_flagged(logm):
    # Comp row 3 sold 2024-12-31; valued as of 2024-06-30 its market adjustment is negative.
    v = valuate(logm, SUBJECT, comps=[2, 3], settings={"valuation_date": "2024-06-30"})
    tot = v.grid[v.grid["kind"] == "total"].set_index("comp_row")
    assert "sold after the valuation date" in tot.loc[3, "flags"]
    assert "sold after" not in tot.loc[2, "flags"]
    # 0.005 × (−184 days / 30.436875) = −0.0302265 on the log scale
    market = v.grid[(v.grid["comp_row"] == 3) & (v.grid["feature"] == "market conditions")]
    assert market["effect"].iloc[0] == pytest.approx(0.005 * -184 / DAYS, rel=1e-9)

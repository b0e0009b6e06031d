"""Portfolio totals (valuation/portfolio.py).

References: statsmodels OLS get_prediction on the summed design row (reference library: the
mean interval of Σxᵢ'b is exactly the total's confidence interval; its se_mean and scale give
the prediction interval of the total of m independent sales, se² + m·s²); for log models a
seeded Monte Carlo coverage check (nominal 95 %, tolerance from the binomial standard error).
"""

import datetime as dt
import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.stats import t as tdist

from plumbrule.analysis import analyze
from plumbrule.valuation.estimates import valuate

VDATE = dt.date(2025, 6, 30)


def _sales(n=150, seed=5, log=False):
    rng = np.random.default_rng(seed)
    area = rng.normal(1600, 350, n).round()
    age = rng.integers(0, 80, n).astype(float)
    hood = rng.choice(["North", "South", "East"], n)
    eff = np.select([hood == "South", hood == "East"], [0.1, -0.06], 0.0)
    if log:
        price = np.exp(10.5 + 0.0004 * area - 0.003 * age + eff + rng.normal(0, 0.15, n))
    else:
        price = 40000 + 95 * area - 600 * age + 100000 * eff + rng.normal(0, 20000, n)
    return pd.DataFrame({"Price": price, "Area": area, "Age": age, "Hood": hood})


SET = dict(response="Price", predictors="Area,Age,Hood", categorical="Hood",
           reference_levels="Hood=North", valuation_date=VDATE.isoformat())
SUBJ = pd.DataFrame({"Area": [1500.0, 2100.0, 1300.0, 1750.0], "Age": [12.0, 40.0, 5.0, 70.0],
                     "Hood": ["South", "North", "East", "North"]})


def _x(frame):
    return np.column_stack([np.ones(len(frame)), frame["Area"], frame["Age"],
                            frame["Hood"].eq("East"), frame["Hood"].eq("South")]).astype(float)


@pytest.mark.parametrize("robust", [None, "HC3"])
def test_linear_total_matches_statsmodels_on_the_summed_row(robust):
    data = _sales()
    settings = dict(SET, **({"robust_se": robust} if robust else {}))
    a = analyze(data, settings)
    port = valuate(a, SUBJ).portfolio.iloc[0]
    x0 = _x(SUBJ).sum(axis=0, keepdims=True)
    res = sm.OLS(data["Price"].to_numpy(), _x(data)).fit(
        **({"cov_type": robust} if robust else {}))
    ref = res.get_prediction(x0).summary_frame(alpha=0.05)
    # Reference library: statsmodels' mean interval at the summed design row 1'X_s.
    assert port["total"] == pytest.approx(ref["mean"].iloc[0], rel=1e-10)
    assert port["se_total"] == pytest.approx(ref["mean_se"].iloc[0], rel=1e-8)
    q = tdist.ppf(0.975, res.df_resid)
    if robust is None:   # statsmodels' own t interval (use_t for the classical fit)
        assert port["ci_low"] == pytest.approx(ref["mean_ci_lower"].iloc[0], rel=1e-10)
        assert port["ci_high"] == pytest.approx(ref["mean_ci_upper"].iloc[0], rel=1e-10)
    # Total of four independent sales: se² + 4·s² (s² = statsmodels' scale).
    se_s = np.sqrt(ref["mean_se"].iloc[0] ** 2 + 4 * res.scale)
    assert port["pi_low"] == pytest.approx(ref["mean"].iloc[0] - q * se_s, rel=1e-9)
    assert port["pi_high"] == pytest.approx(ref["mean"].iloc[0] + q * se_s, rel=1e-9)
    # The naive sum of intervals is never narrower (Minkowski: Σ se ≥ ‖Σ v‖·s).
    assert port["naive_ci_ratio"] > 1 and port["naive_pi_ratio"] > 1


def test_one_subject_has_no_portfolio_and_json_carries_it_for_two():
    from plumbrule.cli.value import valuation_json
    a = analyze(_sales(), SET)
    assert valuate(a, SUBJ.iloc[:1]).portfolio.empty
    out = json.loads(valuation_json(valuate(a, SUBJ)))
    assert {"n", "total", "ci_low", "ci_high", "pi_low", "pi_high", "method"} <= set(
        out["portfolio"])
    assert out["portfolio"]["n"] == 4
    assert "portfolio" not in json.loads(valuation_json(valuate(a, SUBJ.iloc[:1])))


def test_log_total_is_the_sum_of_the_estimates():
    a = analyze(_sales(log=True), dict(SET, log_response=True))
    v = valuate(a, SUBJ)
    port = v.portfolio.iloc[0]
    assert port["total"] == pytest.approx(v.estimates["estimate"].sum(), rel=1e-12)
    assert port["ci_low"] < port["total"] < port["ci_high"]
    assert port["pi_low"] < port["ci_low"] and port["ci_high"] < port["pi_high"]


def test_log_total_covers_at_its_nominal_rate():
    """Seeded Monte Carlo: 300 markets with lognormal errors (true total Σ exp(x'β + σ²/2));
    the CI of the total covers in 95 % of them within 3 binomial standard errors (±3.8 %),
    and so does the PI of a fresh total of the same subjects' sales."""
    rng = np.random.default_rng(20261202)
    beta = np.array([10.5, 0.0004, -0.003, -0.06, 0.1])
    sigma, reps = 0.15, 300
    xs = _x(SUBJ)
    truth = float(np.sum(np.exp(xs @ beta + sigma ** 2 / 2)))
    ci_hit = pi_hit = 0
    for _ in range(reps):
        n = 120
        area = rng.normal(1600, 350, n).round()
        age = rng.integers(0, 80, n).astype(float)
        hood = rng.choice(["North", "South", "East"], n)
        frame = pd.DataFrame({"Area": area, "Age": age, "Hood": hood})
        frame.insert(0, "Price", np.exp(_x(frame) @ beta + rng.normal(0, sigma, n)))
        a = analyze(frame, dict(SET, log_response=True))
        p = valuate(a, SUBJ).portfolio.iloc[0]
        fresh = float(np.sum(np.exp(xs @ beta + rng.normal(0, sigma, len(xs)))))
        ci_hit += p["ci_low"] <= truth <= p["ci_high"]
        pi_hit += p["pi_low"] <= fresh <= p["pi_high"]
    tol = 3 * np.sqrt(0.95 * 0.05 / reps)
    assert abs(ci_hit / reps - 0.95) < tol, ci_hit / reps
    assert abs(pi_hit / reps - 0.95) < tol, pi_hit / reps

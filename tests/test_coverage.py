"""Monte Carlo coverage of the valuation intervals on a correctly specified levels model.

Under the classical normal linear model (fixed design, independent N(0, σ²) errors) the
intervals x₀'b ± t(ν)·s·√h₀ (mean) and x₀'b ± t(ν)·s·√(1 + h₀) (one new sale) have exact
coverage 1 − α for every x₀ (Montgomery, Peck & Vining, *Introduction to Linear Regression
Analysis*, the sections on the confidence interval on the mean response and on prediction of new
observations in multiple regression; from memory). A small seeded market is simulated many times;
the coverage of the 95 % CI and PI that ``valuate`` reports must lie within 3.5 standard errors
of 0.95 (tolerance: common practice, no source). The larger study is benchmarks/coverage.py.
"""

import numpy as np
import pandas as pd

from plumbrule.analysis import analyze
from plumbrule.valuation.estimates import valuate

REPS, SALES, SUBJECTS = 150, 60, 10
CONDITIONS = np.array(["Fair", "Average", "Good"])
SETTINGS = {"response": "Sale price", "predictors": "Living area,Age,Condition",
            "categorical": "Condition", "folds": 0}


def _market(rng, n):
    """Invented sales: price = 60,000 + 120·area − 500·age + condition effect + N(0, 25,000²)."""
    area = np.round(rng.uniform(800, 3000, n))
    age = rng.integers(0, 81, n).astype(float)
    cond = rng.integers(0, 3, n)
    mean = 60_000 + 120 * area - 500 * age + np.array([-20e3, 0.0, 25e3])[cond]
    frame = pd.DataFrame({"Living area": area, "Age": age, "Condition": CONDITIONS[cond]})
    return frame, mean


def _coverage():
    """Per replication: share of subjects whose CI holds the true mean, and whose PI holds
    a fresh sale at the subject's x."""
    rng = np.random.default_rng(20250602)
    ci, pi = np.empty(REPS), np.empty(REPS)
    for i in range(REPS):
        sales, mean = _market(rng, SALES)
        sales.insert(0, "Sale price", mean + rng.normal(0, 25_000, SALES))
        subjects, truth = _market(rng, SUBJECTS)
        est = valuate(analyze(sales, SETTINGS), subjects).estimates
        fresh = truth + rng.normal(0, 25_000, SUBJECTS)
        ci[i] = np.mean((est["ci_low"] <= truth) & (truth <= est["ci_high"]))
        pi[i] = np.mean((est["pi_low"] <= fresh) & (fresh <= est["pi_high"]))
    return ci, pi


def _tolerance(shares):
    # Subjects valued by one fit share its errors, so the standard error is that of the
    # per-replication shares; never below the binomial one of independent subjects.
    binomial = np.sqrt(0.95 * 0.05 / (REPS * SUBJECTS))
    return 3.5 * max(np.std(shares, ddof=1) / np.sqrt(REPS), binomial)


def test_mean_ci_and_prediction_interval_cover_95_percent_on_a_correct_levels_model():
    ci, pi = _coverage()
    assert abs(ci.mean() - 0.95) <= _tolerance(ci), ci.mean()
    assert abs(pi.mean() - 0.95) <= _tolerance(pi), pi.mean()
    # The two intervals differ: a CI as wide as the PI would cover the mean almost always,
    # so the check above could not tell them apart if both tolerances reached 1.
    assert ci.mean() + _tolerance(ci) < 1.0 and pi.mean() + _tolerance(pi) < 1.0

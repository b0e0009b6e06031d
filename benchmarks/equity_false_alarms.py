"""Vertical-equity false alarms: how often a correctly specified model is called regressive.

A correctly specified market (invented): ln value = 12 + 0.8·ln-area + 0.2·condition
− 0.004·age (var ≈ 0.12, R² ≈ 0.84 at σ = 0.15), sale price = value · exp(ε),
ε ~ N(0, σ²). A log-linear model with exactly those predictors is fitted on 400 (or 2000)
training sales and values 200 held-out sales, or the estimates are the values with a
little error of their own; the ratio study runs on the 200. A verdict other than "ok" on
such a model is a false alarm. For each σ it prints the share of replications in which
each ratio-study verdict is not "ok" (every ``*_verdict`` column the installed plumbrule
writes; COD's are not false alarms: at σ = 0.20 the COD really is above 15), the share
the old PRB rule (|PRB| > 0.05, interval ignored) flags, and the share that fail.
With a fitted model the value slope's rate is above 5 % by the fitted coefficients' own
error, about P(|Z| > 1.96 / √(1 + n_holdout / n_fit)) (docs/methods.md).

Second block: coverage of the PRB interval around the population PRB (a slope fitted on
2 million sales of the same market), for the ordinary (classic) standard error and for
the HC3 one, with normal price noise, Laplace noise (heavier tails) and noise whose spread falls as
value rises (cheap sales noisier).

Run: PYTHONPATH=engine python benchmarks/equity_false_alarms.py [--reps 500]
"""

from __future__ import annotations

import argparse

import numpy as np
from scipy.stats import norm
from scipy.stats import t as tdist

from plumbrule import ratios

N_HOLD = 200
DESIGNS = (("fit 400, holdout 200", 400), ("fit 2000, holdout 200", 2000),
           ("estimate = value·e^η, sd η 0.03", 0))


def market(rng, n, sigma, noise="normal"):
    """Design rows [1, ln-area, condition, age] and (value, sale price) of n invented sales."""
    x = np.column_stack([np.ones(n), rng.normal(0, 0.35, n), rng.normal(0, 1, n),
                         rng.uniform(0, 60, n)])
    value = np.exp(x @ np.array([12.0, 0.8, 0.2, -0.004]))
    if noise == "laplace":          # heavier tails than normal, same standard deviation
        e = rng.laplace(0, sigma / np.sqrt(2.0), n)
    elif noise == "uneven":         # cheap sales noisier than dear ones (sd × e^(−z/2))
        z = (np.log(value) - 12.0) / 0.35
        e = rng.normal(0, 1, n) * sigma * np.exp(-0.5 * z)
    else:
        e = rng.normal(0, sigma, n)
    return x, value, value * np.exp(e)


def holdout_study(rng, sigma, n_fit):
    """One replication: fit on n_fit sales and study the holdout (or, n_fit 0, estimates =
    value with a little independent error of their own)."""
    x, value, price = market(rng, n_fit + N_HOLD, sigma)
    if n_fit:
        b = np.linalg.lstsq(x[:n_fit], np.log(price[:n_fit]), rcond=None)[0]
        est = np.exp(x[n_fit:] @ b)
    else:
        est = value * np.exp(rng.normal(0, 0.03, N_HOLD))
    table = ratios.estimates_table(np.arange(N_HOLD), price[n_fit:], est)
    return ratios.ratio_study(table).iloc[0]


def false_alarms(reps: int) -> None:
    print(f"Verdicts other than 'ok' on a correct model ({reps} replications each)")
    for name, n_fit in DESIGNS:
        print(f" {name}" + (f" (value slope expected ≈ "
                            f"{2 * norm.sf(1.96 / np.sqrt(1 + N_HOLD / n_fit)):.1%})"
                            if n_fit else ""))
        for sigma in (0.10, 0.15, 0.20):
            rng = np.random.default_rng(20260)
            recs = [holdout_study(rng, sigma, n_fit) for _ in range(reps)]
            cols = [c for c in recs[0].index if c.endswith("_verdict")]
            rates = {c[:-8]: np.mean([r[c] != ratios.OK for r in recs]) for c in cols}
            old_prb = np.mean([abs(r["prb"]) > 0.05 for r in recs])
            old_fails = np.mean([abs(r["prb"]) > 0.10 for r in recs])
            fails = {c[:-8]: np.mean([r[c] == ratios.FAILS for r in recs])
                     for c in ("prb_verdict", "value_slope_verdict") if c in cols}
            mean_prb = np.mean([r["prb"] for r in recs])
            print(f"  sigma {sigma:.2f}: mean PRB {mean_prb:+.3f}; old PRB rule (|PRB| > 0.05) "
                  f"{old_prb:.1%} (fails {old_fails:.1%}); "
                  + "; ".join(f"{k} {v:.1%}" for k, v in rates.items())
                  + "".join(f"; {k} fails {v:.1%}" for k, v in fails.items()))


def _slope_ci(x, y, level, kind):
    """Slope of y on x with a t(n − 2) interval; classic or HC3 standard error."""
    n = len(x)
    xc, yc = x - x.mean(), y - y.mean()
    sxx = xc @ xc
    slope = xc @ yc / sxx
    e = yc - slope * xc
    if kind == "classic":
        se = np.sqrt(e @ e / (n - 2) / sxx)
    else:
        h = 1.0 / n + xc * xc / sxx
        se = np.sqrt(np.sum((xc * e / (1.0 - h)) ** 2)) / sxx
    q = tdist.ppf(0.5 + level / 2.0, n - 2)
    return slope - q * se, slope + q * se


def _prb_xy(est, price):
    r = est / price
    med = np.median(r)
    return np.log(0.5 * price + 0.5 * est / med) / np.log(2.0), (r - med) / med


def prb_coverage(reps: int) -> None:
    print(f"PRB 95 % interval coverage of the population PRB ({reps} replications)")
    for noise in ("normal", "laplace", "uneven"):
        for n in (50, 200):
            rng = np.random.default_rng(7)
            _, value, price = market(rng, 2_000_000, 0.15, noise)
            x, y = _prb_xy(value, price)
            xc = x - x.mean()
            target = xc @ (y - y.mean()) / (xc @ xc)
            hits = {"classic": 0, "HC3": 0, "plumbrule": 0}
            for _ in range(reps):
                _, value, price = market(rng, n, 0.15, noise)
                x, y = _prb_xy(value, price)
                for kind in ("classic", "HC3"):
                    lo, hi = _slope_ci(x, y, 0.95, kind)
                    hits[kind] += lo <= target <= hi
                _, lo, hi = ratios.prb(value, price, 0.95)
                hits["plumbrule"] += lo <= target <= hi
            print(f"  {noise:7s} noise, n {n:3d} (PRB {target:+.3f}): "
                  + ", ".join(f"{k} {v / reps:.3f}" for k, v in hits.items()))


if __name__ == "__main__":
    ap = argparse.ArgumentParser()
    ap.add_argument("--reps", type=int, default=500)
    a = ap.parse_args()
    false_alarms(a.reps)
    prb_coverage(4 * a.reps)

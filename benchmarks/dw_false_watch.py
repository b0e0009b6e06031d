"""Serial-correlation false watches: how often a correct model is flagged in date order.

A correctly specified market (invented): price = 40,000 + 1,500·area − 400·age + 20·day + ε,
ε ~ N(0, 20,000²) independent, sale days uniform over two years; the model fitted has exactly
those predictors (the date column gives the monthly trend). Any verdict other than "ok" from
the Durbin–Watson check or the check of sales close in time is a false watch. For each
sample size it prints the share of replications flagged by

- the old fixed band (ok only for 1.5 ≤ d ≤ 2.5; common practice, no source),
- Durbin–Watson with its exact two-sided p-value (watch at p < 0.05),
- the time-neighbour ratio with its one-sided p-value (watch at p < 0.05),

and the binomial standard error of a 5% rate at that many replications.

Run: PYTHONPATH=engine python benchmarks/dw_false_watch.py [--reps 2000] [--sizes 25,30,40,150]
"""

from __future__ import annotations

import argparse

import numpy as np
import pandas as pd

from plumbrule.analysis import as_table, coerce_settings, prepare
from plumbrule.diagnostics import checks
from plumbrule.model.fitted import fit_model

SETTINGS = dict(response="Price", predictors="Area,Age", date_column="Sold", folds=0)


def correct_sales(n: int, rng) -> pd.DataFrame:
    area = rng.uniform(60, 260, n)
    age = rng.integers(0, 90, n).astype(float)
    days = rng.integers(0, 730, n)
    price = 40e3 + 1500 * area - 400 * age + 20 * days + rng.normal(0, 2e4, n)
    sold = pd.Timestamp("2023-01-01") + pd.to_timedelta(days, unit="D")
    frame = pd.DataFrame({"Price": price, "Area": area, "Age": age, "Sold": sold})
    frame.index = frame.index + 2           # sheet rows
    return frame


def rates(n: int, reps: int, rng) -> tuple[float, float, float]:
    spec, _ = prepare(as_table(correct_sales(n, rng)), coerce_settings(**SETTINGS))
    band = dw = near = 0
    for _ in range(reps):
        model = fit_model(spec, correct_sales(n, rng))
        d = checks.durbin_watson_date(model)
        band += not 1.5 <= d.statistic <= 2.5
        dw += d.verdict != "ok"
        near += checks.time_neighbours(model).verdict != "ok"
    return band / reps, dw / reps, near / reps


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=2000)
    ap.add_argument("--sizes", default="25,30,40,150")
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    se = np.sqrt(0.05 * 0.95 / args.reps)
    print(f"{args.reps} correct models per size; SE of a 5% rate {se:.3f}")
    print(f"{'sales':>6s} {'old band':>9s} {'DW p<.05':>9s} {'near p<.05':>11s}")
    for n in (int(s) for s in args.sizes.split(",")):
        band, dw, near = rates(n, args.reps, rng)
        print(f"{n:6d} {band:9.3f} {dw:9.3f} {near:11.3f}", flush=True)


if __name__ == "__main__":
    main()

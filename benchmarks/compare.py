"""Compare benchmark: 10 candidate models on 20,000 sales with `plumbrule.compare.compare`,
beside 10 separate full analyses (`plumbrule.analysis.analyze`, one per candidate's settings)
of the same sales, measured side by side in one run.

The comparison shares the intake (typing every used column once), the screening and the
holdout and fold assignment across the candidates; each separate analysis repeats them and
also builds every table a single run returns. Target (issue 13): the comparison takes at most
0.5x the time of the 10 separate analyses.

The sales are the invented town (demo/town.py) at 20,000 sales with unique IDs, a 30 %
holdout, 5 folds and a 1-99 percentile trim, given to both sides as the same DataFrame.

Run: python benchmarks/compare.py [--n 20000] [--repeat 2] [--csv] [--threads N]
     (--csv: both sides read the sales from one CSV file, as `plumbrule compare DATA` does;
      --threads sets OPENBLAS_NUM_THREADS/OMP_NUM_THREADS for this run only: on a shared,
      busy machine multi-threaded BLAS makes every small BLAS call slow, which swamps both
      sides' fits and hides what sharing saves)
"""

from __future__ import annotations

import os
import sys

if "--threads" in sys.argv:   # must be set before numpy loads its BLAS
    _n = sys.argv[sys.argv.index("--threads") + 1]
    os.environ["OPENBLAS_NUM_THREADS"] = os.environ["OMP_NUM_THREADS"] = _n

import argparse
import gc
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "engine"))

CANDIDATES = [
    ("price scale", {"log_response": False, "log_predictors": "none"}),
    ("no lot size", {"predictors": "Living area,Age,Bathrooms,Condition,Neighbourhood"}),
    ("bedrooms too", {"predictors": "Living area,Lot size,Age,Bathrooms,Bedrooms,Condition,"
                                    "Neighbourhood"}),
    ("area in units", {"log_predictors": "Lot size"}),
    ("piecewise 6m", {"trend": "piecewise", "trend_knots": "every 6 months"}),
    ("piecewise 3m", {"trend": "piecewise", "trend_knots": "every 3 months"}),
    ("monthly", {"trend": "periods"}),
    ("quarterly", {"trend": "periods", "trend_period": "quarter"}),
    ("no condition", {"predictors": "Living area,Lot size,Age,Bathrooms,Neighbourhood"}),
]   # with the base model: 10 candidates


def sales(n: int):
    from plumbrule.demo.town import demo_sales
    frame = demo_sales(n)
    frame["Sale ID"] = [f"S-{i:06d}" for i in range(len(frame))]
    return frame


def base_settings() -> dict:
    from plumbrule.demo.town import DEMO_SETTINGS
    return {**DEMO_SETTINGS, "id_column": "Sale ID", "holdout": 0.3, "folds": 5,
            "trim_percentiles": "1,99"}


def best_of(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        gc.collect()
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    from plumbrule.analysis import analyze
    from plumbrule.compare import Candidate, candidate_settings, compare
    from plumbrule.settings import parse_settings
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=20000)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--csv", action="store_true")
    ap.add_argument("--threads", default=None, help="BLAS threads for this run")
    args = ap.parse_args()
    frame = sales(args.n)
    source: object = frame
    if args.csv:
        tmp = Path(tempfile.mkdtemp()) / "sales.csv"
        frame.to_csv(tmp, index=False)
        source = tmp
    base = parse_settings(base_settings())
    cands = [Candidate(name, changes) for name, changes in CANDIDATES]
    every = candidate_settings(base, cands)
    assert len(every) == 10

    def together():
        return compare(source, base, cands)

    def separately():
        return [analyze(source, s) for s in every.values()]

    together()      # warm imports and caches on both sides
    separately()
    t_sep = best_of(separately, args.repeat)
    t_cmp = best_of(together, args.repeat)
    result = together()
    threads = os.environ.get("OPENBLAS_NUM_THREADS", "default")
    print(f"{len(every)} candidates on {len(frame):,} sales "
          f"({'CSV file' if args.csv else 'DataFrame'}, BLAS threads {threads}), "
          f"best of {args.repeat}:")
    print(f"  10 separate analyses: {t_sep:8.3f} s")
    print(f"  compare:              {t_cmp:8.3f} s")
    print(f"  ratio compare / separate: {t_cmp / t_sep:.3f}  (target <= 0.5)")
    print(f"  chosen: {result.chosen}")


if __name__ == "__main__":
    main()

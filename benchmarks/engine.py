"""Engine benchmark: the full analysis beside bare numpy lstsq and beside
statsmodels doing the same work, measured side by side in one run.

For each size (rows × 10 generated predictors) it prints
  - full analysis: plumbrule.analysis.analyze on a numeric DataFrame with
    folds=0 and no holdout (intake, fit, every table, every check);
  - lstsq: numpy.linalg.lstsq on the design with a constant column, alone;
  - statsmodels: OLS fit + summary(), het_breuschpagan, variance_inflation_factor
    for each predictor, OLSInfluence.cooks_distance;
the ratios analysis/lstsq and statsmodels/analysis, and the peak memory that
tracemalloc sees during the analysis (numpy reports its buffers to it) as a
multiple of the design matrix size n·p·8 bytes (p = 10 predictors).

Targets (engine issue) at 1M × 10: analysis within 3× of lstsq, ≥ 8× faster
than statsmodels, peak memory < 4× the design.

Run: python benchmarks/engine.py [--sizes 10000,100000,1000000] [--repeat 1]
     [--threads N]   (sets OPENBLAS_NUM_THREADS/OMP_NUM_THREADS for this run only;
                      on a shared, busy machine multi-threaded BLAS makes every
                      small BLAS call slow, so the ratios are also shown with 1)
"""

from __future__ import annotations

import os
import sys

if "--threads" in sys.argv:   # must be set before numpy loads its BLAS
    _n = sys.argv[sys.argv.index("--threads") + 1]
    os.environ["OPENBLAS_NUM_THREADS"] = os.environ["OMP_NUM_THREADS"] = _n

import argparse
import gc
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "engine"))

K = 10


def make_frame(n: int, seed: int = 1) -> pd.DataFrame:
    """Sales-like numbers: ten predictors on their own scales (areas, ages, counts),
    two of them correlated, and a price whose residual SD is about 12% of the mean
    price (R² ≈ 0.8), as in hedonic models of real sales."""
    rng = np.random.default_rng(seed)
    loc, scale = rng.uniform(0, 1000, K), rng.uniform(1, 100, K)
    x = rng.normal(size=(n, K)) * scale + loc
    x[:, 1] += 0.5 * x[:, 0]                            # some correlation, as in sales data
    beta = rng.uniform(-5, 5, K) / scale
    beta *= 48e3 / (x @ beta).std()                     # signal SD 48k on a 200k mean price
    spread = 1 + np.abs(x[:, 2] - loc[2]) / (3 * scale[2])   # uneven error spread
    y = 2e5 + (x - loc) @ beta + rng.normal(0, 24e3, n) * spread / spread.mean()
    cols = {f"x{j + 1}": x[:, j] for j in range(K)}
    return pd.DataFrame({"price": y, **cols})


def settings():
    return dict(response="price", predictors=",".join(f"x{j + 1}" for j in range(K)), folds=0)


def best_of(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        gc.collect()
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def run_analysis(frame):
    from plumbrule.analysis import analyze
    return analyze(frame, settings())


def run_lstsq(frame):
    x = np.column_stack([np.ones(len(frame)), frame.iloc[:, 1:].to_numpy()])
    return np.linalg.lstsq(x, frame["price"].to_numpy(), rcond=None)


def run_statsmodels(frame):
    import statsmodels.api as sm
    from statsmodels.stats.diagnostic import het_breuschpagan
    from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
    x = sm.add_constant(frame.iloc[:, 1:].to_numpy())
    res = sm.OLS(frame["price"].to_numpy(), x).fit()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res.summary()
    het_breuschpagan(res.resid, x, robust=True)
    [variance_inflation_factor(x, j) for j in range(1, x.shape[1])]
    OLSInfluence(res).cooks_distance
    return res


def peak_memory(frame) -> int:
    gc.collect()
    tracemalloc.start()
    tracemalloc.reset_peak()
    run_analysis(frame)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="10000,100000,1000000",
                    help="comma-separated row counts (default 10000,100000,1000000)")
    ap.add_argument("--repeat", type=int, default=0,
                    help="timing repeats, best kept (default: 3 below 1M rows, 1 at 1M)")
    ap.add_argument("--threads", default=None,
                    help="BLAS threads for this run (default: the environment's)")
    ap.add_argument("--no-statsmodels", action="store_true",
                    help="skip the statsmodels column (it is the slow one)")
    args = ap.parse_args(argv)
    sizes = [int(s) for s in args.sizes.split(",") if s.strip()]
    print(f"BLAS threads: {os.environ.get('OPENBLAS_NUM_THREADS', 'default')}; "
          f"design = n x {K} x 8 bytes")
    run_analysis(make_frame(2000))   # warm imports so the first size is not charged for them
    run_statsmodels(make_frame(2000))
    print(f"{'rows':>9s} {'analysis s':>10s} {'lstsq s':>8s} {'statsm s':>9s} "
          f"{'an/lstsq':>9s} {'sm/an':>6s} {'peak MB':>8s} {'peak/design':>11s}")
    for n in sizes:
        frame = make_frame(n)
        repeat = args.repeat or (1 if n >= 1_000_000 else 3)
        t_an = best_of(lambda: run_analysis(frame), repeat)
        t_ls = best_of(lambda: run_lstsq(frame), repeat)
        t_sm = float("nan") if args.no_statsmodels else best_of(lambda: run_statsmodels(frame),
                                                                 repeat)
        peak = peak_memory(frame)
        design = n * K * 8
        print(f"{n:9d} {t_an:10.3f} {t_ls:8.3f} {t_sm:9.3f} {t_an / t_ls:9.2f} "
              f"{t_sm / t_an:6.1f} {peak / 1e6:8.1f} {peak / design:11.2f}", flush=True)


if __name__ == "__main__":
    main()

"""Roll benchmark: every parcel of a county valued, beside the bare algebra, in one run.

A simulated county of our own (tests/roll_county.py: parcels with living area, lot size, age,
a neighbourhood and a condition; 5,000 of them sold) is fitted once (log model, trend), then
the roll of ``--parcels`` parcels is valued. Printed per size:

  bare       x @ b and each row's leverage ‖(x − x̄)/‖·‖ R⁻¹‖² with the fit's R (one
             triangular solve), on the design matrix alone: the floor any valuation pays
  valuation  plumbrule.valuation.roll.value_block on the typed parcels: estimates, standard
             errors, confidence and prediction intervals (smearing retransformation with its
             own error), leverage, the flag mask and its words
  typing     plumbrule.valuation.roll.parcel_block: parcel IDs trimmed and checked for
             blanks and repeats, every model column typed by the sheet rules, the design
  whole      plumbrule.valuation.roll.value_roll: typing + valuation + the flags summary +
             the roll's total with its interval
  ratios     valuation / bare and whole / bare (target: valuation within 3×)
  peak MB    tracemalloc's peak during value_roll (numpy reports its buffers to it), and as a
             multiple of the design matrix (parcels × terms × 8 bytes)

Run: python benchmarks/roll.py [--parcels 100000,1000000] [--repeat 3] [--threads 1]
     (--threads sets OPENBLAS_NUM_THREADS before numpy loads: "one core" is --threads 1,
     the default)
"""

from __future__ import annotations

import os
import sys

_threads = sys.argv[sys.argv.index("--threads") + 1] if "--threads" in sys.argv else "1"
os.environ["OPENBLAS_NUM_THREADS"] = os.environ["OMP_NUM_THREADS"] = _threads

import argparse  # noqa: E402
import gc  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "engine"))
sys.path.insert(0, str(ROOT / "tests"))


def best(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        gc.collect()
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def bare(fit, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    from scipy.linalg import solve_triangular
    eta = x @ fit.coef[1:] + fit.coef[0]
    w = solve_triangular(fit.r, ((x - fit.x_means) / fit.x_norms).T, trans="T",
                         check_finite=False)
    return eta, np.einsum("ij,ij->j", w, w)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--parcels", default="100000,1000000")
    ap.add_argument("--sales", type=int, default=5000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--threads", default="1")
    args = ap.parse_args(argv)
    import datetime as dt

    import roll_county as county
    from plumbrule.analysis import analyze
    from plumbrule.intake import table_from_frame
    from plumbrule.settings import parse_settings
    from plumbrule.valuation.roll import (
        parcel_block,
        roll_id_column,
        value_block,
        value_roll,
    )

    sizes = [int(s) for s in args.parcels.split(",")]
    roll = county.parcels(max(sizes))
    sales = county.sales(roll, args.sales)
    settings = parse_settings({**county.settings(), "folds": 0})
    analysis = analyze(table_from_frame(sales), settings)
    model = analysis.model
    when = dt.date.fromisoformat(county.VALUATION_DATE)
    print(f"county: {args.sales:,} sales, log model with {len(model.encoding.terms)} terms; "
          f"BLAS threads {os.environ['OPENBLAS_NUM_THREADS']}; best of {args.repeat}")
    head = ["parcels", "bare s", "valuation s", "typing s", "whole s", "parcels/s (whole)",
            "valuation/bare", "whole/bare", "peak MB", "peak/design"]
    print("| " + " | ".join(head) + " |")
    print("|" + "|".join("-" * (len(h) + 2) for h in head) + "|")
    for m in sizes:
        frame = roll.iloc[:m]
        ident = roll_id_column(settings, list(frame.columns))
        block = parcel_block(model, frame, ident, 2)
        x = block.x.copy()
        t_bare = best(lambda: bare(model.fit, x), args.repeat)
        t_val = best(lambda: value_block(model, block, 0.95, "smearing", when), args.repeat)
        t_type = best(lambda: parcel_block(model, frame, ident, 2), args.repeat)
        t_whole = best(lambda: value_roll(analysis, frame, limit=None), args.repeat)
        gc.collect()
        tracemalloc.start()
        tracemalloc.reset_peak()
        value_roll(analysis, frame, limit=None)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        design = x.nbytes
        cells = [f"{m:,}", f"{t_bare:.3f}", f"{t_val:.3f}", f"{t_type:.3f}", f"{t_whole:.3f}",
                 f"{m / t_whole:,.0f}", f"{t_val / t_bare:.2f}", f"{t_whole / t_bare:.2f}",
                 f"{peak / 2 ** 20:,.0f}", f"{peak / design:.1f}"]
        print("| " + " | ".join(cells) + " |")


if __name__ == "__main__":
    main()

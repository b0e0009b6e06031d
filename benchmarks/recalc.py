"""One spreadsheet recalculation of 30 plumbrule cells over a 20,000-row sales block,
beside one full analysis of the same data, measured in the same run.

Each call receives its own copy of the raw cells (fresh objects, as xlwings hands a
new list of lists to every cell), not a shared object. The mix of cells is what a
model sheet holds: coefficients, fit, checks, screening log, ratio study and values.

    python benchmarks/recalc.py [--rows 20000] [--repeat 5] [--cpu]

Prints the times and the ratios; the target is recalc / analysis <= 1.5 for the first
recalculation (one fit, 29 cache hits). Invented Quillford data (demo_data).
"""

from __future__ import annotations

import argparse
import gc
import pickle
import statistics
import time

import pandas as pd

from plumbrule.excel import functions as sf
from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS, demo_sales, demo_subjects

MIX = (["PLUMB_COEFS"] * 8 + ["PLUMB_FIT"] * 6 + ["PLUMB_CHECKS"] * 5 + ["PLUMB_SCREEN"] * 3
       + ["PLUMB_RATIOS"] * 3 + ["PLUMB_VALUE"] * 5)
TARGET = 1.5
CLOCK = time.perf_counter      # --cpu switches to process CPU time (steadier on a busy machine)


def sheet_values(frame: pd.DataFrame) -> list[list]:
    """A frame as the cells Excel hands over: floats, text, datetimes, None."""
    cols = []
    for name in frame.columns:
        s = frame[name]
        if s.dtype.kind == "M":
            cols.append([None if pd.isna(v) else v.to_pydatetime() for v in s])
        elif s.dtype.kind in "fiu":
            cols.append([None if v != v else float(v) for v in s.to_numpy(dtype=float)])
        else:
            cols.append([None if v == "" else v for v in s.tolist()])
    return [list(frame.columns)] + [list(r) for r in zip(*cols, strict=False)]


def settings_block() -> list[list]:
    rows = [[k, v] for k, v in DEMO_SETTINGS.items() if k not in ("response", "predictors")]
    return rows + [["holdout", 0.3], ["trim_percentiles", "1,99"]]


def one_recalc(blob: bytes, subject, settings) -> float:
    """Total time of the 30 calls. Each call's copy of the cells is made just before
    it (untimed, as xlwings builds it) and dropped after, so one copy is alive at a time."""
    total = 0.0
    for name in MIX:
        fn = getattr(sf, name)
        values = pickle.loads(blob)
        args = (values, DEMO_SETTINGS["response"], DEMO_SETTINGS["predictors"])
        args += (subject, settings) if name == "PLUMB_VALUE" else (settings,)
        t0 = CLOCK()
        out = fn(*args)
        total += CLOCK() - t0
        if isinstance(out, str):
            raise SystemExit(f"{name} returned an error cell: {out}")
        del values, args
    return total


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=20_000)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--cpu", action="store_true",
                    help="time with process CPU time instead of wall-clock time")
    args = ap.parse_args()
    global CLOCK
    if args.cpu:
        CLOCK = time.process_time
    base = sheet_values(demo_sales(args.rows - 3))
    subject = sheet_values(demo_subjects())
    settings = settings_block()
    analyze(sheet_values(demo_sales(200)), sf.resolve_settings(  # warm imports for both sides
        DEMO_SETTINGS["response"], DEMO_SETTINGS["predictors"], settings))
    blob = pickle.dumps(base)
    cold, warm, full = [], [], []
    for _ in range(args.repeat):
        s = sf.resolve_settings(DEMO_SETTINGS["response"], DEMO_SETTINGS["predictors"], settings)
        one = pickle.loads(blob)
        gc.collect()                                    # each side starts from a clean heap
        t0 = CLOCK()
        analyze(one, s)
        full.append(CLOCK() - t0)
        del one
        sf.CACHE.clear()
        gc.collect()
        cold.append(one_recalc(blob, subject, settings))
        gc.collect()
        warm.append(one_recalc(blob, subject, settings))
    st = sf.CACHE.stats()
    f, c, w = (min(x) for x in (full, cold, warm))      # best of N: the least disturbed run
    fm, cm = statistics.median(full), statistics.median(cold)
    print(f"sales block: {len(base) - 1:,} rows x {len(base[0])} columns; "
          f"{len(MIX)} cells per recalculation; best of {args.repeat} (median in brackets); "
          f"{'CPU' if args.cpu else 'wall-clock'} time")
    print(f"one full analysis (analyze)         {f * 1000:9.1f} ms  [{fm * 1000:.1f}]")
    print(f"first recalc (1 fit + {len(MIX) - 1} cache hits) {c * 1000:9.1f} ms  "
          f"[{cm * 1000:.1f}]   ratio {c / f:5.2f} [{cm / fm:.2f}]  (target <= {TARGET})")
    print(f"recalc, unchanged data ({len(MIX)} hits)   {w * 1000:9.1f} ms   ratio {w / f:5.2f}")
    print(f"per cached cell                     {w / len(MIX) * 1000:9.2f} ms")
    print(f"cache: {st.entries} entries, {st.hits} hits, {st.misses} misses, "
          f"~{st.approx_bytes / 2**20:.0f} MB")
    print("PASS" if c / f <= TARGET else "ABOVE TARGET")


if __name__ == "__main__":
    main()

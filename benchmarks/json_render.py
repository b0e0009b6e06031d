"""`plumbrule fit --json` rendering: the column-wise writer (numpy → plain values, orjson)
against the cell-by-cell writer it replaced (every value through `jsonable`, then the
standard json module), side by side in one run on the same analysis. Prints the time of
each (median of 3), the ratio, and that both parse to the same object.

    PYTHONPATH=engine python benchmarks/json_render.py [--sales 200000]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "engine"))


def market(n: int, seed: int = 1) -> pd.DataFrame:
    """Invented sales: ten numeric predictors and a price."""
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 10))
    price = 200000 + x @ rng.uniform(1000, 9000, 10) + rng.normal(0, 15000, n)
    frame = pd.DataFrame(x, columns=[f"x{i}" for i in range(10)])
    frame.insert(0, "Price", price)
    return frame


def cell_by_cell(result) -> str:
    """The writer before this change: a Python call per value."""
    from plumbrule.render.json import _fallback, jsonable
    out = {}
    for name, table in result.tables.items():
        cols = [str(c) for c in table.columns]
        recs = [dict(zip(cols, (jsonable(v) for v in row), strict=True))
                for row in table.itertuples(index=False, name=None)]
        out[name] = recs[0] if name == "fit" and recs else recs
    return json.dumps(out, allow_nan=False, ensure_ascii=False, default=_fallback)


def timed(fn, *args, repeat: int = 3) -> tuple[float, str]:
    times, text = [], ""
    for _ in range(repeat):
        t0 = time.perf_counter()
        text = fn(*args)
        times.append(time.perf_counter() - t0)
    return statistics.median(times), text


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sales", type=int, default=200_000)
    n = ap.parse_args().sales
    from plumbrule.analysis import analyze
    from plumbrule.render.json import analysis_json
    result = analyze(market(n), response="Price",
                     predictors=",".join(f"x{i}" for i in range(10)), folds=5)
    old_t, old = timed(cell_by_cell, result)
    new_t, new = timed(analysis_json, result)
    same = json.loads(old) == json.loads(new)
    print(f"{n:,} sales: cell by cell {old_t:.2f} s ({len(old) / 1e6:.0f} MB), column-wise "
          f"{new_t:.2f} s ({len(new) / 1e6:.0f} MB): {old_t / new_t:.1f}x faster; "
          f"same JSON after parsing: {same}")


if __name__ == "__main__":
    main()

"""`plumbrule fit --json` rendering, three writers side by side in one run on the same
analysis (benchmarks/cli.py's invented sales: an ID, the price, eight numbers, a
neighbourhood and a sale date):

  careful     every cell through `jsonable` into a dict per row, then orjson
              (render.json.reference_json: the reference the tests hold the others to)
  records     the writer before issue 16: numbers a column at a time, text columns cell by
              cell, a dict per row, orjson (kept here as it was, to measure against)
  fast        render.json.analysis_json_bytes: each column's cells' text found in C, rows
              laid out in a byte matrix, no Python value or dict per cell

Each repeat times the three back to back; the ratios shown are medians of the per-repeat
ratios (the machine may be shared). It checks that all three write the same bytes, then
measures the peak memory (tracemalloc) of rendering, as a multiple of the design matrix
(n × p × 8 bytes): into one bytes object, and streamed to a null sink block by block as
`plumbrule fit --json` writes it.

    PYTHONPATH=engine python benchmarks/json_render.py [--sales 200000] [--repeat 3]
"""

from __future__ import annotations

import os

os.environ["OPENBLAS_NUM_THREADS"] = os.environ.get("OPENBLAS_NUM_THREADS", "1")

import argparse
import gc
import statistics
import sys
import time
import tracemalloc
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "engine"))
sys.path.insert(0, str(Path(__file__).resolve().parent))


def records_writer(result) -> bytes:
    """The writer before issue 16 (a dict per row; text cells one by one through jsonable)."""
    import numpy as np
    import orjson

    from plumbrule.render.json import _fallback, jsonable

    def values(col) -> list[Any]:
        kind = col.dtype.kind if isinstance(col.dtype, np.dtype) else "O"
        if kind == "f":
            v = col.to_numpy(dtype=float)
            out = v.astype(object)
            out[~np.isfinite(v)] = None
            return out.tolist()
        if kind in "iub":
            return col.to_numpy().tolist()
        if kind == "M":
            v = col.to_numpy(dtype="datetime64[us]")
            whole = v.astype("datetime64[s]")
            if np.all((v == whole) | np.isnat(v)):
                text = np.datetime_as_string(whole, unit="s").astype(object)
                text[np.isnat(v)] = None
                return text.tolist()
        return [jsonable(v) for v in col.tolist()]

    out: dict[str, Any] = {}
    for name, table in result.tables.items():
        cols = [str(c) for c in table.columns]
        vals = [values(table.iloc[:, j]) for j in range(table.shape[1])]
        recs = [dict(zip(cols, row, strict=True)) for row in zip(*vals, strict=True)]
        out[name] = recs[0] if name == "fit" and recs else recs
    return orjson.dumps(out, default=_fallback)


class NullSink:
    """A binary stream that keeps nothing (as stdout to /dev/null)."""

    def __init__(self) -> None:
        self.size = 0

    def write(self, data: bytes) -> int:
        self.size += len(data)
        return len(data)


def timed(fn, *args) -> tuple[float, Any]:
    gc.collect()
    t0 = time.perf_counter()
    out = fn(*args)
    return time.perf_counter() - t0, out


def peak(fn, *args) -> int:
    gc.collect()
    tracemalloc.start()
    fn(*args)
    top = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    return top


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sales", type=int, default=200_000)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--skip-careful", action="store_true",
                    help="Leave out the careful writer (minutes at a million sales).")
    a = ap.parse_args()
    from cli import SETTINGS, make_sales

    from plumbrule.analysis import analyze
    from plumbrule.render.json import analysis_json_bytes, reference_json, write_analysis_json
    from plumbrule.settings import parse_settings
    result = analyze(make_sales(a.sales), parse_settings(SETTINGS))

    def careful(result) -> bytes:
        return reference_json(result).encode("utf-8")

    writers = {"records": records_writer, "fast": analysis_json_bytes}
    if not a.skip_careful:
        writers = {"careful": careful, **writers}
    times: dict[str, list[float]] = {k: [] for k in writers}
    texts: dict[str, bytes] = {}
    for _ in range(a.repeat):
        for name, fn in writers.items():
            t, texts[name] = timed(fn, result)
            times[name].append(t)
    same = len(set(texts.values())) == 1
    size = len(texts["fast"]) / 1e6
    del texts
    n, p = result.model.x.shape
    design = n * p * 8
    print(f"{a.sales:,} sales ({size:.0f} MB of JSON; design matrix {design / 1e6:.0f} MB), "
          f"medians of {a.repeat}:")
    for name, ts in times.items():
        ratio = statistics.median(f / o for f, o in zip(times["fast"], ts, strict=True))
        print(f"  {name:8s} {statistics.median(ts):6.2f} s   fast/{name} = {ratio:.3f}")
    print(f"  the same bytes from every writer: {same}")
    whole = peak(analysis_json_bytes, result)
    sink = NullSink()
    streamed = peak(write_analysis_json, result, sink)
    old = peak(records_writer, result)
    print(f"  peak memory of rendering (× design matrix): records writer "
          f"{old / design:.2f}, fast into one bytes object {whole / design:.2f}, "
          f"fast streamed (fit --json) {streamed / design:.2f}")


if __name__ == "__main__":
    main()

"""What reading real sheet layouts costs: the header search, the sheet-XML scan (hidden rows,
error cells, formulas with no saved result), the totals-row search and text dates, each as a
share of reading the same file.

    PYTHONPATH=engine python benchmarks/intake_layouts.py [--rows 50000]

Prints seconds and ratios; invented sales (an invented town). Not a test: timings vary.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np


def best_of(fn, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def write_book(path: Path, n: int, seed: int = 3) -> None:
    import openpyxl
    rng = np.random.default_rng(seed)
    wb = openpyxl.Workbook(write_only=True)
    ws = wb.create_sheet("Sales")
    ws.append(["Wrenfield sales (invented)"])
    ws.append([])
    ws.append(["Sale ID", "Sale price", "Living area", "Age", "Sale date", "Price per area"])
    price = rng.integers(150_000, 450_000, n)
    area = rng.integers(800, 2600, n)
    age = rng.integers(0, 90, n)
    month, day = rng.integers(1, 13, n), rng.integers(1, 29, n)
    for i in range(n):      # building the test file, not engine code
        ws.append([f"W-{i}", int(price[i]), int(area[i]), int(age[i]),
                   f"{month[i]}/{day[i]}/2025", f"=B{i + 4}/C{i + 4}"])
    wb.save(path)


def main(argv=None) -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=50_000)
    args = ap.parse_args(argv)
    from plumbrule.intake import clean, read_table, totals_rows
    from plumbrule.intake.readers import _xlsx_facts
    from plumbrule.intake.table import find_header
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "sales.xlsx"
        write_book(path, args.rows)
        table = read_table(path)
        read = best_of(lambda: read_table(path))
        scan = best_of(lambda: _xlsx_facts(path, "Sales"))
        block = table.frame.to_numpy(dtype=object)
        header = best_of(lambda: find_header(block))
        numeric = ["Sale price", "Living area", "Age"]
        totals = best_of(lambda: totals_rows(table, numeric))
        typed = best_of(lambda: clean(table, numeric=numeric, date="Sale date"))
    print(f"rows {args.rows}: read_table {read:.3f} s")
    print(f"  sheet-XML scan   {scan:.3f} s  ({scan / read:.2f} of the read)")
    print(f"  header search    {header:.5f} s  ({header / read:.4f} of the read)")
    print(f"  totals rows      {totals:.3f} s  ({totals / read:.2f} of the read)")
    print(f"  clean (M/D/Y)    {typed:.3f} s  ({typed / read:.2f} of the read)")


if __name__ == "__main__":
    main()

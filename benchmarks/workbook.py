"""``plumbrule run`` beside a bare openpyxl load-and-save of the same workbook.

    python benchmarks/workbook.py            # 1,000, 10,000 and 100,000 sales
    python benchmarks/workbook.py 1000 10000 # chosen sizes

Each workbook is the template filled with invented Quillford sales (demo_data,
scaled up), one subject and four comparables, with the demo's settings (log model,
percentile trim, 30 % holdout, 5-fold cross-validation). Timed in one process, side
by side, paired: bare, run and rerun back to back in each of a few repeats (two at
100,000); medians of the times and of the per-repeat ratios:

* bare      openpyxl.load_workbook(book) + save(copy): what any openpyxl-based
            updater pays just to carry the book through;
* run       plumbrule's run_book on a fresh copy (read with calamine, analysis,
            valuation, result sheets, graft into the book, atomic replace);
* rerun     the same on a book that already holds results (the everyday case);
* cli       `plumbrule run` as a subprocess (adds interpreter start and imports), once,
            over the median bare time.

Targets (issue 6): run <= 3 s at 10,000 rows, and run <= 1.3 x bare.
"""

from __future__ import annotations

import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def build(folder: Path, n: int) -> Path:
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import demo_comps, demo_sales, demo_subjects
    from plumbrule.workbook.fill import fill_template
    sales = demo_sales(n - 3)             # + the three unusual sales
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    return fill_template(folder / f"sales-{n}.xlsx", sales, demo_subjects(), demo_comps(sales),
                         settings)


def timed(fn) -> float:
    t = time.perf_counter()
    fn()
    return time.perf_counter() - t


def bare(book: Path, out: Path) -> None:
    from openpyxl import load_workbook
    load_workbook(book).save(out)


def main(sizes) -> None:
    import compileall
    from plumbrule.workbook.run import run_book
    # the cli row runs from bytecode, as an installed package does (a machine with
    # PYTHONDONTWRITEBYTECODE set would recompile every plumbrule module in each command)
    compileall.compile_dir(str(Path(__file__).resolve().parents[1] / "engine" / "plumbrule"),
                           quiet=1)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        warm = build(folder, 1000)          # imports and first-call costs out of the timings
        run_book(shutil.copyfile(warm, folder / "warm.xlsx"), backup=False)
        print(f"{'sales':>8} {'bare s':>8} {'run s':>8} {'rerun s':>8} {'cli s':>8} "
              f"{'run/bare':>9} {'rerun/bare':>11} {'cli/bare':>9}")
        for n in sizes:
            book = build(folder, n)
            reps = 3 if n <= 10_000 else 2
            work = folder / "work.xlsx"

            def fresh():
                shutil.copyfile(book, work)
                t = time.perf_counter()
                run_book(work, backup=False)
                return time.perf_counter() - t
            # paired: bare and run back to back in each repeat; the medians of the times and
            # of the per-repeat ratios (a shared, busy machine swings minima both ways)
            b, r, rr = [], [], []
            for _ in range(reps):
                b.append(timed(lambda: bare(book, folder / "bare.xlsx")))
                r.append(fresh())
                rr.append(timed(lambda: run_book(work, backup=False)))
            t = time.perf_counter()
            subprocess.run([sys.executable, "-m", "plumbrule", "run", str(work), "--no-backup"],
                           check=True, capture_output=True)
            t_cli = time.perf_counter() - t
            med = statistics.median
            print(f"{n:>8,} {med(b):8.2f} {med(r):8.2f} {med(rr):8.2f} {t_cli:8.2f} "
                  f"{med([y / x for x, y in zip(b, r, strict=True)]):9.2f} "
                  f"{med([y / x for x, y in zip(b, rr, strict=True)]):11.2f} "
                  f"{t_cli / med(b):9.2f}", flush=True)

if __name__ == "__main__":
    main([int(a) for a in sys.argv[1:]] or [1_000, 10_000, 100_000])

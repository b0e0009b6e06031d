"""Printed pages per sheet of the template, the demo book and a 2,000-sale book.

    PYTHONPATH=engine python benchmarks/print_pages.py [--sales 2000]

Each sheet is printed alone by LibreOffice (headless), from a copy in which every other
sheet is hidden (plumbrule.workbook.pdf.pages_per_sheet), as a spreadsheet prints it:
its print area, orientation, scaling and repeated rows as the sheet XML sets them.
Hidden sheets (Chart data) are left out, as a spreadsheet leaves them out.
"""

from __future__ import annotations

import argparse
import tempfile
from pathlib import Path


def books(folder: Path, n_sales: int) -> dict[str, Path]:
    from plumbrule.cli.demo import demo_settings, write_demo_book
    from plumbrule.demo.town import demo_comps, demo_sales, demo_subjects
    from plumbrule.workbook.fill import fill_template
    from plumbrule.workbook.run import run_book
    from plumbrule.workbook.template import packaged_template
    demo = write_demo_book(folder / "demo")
    run_book(demo, backup=False)
    big = folder / "big.xlsx"
    sales = demo_sales(n=n_sales)
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    fill_template(big, sales, demo_subjects(), demo_comps(sales), settings)
    run_book(big, backup=False)
    return {"template": packaged_template(), "demo": demo, f"{n_sales:,} sales": big}


def main() -> None:
    from plumbrule.workbook.pdf import pages_per_sheet
    parser = argparse.ArgumentParser()
    parser.add_argument("--sales", type=int, default=2000)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        for label, path in books(Path(tmp), args.sales).items():
            pages = pages_per_sheet(path)
            total = sum(pages.values())
            print(f"{label}: {total} pages; " + ", ".join(f"{k} {v}" for k, v in pages.items()))


if __name__ == "__main__":
    main()

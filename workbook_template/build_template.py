"""Rebuild the plumbrule template workbook.

    python workbook_template/build_template.py

Writes workbook_template/plumbrule-template.xlsx and the copy shipped inside the
package (engine/plumbrule/templates/). The layout lives in
engine/plumbrule/workbook/template.py; tests/test_workbook_template.py checks that
both committed files match what it builds.
"""

from __future__ import annotations

import shutil
from pathlib import Path

from plumbrule.workbook.template import TEMPLATE_NAME, build_template, packaged_template

HERE = Path(__file__).resolve().parent


def main() -> None:
    out = build_template(HERE / TEMPLATE_NAME)
    packaged = packaged_template()
    packaged.parent.mkdir(parents=True, exist_ok=True)
    shutil.copyfile(out, packaged)
    print(f"wrote {out}\nwrote {packaged}")


if __name__ == "__main__":
    main()

"""Rebuild the plumbrule template workbook.

    python workbook_template/build_template.py

Writes the one committed template, the file shipped inside the package
(engine/plumbrule/templates/plumbrule-template.xlsx), which ``plumbrule new`` copies.
The layout lives in engine/plumbrule/workbook/template.py;
tests/test_workbook_template.py checks that the committed file matches what it builds.
"""

from __future__ import annotations

from plumbrule.workbook.template import build_template, packaged_template


def main() -> None:
    packaged = packaged_template()
    packaged.parent.mkdir(parents=True, exist_ok=True)
    print(f"wrote {build_template(packaged)}")


if __name__ == "__main__":
    main()

"""`plumbrule run` on valid but sparse packages: a styles part holding cellXfs alone, or
no styles part at all (both valid: ECMA-376 Part 1 makes every other child of
CT_Stylesheet optional and a workbook's styles part optional, from memory). The run
updates the book in place, and openpyxl (the reference reader here) and python-calamine
read the result with the result sheets' formats in place."""

from __future__ import annotations

import re
import warnings
import zipfile

import pytest

from plumbrule.demo.town import demo_sales

MINIMAL_STYLES = (b'<?xml version="1.0" encoding="UTF-8"?><styleSheet xmlns="http://schemas.'
                  b'openxmlformats.org/spreadsheetml/2006/main"><cellXfs count="1"><xf numFmtId'
                  b'="0"/></cellXfs></styleSheet>')


SALES = demo_sales(n=30, seed=2)[["Sale price", "Living area", "Age"]]
BOOK_SALES = len(SALES)


@pytest.fixture(scope="module")
def book(tmp_path_factory):
    from workbook_snapshot import plain_book
    return plain_book(tmp_path_factory.mktemp("sparse") / "book.xlsx", SALES,
                      {"response": "Sale price", "predictors": "Living area,Age"})


def _rewritten(src, dest, edit) -> None:
    with zipfile.ZipFile(src) as z, zipfile.ZipFile(dest, "w", zipfile.ZIP_DEFLATED) as out:
        for info in z.infolist():
            data = edit(info.filename, z.read(info.filename))
            if data is not None:
                out.writestr(info.filename, data)


def _minimal(name, data):
    return MINIMAL_STYLES if name == "xl/styles.xml" else data


def _without(name, data):
    if name == "xl/styles.xml":
        return None
    if name == "xl/_rels/workbook.xml.rels":
        data, k = re.subn(rb"<Relationship\b[^>]*/styles\"[^>]*/>", b"", data)
        assert k == 1
    if name == "[Content_Types].xml":
        data, k = re.subn(rb"<Override\b[^>]*styles\.xml\"[^>]*/>", b"", data)
        assert k == 1
    return data


@pytest.mark.parametrize("edit", [_minimal, _without], ids=["cellXfs only", "no styles part"])
def test_run_updates_a_book_with_sparse_styles(book, tmp_path, edit):
    from openpyxl import load_workbook
    from python_calamine import CalamineWorkbook
    from plumbrule.workbook.run import run_book
    path = tmp_path / "sparse.xlsx"
    _rewritten(book, path, edit)
    res = run_book(path, backup=False)
    assert res.in_place and res.headline["n_used"] == BOOK_SALES
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)   # openpyxl: "no default style"
        wb = load_workbook(path)
    model = wb["Model"]
    assert model["A1"].font.b                          # the result sheet's own formats
    assert any(c.number_format not in ("General", None)
               for row in model.iter_rows(max_row=40) for c in row if c.value is not None)
    assert "Model" in CalamineWorkbook.from_path(str(path)).sheet_names
    assert run_book(path, backup=False).in_place       # and a rerun on the result

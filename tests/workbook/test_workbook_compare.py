"""`plumbrule run` / `plumbrule compare` on a workbook whose Models sheet lists candidates
(issue 13 §4): the Comparison sheet, the Report's section, the results following
`use_model`, and a bad Models cell refused naming it with nothing written."""

from __future__ import annotations

import json
import shutil

import pytest

from plumbrule.cli.main import main
from plumbrule.cli.demo import demo_models
from plumbrule.compare import compare
from plumbrule.workbook.read import read_inputs


def _set(book_path, cell_values: dict, sheet: str = "Models"):
    from openpyxl import load_workbook
    book = load_workbook(book_path)
    for ref, value in cell_values.items():
        book[sheet][ref] = value
    book.save(book_path)


def test_run_writes_comparison_and_report_section(book, capsys):
    assert main(["run", str(book), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    names = [r["name"] for r in out["comparison"]]
    assert sorted(names) == sorted(demo_models()["Model"])
    assert sum(r["chosen"] for r in out["comparison"]) == 1 and out["reason"]
    from openpyxl import load_workbook
    wb = load_workbook(book)
    assert "Comparison" in wb.sheetnames
    ws = wb["Comparison"]
    col_b = [c.value for c in ws["B"]]
    assert all(n in col_b for n in names)
    report = [str(c.value) for row in wb["Report"].iter_rows() for c in row if c.value]
    assert "Candidate models compared" in report
    assert any(out["reason"] == t for t in report)
    # the figures on the sheet are the engine's, for the same inputs
    inputs = read_inputs(book)
    from plumbrule.settings import parse_settings
    again = compare(inputs.sales, parse_settings(inputs.settings), inputs.models)
    assert [r["name"] for r in out["comparison"]] == list(again.table["name"])


def test_use_model_sends_the_results_to_that_candidate(book):
    from openpyxl import load_workbook
    from plumbrule.workbook.fill import set_settings
    from plumbrule.workbook.run import run_book
    wb = load_workbook(book)
    set_settings(wb, {"use_model": "quarterly index"})
    wb.save(book)
    result = run_book(book, backup=False)
    assert result.analysis.settings.trend == "periods"      # the Model sheet is this model's
    assert result.analysis.settings.trend_period == "quarter"
    assert result.comparison.used == "quarterly index"
    t = result.comparison.table.set_index("name")
    assert t.loc["quarterly index", "used"] and t["used"].sum() == 1


def test_bad_models_cell_named_and_nothing_written(book, capsys):
    from openpyxl import load_workbook
    from openpyxl.utils import get_column_letter
    heads = [c.value for c in load_workbook(book)["Models"][1]]
    letter = get_column_letter(heads.index("log_response") + 1)
    _set(book, {f"{letter}3": "maybe"})    # the log_response cell of 'price scale'
    before = book.read_bytes()
    assert main(["run", str(book)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"plumbrule: Models sheet, cell {letter}3:") and "\n" not in err
    assert "TRUE or FALSE" in err
    assert book.read_bytes() == before


def test_compare_reads_the_books_models_sheet(book, capsys):
    assert main(["compare", str(book), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert len(out["comparison"]) == len(demo_models())


def test_without_candidates_no_comparison_sheet(filled, tmp_path):
    from openpyxl import load_workbook
    path = shutil.copyfile(filled, tmp_path / "plain.xlsx")
    wb = load_workbook(path)
    ws = wb["Models"]
    for row in ws.iter_rows(min_row=2):
        for c in row:
            c.value = None
    wb.save(path)
    assert main(["run", str(path), "--no-backup"]) == 0
    assert "Comparison" not in load_workbook(path).sheetnames


@pytest.mark.parametrize("value", ["nobody"])
def test_use_model_without_that_candidate_is_refused(book, value, capsys):
    from openpyxl import load_workbook
    from plumbrule.workbook.fill import set_settings
    wb = load_workbook(book)
    set_settings(wb, {"use_model": value})
    wb.save(book)
    assert main(["run", str(book)]) == 2
    assert "use_model" in capsys.readouterr().err


def test_fit_on_the_book_follows_use_model(book, capsys):
    from openpyxl import load_workbook
    from plumbrule.workbook.fill import set_settings
    wb = load_workbook(book)
    set_settings(wb, {"use_model": "price scale"})
    wb.save(book)
    assert main(["fit", str(book), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["fit"]["response"] == "Sale price"          # the candidate's, not log(...)

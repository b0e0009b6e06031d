"""The template: the committed files match what the build script makes; its
sheets are what the Read me promises; ``plumbrule new`` copies it safely."""

from __future__ import annotations


import pytest

from workbook_snapshot import snapshot
from plumbrule.cli.main import main
from plumbrule.settings import REGISTRY, parse_settings
from plumbrule.workbook.template import (SALES_COLUMNS, TEMPLATE_NAME, TEMPLATE_VALUES,
                                         build_template, packaged_template)



@pytest.fixture(scope="module")
def built(tmp_path_factory):
    return build_template(tmp_path_factory.mktemp("tpl") / TEMPLATE_NAME)


def test_committed_template_matches_the_build_script(built):
    # Rebuild with: python workbook_template/build_template.py
    committed = packaged_template()
    assert committed.exists(), f"{committed} is missing: run workbook_template/build_template.py"
    assert snapshot(committed) == snapshot(built)


def test_template_sheets_and_tables(built):
    from openpyxl import load_workbook
    book = load_workbook(built)
    assert book.sheetnames == ["Read me", "Sales", "Subjects", "Comps", "Settings", "Models",
                               "Roll",
                               "xlwings.conf"]
    assert "Roll" in book["Roll"].tables      # an assessor's roll, optional
    sales = book["Sales"].tables["Sales"]
    assert sales.ref.startswith("A1:")
    assert [c.value for c in book["Sales"][1]] == SALES_COLUMNS
    assert "Settings" in book["Settings"].tables
    # the Models table: a name, then every setting a candidate may change (issue 13 §4)
    from plumbrule.compare import model_settings
    assert "Models" in book["Models"].tables
    heads = [c.value for c in book["Models"][1]]
    assert heads == ["Model", *model_settings()]
    assert {"log_response", "predictors", "categorical", "log_predictors", "trend"} <= set(heads)


def test_read_me_has_five_steps_and_the_cautions(built):
    from openpyxl import load_workbook
    text = [c.value or "" for c in load_workbook(built)["Read me"]["A"]]
    steps = [t for t in text if t[:2] in {"1.", "2.", "3.", "4.", "5."}]
    assert len(steps) == 5
    assert any("not an appraisal" in t and "USPAP" in t for t in text)


def test_xlwings_conf_names_the_worksheet_functions(built):
    # xlwings' add-in reads keys from column A (upper-cased) and values from column B
    # of a sheet named 'xlwings.conf' (xlwings addin/Config.bas, GetConfigFromSheet);
    # the key is "UDF MODULES" with a space.
    from openpyxl import load_workbook
    ws = load_workbook(built)["xlwings.conf"]
    assert ws["A1"].value.upper() == "UDF MODULES"
    assert ws["B1"].value == "plumbrule.sheet_functions"


def test_settings_sheet_lists_every_setting_with_drop_downs(built):
    from openpyxl import load_workbook
    ws = load_workbook(built)["Settings"]
    rows = {ws.cell(row=r, column=1).value: r for r in range(2, ws.max_row + 1)}
    assert set(REGISTRY) <= set(rows)
    lists = {}
    for dv in ws.data_validations.dataValidation:
        for rng in dv.sqref.ranges:
            for r in range(rng.min_row, rng.max_row + 1):
                lists[r] = dv.formula1.strip('"').split(",")
    for s in REGISTRY.values():
        if s.kind == "bool":
            assert lists[rows[s.name]] == ["TRUE", "FALSE"], s.name
        elif s.kind == "choice":
            assert lists[rows[s.name]] == list(s.choices), s.name
    # the values the template comes with are valid settings
    values = {ws.cell(row=r, column=1).value: ws.cell(row=r, column=2).value for r in rows.values()}
    parsed = parse_settings({k: v for k, v in values.items() if v is not None})
    assert parsed.response == TEMPLATE_VALUES["response"]
    assert parsed.categorical == ("Condition", "Neighbourhood")


def test_new_writes_a_fresh_copy_and_refuses_to_overwrite(tmp_path, capsys):
    book = tmp_path / "mine.xlsx"
    assert main(["new", str(book)]) == 0
    assert snapshot(book) == snapshot(packaged_template())
    before = book.read_bytes()
    assert main(["new", str(book)]) == 2
    assert "already exists" in capsys.readouterr().err
    assert book.read_bytes() == before


def test_new_refuses_a_name_that_is_not_xlsx(tmp_path, capsys):
    assert main(["new", str(tmp_path / "mine.csv")]) == 2
    assert ".xlsx" in capsys.readouterr().err
    assert not (tmp_path / "mine.csv").exists()

"""``plumbrule run`` on a workbook whose Roll sheet holds parcels: the Roll results sheet
carries every parcel's value by ID, equal to the engine's roll (valuation/roll.py, itself
checked row by row against the subject path in tests/valuation/test_roll.py); a rerun with
the Roll sheet emptied removes it. The county is our own simulation (tests/roll_county.py)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import roll_county as county
from plumbrule.analysis import analyze
from plumbrule.intake import table_from_frame
from plumbrule.settings import parse_settings
from plumbrule.valuation.roll import value_roll
from plumbrule.workbook.fill import fill_template
from plumbrule.workbook.run import run_book

SETTINGS = {**county.settings(), "folds": 0, "id_column": None, "roll_id_column": "Parcel"}


@pytest.fixture(scope="module")
def county_book(tmp_path_factory):
    roll = county.parcels(400, seed=41)
    sales = county.sales(roll, 150, seed=42).drop(columns="Parcel")
    book = tmp_path_factory.mktemp("roll") / "county.xlsx"
    fill_template(book, sales, settings=SETTINGS, roll=roll)
    return book, roll, sales


def test_the_roll_results_sheet_holds_every_parcel(county_book):
    from openpyxl import load_workbook
    book, roll, sales = county_book
    result = run_book(book, backup=False)
    assert result.roll is not None and int(result.roll.summary["parcels"].iloc[0]) == len(roll)
    wb = load_workbook(book, read_only=True)
    assert "Roll results" in wb.sheetnames
    rows = list(wb["Roll results"].iter_rows(min_row=1, max_col=11, values_only=True))
    header, body = rows[0], [r for r in rows[1:] if r[0] is not None]
    got = pd.DataFrame(body, columns=header)
    analysis = analyze(table_from_frame(sales), parse_settings(SETTINGS))
    want = value_roll(analysis, roll).values
    assert list(got["parcel_id"]) == list(roll["Parcel"])
    for col in ("estimate", "ci_low", "ci_high", "pi_low", "pi_high", "leverage"):
        np.testing.assert_allclose(got[col].astype(float), want[col], rtol=1e-12, err_msg=col)
    assert list(got["flags"].fillna("")) == list(want["flags"].astype(str))


def test_a_rerun_without_parcels_removes_the_roll_results(county_book, tmp_path):
    from openpyxl import load_workbook
    book, roll, sales = county_book
    again = tmp_path / "again.xlsx"
    fill_template(again, sales, settings=SETTINGS, roll=roll)
    run_book(again, backup=False)
    wb = load_workbook(again)
    ws = wb["Roll"]
    ws.delete_rows(3, ws.max_row)        # one parcel left: still a roll (with no total)
    wb.save(again)
    result = run_book(again, backup=False)
    assert result.roll is not None and int(result.roll.summary["parcels"].iloc[0]) == 1
    assert result.roll.total.empty
    wb = load_workbook(again)
    wb["Roll"].delete_rows(2, wb["Roll"].max_row)       # no parcels: no Roll results
    wb.save(again)
    result = run_book(again, backup=False)
    assert result.roll is None
    assert "Roll results" not in load_workbook(again).sheetnames

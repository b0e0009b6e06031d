"""PLUMB_MODEL and its handle: the other PLUMB_ cells given the model cell instead of the
sales range show exactly what the direct call shows, and a changed block is never served
an earlier fit.

Reference: the direct call of the same function with the sales range (checked against the
engine in test_sheet_functions.py) and the engine itself (``analysis.analyze``) for the
changed blocks. Data: the invented Quillford sales.
"""

from __future__ import annotations

import copy

import pytest

from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS, demo_comps, demo_sales, demo_subjects
from plumbrule.excel import functions as sf
from plumbrule.excel import handles
from test_sheet_functions import sheet_cells

MODEL = [[k, v] for k, v in DEMO_SETTINGS.items()] + [["trim_percentiles", "1,99"]]


@pytest.fixture()
def cells():
    sf.CACHE.clear()
    handles.clear()
    return sheet_cells(demo_sales())


def _handle(rows, settings=MODEL):
    out = sf.PLUMB_MODEL(copy.deepcopy(rows), "", "", settings)
    assert isinstance(out, str) and out.startswith(handles.PREFIX), out
    return out


@pytest.mark.parametrize("name", ["PLUMB_COEFS", "PLUMB_FIT", "PLUMB_CHECKS", "PLUMB_SCREEN",
                                  "PLUMB_RATIOS", "PLUMB_VALUE", "PLUMB_GRID",
                                  "PLUMB_RECONCILE"])
def test_handle_path_gives_the_direct_tables(cells, name):
    h = _handle(cells)
    extra: list = []
    if name in ("PLUMB_VALUE", "PLUMB_GRID", "PLUMB_RECONCILE"):
        extra.append(sheet_cells(demo_subjects()))
    if name in ("PLUMB_GRID", "PLUMB_RECONCILE"):
        extra.append(",".join(str(r) for r in demo_comps(demo_sales())))
    fn = getattr(sf, name)
    direct = fn(copy.deepcopy(cells), "", "", *extra, MODEL)
    assert isinstance(direct, list) and len(direct) > 1, direct
    assert fn([[h]], "", "", *extra, MODEL) == direct      # same settings range given
    assert fn([[h]], "", "", *extra) == direct             # or none: the model cell's
    assert fn(h, "", "", *extra) == direct                 # a plain text handle from Python


def _changed_cell(rows):
    rows[5][rows[0].index("Living area")] *= 1.5
    return rows


def _true_for_one(rows):
    # A category column holding 1 in one row, then TRUE there: intake reads them as the
    # levels '1' and 'TRUE' (== alone would call them equal).
    j = rows[0].index("Condition")
    rows[7][j] = 1.0
    return rows


def _true_instead(rows):
    rows = _true_for_one(rows)
    rows[7][rows[0].index("Condition")] = True
    return rows


def _inserted_row(rows):
    rows.insert(4, list(rows[9]))
    return rows


@pytest.mark.parametrize("change", [_changed_cell, _true_instead, _inserted_row])
def test_a_changed_block_gets_a_new_handle_and_its_own_fit(cells, change):
    base = _true_for_one(copy.deepcopy(cells)) if change is _true_instead else cells
    h1 = _handle(base)
    assert _handle(base) == h1                        # unchanged block: the same handle
    changed = change(copy.deepcopy(base))
    h2 = _handle(changed)
    assert h2 != h1
    settings = sf.resolve_settings("", "", MODEL)
    engine = analyze(copy.deepcopy(changed), settings)
    want = sf.frame_cells(engine.tables.coefficients)
    got = sf.PLUMB_COEFS([[h2]], "", "")
    assert got == want
    # The old handle still names the old block's fit, never the new one.
    old = sf.frame_cells(analyze(copy.deepcopy(base), settings).tables.coefficients)
    assert sf.PLUMB_COEFS([[h1]], "", "") == old
    if change is not _true_instead:                  # TRUE vs 1 may leave the numbers alike
        assert want != old


def test_a_model_setting_on_a_dependent_cell_must_match(cells):
    h = _handle(cells)
    out = sf.PLUMB_COEFS([[h]], "", "", [["log_response", not DEMO_SETTINGS["log_response"]]])
    assert isinstance(out, str) and "log_response" in out and "PLUMB_MODEL" in out


def test_valuation_settings_on_a_dependent_cell_apply(cells):
    h = _handle(cells)
    subject = sheet_cells(demo_subjects())
    own = [["valuation_date", "2025-06-30"], ["retransform", "median"]]
    direct = sf.PLUMB_VALUE(copy.deepcopy(cells), "", "", subject, MODEL + own)
    assert sf.PLUMB_VALUE([[h]], "", "", subject, own) == direct


def test_an_unknown_or_foreign_session_handle_asks_for_a_recalculation(cells):
    out = sf.PLUMB_FIT([["plumbrule model 000000-1: fitted on 10 sales, 2 terms"]], "", "")
    assert isinstance(out, str) and out.startswith(sf.PREFIX) and "Recalculate" in out


def test_a_model_cell_error_is_shown_by_its_dependents(cells):
    bad = sf.PLUMB_MODEL(copy.deepcopy(cells), "No such column", "", MODEL)
    assert isinstance(bad, str) and bad.startswith(sf.PREFIX)
    assert sf.PLUMB_COEFS([[bad]], "", "") == bad

"""Totals rows: a row summing or averaging the sales above it is not a sale.

Behaviour users rely on (docs/screening.md, "Totals rows"): a sheet's 'Total' row, a
subtotal per neighbourhood or an unlabelled row of SUM() results is listed, by sheet row,
for the caller to set aside; a sale whose Condition is 'Average' is a sale. The expected
sums below are plain arithmetic on the invented sales (Wrenfield, an invented town).
"""

import numpy as np
import pandas as pd
import pytest

from plumbrule.intake import table_from_values, table_without, totals_rows
from plumbrule.screening import LOG_COLUMNS

HEADER = ["Sale ID", "Nbhd", "Condition", "Sale price", "Living area"]
NUMERIC = ["Sale price", "Living area"]


def _sheet(*rows):
    """Title on row 1, header on row 2, the rows from sheet row 3."""
    return table_from_values([["Wrenfield sales 2025"], HEADER] + [list(r) for r in rows])


@pytest.mark.parametrize("label", ["Total", "TOTAL 2025", "Totals", "Grand total",
                                   "Subtotal Millrace", "Sub-total", "sum", "Average:",
                                   "Mean", "Count"])
def test_a_row_whose_first_cell_says_total_is_a_totals_row(label):
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480],
               ["W-2", "Millrace", "Fair", 298500, 1390],
               [f"  {label} ", None, None, 123, 4])
    log = totals_rows(t, NUMERIC)
    shown = " ".join(label.split())
    assert log[["row", "column", "rule", "reason"]].to_dict("records") == [
        {"row": 5, "column": "Sale ID", "rule": "totals row",
         "reason": f"'{shown}' marks a totals row, not a sale"}]
    assert log["value"].isna().all() and log["limit"].isna().all()


def test_a_label_after_blank_cells_is_still_the_rows_first_filled_cell():
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480],
               [None, None, "Total", 312000, 1480])
    assert totals_rows(t, NUMERIC)[["row", "column"]].to_dict("records") == [
        {"row": 4, "column": "Condition"}]


@pytest.mark.parametrize("row", [["W-7", "Millrace", "Average", 250000, 1200],
                                 ["Summit Way 12", "Upper Wren", "Good", 250000, 1200],
                                 ["Countess Rd 3", "Upper Wren", "Sum paid in cash", 1, 2],
                                 ["Totally rebuilt", "Millrace", "Good", 250000, 1200],
                                 ["Meanwood Ln 8", "Millrace", "Fair", 250000, 1200]])
def test_words_that_only_look_like_totals_are_sales(row):
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480], row)
    assert totals_rows(t, NUMERIC).empty


def test_an_unlabelled_row_of_sums_is_found_with_the_rows_it_sums():
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480],
               ["W-2", "Millrace", "Fair", "$298,500", 1390],     # a number typed as text
               ["W-3", "Upper Wren", "Good", 355000, 1710],
               [None, None, None, 965500, 4580])          # 312000+298500+355000, 1480+1390+1710
    log = totals_rows(t, NUMERIC)
    assert list(log.columns) == LOG_COLUMNS
    assert log.to_dict("records") == [
        {"row": 6, "column": "Sale price", "value": 965500.0, "rule": "totals row",
         "limit": 965500.0,
         "reason": "its 'Sale price', 'Living area' equal the sum of the sales in rows 3-5: "
                   "a totals row, not a sale"}]


def test_a_row_of_means_is_found():
    t = _sheet(["W-1", "Millrace", "Good", 300000, 1400],
               ["W-2", "Millrace", "Fair", 310000, 1500],
               [None, None, None, 305000, 1450])          # (300000+310000)/2, (1400+1500)/2
    log = totals_rows(t, NUMERIC)
    assert log[["row", "value", "limit"]].to_dict("records") == [
        {"row": 5, "value": 305000.0, "limit": 305000.0}]
    assert log["reason"].iloc[0].startswith("its 'Sale price', 'Living area' equal the mean of "
                                            "the sales in rows 3-4")


def test_subtotals_and_a_grand_total_below_them():
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480],
               ["W-2", "Millrace", "Fair", 298500, 1390],
               [None, None, None, 610500, 2870],          # Millrace subtotal, row 5
               ["W-3", "Upper Wren", "Good", 355000, 1710],
               ["W-4", "Upper Wren", "Good", 340000, 1650],
               [None, None, None, 695000, 3360],          # Upper Wren subtotal, row 8
               [None, None, None, 1305500, 6230])         # all four sales, row 9
    log = totals_rows(t, NUMERIC)
    assert log[["row", "value"]].to_dict("records") == [
        {"row": 5, "value": 610500.0}, {"row": 8, "value": 695000.0},
        {"row": 9, "value": 1305500.0}]
    assert "sum of the sales in rows 6-7" in log["reason"].iloc[1]


def test_sales_that_are_not_totals():
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480],
               ["W-2", "Millrace", "Good", 312000, 1480],   # a duplicate: the duplicates rule's
               ["W-3", "Millrace", "Good", 624000, 1000],   # price is the sum, area is not
               ["W-4", "Millrace", "Good", 0, 0],           # nothing to sum
               ["W-5", "Millrace", "Good", None, 2960 + 1000 + 1480 * 2])  # one number only
    assert totals_rows(t, NUMERIC).empty


def test_one_numeric_column_is_not_enough_to_call_a_row_a_total():
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480],
               ["W-2", "Millrace", "Good", 298500, 1390],
               [None, None, None, 610500, None])
    assert totals_rows(t, ["Sale price"]).empty
    assert totals_rows(t, NUMERIC).empty                  # one filled numeric cell


def test_the_match_is_to_one_part_in_a_billion():
    # 0.1 + 0.2 is 0.30000000000000004 in binary floating point (IEEE 754): a sheet's
    # typed 0.3 is the same total; 1e-6 relative off is not.
    base = [["W-1", "M", "Good", 0.1, 100.0], ["W-2", "M", "Good", 0.2, 200.0]]
    assert totals_rows(_sheet(*base, [None, None, None, 0.3, 300.0]), NUMERIC)["row"].tolist() \
        == [5]
    assert totals_rows(_sheet(*base, [None, None, None, 0.3, 300.0 * (1 + 1e-6)]),
                       NUMERIC).empty


def test_table_without_drops_rows_and_keeps_sheet_rows():
    t = _sheet(["W-1", "Millrace", "Good", 312000, 1480],
               ["W-2", "Millrace", "Fair", 298500, 1390],
               ["Total", None, None, 610500, 2870])
    from dataclasses import replace
    t = replace(t, hidden_rows=(4, 5))
    kept = table_without(t, totals_rows(t, NUMERIC)["row"])
    assert kept.frame.index.tolist() == [3, 4]
    assert (kept.hidden_rows, kept.header_row, kept.columns) == ((4,), 2, HEADER)
    assert table_without(t, [99]).frame.index.tolist() == [3, 4, 5]


def test_many_sales_are_looked_at_at_once():
    # 20 000 invented sales and one unlabelled total at the end: found, nothing else.
    rng = np.random.default_rng(7)
    price = rng.integers(150_000, 450_000, 20_000).astype(float)
    area = rng.integers(800, 2600, 20_000).astype(float)
    frame = pd.DataFrame({"Sale price": np.append(price, price.sum()),
                          "Living area": np.append(area, area.sum())})
    from plumbrule.intake import table_from_frame
    log = totals_rows(table_from_frame(frame), NUMERIC)
    assert log["row"].tolist() == [20_002]


def test_a_run_of_identical_sales_is_not_a_row_of_means():
    # Three sales alike in every used column: the third equals the mean of the two above,
    # as any repeat does; that is a repeat (the duplicates rule's), not a totals row.
    t = _sheet(["W-1", "Millrace", "Good", 300000, 1400],
               ["W-2", "Millrace", "Good", 300000, 1400],
               ["W-3", "Millrace", "Good", 300000, 1400])
    assert totals_rows(t, NUMERIC).empty


# --- the shortcut for a sheet with no totals row (totals._no_candidate) ---------------------

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

from plumbrule.intake import totals  # noqa: E402

_CELL = st.one_of(st.sampled_from([None, "", 0, 0.0, 1, 2, 3, 5, 6, 10, -3, 1e300]),
                  st.integers(-5, 12))


@st.composite
def _sales_with_sums(draw):
    """Small sheets of two or three numeric columns with blanks, zeros and repeats, where
    some rows are made the sum or the mean of the rows above them in some columns."""
    k = draw(st.integers(2, 3))
    rows = draw(st.lists(st.lists(_CELL, min_size=k, max_size=k), min_size=3, max_size=9))
    for i in draw(st.lists(st.integers(2, len(rows) - 1), max_size=2)):
        how = draw(st.sampled_from(["sum", "mean"]))
        for j in range(k):
            vals = [r[j] for r in rows[:i] if isinstance(r[j], (int, float))]
            if vals and draw(st.booleans()):
                rows[i][j] = sum(vals) if how == "sum" else sum(vals) / len(vals)
    label = draw(st.sampled_from([None, "Total", "W-9"]))
    at = draw(st.integers(0, len(rows) - 1))
    return [[f"W-{i}" if (i != at or label is None) else label] + r
            for i, r in enumerate(rows)], k


@settings(max_examples=400, deadline=None)
@given(_sales_with_sums())
def test_the_no_totals_shortcut_finds_what_the_full_passes_find(sheet):
    # reference: the full passes over the n × k table (the shortcut turned off); the
    # sheets hold blanks in the first column, which the shortcut must not skip past
    rows, k = sheet
    names = ["Sale ID"] + [f"n{j}" for j in range(k)]
    table = table_from_values([names] + rows)
    quick = totals_rows(table, names[1:])
    try:
        totals.QUICK = False
        full = totals_rows(table, names[1:])
    finally:
        totals.QUICK = True
    pd.testing.assert_frame_equal(quick, full)


def test_the_shortcut_does_not_skip_a_total_behind_a_blank_first_column():
    # the row of sums (sheet row 5) has no first number: its first filled column is the
    # second (3 + 4 + 8 = 15, 10 + 20 + 30 = 60); the shortcut reads only the first column,
    # so it must not be taken
    table = table_from_values([["Sale ID", "a", "b", "c"], ["W-1", 1, 3, 10],
                               ["W-2", 2, 4, 20], ["W-3", 9, 8, 30], ["", None, 15, 60]])
    log = totals_rows(table, ["a", "b", "c"])
    assert log["row"].tolist() == [5] and log["limit"].tolist() == [15.0]

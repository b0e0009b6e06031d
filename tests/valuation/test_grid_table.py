"""The grid as appraisers read it (issue 14): features down the side, subject and
comparables across, adjustments rounded with net = the sum of the rounded adjustments; the
gap between the comparables' value and the model's; every listed sale named.

The hand-worked level model of test_comparables.py (least squares returns the round
coefficients 50,000 + 100·Area + 5,000·[Hood = B] exactly) gives every expected number:
subject 1,500 sq ft in B; comparable row 2 (1,400 sq ft in A, sold 200,000) needs Area
+10,000 and Hood +5,000; row 3 (1,700 sq ft in B, sold 240,000) needs Area −20,000.
Rounding money to a multiple, halves away from zero, is how adjustments are rounded by hand
(common practice, no source).
"""

import numpy as np
import pandas as pd
import pytest

from plumbrule.analysis import analyze
from plumbrule.valuation.comparables import round_to
from plumbrule.valuation.estimates import _date_note, shared_flags, valuate
from test_comparables import LEVEL, SUBJECT, _level_sales


@pytest.fixture(scope="module")
def named():
    sales = _level_sales()
    sales.insert(0, "Sale ID", [f"A-{i}" for i in range(len(sales))])
    sales["Address"] = [f"{i} Oak Road" for i in range(len(sales))]
    sales.loc[5, "Address"] = None                # a blank label falls back to the ID
    return analyze(sales, {**LEVEL, "id_column": "Sale ID", "label_column": "address",
                           "holdout": 0.25, "trim_percentiles": "2,98"})


def _line(wide, line, col):
    return wide.loc[wide["line"] == line, col].iloc[0]


def test_grid_layout_features_down_the_side_comparables_across():
    a = analyze(_level_sales(), LEVEL)
    wide = valuate(a, SUBJECT, comps=[2, 3]).grid_table
    assert list(wide.columns) == ["line", "kind", "subject", "comp_1", "comp_1_adjustment",
                                  "comp_2", "comp_2_adjustment"]
    assert wide["line"].tolist() == ["sale", "sheet row", "sale price", "Area", "Hood",
                                     "net adjustment", "gross adjustment", "adjusted price",
                                     "weight", "notes"]
    assert _line(wide, "sale", "subject") == "7 Elm"
    assert _line(wide, "sheet row", "comp_1") == 2 and _line(wide, "sheet row", "comp_2") == 3
    assert _line(wide, "sale price", "comp_2") == pytest.approx(240_000)
    assert (_line(wide, "Area", "subject"), _line(wide, "Area", "comp_1")) == (1500, 1400)
    assert (_line(wide, "Hood", "subject"), _line(wide, "Hood", "comp_1")) == ("B", "A")
    # hand-worked, default rounding to 100 leaves these round figures as they are
    assert _line(wide, "Area", "comp_1_adjustment") == 10_000
    assert _line(wide, "Hood", "comp_1_adjustment") == 5_000
    assert _line(wide, "net adjustment", "comp_1_adjustment") == 15_000
    assert _line(wide, "net adjustment", "comp_1") == pytest.approx(0.075)
    assert _line(wide, "gross adjustment", "comp_2") == pytest.approx(20_000 / 240_000)
    assert _line(wide, "adjusted price", "comp_1_adjustment") == pytest.approx(215_000)
    assert _line(wide, "adjusted price", "comp_2_adjustment") == pytest.approx(220_000)
    assert _line(wide, "weight", "comp_1") == pytest.approx(10 / 19)


def test_rounding_keeps_net_the_sum_of_the_rounded_adjustments():
    a = analyze(_level_sales(), {**LEVEL, "adjustment_rounding": 3000})
    v = valuate(a, SUBJECT, comps=[2, 3])
    wide = v.grid_table
    # to 3,000: +10,000 → +9,000 (3.33 steps), +5,000 → +6,000 (1.67), −20,000 → −21,000
    assert _line(wide, "Area", "comp_1_adjustment") == 9_000
    assert _line(wide, "Hood", "comp_1_adjustment") == 6_000
    assert _line(wide, "Area", "comp_2_adjustment") == -21_000
    assert _line(wide, "net adjustment", "comp_1_adjustment") == 15_000
    assert _line(wide, "net adjustment", "comp_2_adjustment") == -21_000   # not −20,000
    assert _line(wide, "gross adjustment", "comp_1_adjustment") == 15_000
    assert _line(wide, "adjusted price", "comp_2_adjustment") == pytest.approx(219_000)
    # the unrounded figures stay in the long grid (the Valuation sheet's detail)
    g = v.grid
    tot = g[g["kind"] == "total"].set_index("comp_row")
    assert tot.loc[3, "net_adjustment"] == pytest.approx(-20_000, rel=1e-9)
    assert tot.loc[3, "adjustment_rounded"] == -21_000
    feats = g[g["kind"] != "total"]
    assert feats["adjustment_rounded"].sum() == tot["adjustment_rounded"].sum()
    # halves go away from zero, both signs; step 0 leaves the figure alone
    assert list(round_to([150.0, -150.0, 149.9, 0.0], 100)) == [200.0, -200.0, 100.0, 0.0]
    assert round_to(1234.5, 0) == 1234.5


def test_net_is_the_sum_of_rounded_lines_on_the_demo(demo_frame):
    from plumbrule.demo.town import DEMO_SETTINGS, demo_comps, demo_subjects
    a = analyze(demo_frame, {**DEMO_SETTINGS, "valuation_date": "2026-01-05"})
    wide = valuate(a, demo_subjects(), comps=demo_comps(demo_frame)).grid_table
    feats = wide[wide["kind"].isin(["feature", "market"])]
    assert "market conditions (sale date)" in feats["line"].tolist()
    for i in range(1, 5):
        adj = feats[f"comp_{i}_adjustment"].to_numpy(float)
        assert np.all(adj % 100 == 0)
        assert _line(wide, "net adjustment", f"comp_{i}_adjustment") == adj.sum()
        assert _line(wide, "gross adjustment", f"comp_{i}_adjustment") == np.abs(adj).sum()
        price = _line(wide, "sale price", f"comp_{i}")
        assert _line(wide, "adjusted price", f"comp_{i}_adjustment") == price + adj.sum()


def test_gap_warning_names_the_largest_adjustments():
    a = analyze(_level_sales(), {**LEVEL, "reconcile_gap": 0.05})
    rec = valuate(a, SUBJECT, comps=[2, 3]).reconciled.iloc[0]
    # model: 50,000 + 100 × 1,500 + 5,000 = 205,000; comparables 4,130,000 / 19
    assert rec["model_estimate"] == pytest.approx(205_000, rel=1e-9)
    assert rec["gap"] == pytest.approx(4_130_000 / 19 - 205_000, rel=1e-9)
    half = (rec["pi_high"] - rec["pi_low"]) / 2
    assert rec["gap_limit"] == pytest.approx(min(half, 0.05 * 205_000))
    assert bool(rec["gap_warning"]) == (abs(rec["gap"]) > rec["gap_limit"])
    assert bool(rec["gap_warning"])                      # 6.0 % > 5 %
    assert rec["largest_adjustments"].startswith("row 3: Area -20,000 (-8.3%); row 2: Area "
                                                 "+10,000")
    loose = analyze(_level_sales(), {**LEVEL, "reconcile_gap": 0.5})
    rec2 = valuate(loose, SUBJECT, comps=[2, 3]).reconciled.iloc[0]
    assert rec2["gap_limit"] == pytest.approx(min(half, 0.5 * 205_000))
    assert bool(rec2["gap_warning"]) == (abs(rec2["gap"]) > half)


def test_every_listed_sale_carries_its_label_price_and_date(named):
    t = named.tables
    sales = named.clean.data
    for table in (t.screen_log, t.residuals, t.holdout_estimates):
        assert len(table)
        assert {"sale", "sale_price"} <= set(table.columns)
        for row, sale in zip(table["row"], table["sale"], strict=True):
            want = f"{row - 2} Oak Road (A-{row - 2})" if row != 7 else "A-5"
            assert sale == want
        np.testing.assert_allclose(table["sale_price"], sales.loc[table["row"], "Price"])
    v = valuate(named, SUBJECT, comps=[2, 3], settings={"suggest_comps": 2})
    assert set(v.grid["comp_sale"]) == {"0 Oak Road (A-0)", "1 Oak Road (A-1)"}
    assert _line(v.grid_table, "sale", "comp_1") == "0 Oak Road (A-0)"
    assert all(s.endswith(")") and "Oak Road" in s for s in v.suggestions["comp_sale"])


def test_without_label_or_id_a_sale_is_its_sheet_row():
    a = analyze(_level_sales(), {**LEVEL, "holdout": 0.25})
    res = a.tables.residuals
    assert (res["sale"] == [f"row {r}" for r in res["row"]]).all()


def test_a_caution_common_to_every_subject_is_said_once():
    common, own = shared_flags(["date note; Age 99 above", "date note", "date note"])
    assert common == ["date note"] and own == ["Age 99 above", "", ""]
    assert shared_flags(["date note"]) == ([], ["date note"])    # one subject: its own


def test_date_note_names_the_trend_kind():
    when, first, last = (pd.Timestamp(d) for d in ("2026-01-05", "2024-01-03", "2025-12-30"))
    assert _date_note(when, first, last).endswith("the market trend is carried forward")
    assert _date_note(when, first, last, "piecewise").endswith(
        "the trend's last segment is carried forward")
    assert _date_note(pd.Timestamp("2023-06-01"), first, last, "periods").endswith(
        "the first period's level is carried back")
    assert _date_note(pd.Timestamp("2025-01-01"), first, last) == ""

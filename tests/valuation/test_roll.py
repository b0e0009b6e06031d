"""The roll (valuation/roll.py): every parcel valued as the subject path values it, flags
counted once, parcel IDs checked. The county is our own simulation (tests/roll_county.py);
the reference for every figure is plumbrule's own subject path (``valuate``, itself checked
against statsmodels in test_estimates.py), row by row to 1e-9."""

from __future__ import annotations

import numpy as np
import pytest

import roll_county as county
from plumbrule.analysis import analyze
from plumbrule.errors import IntakeError, SpecError
from plumbrule.intake import table_from_frame
from plumbrule.settings import parse_settings
from plumbrule.valuation.estimates import valuate
from plumbrule.valuation.roll import value_roll

FIGURES = ["estimate", "ci_low", "ci_high", "pi_low", "pi_high", "se_mean", "se_single",
           "leverage"]


def _analysis(log=True, **extra):
    roll = county.parcels(3000, seed=21)
    sales = county.sales(roll, 600, seed=22)
    settings = parse_settings({**county.settings(log), "folds": 0, **extra})
    return analyze(table_from_frame(sales), settings), roll


@pytest.mark.parametrize("log,extra", [
    (True, {}), (False, {}), (True, {"retransform": "lognormal"}),
    (True, {"retransform": "median"}), (True, {"robust_se": "HC3"}),
    (False, {"robust_se": "HC1"}), (True, {"log_predictors": "Lot size"}),
    # with a holdout the model that values is refitted on every screened sale (final_fit)
    (True, {"holdout": 0.3}), (False, {"holdout": 0.3}),
])
def test_the_roll_matches_the_subject_path_row_by_row(log, extra):
    analysis, roll = _analysis(log, **extra)
    got = value_roll(analysis, roll).values
    # the subject path: the same parcels given as subjects (a 'Subject' column names them)
    subjects = roll.rename(columns={"Parcel": "Subject"})
    want = valuate(analysis, table_from_frame(subjects)).estimates
    assert list(got["parcel_id"]) == list(want["subject"])
    assert list(got["row"]) == list(want["row"])
    for col in FIGURES:
        np.testing.assert_allclose(got[col], want[col], rtol=1e-9, atol=0, err_msg=col)
    # flagged parcels are the subjects with a flag (the roll's words are shorter); the
    # valuation-date note applies to every parcel and is said once, in the flags summary
    own = want["flags"].str.split("; ").map(
        lambda notes: [n for n in notes if n and not n.startswith("valuation date")])
    assert list(got["flags"] != "") == list(own.map(bool))
    assert got["flags"].ne("").sum() > 10


def test_flags_are_counted_once_for_the_roll():
    analysis, roll = _analysis()
    result = value_roll(analysis, roll)
    sales = analysis.model.data
    flags = result.flags.set_index(["flag", "feature", "side"])
    # an independent count: parcels whose living area exceeds every sale's
    above = int((roll["Living area"] > sales["Living area"].max()).sum())
    assert above > 0
    assert flags.loc[("out of range", "Living area", "above"), "parcels"] == above
    old = int((roll["Age"] > sales["Age"].max()).sum())
    assert flags.loc[("out of range", "Age", "above"), "parcels"] == old
    assert result.summary["flagged"].iloc[0] == int((result.values["flags"] != "").sum())
    assert result.summary["parcels"].iloc[0] == len(roll)
    # counted once: one row per flag, never one per parcel
    assert len(result.flags) < 12


def test_a_repeated_parcel_id_names_both_cells():
    analysis, roll = _analysis()
    roll.loc[10, "Parcel"] = roll.loc[3, "Parcel"]
    with pytest.raises(IntakeError, match=r"cells A5 and A12 .*'P-0000004' is on both"):
        value_roll(analysis, roll)


def test_a_blank_parcel_id_names_the_cell():
    analysis, roll = _analysis()
    roll.loc[7, "Parcel"] = "  "
    with pytest.raises(IntakeError, match=r"cell A9 \(column 'Parcel', the parcel ID\) is blank"):
        value_roll(analysis, roll)


def test_a_blank_feature_and_an_unknown_level_name_the_cell():
    analysis, roll = _analysis()
    bad = roll.copy()
    bad.loc[4, "Age"] = np.nan
    with pytest.raises(IntakeError, match=r"cell D6 \(column 'Age', parcel 'P-0000005'\) is blank"):
        value_roll(analysis, bad)
    bad = roll.copy()
    bad.loc[6, "Neighbourhood"] = "Nowhere"
    with pytest.raises(SpecError, match=r"Parcel 'P-0000007' \(row 8\), column 'Neighbourhood'"):
        value_roll(analysis, bad)


def test_past_a_sheet_the_roll_points_to_the_command_line():
    analysis, roll = _analysis()
    with pytest.raises(IntakeError, match="--out"):
        value_roll(analysis, roll, limit=100)

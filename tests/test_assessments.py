"""The ratio study of the assessments already on the roll, value ranges, sales chasing.

References: the IAAO Standard on Ratio Studies (2013) formulas, recomputed here with numpy by
hand (median; COD = 100·mean|r − median|/median; COV = 100·s/mean; PRD = mean ratio /
(ΣA/ΣS); PRB = slope of (r − median)/median on log₂((A/median + S)/2); the median's
order-statistic interval from binomial(n, ½)); scipy.stats.mannwhitneyu for the rank test.
"""

import numpy as np
import pandas as pd
import pytest
from scipy.stats import binom, mannwhitneyu

from plumbrule import assessments
from plumbrule.analysis import analyze
from plumbrule.errors import SettingError, SpecError
from plumbrule.settings import parse_settings
from simulated_county import SETTINGS, county


def _by_hand(a: np.ndarray, s: np.ndarray) -> dict:
    """The IAAO measures, written out independently of plumbrule.ratios."""
    r = a / s
    n = len(r)
    med = np.median(r)
    out = {"n": n, "median_ratio": med, "mean_ratio": r.mean(),
           "weighted_mean_ratio": a.sum() / s.sum(),
           "cod": 100 * np.abs(r - med).sum() / n / med,
           "cov": 100 * r.std(ddof=1) / r.mean(),
           "prd": r.mean() / (a.sum() / s.sum())}
    x = np.log((a / med + s) / 2) / np.log(2)
    y = (r - med) / med
    X = np.column_stack([np.ones(n), x])
    out["prb"] = np.linalg.lstsq(X, y, rcond=None)[0][1]
    # the widest [r(j), r(n−j+1)] whose binomial coverage is at least 95 %: brute force
    rs = np.sort(r)
    cover = np.array([binom.cdf(n - j, n, 0.5) - binom.cdf(j - 1, n, 0.5)
                      for j in range(1, n // 2 + 1)])
    j = int(np.nonzero(cover >= 0.95)[0].max()) + 1
    out["median_ci_low"], out["median_ci_high"] = rs[j - 1], rs[n - j]
    return out


@pytest.fixture(scope="module")
def roll():
    d = county(500, seed=4)
    d["Hood"] = np.where(d["X"] < 10_000, "West", "East")
    d.loc[[3, 17, 250], "Assessed"] = np.nan          # three sales not on the roll
    settings = {**SETTINGS, "assessed_column": "Assessed", "prior_assessed_column": "Prior",
                "ratio_by": "Hood", "folds": 5}
    return d, analyze(d, settings)


def test_assessed_study_equals_the_iaao_formulas_by_hand(roll):
    d, a = roll
    st = a.tables.ratio_study
    own = st[st["sample"] == "assessed"].set_index("stratum")
    ok = d["Assessed"].notna()
    groups = {"all": ok, "Hood: East": ok & (d["Hood"] == "East"),
              "Hood: West": ok & (d["Hood"] == "West")}
    for name, sel in groups.items():
        ref = _by_hand(d.loc[sel, "Assessed"].to_numpy(float), d.loc[sel, "Price"].to_numpy(float))
        for key, v in ref.items():
            assert own.loc[name, key] == pytest.approx(v, rel=1e-9, abs=1e-12), (name, key)


def test_value_ranges_are_quartiles_of_the_assessed_value(roll):
    d, a = roll
    st = a.tables.ratio_study
    own = st[(st["sample"] == "assessed") & st["stratum"].str.startswith("value range")]
    assert len(own) == 4
    v = d.loc[d["Assessed"].notna(), ["Assessed", "Price"]].to_numpy(float)
    q = np.quantile(v[:, 0], [0.25, 0.5, 0.75])       # numpy's default quantile rule
    q = np.array([float(f"{b:.3g}") for b in q])        # rounded to 3 significant figures
    g = np.searchsorted(q, v[:, 0], side="left")
    for j in range(4):
        ref = _by_hand(v[g == j, 0], v[g == j, 1])
        rec = own.iloc[j]
        assert rec["n"] == ref["n"]
        for key in ("median_ratio", "cod", "prd", "prb"):
            assert rec[key] == pytest.approx(ref[key], rel=1e-9), (j, key)
    # the model's own study gets the same kind of strata beside it
    model = st[(st["sample"] != "assessed") & st["stratum"].str.startswith("value range")]
    assert len(model) == 4


def test_blank_assessed_values_are_left_out_and_counted(roll):
    d, a = roll
    st = a.tables.ratio_study
    first = st[(st["sample"] == "assessed") & (st["stratum"] == "all")].iloc[0]
    assert first["n"] == len(d) - 3
    assert first["note"].startswith("3 sales without a usable assessed value")
    est = a.tables.assessed_estimates
    assert (~est["in_study"]).sum() == 3


def test_assessed_value_is_never_a_predictor():
    d = county(60, seed=1)
    with pytest.raises(SpecError, match="assessed_column"):
        analyze(d, {**SETTINGS, "predictors": "Living area,Age,Assessed",
                    "assessed_column": "Assessed"})


def test_value_strata_setting_reads_groups_and_break_points():
    assert parse_settings(value_strata="quartiles").value_strata == 4
    assert parse_settings(value_strata=5).value_strata == 5
    assert parse_settings(value_strata="400000,200000").value_strata == (200000.0, 400000.0)
    with pytest.raises(SettingError, match="value_strata"):
        parse_settings(value_strata="lots")


def test_break_points_cut_the_ranges_where_given():
    d = county(300, seed=2)
    a = analyze(d, {**SETTINGS, "assessed_column": "Assessed", "value_strata": "100000,150000"})
    st = a.tables.ratio_study
    own = st[(st["sample"] == "assessed") & st["stratum"].str.startswith("value range")]
    v = d["Assessed"].to_numpy(float)
    assert own["n"].tolist() == [(v <= 100000).sum(), ((v > 100000) & (v <= 150000)).sum(),
                                 (v > 150000).sum()]


# --- sales chasing ----------------------------------------------------------------------

def test_mann_whitney_matches_scipy_with_ties():
    rng = np.random.default_rng(5)
    a = np.round(rng.normal(0.05, 0.03, 80), 2)        # rounded: many ties
    b = np.round(rng.normal(0.04, 0.03, 900), 2)
    u, p = assessments.mann_whitney(a, b)
    # Reference: scipy.stats.mannwhitneyu, normal approximation with tie and continuity terms
    ref = mannwhitneyu(a, b, alternative="two-sided", method="asymptotic", use_continuity=True)
    assert u == pytest.approx(ref.statistic, rel=1e-12)
    assert p == pytest.approx(ref.pvalue, rel=1e-9)


def test_chasing_seen_when_sold_parcels_are_drawn_to_their_prices():
    rng = np.random.default_rng(8)
    d = county(4000, seed=8)
    sold = rng.random(len(d)) < 0.1
    chased = d["Assessed"].to_numpy(float).copy()
    # the assessor sets each sold parcel near its price; the unsold keep last year's change
    chased[sold] = np.round(d["Price"].to_numpy()[sold] * np.exp(rng.normal(0, 0.02,
                                                                      sold.sum())), -2)
    prior = d["Prior"].to_numpy(float)
    t = assessments.chasing_table(d["Price"].to_numpy()[sold], chased[sold], prior[sold],
                                  chased[~sold], prior[~sold]).set_index("test")
    assert t.iloc[0]["verdict"] == "watch" and t.iloc[0]["p_value"] < 1e-6
    assert t.loc["COD of prior vs current assessments, same sales", "verdict"] == "watch"
    # IAAO Standard on Ratio Studies (2013): a COD below 5 points to chasing
    assert t.loc["current COD below 5", "verdict"] == "watch"


def test_no_chasing_flagged_on_an_honest_roll():
    d = county(4000, seed=9)
    sold = np.random.default_rng(9).random(len(d)) < 0.1
    cur, prior, price = (d[c].to_numpy(float) for c in ("Assessed", "Prior", "Price"))
    t = assessments.chasing_table(price[sold], cur[sold], prior[sold], cur[~sold], prior[~sold])
    assert (t["verdict"] == "ok").all()


def test_chasing_without_the_roll_says_it_needs_the_unsold_parcels(roll):
    _, a = roll
    t = a.tables.sales_chasing
    assert t.iloc[0]["verdict"] == "n/a" and "needs the roll" in t.iloc[0]["note"]
    assert len(t) == 3


def test_the_model_study_sales_get_their_own_assessed_record():
    d = county(400, seed=7)
    a = analyze(d, {**SETTINGS, "assessed_column": "Assessed", "holdout": 0.3})
    st = a.tables.ratio_study
    rows = a.tables.holdout_estimates["row"].to_numpy()
    rec = st[(st["sample"] == "assessed")
             & (st["stratum"] == "the sales of the model's study")].iloc[0]
    sel = d.loc[rows - 2]                                 # sheet rows: header on row 1
    ref = _by_hand(sel["Assessed"].to_numpy(float), sel["Price"].to_numpy(float))
    assert rec["n"] == len(rows)
    for key in ("median_ratio", "cod", "prd", "prb"):
        assert rec[key] == pytest.approx(ref[key], rel=1e-9)


def test_slopes_inside_a_value_range_are_shown_not_judged(roll):
    _, a = roll
    st = a.tables.ratio_study
    vr = st[st["stratum"].str.startswith("value range")]
    assert vr["prb"].notna().all()
    assert set(vr["prb_verdict"]) == {"n/a"} and set(vr["value_slope_verdict"]) == {"n/a"}


def test_chasing_with_the_roll_takes_the_unsold_parcels_by_id():
    rng = np.random.default_rng(21)
    parcels = county(3000, seed=21)
    parcels.insert(0, "Parcel", [f"P{i:05d}" for i in range(len(parcels))])
    sold = rng.random(len(parcels)) < 0.15
    chased = parcels.copy()
    chased.loc[sold, "Assessed"] = np.round(chased.loc[sold, "Price"] * 0.97, -2)
    sales = chased[sold].reset_index(drop=True)
    roll = chased.drop(columns=["Price"])                 # the roll: every parcel, no price
    a = analyze(sales, {**SETTINGS, "id_column": "Parcel", "assessed_column": "Assessed",
                        "prior_assessed_column": "Prior"})
    t = assessments.chasing_with_roll(a, roll)
    # Reference: the same test on the arrays split by hand
    ref = assessments.chasing_table(sales["Price"].to_numpy(), sales["Assessed"].to_numpy(),
                                    sales["Prior"].to_numpy(),
                                    chased.loc[~sold, "Assessed"].to_numpy(),
                                    chased.loc[~sold, "Prior"].to_numpy())
    pd.testing.assert_frame_equal(t, ref)
    assert t.iloc[0]["verdict"] == "watch"
    unsold_change = np.median(chased.loc[~sold, "Assessed"] / chased.loc[~sold, "Prior"] - 1)
    assert t.iloc[0]["unsold"] == pytest.approx(unsold_change, rel=1e-12)   # numpy median

"""Screening rules: limits against numpy/pandas, the log against an independent computation."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from statsmodels.stats.outliers_influence import OLSInfluence

from plumbrule import screening as screen
from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS
from plumbrule.errors import SettingError

# By default the rules read the numeric predictors, not the price (truncating the response
# biases every slope toward zero: Heckman 1979, from memory); logged ones on their logarithm.
COLS = ["Living area", "Lot size", "Age", "Bathrooms"]
LOGGED = {"Living area", "Lot size"}


def _model_scale(data, cols=COLS):
    """The columns as the model sees them: logged predictors as their logarithm."""
    return np.column_stack([np.log(data[c]) if c in LOGGED else data[c] for c in cols])


def _back(v, cols=COLS):
    """Limits on the model's scale back in each column's units."""
    return np.array([np.exp(x) if c in LOGGED else x for x, c in zip(v, cols, strict=True)])


def _clean(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "folds": 0})
    return res.clean.data


def test_percentile_limits_match_numpy_linear(demo_frame):
    # Reference: numpy.percentile, default 'linear' method (= pandas' default quantile).
    data = _clean(demo_frame)
    lim = screen.percentile_limits(data, COLS, 1, 99)
    want = np.percentile(data[COLS].to_numpy(float), [1, 99], axis=0)
    np.testing.assert_allclose(lim["low"], want[0], rtol=1e-14)
    np.testing.assert_allclose(lim["high"], want[1], rtol=1e-14)


def test_percentile_tail_off(demo_frame):
    # 0,99 trims only the top (issue contract): the low limit is −inf.
    data = _clean(demo_frame)
    lim = screen.percentile_limits(data, COLS, 0, 99)
    assert np.all(np.isneginf(lim["low"]))
    res = analyze(demo_frame, {**DEMO_SETTINGS, "trim_percentiles": "0,99"})
    log = res.tables.screen_log
    assert len(log) > 0 and (log["value"] > log["limit"]).all()


def test_fence_limits_match_numpy(demo_frame):
    # Reference: numpy quartiles (linear); fence = Q1 − k·IQR, Q3 + k·IQR.
    data = _clean(demo_frame)
    q1, q3 = np.percentile(data[COLS].to_numpy(float), [25, 75], axis=0)
    lim = screen.fence_limits(data, COLS, 1.5)
    np.testing.assert_allclose(lim["low"], q1 - 1.5 * (q3 - q1), rtol=1e-14)
    np.testing.assert_allclose(lim["high"], q3 + 1.5 * (q3 - q1), rtol=1e-14)


def _independent_log(data, cols, lo, hi, skip=()):
    """For each row (sheet order), the first column in ``cols`` outside [lo, hi]."""
    out = []
    for row, rec in data.iterrows():
        if row in skip:
            continue
        for j, c in enumerate(cols):
            v = rec[c]
            if v < lo[j] or v > hi[j]:
                out.append((row, c, v, hi[j] if v > hi[j] else lo[j]))
                break
    return out


def _as_tuples(log):
    return list(zip(log["row"], log["column"], log["value"], log["limit"], strict=False))


def _assert_same_log(got, want):
    """Rows and columns exactly, values and limits to 1e-12 relative."""
    assert [(r, c) for r, c, *_ in got] == [(r, c) for r, c, *_ in want]
    np.testing.assert_allclose([[v, lim] for *_, v, lim in got],
                               [[v, lim] for *_, v, lim in want], rtol=1e-12)


def test_trim_log_agrees_row_for_row(demo_frame):
    data = _clean(demo_frame)
    lo, hi = (_back(v) for v in np.percentile(_model_scale(data), [1, 99], axis=0))
    res = analyze(demo_frame, {**DEMO_SETTINGS, "trim_percentiles": "1,99"})
    log = res.tables.screen_log
    assert set(log["rule"]) == {"percentile trim"}
    _assert_same_log(_as_tuples(log), _independent_log(data, COLS, lo, hi))
    assert res.tables.fit["n_used"].iloc[0] == len(data) - len(log)


def test_manual_then_fence_order_and_log(demo_frame):
    # Order manual → fence: a manual row is logged once, as manual, with the user's reason.
    data = _clean(demo_frame)
    q1, q3 = np.percentile(_model_scale(data), [25, 75], axis=0)
    lo, hi = _back(q1 - 3 * (q3 - q1)), _back(q3 + 3 * (q3 - q1))
    res = analyze(demo_frame, {**DEMO_SETTINGS, "iqr_fence": 3,
                               "exclude_rows": "362=small hotel,40"})
    log = res.tables.screen_log
    manual = log[log["rule"] == "manual"]
    assert list(manual["row"]) == [40, 362]
    assert list(manual["reason"]) == ["set aside by hand (no reason given)", "small hotel"]
    fence = log[log["rule"] == "IQR fence"]
    _assert_same_log(_as_tuples(fence), _independent_log(data, COLS, lo, hi, skip={40, 362}))
    assert log["row"].is_unique


def test_trim_columns_limits_the_rule(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "trim_percentiles": "5,95",
                               "trim_columns": "living area"})
    log = res.tables.screen_log
    assert set(log["column"]) == {"Living area"}
    data = _clean(demo_frame)["Living area"]
    lo, hi = np.percentile(data, [5, 95])
    assert set(log["row"]) == set(data.index[(data < lo) | (data > hi)])


def test_unknown_manual_row_is_named():
    frame = pd.DataFrame({"Price": [100.0, 120, 130, 150, 160, 170], "Area": [1, 2, 3, 4, 5, 7.0]})
    with pytest.raises(SettingError, match=r"'exclude_rows': sheet row 99 is not a row"):
        analyze(frame, response="Price", predictors="Area", exclude_rows="99")


def test_influence_rule_matches_statsmodels(demo_frame):
    # Reference: statsmodels OLSInfluence on the first fit (Cook's D > 4/n, common practice;
    # |externally studentized residual| > 3, common practice); one refit only.
    base = analyze(demo_frame, {**DEMO_SETTINGS, "folds": 0})
    first = base.model
    infl = OLSInfluence(sm.OLS(first.y, sm.add_constant(first.x)).fit())
    n = len(first.y)
    flagged = first.rows[(infl.cooks_distance[0] > 4 / n)
                         | (np.abs(infl.resid_studentized_external) > 3)]
    res = analyze(demo_frame, {**DEMO_SETTINGS, "influence_screen": True, "folds": 0})
    log = res.tables.screen_log
    assert set(log["rule"]) == {"influence"} and len(flagged) > 0
    assert list(log["row"]) == list(flagged)
    assert res.tables.fit["n_used"].iloc[0] == n - len(flagged)
    assert res.tables.fit["n_screened"].iloc[0] == len(flagged)
    cooks = log[log["column"] == "Cook's distance"]
    np.testing.assert_allclose(cooks["value"],
                               infl.cooks_distance[0][np.isin(first.rows, cooks["row"])],
                               rtol=1e-8)


def test_watch_when_rule_removes_more_than_ten_percent(demo_frame):
    # 10 % default share (issue setting max_excluded_share; common practice, no source).
    res = analyze(demo_frame, {**DEMO_SETTINGS, "trim_percentiles": "5,95"})
    checks = res.tables.checks.set_index("check")
    share = (res.tables.screen_log["rule"] == "percentile trim").sum() / len(_clean(demo_frame))
    assert share > 0.10
    assert checks.loc["Screening: percentile trim", "verdict"] == "watch"
    assert checks.loc["Screening: percentile trim", "statistic"] == pytest.approx(share)
    ok = analyze(demo_frame, {**DEMO_SETTINGS, "trim_percentiles": "5,95",
                              "max_excluded_share": 0.5}).tables.checks.set_index("check")
    assert ok.loc["Screening: percentile trim", "verdict"] == "ok"
    mild = analyze(demo_frame, {**DEMO_SETTINGS, "iqr_fence": 3}).tables.checks
    assert mild.set_index("check").loc["Screening: IQR fence", "verdict"] == "ok"


def test_screen_summary_box_plot_numbers(demo_frame):
    data = _clean(demo_frame)
    res = analyze(demo_frame, {**DEMO_SETTINGS, "trim_percentiles": "1,99", "iqr_fence": 1.5,
                               "fence_scale": "raw"})
    summ = res.tables.screen_summary.set_index("item")
    log = res.tables.screen_log
    after = data.drop(index=log["row"])
    assert summ.loc["all rows", "rows_before"] == len(data)
    assert summ.loc["all rows", "rows_after"] == len(after)
    assert summ.loc["percentile trim", "excluded"] + summ.loc["IQR fence", "excluded"] == len(log)
    for c in COLS:
        # Reference: numpy percentiles (linear) of the column before and after screening.
        b = np.percentile(data[c], [0, 25, 50, 75, 100])
        a = np.percentile(after[c], [0, 25, 50, 75, 100])
        got_b = summ.loc[c, ["min_before", "q1_before", "median_before", "q3_before",
                             "max_before"]].to_numpy(float)
        got_a = summ.loc[c, ["min_after", "q1_after", "median_after", "q3_after",
                             "max_after"]].to_numpy(float)
        np.testing.assert_allclose(got_b, b, rtol=1e-14)
        np.testing.assert_allclose(got_a, a, rtol=1e-14)
        assert summ.loc[c, "fence_high_3_after"] == pytest.approx(a[3] + 3 * (a[3] - a[1]))
        assert summ.loc[c, "excluded"] == (log["column"] == c).sum()


def test_no_screening_leaves_tables_empty_but_present(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "folds": 0})
    from plumbrule.sales import NAME_COLUMNS
    cols = list(res.tables.screen_log.columns)
    assert [c for c in cols if c not in NAME_COLUMNS] == screen.LOG_COLUMNS
    assert set(NAME_COLUMNS) <= set(cols)         # each sale named, priced and dated
    assert len(res.tables.screen_log) == 0
    assert res.tables.fit["n_screened"].iloc[0] == 0
    summ = res.tables.screen_summary
    assert set(summ.loc[summ["kind"] == "column", "item"]) == set(COLS)


def test_raw_scale_fence_reads_each_column_in_its_own_units(demo_frame):
    # Reference: numpy quartiles (linear) of the raw columns.
    data = _clean(demo_frame)
    q1, q3 = np.percentile(data[COLS].to_numpy(float), [25, 75], axis=0)
    lo, hi = q1 - 3 * (q3 - q1), q3 + 3 * (q3 - q1)
    res = analyze(demo_frame, {**DEMO_SETTINGS, "iqr_fence": 3, "fence_scale": "raw"})
    fence = res.tables.screen_log
    _assert_same_log(_as_tuples(fence), _independent_log(data, COLS, lo, hi))


def test_log_scale_fence_catches_a_dropped_digit_the_raw_fence_cannot():
    """A living area typed 226 for 2,260: on the raw scale the low 3·IQR fence is negative
    and lets it through; on the logarithm the model fits, it is far outside."""
    rng = np.random.default_rng(4)
    n = 300
    area = np.exp(rng.normal(np.log(1800), 0.35, n)).round()
    price = np.exp(11.0 + 0.8 * np.log(area) + rng.normal(0, 0.15, n))
    area[17] = 226.0                          # sheet row 19 (header on row 1)
    frame = pd.DataFrame({"Price": price, "Area": area})
    base = dict(response="Price", predictors="Area", log_response=True, log_predictors="Area",
                iqr_fence=3, folds=0)
    raw = analyze(frame, {**base, "fence_scale": "raw"}).tables.screen_log
    model = analyze(frame, base).tables.screen_log
    assert 19 not in set(raw["row"])
    assert 19 in set(model["row"])
    assert "judged on the logarithm" in model.set_index("row").loc[19, "reason"]


def test_price_is_screened_only_when_named(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "iqr_fence": 1.5})
    assert "Sale price" not in set(res.tables.screen_log["column"])
    named = analyze(demo_frame, {**DEMO_SETTINGS, "iqr_fence": 1.5,
                                 "trim_columns": "Sale price,Living area"})
    assert "Sale price" in set(named.tables.screen_log["column"])
    checks = named.tables.checks.set_index("check")
    assert checks.loc["Screening on the sale price", "verdict"] == "watch"
    assert "too narrow" in checks.loc["Screening on the sale price", "note"]


def test_only_logged_columns_say_they_were_judged_on_the_logarithm(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "trim_percentiles": "1,99"})
    log = res.tables.screen_log
    for _, rec in log.iterrows():
        assert ("judged on the logarithm" in rec["reason"]) == (rec["column"] in LOGGED)


@pytest.mark.parametrize("logged", [(), ("size",)])
def test_summary_box_numbers_and_distinct_counts_match_pandas(logged):
    # Reference: pandas' quantile (linear) for the five numbers and the fences (Q1 − k·IQR,
    # Q3 + k·IQR; a logged column's fence on its logarithm, back through exp), pandas'
    # nunique for the distinct values (missing left out, 0.0 and −0.0 one value). Exact:
    # the same order statistics and interpolation.
    rng = np.random.default_rng(4)
    n = 3001
    frame = pd.DataFrame({
        "size": np.exp(rng.normal(7, 0.4, n)),
        "count": rng.integers(-3, 40, n),
        "big": rng.integers(0, 2**62, n),
        "zeros": rng.choice([0.0, -0.0, 2.5], n),
        "gaps": np.where(rng.random(n) < 0.1, np.nan, rng.normal(size=n)),
    })
    cols = list(frame.columns)
    after = frame.iloc[::2]
    table = screen.summary_table(frame, after, screen.empty_log(), cols, [], 3.0, logged)
    rows = table[table["kind"] == "column"].set_index("item")
    for c in cols:
        assert rows.at[c, "distinct_before"] == frame[c].nunique(), c
        for part, data in (("before", frame), ("after", after)):
            v = data[c].astype(float)
            if v.isna().any():       # a column with missing values has no box numbers
                assert np.isnan(rows.at[c, f"median_{part}"]), c
                continue
            q = v.quantile([0.0, 0.25, 0.5, 0.75, 1.0]).to_numpy()
            got = rows.loc[c, [f"{s}_{part}" for s in ("min", "q1", "median", "q3", "max")]]
            assert got.to_numpy(float).tolist() == q.tolist(), (c, part)
            iqr = q[3] - q[1]
            assert rows.at[c, f"fence_low_1_5_{part}"] == q[1] - 1.5 * iqr
            w = np.log(v) if c in logged else v
            lq1, lq3 = w.quantile([0.25, 0.75]).to_numpy()
            low, high = lq1 - 3.0 * (lq3 - lq1), lq3 + 3.0 * (lq3 - lq1)
            if c in logged:
                low, high = np.exp(low), np.exp(high)
            assert (rows.at[c, f"fence_low_used_{part}"],
                    rows.at[c, f"fence_high_used_{part}"]) == (low, high), (c, part)

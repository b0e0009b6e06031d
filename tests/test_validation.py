"""Holdout, k-fold and the validation table, against statsmodels and direct formulas."""

import io
import json
from contextlib import redirect_stdout

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from plumbrule import validation as validate
from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS
from plumbrule.errors import SettingError

SIMPLE = {"response": "Sale price", "predictors": "Living area,Age,Condition",
          "categorical": "Condition"}


def test_holdout_same_seed_same_split_other_seed_differs(demo_frame):
    a = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "seed": 11, "folds": 0})
    b = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "seed": 11, "folds": 0})
    c = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "seed": 12, "folds": 0})
    assert list(a.holdout.index) == list(b.holdout.index)
    assert list(a.holdout.index) != list(c.holdout.index)
    # each sale is held out with probability 0.3: the count is binomial(363, 0.3), within
    # 4 standard deviations (sd = sqrt(363 * 0.3 * 0.7) = 8.7)
    assert abs(len(a.holdout) - 0.3 * 363) < 4 * 8.73
    assert len(a.holdout) == a.tables.fit["n_holdout"].iloc[0]
    # the training model never sees the holdout; the final model (final_fit = all, the
    # default) is refitted on every screened sale after validation
    assert a.tables.fit["n_training"].iloc[0] == a.model.fit.n == 363 - len(a.holdout)
    assert a.tables.fit["n_used"].iloc[0] == a.final_model.fit.n == 363
    assert not set(a.holdout.index) & set(a.model.rows)


def test_random_holdout_is_each_sales_own_seeded_draw():
    # Contract: sale i is held out when splitmix64(key_i ^ mix(seed)) / 2^53 < share
    # (Steele, Lea & Flood 2014 finaliser, recomputed here with Python integers).
    keys = np.array([1, 2, 3, 2 ** 63 + 5, 987654321], dtype=np.uint64)
    mask = validate.random_holdout(keys, 0.5, 7)
    m64 = 2 ** 64 - 1

    def draw(k):
        z = int(k) ^ ((7 * 0x9E3779B97F4A7C15) & m64)
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & m64
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & m64
        return (z ^ (z >> 31)) >> 11
    assert list(mask) == [draw(k) / 2 ** 53 < 0.5 for k in keys]


def _stable_frame(n=240, seed=3):
    rng = np.random.default_rng(seed)
    area = rng.uniform(800, 2600, n).round()
    price = 20000 + 110 * area + rng.normal(0, 15000, n)
    return pd.DataFrame({"Sale ID": [f"S-{i:04d}" for i in range(n)], "Price": price,
                         "Area": area})


@pytest.mark.parametrize("with_id", [True, False])
def test_holdout_and_folds_follow_each_sale_through_insert_delete_sort_append(with_id):
    """Adding, deleting or sorting sales never moves another sale between training and
    holdout, or between folds: each sale's draw depends on its ID (or its cells) alone."""
    frame = _stable_frame()
    kw = dict(response="Price", predictors="Area", holdout=0.3, folds=4, seed=5)
    if with_id:
        kw["id_column"] = "Sale ID"

    def placement(f):
        res = analyze(f, kw)
        held = set(f.loc[res.holdout.index - 2, "Sale ID"])
        folds = res.tables.cv_estimates.assign(
            sale=lambda t: f["Sale ID"].to_numpy()[t["row"].to_numpy() - 2])
        return held, dict(zip(folds["sale"], folds["fold"], strict=True))

    held, folds = placement(frame)
    extra = pd.DataFrame({"Sale ID": ["S-NEW1"], "Price": [250000.0], "Area": [2000.0]})
    variants = {
        "insert at the top": pd.concat([extra, frame], ignore_index=True),
        "delete one": frame.drop(index=7).reset_index(drop=True),
        "sort by price": frame.sort_values("Price").reset_index(drop=True),
        "append": pd.concat([frame, extra.assign(**{"Sale ID": "S-NEW2"})],
                            ignore_index=True),
    }
    for name, f in variants.items():
        h2, f2 = placement(f)
        common = set(frame["Sale ID"]) & set(f["Sale ID"])
        assert held & common == h2 & common, name
        assert all(folds[s] == f2[s] for s in common & set(folds) & set(f2)), name


def test_recent_holdout_takes_latest_sales(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "holdout_recent": True, "folds": 0})
    dates = res.clean.data["Sale date"]
    assert len(res.holdout) == round(0.3 * 363)        # 0.30 default share with holdout_recent
    assert dates[res.holdout.index].min() >= dates[res.model.rows].max()


def test_recent_holdout_needs_date_column(demo_frame):
    with pytest.raises(SettingError, match="'holdout_recent' needs a sale-date column"):
        analyze(demo_frame, {**SIMPLE, "holdout_recent": True})


def test_fold_labels_cover_every_row_once():
    keys = pd.util.hash_pandas_object(pd.Series(np.arange(103)), index=False).to_numpy()
    labels = validate.fold_labels(keys, 5, 7)
    counts = np.bincount(labels, minlength=5)
    # multinomial sizes: each within 4 sd of 103/5 (sd = sqrt(103 * 0.2 * 0.8) = 4.06)
    assert counts.sum() == 103 and len(counts) == 5 and np.all(np.abs(counts - 20.6) < 16.3)
    assert np.array_equal(labels, validate.fold_labels(keys, 5, 7))
    assert not np.array_equal(labels, validate.fold_labels(keys, 5, 8))
    few = validate.fold_labels(keys[:5], 5, 7)          # no fold may be empty
    assert sorted(few) == [0, 1, 2, 3, 4]


def test_cv_predictions_match_statsmodels_refit(demo_frame):
    # Reference library: a statsmodels OLS fitted on the other folds predicts each fold.
    res = analyze(demo_frame, {**DEMO_SETTINGS, "folds": 4})
    model = res.model
    cv = validate.cross_validate(model, 4, res.settings.seed)
    x = sm.add_constant(model.x)
    for f in range(4):
        held = cv.labels == f
        ref = sm.OLS(model.y[~held], x[~held]).fit()
        pred = ref.predict(x[held])
        np.testing.assert_allclose(cv.pred[held], pred, rtol=1e-9)
        # Duan (1983) smearing: mean of exp(residuals) of the fitting rows
        smear = np.mean(np.exp(ref.resid))
        np.testing.assert_allclose(cv.estimate[held], np.exp(pred) * smear, rtol=1e-9)
    assert np.all(np.isfinite(cv.pred))


def test_validation_table_against_direct_formulas(demo_frame):
    # final_fit = training: the fit table describes the training model the validation tests
    res = analyze(demo_frame, {**SIMPLE, "holdout": 0.3, "final_fit": "training"})
    val = res.tables.validation.set_index("set")
    fit = res.tables.fit.iloc[0]
    # Linear model: training R², RMSE, MAE equal the fit table's (same rows, same scale).
    assert val.loc["training", "r_squared"] == pytest.approx(fit["r_squared"], rel=1e-12)
    assert val.loc["training", "rmse"] == pytest.approx(fit["rmse"], rel=1e-12)
    assert val.loc["training", "mae"] == pytest.approx(fit["mae"], rel=1e-12)
    h = res.tables.holdout_estimates
    e = h["sale_price"] - h["estimate"]
    assert val.loc["holdout", "n"] == len(h) == len(res.holdout)
    assert val.loc["holdout", "rmse"] == pytest.approx(np.sqrt(np.mean(e ** 2)))
    assert val.loc["holdout", "mae"] == pytest.approx(np.mean(np.abs(e)))
    assert val.loc["holdout", "mape"] == pytest.approx(100 * np.mean(np.abs(e / h["sale_price"])))
    tss = np.sum((h["sale_price"] - h["sale_price"].mean()) ** 2)
    assert val.loc["holdout", "r_squared"] == pytest.approx(1 - np.sum(e ** 2) / tss)
    folds = val.loc[[f"fold {i}" for i in range(1, 6)]]
    assert folds["n"].sum() == fit["n_used"]
    assert val.loc["folds mean", "rmse"] == pytest.approx(folds["rmse"].mean())
    assert val.loc["folds sd", "rmse"] == pytest.approx(folds["rmse"].std(ddof=1))


def test_holdout_estimates_match_statsmodels_training_fit(demo_frame):
    # Reference library: statsmodels OLS on the training design predicts the holdout design.
    res = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "folds": 0})
    m = res.model
    ref = sm.OLS(m.y, sm.add_constant(m.x)).fit()
    xh = sm.add_constant(m.encoding.design(res.holdout), has_constant="add")
    want = np.exp(ref.predict(xh)) * np.mean(np.exp(ref.resid))     # Duan (1983) smearing
    np.testing.assert_allclose(res.tables.holdout_estimates["estimate"], want, rtol=1e-9)


def test_unseen_level_moves_to_training_with_watch():
    rng = np.random.default_rng(0)
    n = 60
    area = rng.uniform(800, 2500, n)
    kind = np.where(np.arange(n) < n - 1, np.where(np.arange(n) % 2, "A", "B"), "Rare")
    price = 100 * area + np.where(kind == "A", 5000, 0) + rng.normal(0, 5000, n)
    frame = pd.DataFrame({"Price": price, "Area": area, "Kind": kind})
    frame["Sale ID"] = [f"K{i}" for i in range(n)]
    from plumbrule.intake.keys import sale_hashes
    rows = pd.RangeIndex(2, n + 2)
    keys = sale_hashes(pd.DataFrame(index=rows),
                       pd.Series(frame["Sale ID"].to_numpy(), index=rows))
    seed = next(s for s in range(200) if validate.random_holdout(keys, 0.3, s)[-1])
    res = analyze(frame, response="Price", predictors="Area,Kind", categorical="Kind",
                  holdout=0.3, seed=seed, folds=0, id_column="Sale ID")
    assert n + 1 in res.model.rows and n + 1 not in res.holdout.index   # sheet row of "Rare"
    check = res.tables.checks.set_index("check").loc[
        "Holdout: category levels unseen in training"]
    assert check["verdict"] == "watch" and str(n + 1) in check["note"]


def test_one_fold_is_refused(demo_frame):
    with pytest.raises(SettingError, match="'folds': 1 fold is not cross-validation"):
        analyze(demo_frame, {**SIMPLE, "folds": 1})


def test_cli_json_has_the_new_keys(tmp_path, demo_frame):
    # CLI contract of the issue: --json adds these keys.
    from plumbrule.cli.main import main
    path = tmp_path / "sales.csv"
    demo_frame.to_csv(path, index=False)
    out = io.StringIO()
    with redirect_stdout(out):
        code = main(["fit", str(path), "--response", "Sale price", "--predictors",
                     "Living area,Age,Condition", "--categorical", "Condition",
                     "--holdout", "0.3", "--trim-percentiles", "1,99", "--seed", "3",
                     "--folds", "3", "--ratio-by", "Condition", "--json"])
    assert code == 0
    doc = json.loads(out.getvalue())
    for key in ("screen_log", "screen_summary", "validation", "ratio_study", "holdout_estimates"):
        assert key in doc
    assert doc["fit"]["n_holdout"] == len(doc["holdout_estimates"]) > 0
    assert {"stratum", "n", "median_ratio", "median_ci_low", "median_ci_high", "mean_ratio",
            "weighted_mean_ratio", "cod", "cov", "prd", "prb", "prb_ci_low",
            "prb_ci_high"} <= set(doc["ratio_study"][0])
    assert {"row", "sale_price", "estimate", "ratio"} <= set(doc["holdout_estimates"][0])


def test_default_folds_do_not_break_a_tiny_table():
    # A user who never set 'folds' still gets a fit on four sales; the table says CV did not run.
    frame = pd.DataFrame({"Price": [100.0, 121, 139, 162], "Area": [1.0, 2, 3, 4]})
    res = analyze(frame, response="Price", predictors="Area")
    val = res.tables.validation.set_index("set")
    assert "not run" in val.loc["folds", "note"]
    assert res.tables.ratio_study["sample"].iloc[0].startswith("in-sample")


def test_cv_estimates_cover_every_training_row_once(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "folds": 4})
    cv = res.tables.cv_estimates
    assert sorted(cv["row"]) == sorted(res.model.rows)          # each training row exactly once
    assert set(cv["fold"]) == {1, 2, 3, 4}
    val = res.tables.validation.set_index("set")
    assert [val.loc[f"fold {f}", "n"] for f in range(1, 5)] == list(
        cv["fold"].value_counts().sort_index())


def _rare_level_market(seed=8, n=300, folds=5):
    """Invented sales, n = 300: area, age, a four-level neighbourhood, and two rare levels.
    'Rare' has 2 sales, both in fold 1 (no other fold sees it); 'Odd' has 3 sales in three
    different folds (every fold's complement sees it)."""
    from plumbrule.model.fitted import fit_model
    from plumbrule.model.spec import ModelSpec
    rng = np.random.default_rng(seed)
    keys = pd.util.hash_pandas_object(pd.Series(np.arange(n)), index=False).to_numpy()
    labels = validate.fold_labels(keys, folds, 7)
    hood = rng.choice(["N", "S", "E", "W"], n).astype(object)
    rare = np.flatnonzero(labels == 0)[:2]
    odd = [np.flatnonzero(labels == f)[0] for f in (1, 2, 3)]
    hood[rare], hood[odd] = "Rare", "Odd"
    area = rng.normal(1600, 300, n)
    age = rng.uniform(0, 60, n)
    shift = pd.Series({"N": 0.0, "S": 0.1, "E": -0.05, "W": 0.03, "Rare": 0.2, "Odd": -0.1})
    logp = 11 + 0.0004 * area - 0.003 * age + shift[hood].to_numpy() + rng.normal(0, 0.15, n)
    data = pd.DataFrame({"Price": np.exp(logp), "Area": area, "Age": age, "Hood": hood},
                        index=pd.RangeIndex(2, n + 2))
    spec = ModelSpec(response="Price", predictors=("Area", "Age", "Hood"),
                     categorical=("Hood",), reference_levels=(("Hood", "N"),),
                     log_response=True)
    return fit_model(spec, data), rare, keys


def test_cv_leaves_out_only_the_rows_whose_level_is_unseen():
    model, rare, keys = _rare_level_market()
    cv = validate.cross_validate(model, 5, 7, keys=keys)
    assert np.array_equal(cv.labels, validate.fold_labels(keys, 5, 7))
    missing = np.flatnonzero(np.isnan(cv.pred))
    assert list(missing) == list(rare)                  # the two 'Rare' sales, nothing else
    assert int(cv.folds["n"].sum()) == 298
    assert cv.folds["note"].iloc[0] == ("2 sales not estimated: their category level is only "
                                        "in this fold")
    # Reference library: statsmodels OLS on the other folds predicts each fold; a column
    # the other folds never use (the 'Rare' indicator, for fold 1) is left out of the refit.
    x = sm.add_constant(model.x)
    for f in range(5):
        held = cv.labels == f
        used = np.any(x[~held] != 0, axis=0)
        ref = sm.OLS(model.y[~held], x[~held][:, used]).fit()
        rows = held & ~np.isnan(cv.pred)
        np.testing.assert_allclose(cv.pred[rows], ref.predict(x[rows][:, used]), rtol=1e-8)
        # Duan (1983) smearing: mean of exp(residuals) of the fitting rows
        smear = np.mean(np.exp(ref.resid))
        np.testing.assert_allclose(cv.estimate[rows], np.exp(cv.pred[rows]) * smear, rtol=1e-8)


def test_one_name_per_scale_fit_and_validation_agree_on_the_price_scale(demo_frame):
    """For a log model the fit table's mape and *_price_scale figures are the validation
    table's training figures (price scale, fitted values retransformed as the estimates);
    r_squared stays the log-scale R² of the least-squares fit (statsmodels' rsquared)."""
    # final_fit = training: the fit table describes the training model the validation tests
    res = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "folds": 0,
                               "final_fit": "training"})
    fit = res.tables.fit.iloc[0]
    train = res.tables.validation.set_index("set").loc["training"]
    assert fit["scale"] == "log price"
    assert fit["mape"] == pytest.approx(train["mape"], rel=1e-12)
    assert fit["r_squared_price_scale"] == pytest.approx(train["r_squared"], rel=1e-12)
    assert fit["rmse_price_scale"] == pytest.approx(train["rmse"], rel=1e-12)
    m = res.model
    ols = sm.OLS(m.y, sm.add_constant(m.x)).fit()
    assert fit["r_squared"] == pytest.approx(ols.rsquared, rel=1e-10)
    assert fit["r_squared"] != pytest.approx(fit["r_squared_price_scale"], rel=1e-3)


def test_cross_validation_after_influence_screening_is_labelled_optimistic(demo_frame):
    # The influence rule sees every sale before the folds are cut, so the out-of-fold
    # figures never meet the sales it removed: the ratio study must not read as unscreened.
    plain = analyze(demo_frame, {**DEMO_SETTINGS, "folds": 4})
    screened = analyze(demo_frame, {**DEMO_SETTINGS, "folds": 4, "influence_screen": True})
    assert plain.tables.ratio_study["sample"].iloc[0] == "cross-validated (out-of-fold)"
    assert "optimistic" in screened.tables.ratio_study["sample"].iloc[0]

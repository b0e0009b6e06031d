"""Sales-ratio study: measures against hand-computed examples and the published formulas.

Formulas written out here from the IAAO Standard on Ratio Studies (2013) (from memory):
  ratio r = appraised (estimate) / sale price
  COD = 100 · (Σ|rᵢ − median| / n) / median
  COV = 100 · s / mean, s the sample standard deviation (n − 1)
  weighted mean = Σ A / Σ S;  PRD = mean ratio / weighted mean ratio
  median CI: [r₍ⱼ₎, r₍ₙ₋ⱼ₊₁₎] with binomial(n, ½) coverage ≥ level
PRB (Gloudemans 2011, adopted in the 2013 standard; from memory): regress
  (r − median)/median on ln(½·S + ½·A/median) / ln 2; PRB is the slope.
Value slope (plumbrule's): the same regression on ln(A) / ln 2, the estimate alone.
Both intervals: slope ± t(n − 2)·HC3 standard error (MacKinnon & White 1985, from memory),
checked against statsmodels' HC3 covariance with t quantiles.
"""

import math

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.stats import binom, t as tdist

from plumbrule import ratios
from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS

# Hand example: five sales, ratios 0.9, 1.0, 1.1, 0.9, 1.1 (hand-computed figures below).
S = np.array([100.0, 200.0, 300.0, 400.0, 500.0])
A = np.array([90.0, 200.0, 330.0, 360.0, 550.0])


def test_cod_hand_example():
    # median 1.0; mean |r − 1| = (0.1 + 0 + 0.1 + 0.1 + 0.1)/5 = 0.08 → COD 8.0 (by hand)
    assert ratios.cod(A / S) == pytest.approx(8.0, rel=1e-12)


def test_cov_hand_example():
    # mean 1.0; Σ(r − 1)² = 0.04, s² = 0.04/4 = 0.01, s = 0.1 → COV 10.0 (by hand)
    assert ratios.cov(A / S) == pytest.approx(10.0, rel=1e-12)


def test_weighted_mean_and_prd_hand_example():
    # Σ A / Σ S = 1530/1500 = 1.02; PRD = 1.0 / 1.02 (by hand)
    assert ratios.weighted_mean_ratio(A, S) == pytest.approx(1.02, rel=1e-12)
    assert ratios.prd(A, S) == pytest.approx(1.0 / 1.02, rel=1e-12)


def _hc3_slope_by_hand(x, y):
    """Simple-regression slope and 95 % t(n − 2) interval with the HC3 standard error,
    written out with plain sums: se² = Σ (xᵢ − x̄)²·eᵢ²/(1 − hᵢ)² / Sxx², hᵢ = 1/n + (xᵢ − x̄)²/Sxx
    (MacKinnon & White 1985, from memory)."""
    n = len(x)
    xb, yb = sum(x) / n, sum(y) / n
    sxx = sum((v - xb) ** 2 for v in x)
    slope = sum((u - xb) * (v - yb) for u, v in zip(x, y, strict=False)) / sxx
    terms = []
    for u, v in zip(x, y, strict=False):
        e = v - yb - slope * (u - xb)
        h = 1 / n + (u - xb) ** 2 / sxx
        terms.append(((u - xb) * e / (1 - h)) ** 2)
    half = tdist.ppf(0.975, n - 2) * math.sqrt(sum(terms)) / sxx
    return slope, slope - half, slope + half


def test_prb_hand_example_against_written_out_slope():
    # Gloudemans' PRB written out with plain sums (simple regression slope, HC3 t interval).
    med = 1.0
    x = [math.log(0.5 * s + 0.5 * a / med) / math.log(2) for s, a in zip(S, A, strict=False)]
    y = [(a / s - med) / med for s, a in zip(S, A, strict=False)]
    got = ratios.prb(A, S, 0.95)
    assert got == pytest.approx(_hc3_slope_by_hand(x, y), rel=1e-10)


def test_value_slope_hand_example_against_written_out_slope():
    # The value slope: the PRB regression with log₂(estimate) as the regressor, by hand.
    x = [math.log(a) / math.log(2) for a in A]
    y = [a / s - 1.0 for s, a in zip(S, A, strict=False)]          # median ratio 1.0
    assert ratios.value_slope(A, S, 0.95) == pytest.approx(_hc3_slope_by_hand(x, y), rel=1e-10)


def _generated_sales(seed=3, n=200):
    rng = np.random.default_rng(seed)
    price = np.exp(rng.normal(12, 0.4, n))
    est = price * np.exp(rng.normal(0, 0.1, n)) * (price / price.mean()) ** -0.05
    return est, price


def test_prb_against_statsmodels_on_generated_sales():
    # Reference library: statsmodels OLS of the same regression, HC3 covariance with t
    # quantiles (use_t), 95 % interval.
    est, price = _generated_sales()
    r = est / price
    med = np.median(r)
    x = np.log(0.5 * price + 0.5 * est / med) / np.log(2)
    ref = sm.OLS((r - med) / med, sm.add_constant(x)).fit(cov_type="HC3", use_t=True)
    lo, hi = ref.conf_int(0.05)[1]
    assert ratios.prb(est, price, 0.95) == pytest.approx((ref.params[1], lo, hi), rel=1e-9)


def test_value_slope_against_statsmodels_on_generated_sales():
    # Reference library: statsmodels OLS of (r − median)/median on log₂(estimate), HC3, t.
    est, price = _generated_sales(seed=4)
    r = est / price
    med = np.median(r)
    ref = sm.OLS((r - med) / med, sm.add_constant(np.log2(est))).fit(cov_type="HC3",
                                                                    use_t=True)
    lo, hi = ref.conf_int(0.10)[1]
    assert ratios.value_slope(est, price, 0.90) == pytest.approx((ref.params[1], lo, hi),
                                                                 rel=1e-9)
    # the study record carries the same figures
    rec = ratios.ratio_study(ratios.estimates_table(np.arange(200), price, est),
                             level=0.90).iloc[0]
    assert (rec["value_slope"], rec["value_slope_ci_low"], rec["value_slope_ci_high"]) == \
        pytest.approx((ref.params[1], lo, hi), rel=1e-9)


def test_median_interval_ten_sales_hand_computed():
    # n = 10, 95 %: P(B ≤ 1) = 11/1024 → j = 2 covers 1 − 22/1024 = 0.978515625;
    # j = 3 covers only 1 − 2·56/1024 = 0.890625 (binomial(10, ½) by hand).
    r = np.array([0.81, 0.95, 0.87, 1.02, 0.99, 1.10, 0.92, 1.05, 0.97, 1.20])
    lo, hi, cover = ratios.median_interval(r, 0.95)
    srt = np.sort(r)
    assert (lo, hi) == (srt[1], srt[8])
    assert cover == pytest.approx(1 - 22 / 1024, rel=1e-12)


@pytest.mark.parametrize("level", [0.90, 0.95, 0.99])
def test_median_rank_coverage_against_scipy_binom(level):
    # Reference: brute force over every j with scipy.stats.binom (coverage P(j ≤ B ≤ n − j)).
    for n in list(range(1, 80)) + [137, 500, 2001]:
        cover = np.array([binom.cdf(n - j, n, 0.5) - binom.cdf(j - 1, n, 0.5)
                          for j in range(1, n // 2 + 1)])
        ok = np.nonzero(cover >= level)[0]
        want = int(ok.max()) + 1 if len(ok) else 0
        j, c = ratios.median_rank(n, level)
        assert j == want, n
        if want:
            assert c == pytest.approx(cover[want - 1], rel=1e-9) and c >= level


def test_median_interval_too_few_sales_is_blank():
    # With 5 sales even [min, max] covers only 1 − 2/32 = 0.9375 < 0.95 (by hand).
    assert all(math.isnan(v) for v in ratios.median_interval(A / S, 0.95))


def _study(n, ratio_spread=0.10, slope=0.0, seed=1):
    rng = np.random.default_rng(seed)
    price = np.exp(rng.normal(12, 0.3, n))
    est = price * np.exp(rng.normal(0, ratio_spread, n)) * (price / np.median(price)) ** slope
    return ratios.estimates_table(np.arange(2, n + 2), price, est)


def test_fewer_than_twenty_sales_too_small_to_judge():
    # Issue rule (common practice, no source): below 20 sales the verdicts do not judge.
    small = ratios.ratio_study(_study(19)).iloc[0]
    assert small["cod_verdict"] == small["prb_verdict"] == ratios.TOO_FEW
    assert small["value_slope_verdict"] == ratios.TOO_FEW
    assert "too few" in small["note"]
    enough = ratios.ratio_study(_study(20)).iloc[0]
    assert enough["cod_verdict"] == "ok"


def test_verdicts_follow_iaao_2013_targets():
    # IAAO 2013 (from memory): median 0.90–1.10; COD ≤ 15 residential, ≤ 10 newer, ≤ 20 other;
    # PRD 0.98–1.03; PRB within ±0.05, beyond ±0.10 unacceptable.
    t = ratios.RatioTargets.for_class("residential")
    base = {"n": 50, "median_ratio": 1.0, "cod": 12.0, "prd": 1.0, "prb": 0.0}
    assert ratios.verdicts(base, t)["cod_verdict"] == "ok"
    assert ratios.verdicts(base, ratios.RatioTargets.for_class("newer-residential"))[
        "cod_verdict"] == "fails"
    assert ratios.verdicts({**base, "cod": 18.0}, ratios.RatioTargets.for_class("other"))[
        "cod_verdict"] == "ok"
    assert ratios.verdicts({**base, "median_ratio": 1.12}, t)["median_verdict"] == "fails"
    assert ratios.verdicts({**base, "prd": 1.04}, t)["prd_verdict"] == "fails"
    assert ratios.verdicts({**base, "prb": -0.07}, t)["prb_verdict"] == "watch"
    clear = {"prb_ci_low": 0.08, "prb_ci_high": 0.16}
    assert ratios.verdicts({**base, "prb": 0.12, **clear}, t)["prb_verdict"] == "fails"


def test_cod_below_five_asks_for_a_look():
    # IAAO 2013 (from memory): CODs below 5 may point to sales chasing or a sample of sales
    # unlike the properties valued — a watch, not a failure.
    t = ratios.RatioTargets()
    base = {"n": 50, "median_ratio": 1.0, "prd": 1.0, "prb": 0.0}
    low = ratios.verdicts({**base, "cod": 4.9}, t)
    assert low["cod_verdict"] == "watch"
    assert "sales chasing" in low["note"] and "Off target" not in low["note"]
    assert ratios.verdicts({**base, "cod": 5.0}, t)["cod_verdict"] == "ok"
    assert ratios.verdicts({**base, "cod": 15.1}, t)["cod_verdict"] == "fails"
    # from sales: ratios within ±2 % of the price give a COD near 1
    rec = ratios.ratio_study(_study(60, ratio_spread=0.02)).iloc[0]
    assert rec["cod"] < 5 and rec["cod_verdict"] == "watch"


def test_prb_verdict_respects_its_interval():
    # Rule (plumbrule's, docs/methods.md): PRB beyond ±0.10 fails only when its interval is
    # clear of 0; with 0 inside, at most watch; within ±0.05 ok whatever the interval.
    t = ratios.RatioTargets()
    v = ratios.prb_verdict
    assert v(-0.12, -0.25, 0.01, t) == "watch"          # 0 inside: not shown to drift
    assert v(-0.12, -0.20, -0.04, t) == "fails"
    assert v(-0.07, -0.10, -0.04, t) == "watch"
    assert v(-0.07, -0.15, 0.01, t) == "watch"
    assert v(0.04, 0.02, 0.06, t) == "ok"
    assert v(0.12, float("nan"), float("nan"), t) == "watch"   # no interval: cannot fail


def test_value_slope_verdict_is_a_test_of_zero():
    # Rule (plumbrule's): ok while the interval includes 0; clear of 0 watch, and fails
    # beyond ±0.10 (the PRB limit by analogy, no source).
    t = ratios.RatioTargets()
    v = ratios.value_slope_verdict
    assert v(-0.30, -0.60, 0.01, t) == "ok"
    assert v(-0.02, -0.03, -0.01, t) == "watch"
    assert v(0.15, 0.11, 0.19, t) == "fails"
    assert v(-0.15, -0.19, -0.02, t) == "fails"
    assert v(float("nan"), float("nan"), float("nan"), t) == "n/a"


def test_note_claims_no_drift_the_intervals_do_not_support():
    # A PRD/PRB off target whose intervals include 0 must not be reported as a drift.
    t = ratios.RatioTargets()
    base = {"n": 200, "median_ratio": 1.0, "cod": 12.0, "prd": 1.035, "prb": -0.08,
            "prb_ci_low": -0.17, "prb_ci_high": 0.01}
    note = ratios.verdicts({**base, "value_slope": -0.01, "value_slope_ci_low": -0.05,
                            "value_slope_ci_high": 0.03}, t)["note"]
    assert "drift" in note and "drift higher" not in note and "drift lower" not in note
    assert "value slope" in note
    note = ratios.verdicts(base, t)["note"]                  # no value slope to read
    assert "drift lower" not in note and "includes 0" in note
    # the value slope clear of 0 does support a drift, and says which way
    got = ratios.verdicts({**base, "value_slope": -0.14, "value_slope_ci_low": -0.2,
                           "value_slope_ci_high": -0.08}, t)
    assert got["value_slope_verdict"] == "fails"
    assert "Off target: ratios drift lower as the estimate rises" in got["note"]


def test_study_record_matches_formulas_and_strata():
    est = _study(60, slope=-0.1)
    est["stratum"] = np.where(np.arange(60) % 3 == 0, "North", "South")
    study = ratios.ratio_study(est, by="Area")
    assert list(study["stratum"]) == ["all", "Area: North", "Area: South"]
    assert list(study["n"]) == [60, 20, 40]
    south = est[est["stratum"] == "South"]
    r = south["ratio"].to_numpy()
    rec = study.iloc[2]
    # IAAO 2013 formulas (module docstring), computed directly with numpy
    assert rec["cod"] == pytest.approx(100 * np.mean(np.abs(r - np.median(r))) / np.median(r))
    assert rec["cov"] == pytest.approx(100 * np.std(r, ddof=1) / np.mean(r))
    assert rec["prd"] == pytest.approx(r.mean() / (south["estimate"].sum()
                                                   / south["sale_price"].sum()))
    assert list(study.columns) == ratios.STUDY_COLUMNS


def test_ratio_trim_uses_three_iqr_fence_of_ratios():
    # IAAO practice (from memory): trim ratios beyond Q1 − 3·IQR / Q3 + 3·IQR; limits vs numpy.
    est = _study(80)
    est.loc[5, "estimate"] = est.loc[5, "sale_price"] * 3.0
    est["ratio"] = est["estimate"] / est["sale_price"]
    q1, q3 = np.percentile(est["ratio"], [25, 75])
    want = est["row"][(est["ratio"] > q3 + 3 * (q3 - q1)) | (est["ratio"] < q1 - 3 * (q3 - q1))]
    log = ratios.ratio_trim(est)
    assert list(log["row"]) == list(want) and 7 in list(log["row"])
    assert log["limit"].iloc[0] == pytest.approx(q3 + 3 * (q3 - q1))


def test_analysis_ratio_study_on_holdout(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "ratio_by": "Neighbourhood"})
    study, hold = res.tables.ratio_study, res.tables.holdout_estimates
    assert study["sample"].iloc[0] == "holdout"
    assert study["n"].iloc[0] == len(hold) == res.tables.fit["n_holdout"].iloc[0]
    assert study["n"].iloc[1:].sum() == study["n"].iloc[0]
    # ratio = estimate / sale price, median as numpy computes it
    np.testing.assert_allclose(hold["ratio"], hold["estimate"] / hold["sale_price"])
    assert study["median_ratio"].iloc[0] == pytest.approx(np.median(hold["ratio"]))


def test_without_holdout_study_is_labelled(demo_frame):
    res = analyze(demo_frame, {**DEMO_SETTINGS, "folds": 0})
    assert res.tables.ratio_study["sample"].iloc[0].startswith("in-sample")
    assert len(res.tables.holdout_estimates) == 0
    res = analyze(demo_frame, DEMO_SETTINGS)
    assert res.tables.ratio_study["sample"].iloc[0].startswith("cross-validated")


def test_ratio_trim_reported_in_screen_log(demo_frame):
    # a seed that holds out the demo's family transfer (ID Q-9003, sheet row 364): each
    # sale's draw depends on its ID alone
    from plumbrule.intake.keys import sale_hashes
    from plumbrule.validation import random_holdout
    key = sale_hashes(pd.DataFrame(index=[364]), pd.Series(["Q-9003"], index=[364]))
    seed = next(s for s in range(100) if random_holdout(key, 0.3, s)[0])
    res = analyze(demo_frame, {**DEMO_SETTINGS, "holdout": 0.3, "ratio_trim": True,
                               "predictors": "Living area,Condition", "log_predictors": "",
                               "categorical": "Condition", "id_column": "Sale ID",
                               "seed": seed})
    log = res.tables.screen_log
    trimmed = log[log["rule"] == "ratio trim"]
    hold = res.tables.holdout_estimates
    assert 364 in set(trimmed["row"])     # the demo's family transfer (61,000) is in the holdout
    assert set(trimmed["row"]) == set(hold.loc[~hold["in_study"], "row"])
    assert res.tables.ratio_study["n"].iloc[0] == int(hold["in_study"].sum())
    # a ratio trim does not change the fit: n_screened counts only fit rules
    assert res.tables.fit["n_screened"].iloc[0] == len(log) - len(trimmed)


def test_regressive_estimates_show_in_prd_and_prb():
    # Fact of the trade (IAAO 2013, from memory): when estimates are pulled towards the middle
    # (cheap sales over-valued, dear ones under-valued) PRD rises above 1 and PRB turns negative.
    rng = np.random.default_rng(9)
    price = np.exp(rng.normal(12, 0.4, 400))
    est = np.exp(12 + 0.7 * (np.log(price) - 12) + rng.normal(0, 0.05, 400))
    rec = ratios.ratio_study(ratios.estimates_table(np.arange(400), price, est)).iloc[0]
    assert rec["prd"] > 1.03 and rec["prd_verdict"] == "fails"
    assert rec["prb_ci_high"] < -0.10 and rec["prb_verdict"] == "fails"
    assert rec["value_slope_ci_high"] < -0.10 and rec["value_slope_verdict"] == "fails"
    assert "drift lower as the estimate rises" in rec["note"]
    fair = ratios.ratio_study(ratios.estimates_table(
        np.arange(400), price, price * np.exp(rng.normal(0, 0.05, 400)))).iloc[0]
    assert fair["prb_ci_low"] < 0 < fair["prb_ci_high"] and fair["prd_verdict"] == "ok"
    assert fair["value_slope_verdict"] == "ok"


def _correct_model_holdouts(sigma, reps, seed, n_train=2000, n_hold=200):
    """Ratio-study records of ``reps`` correctly specified markets: ln value linear in three
    invented characteristics (var ≈ 0.12, so R² ≈ 0.84 at σ = 0.15), sale price = value ·
    exp(ε), ε ~ N(0, σ²); a least-squares log model with the right predictors fitted on the
    training sales values the held-out sales. Many training sales: the fitted coefficients'
    own error, a real slope of that fitted model, stays small beside the study's noise."""
    rng = np.random.default_rng(seed)
    n = n_train + n_hold
    x = np.stack([np.ones((reps, n)), rng.normal(0, 0.35, (reps, n)),
                  rng.normal(0, 1, (reps, n)), rng.uniform(0, 60, (reps, n))], axis=2)
    value = np.exp(x @ np.array([12.0, 0.8, 0.2, -0.004]))
    price = value * np.exp(rng.normal(0, sigma, (reps, n)))
    recs = []
    for i in range(reps):
        b = np.linalg.lstsq(x[i, :n_train], np.log(price[i, :n_train]), rcond=None)[0]
        m = ratios.measures(np.exp(x[i, n_train:] @ b), price[i, n_train:])
        recs.append({**m, **ratios.verdicts(m, ratios.RatioTargets())})
    return recs


@pytest.mark.parametrize("sigma", [0.15, 0.20])
def test_correct_model_passes_value_slope_at_nominal_rate_but_not_prb(sigma):
    # Errors-in-variables bias of price-based vertical-equity measures (IAAO 2013's
    # discussion of PRB's value proxy; Kochin & Parks 1982; from memory): noise in sale
    # prices alone makes PRD and PRB read a correct model as regressive. The value slope's
    # verdict is a 95 % test of slope 0: on 200 seeded correct models it may be other than
    # "ok" in about 5 % of them — inside the central 99.9 % of binomial(200, 0.05), 2 to 21
    # (scipy.stats.binom.interval). (The fitted model's own error adds a little: about
    # 6 % expected with 2000 training sales, docs/methods.md.)
    recs = _correct_model_holdouts(sigma, 200, seed=int(sigma * 100))
    not_ok = sum(r["value_slope_verdict"] != ratios.OK for r in recs)
    assert 2 <= not_ok <= 21
    # The old PRB rule (|PRB| > 0.05, interval ignored) flags far more: the bias, documented
    # (mean PRB about −0.06 at σ = 0.15 and −0.11 at σ = 0.20 for this market).
    old_rule = sum(abs(r["prb"]) > 0.05 for r in recs)
    assert old_rule > 100
    assert np.mean([r["prb"] for r in recs]) < -0.05
    # the notes do not call those models regressive where the value slope shows no drift
    quiet = [r for r in recs if r["value_slope_verdict"] == ratios.OK]
    assert not any("drift lower" in r["note"] or "drift higher" in r["note"] for r in quiet)
    if sigma == 0.20:      # PRD ≈ e^(σ²) ≈ 1.04 under a correct model: it fails nearly always
        assert sum(r["prd_verdict"] == ratios.FAILS for r in recs) > 150

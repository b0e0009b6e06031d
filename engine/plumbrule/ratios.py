"""The sales-ratio study: does the model value uniformly? (ratio = estimate / sale price)

Measures and default targets follow the IAAO Standard on Ratio Studies (2013):
level (median ratio 0.90–1.10, with an order-statistic confidence interval),
uniformity (COD at most 15 residential; below 5 asks for a look, as the standard
warns of sales chasing or a non-representative sample; COV is reported without a
target) and vertical equity (PRD 0.98–1.03; PRB, Gloudemans' coefficient of
price-related bias, within ±0.05, beyond ±0.10 unacceptable). Beside PRD and PRB,
the value slope: the same regression as PRB with the estimate alone as the
regressor, which a correctly specified model passes at the nominal rate (noise in
sale prices makes PRD and PRB read regressive; see :func:`value_slope`). Fewer
than 20 sales: the figures are shown but the verdicts say the sample is too small
to judge (common practice, no source).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from plumbrule.numeric.quantiles import order_stats
from plumbrule.numeric.vectors import dot
from plumbrule.verdicts import FAILS, OK, TOO_FEW, WATCH

COD_TARGETS = {"residential": 15.0, "newer-residential": 10.0, "other": 20.0}
ESTIMATE_COLUMNS = ["row", "sale_price", "estimate", "ratio", "stratum", "in_study"]
STUDY_COLUMNS = [
    "sample", "stratum", "n", "median_ratio", "median_ci_low", "median_ci_high",
    "median_ci_coverage", "mean_ratio", "weighted_mean_ratio", "cod", "cov", "prd", "prb",
    "prb_ci_low", "prb_ci_high", "value_slope", "value_slope_ci_low", "value_slope_ci_high",
    "median_target", "median_verdict", "cod_target", "cod_verdict", "prd_target", "prd_verdict",
    "prb_target", "prb_verdict", "value_slope_target", "value_slope_verdict", "note"]
MEASURE_COLUMNS = STUDY_COLUMNS[3:18]      # the figures of measures(), after sample, stratum, n


@dataclass(frozen=True)
class RatioTargets:
    """Targets a study is judged against (IAAO Standard on Ratio Studies, 2013, from memory).

    ``cod_min``: a COD below it is a "watch" (the standard warns that very low CODs may
    mean sales chasing or a non-representative sample). ``value_slope_max``: a value
    slope beyond it whose interval excludes 0 "fails" — our choice, the PRB limit by
    analogy (no published target for this measure).
    """

    median_low: float = 0.90
    median_high: float = 1.10
    cod_max: float = 15.0
    cod_min: float = 5.0
    prd_low: float = 0.98
    prd_high: float = 1.03
    prb_ok: float = 0.05
    prb_max: float = 0.10
    value_slope_max: float = 0.10
    min_sales: int = 20
    property_class: str = "residential"

    @classmethod
    def for_class(cls, property_class: str = "residential") -> "RatioTargets":
        """COD ≤ 15 single-family residential, ≤ 10 newer homogeneous residential, ≤ 20 other."""
        return cls(cod_max=COD_TARGETS[property_class], property_class=property_class)


# --- the measures ---------------------------------------------------------------

def cod(ratios: np.ndarray, median: float | None = None) -> float:
    """Coefficient of dispersion, percent: 100 · mean|r − median| / median."""
    r = np.asarray(ratios, dtype=float)
    med = np.median(r) if median is None else median
    d = r - med
    np.abs(d, out=d)
    return float(100.0 * np.mean(d) / med)


def cov(ratios: np.ndarray) -> float:
    """Coefficient of variation, percent: 100 · s / mean, s with n − 1 (NaN below 2 sales)."""
    r = np.asarray(ratios, dtype=float)
    if len(r) < 2:
        return float("nan")
    return float(100.0 * np.std(r, ddof=1) / np.mean(r))


def weighted_mean_ratio(estimate: np.ndarray, price: np.ndarray) -> float:
    """Σ estimates / Σ sale prices."""
    return float(np.sum(estimate) / np.sum(price))


def prd(estimate: np.ndarray, price: np.ndarray) -> float:
    """Price-related differential: mean ratio / weighted mean ratio."""
    return float(np.mean(np.asarray(estimate) / np.asarray(price))
                 / weighted_mean_ratio(estimate, price))


def median_rank(n: int, level: float) -> tuple[int, float]:
    """The largest j such that [r₍ⱼ₎, r₍ₙ₋ⱼ₊₁₎] covers the median with probability ≥ level.

    Coverage is P(j ≤ B ≤ n − j) = 1 − 2·P(B ≤ j − 1), B ~ binomial(n, ½).
    Returns (j, coverage); (0, nan) when even [min, max] falls short of ``level``.
    """
    from plumbrule.numeric.distributions import binom_cdf, binom_ppf
    if n < 1:
        return 0, float("nan")
    alpha2 = (1.0 - level) / 2.0
    k0 = int(binom_ppf(alpha2, n, 0.5))
    cand = np.arange(max(k0 - 2, -1), min(k0 + 3, (n - 1) // 2 + 1))   # k = j − 1
    cdf = np.where(cand >= 0, binom_cdf(cand, n, 0.5), 0.0)
    ok = cand[(cdf <= alpha2) & (cand >= 0)]
    if not len(ok):
        return 0, float("nan")
    j = int(ok.max()) + 1
    return j, float(1.0 - 2.0 * binom_cdf(j - 1, n, 0.5))


def median_interval(ratios: np.ndarray, level: float = 0.95) -> tuple[float, float, float]:
    """(low, high, coverage) of the order-statistic interval for the median ratio."""
    return median_and_interval(np.asarray(ratios, dtype=float), level)[1:]


def median_and_interval(r: np.ndarray, level: float = 0.95):
    """(median, low, high, coverage): the median ratio (as ``np.median``) and its
    order-statistic interval, from one selection of the order statistics they need."""
    n = len(r)
    if n == 0:
        return (float("nan"),) * 4
    j, coverage = median_rank(n, level)
    mid = [(n - 1) // 2, n // 2]
    ranks = sorted({*mid, *([j - 1, n - j] if j else [])})
    at = dict(zip(ranks, order_stats(r, np.array(ranks)), strict=False))
    med = float(at[mid[0]]) if n % 2 else float(np.mean([at[mid[0]], at[mid[1]]]))
    if j == 0:
        return med, float("nan"), float("nan"), float("nan")
    return med, float(at[j - 1]), float(at[n - j]), coverage


def prb(estimate: np.ndarray, price: np.ndarray, level: float = 0.95,
        median: float | None = None) -> tuple[float, float, float]:
    """Gloudemans' PRB with its confidence interval: (slope, low, high).

    Regress (ratio − median)/median on ln(½·price + ½·estimate/median)/ln 2; the
    slope is the proportional change in ratios when value doubles. Interval:
    slope ± t(n − 2)·HC3 standard error (see :func:`_slope`). NaN when the
    regression cannot be fitted (fewer than 3 sales, all values alike).
    """
    est, price = np.asarray(estimate, float), np.asarray(price, float)
    r = est / price
    med = float(np.median(r)) if median is None else median
    return _prb(est, price, r, med, level)


def value_slope(estimate: np.ndarray, price: np.ndarray, level: float = 0.95,
                median: float | None = None) -> tuple[float, float, float]:
    """The value slope with its confidence interval: (slope, low, high).

    Regress (ratio − median)/median on ln(estimate)/ln 2: the proportional change in
    ratios when the *estimate* doubles; 0 when ratios do not move with value. Interval
    as for PRB (t(n − 2), HC3 standard error). NaN as for :func:`prb`.

    Why the estimate: noise in sale prices sits in the ratio's denominator, so a
    regressor built from the sale price (PRD, PRB, whose value proxy is half price)
    correlates with the ratio's noise and reads a correct model as regressive — the
    errors-in-variables bias; the IAAO Standard on Ratio Studies (2013) discusses it
    in choosing PRB's value proxy, and it is older (Kochin & Parks 1982; Clapp 1990,
    who proposed instrumental-variable regressions instead). With the estimate as
    regressor a model whose estimate is E[price | characteristics] has slope 0
    exactly (E[ratio | estimate] is constant). The bias runs the other way,
    progressive, by about var(estimate error)/var(ln estimate) when the estimate has
    error of its own (sources from memory) — small for a fitted model valuing
    sales it did not see, but in-sample a least-squares log model has slope ≈ 0 by
    construction, so read it on the holdout or cross-validated estimates.
    """
    est, price = np.asarray(estimate, float), np.asarray(price, float)
    r = est / price
    med = float(np.median(r)) if median is None else median
    return _value_slope(est, r, med, level)


def _prb(est: np.ndarray, price: np.ndarray, r: np.ndarray, med: float,
         level: float) -> tuple[float, float, float]:
    """:func:`prb` from the ratios ``r`` = est/price (overwritten) and their median."""
    # Formed in place (same operations, same order, so the same numbers): the
    # study runs on every sale in-sample, where each n-row temporary counts.
    y = r
    y -= med
    y /= med                                          # (r − med)/med
    x = 0.5 * est
    x /= med
    x += 0.5 * price
    np.log(x, out=x)
    x /= np.log(2.0)                                  # log₂(½·price + ½·est/med)
    return _slope(x, y, level)


def _value_slope(est: np.ndarray, r: np.ndarray, med: float,
                 level: float) -> tuple[float, float, float]:
    """:func:`value_slope` from the ratios ``r`` (left as they are) and their median."""
    y = r - med
    y /= med                                          # (r − med)/med
    x = np.log(est)
    x /= np.log(2.0)                                  # log₂(est)
    return _slope(x, y, level)


def _slope(x: np.ndarray, y: np.ndarray, level: float) -> tuple[float, float, float]:
    """Least-squares slope of y on x (with an intercept) and its t(n − 2) interval with
    the HC3 standard error; x and y are overwritten. NaN for fewer than 3 sales or x
    all alike; a NaN interval where HC3 is undefined (a sale with leverage 1).

    HC3 (MacKinnon & White 1985; recommended for small samples by Long & Ervin 2000;
    from memory): se² = Σ xᵢ²·eᵢ²/(1 − hᵢ)² / (Σ xᵢ²)², x centred, hᵢ = 1/n + xᵢ²/Σx².
    Why not the ordinary se: in PRB the sale price's noise is in the regressor and the
    ratio alike, so errors are not independent of the regressor; with heavier tails
    than normal or cheap sales noisier than dear ones the ordinary interval covered
    0.93 and 0.71–0.75 of the time at 95 %, HC3 0.94–0.95 and 0.87–0.89, and both 0.95
    with normal noise (benchmarks/equity_false_alarms.py).
    """
    from plumbrule.numeric.distributions import t_ppf
    n = len(x)
    size = dot(x, x)
    # One predictor: the centred two-pass formulas are the QR solution (R = ‖x − x̄‖).
    x -= x.mean()
    y -= y.mean()
    sxx = dot(x, x)
    if n < 3 or not sxx > 1e-24 * max(size, 1e-300):
        return float("nan"), float("nan"), float("nan")
    slope = dot(x, y) / sxx
    w = x * slope
    y -= w                                            # the residuals eᵢ
    np.multiply(x, x, out=w)
    w /= -sxx
    w += 1.0 - 1.0 / n                                # 1 − hᵢ
    y *= x
    with np.errstate(divide="ignore", invalid="ignore"):
        y /= w                                        # xᵢ·eᵢ/(1 − hᵢ)
        se = float(np.sqrt(dot(y, y))) / sxx
    if not np.isfinite(se):
        return slope, float("nan"), float("nan")
    q = float(t_ppf(0.5 + level / 2.0, n - 2))
    return slope, slope - q * se, slope + q * se


# --- the study ------------------------------------------------------------------

def ratio_trim(estimates: pd.DataFrame, k: float = 3.0) -> pd.DataFrame:
    """Screen-log records for ratios beyond Q1 − k·IQR or Q3 + k·IQR (IAAO practice, k = 3)."""
    from plumbrule.numbers import written
    from plumbrule.screening import LOG_COLUMNS, RATIO_TRIM, empty_log, fence_limits
    if len(estimates) < 4:
        return empty_log()
    lim = fence_limits(estimates, ["ratio"], k).iloc[0]
    r = estimates["ratio"].to_numpy(float)
    hit = (r < lim["low"]) | (r > lim["high"])
    if not hit.any():
        return empty_log()
    up = r[hit] > lim["high"]
    limit = np.where(up, lim["high"], lim["low"])
    reason = [f"ratio {v:.4g} is {'above Q3' if u else 'below Q1'} {'+' if u else '−'} "
              f"{k:g}·IQR ({written(lim_v)}); kept in the fit, left out of the ratio study"
              for v, u, lim_v in zip(r[hit], up, limit, strict=False)]
    return pd.DataFrame({"row": estimates["row"].to_numpy(np.int64)[hit], "column": "ratio",
                         "value": r[hit], "rule": RATIO_TRIM, "limit": limit,
                         "reason": reason})[LOG_COLUMNS]


def estimates_table(rows, price, estimate, stratum=None) -> pd.DataFrame:
    """row, sale_price, estimate, ratio (estimate / sale price), stratum, in_study
    (False for a ratio left out of the study: trimmed, or price or estimate not positive)."""
    price, estimate = np.asarray(price, float), np.asarray(estimate, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = estimate / price
    # copy=False: the columns are fresh arrays or the caller's (pandas copy-on-write
    # keeps those safe), so a million-sale table costs no second copy
    return pd.DataFrame({"row": np.asarray(rows, dtype=np.int64), "sale_price": price,
                         "estimate": estimate, "ratio": ratio,
                         "stratum": _no_strata(len(price)) if stratum is None
                         else np.asarray(stratum, object),
                         # a ratio needs a positive price and estimate (a linear model can
                         # estimate below zero); such rows stay listed, out of the study
                         "in_study": np.isfinite(ratio) & (price > 0) & (estimate > 0)},
                        columns=ESTIMATE_COLUMNS, copy=False)


def _no_strata(n: int) -> pd.Series:
    """A column of None; as a typed Series pandas need not scan a million Nones for a type."""
    return pd.Series(np.empty(n, dtype=object), dtype=object, copy=False)


def measures(estimate: np.ndarray, price: np.ndarray, level: float = 0.95) -> dict:
    """Every ratio-study figure for one group of sales (NaN where n is too small)."""
    r = estimate / price
    n = len(r)
    if n == 0:
        return {"n": 0, **{k: np.nan for k in MEASURE_COLUMNS}}
    med, lo, hi, coverage = median_and_interval(r, level)
    mean, wmr = float(r.mean()), weighted_mean_ratio(estimate, price)
    out = {"n": n, "median_ratio": med, "median_ci_low": lo,
           "median_ci_high": hi, "median_ci_coverage": coverage, "mean_ratio": mean,
           "weighted_mean_ratio": wmr, "cod": cod(r, med), "cov": cov(r), "prd": mean / wmr}
    v, vlo, vhi = _value_slope(estimate, r, med, level)
    slope, slo, shi = _prb(estimate, price, r, med, level)     # last: it works in r's place
    return {**out, "prb": slope, "prb_ci_low": slo, "prb_ci_high": shi,
            "value_slope": v, "value_slope_ci_low": vlo, "value_slope_ci_high": vhi}


def clear_of_zero(low: float, high: float) -> bool:
    """True when an interval [low, high] excludes 0 (False for a NaN interval)."""
    return bool(low > 0 or high < 0)


def prb_verdict(b: float, low: float, high: float, t: RatioTargets) -> str:
    """ok within ±prb_ok; fails beyond ±prb_max only with the interval clear of 0;
    otherwise watch (beyond ±prb_ok, or beyond ±prb_max with 0 inside the interval)."""
    if not np.isfinite(b):
        return "n/a"
    if abs(b) <= t.prb_ok:
        return OK
    return FAILS if abs(b) > t.prb_max and clear_of_zero(low, high) else WATCH


def value_slope_verdict(v: float, low: float, high: float, t: RatioTargets) -> str:
    """ok while the interval includes 0 (so a correct model passes at the confidence
    level); interval clear of 0: watch, fails beyond ±value_slope_max."""
    if not np.isfinite(v):
        return "n/a"
    if not clear_of_zero(low, high):
        return OK
    return FAILS if abs(v) > t.value_slope_max else WATCH


def verdicts(m: dict, t: RatioTargets) -> dict:
    """Targets in words, a verdict per measure (ok / watch / fails / too few sales), a note.

    ``m`` is a :func:`measures` record; interval columns it lacks count as unknown
    (NaN: an interval that does not exclude 0)."""
    out = {"median_target": f"{t.median_low:.2f} to {t.median_high:.2f}",
           "cod_target": f"at most {t.cod_max:g} ({t.property_class}), watch below "
                         f"{t.cod_min:g}",
           "prd_target": f"{t.prd_low:.2f} to {t.prd_high:.2f}",
           "prb_target": f"within ±{t.prb_ok:.2f} (beyond ±{t.prb_max:.2f} with the interval "
                         "clear of 0 unacceptable)",
           "value_slope_target": f"interval includes 0 (clear of 0 and beyond "
                                 f"±{t.value_slope_max:.2f} unacceptable)"}
    if m["n"] < t.min_sales:
        out.update(median_verdict=TOO_FEW, cod_verdict=TOO_FEW, prd_verdict=TOO_FEW,
                   prb_verdict=TOO_FEW, value_slope_verdict=TOO_FEW,
                   note=f"Only {m['n']} sales: too few to judge the model against the targets "
                        f"(at least {t.min_sales} needed); read the figures as indications.")
        return out
    nan = float("nan")
    med, c, d, b = m["median_ratio"], m["cod"], m["prd"], m["prb"]
    b_lo, b_hi = m.get("prb_ci_low", nan), m.get("prb_ci_high", nan)
    v = m.get("value_slope", nan)
    v_lo, v_hi = m.get("value_slope_ci_low", nan), m.get("value_slope_ci_high", nan)
    out["median_verdict"] = OK if t.median_low <= med <= t.median_high else FAILS
    out["cod_verdict"] = FAILS if c > t.cod_max else WATCH if c < t.cod_min else OK
    out["prd_verdict"] = OK if t.prd_low <= d <= t.prd_high else FAILS
    out["prb_verdict"] = prb_verdict(b, b_lo, b_hi, t)
    out["value_slope_verdict"] = value_slope_verdict(v, v_lo, v_hi, t)
    problems, looks = [], []
    if out["median_verdict"] == FAILS:
        problems.append(f"estimates run {'high' if med > t.median_high else 'low'} "
                        f"(median ratio {med:.3f})")
    if out["cod_verdict"] == FAILS:
        problems.append(f"estimates are uneven (COD {c:.1f})")
    elif out["cod_verdict"] == WATCH:
        looks.append(f"COD {c:.1f} is below {t.cod_min:g}: ratios this even can mean sales "
                     "chasing (estimates drawn to the sale prices) or sales unlike the "
                     "properties valued")
    _equity_note(out, problems, looks, d, (b, b_lo, b_hi), (v, v_lo, v_hi))
    if not problems and not looks:
        out["note"] = "Level, uniformity and vertical equity meet the targets."
    else:
        out["note"] = " ".join(
            [f"Off target: {'; '.join(problems)}." if problems else "",
             f"Worth a look: {'; '.join(looks)}." if looks else ""]).strip()
    return out


def _equity_note(out: dict, problems: list, looks: list, d: float, b: tuple, v: tuple) -> None:
    """Vertical equity in words; a drift is claimed only where an interval excludes 0."""
    off = ([f"PRD {d:.3f}"] if out["prd_verdict"] == FAILS else []) + (
        [f"PRB {b[0]:+.3f}"] if out["prb_verdict"] in (WATCH, FAILS) else [])
    price_text = " and ".join(off)
    beyond = price_text + (" is beyond its target" if len(off) == 1
                           else " are beyond their targets")
    if out["value_slope_verdict"] in (WATCH, FAILS):
        side = "higher" if v[0] > 0 else "lower"
        text = (f"ratios drift {side} as the estimate rises (value slope {v[0]:+.3f}, "
                f"interval {v[1]:+.3f} to {v[2]:+.3f}" + (f"; {price_text})" if off else ")"))
        (problems if out["value_slope_verdict"] == FAILS else looks).append(text)
    elif off and out["value_slope_verdict"] == OK:
        # the regressive reading is the one price noise produces (PRD up, PRB down)
        regressive = d > 1.0 if out["prd_verdict"] == FAILS else b[0] < 0
        looks.append(f"{beyond}, but the value slope ({v[0]:+.3f}, interval {v[1]:+.3f} to "
                     f"{v[2]:+.3f}) shows no drift with value"
                     + (": scatter in sale prices alone pushes PRD up and PRB down"
                        if regressive else ""))
    elif off and clear_of_zero(b[1], b[2]):              # no value slope to read
        side = "higher" if b[0] > 0 else "lower"
        text = (f"ratios drift {side} as value rises (PRD {d:.3f}, PRB {b[0]:+.3f}, "
                f"interval {b[1]:+.3f} to {b[2]:+.3f})")
        (problems if FAILS in (out["prd_verdict"], out["prb_verdict"]) else looks).append(text)
    elif off:
        looks.append(f"{beyond}, but PRB's interval includes 0: no drift with value is shown")


def ratio_study(estimates: pd.DataFrame, sample: str = "holdout",
                targets: RatioTargets | None = None, level: float = 0.95,
                by: str | None = None) -> pd.DataFrame:
    """ratio_study: one record for all sales in the study, then one per stratum (sorted).

    ``estimates`` is an :func:`estimates_table`; rows with in_study False are left
    out. ``sample`` says what the estimates are (holdout, cross-validated, in-sample).
    """
    targets = targets or RatioTargets()
    # numpy columns of the sales in the study: no copy of the whole table
    keep = estimates["in_study"].to_numpy(bool)
    est = estimates["estimate"].to_numpy(float)[keep]
    price = estimates["sale_price"].to_numpy(float)[keep]
    groups = [("all", slice(None))]
    if by is not None:
        values = estimates["stratum"][keep]
        groups += [(f"{by}: {_label(lv)}", (values == lv).to_numpy())
                   for lv in sorted(values.unique())]
    recs = []
    for name, g in groups:
        m = measures(est[g], price[g], level)
        recs.append({"sample": sample, "stratum": name, **m, **verdicts(m, targets)})
    return pd.DataFrame(recs).reindex(columns=STUDY_COLUMNS)


def _label(v) -> str:
    """A stratum value as text: 3.0 → '3', 'Old Quay' unchanged."""
    if isinstance(v, (float, np.floating)) and float(v).is_integer():
        return str(int(v))
    return str(v)

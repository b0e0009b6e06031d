"""The market over the sale dates, read from the fitted trend: the market index, each
sale's price adjusted to the valuation date, and the check that the trend fits the dates.

The trend's effect at a date is T(date)·b on the model scale (T the trend columns of the
encoding, b their coefficients). A log model's index is exp(T(d)·b − T(v)·b): prices at
date d as a share of prices at the valuation date v. A price-scale model's trend adds
money, so its index is 1 + (T(d)·b − T(v)·b) / P̄, P̄ the mean fitted price of the sales
used carried to the valuation date (the "typical" sale); its interval takes P̄ as known.
"""

from __future__ import annotations

import datetime as _dt

import numpy as np
import pandas as pd

from plumbrule.diagnostics.checks import LEFT_NOTHING, Check, nested_f, not_applicable
from plumbrule.model.fitted import FittedModel
from plumbrule.verdicts import FAILS, OK, WATCH

INDEX_COLUMNS = ["period", "date", "index", "ci_low", "ci_high", "sales", "mean_residual",
                 "extrapolated"]
CHECK_NAME = "Trend fits the sale dates"
ALPHA = 0.05
# A period whose sales sit more than 3 % (log models; 3 % of the mean price otherwise) off
# the trend on average, with p < 0.001, fails: common practice, no source.
FAIL_P, FAIL_SIZE = 0.001, 0.03


def valuation_day(settings) -> _dt.date:
    """The date the index is 1.00 at and prices are adjusted to: the valuation date, or
    today (as the valuation's default)."""
    return settings.valuation_date or _dt.date.today()


def _trend_index(model: FittedModel) -> list[int]:
    return [j for j, t in enumerate(model.encoding.terms) if t.kind == "trend"]


def trend_effect(model: FittedModel, dates) -> np.ndarray:
    """T(date)·b for each date, on the model scale (log price or price)."""
    idx = _trend_index(model)
    b = model.fit.coef[int(model.fit.has_intercept):][idx]
    cols = model.encoding.trend_columns(pd.Series(pd.to_datetime(dates)))
    return cols @ b


def time_adjusted_prices(model: FittedModel, when: _dt.date) -> np.ndarray:
    """Each sale's price carried from its sale date to ``when`` by the fitted trend, in
    price units: P·exp(T(v)·b − T(d)·b) for a log model, P + T(v)·b − T(d)·b otherwise.
    NaN without a date column."""
    spec = model.spec
    price = model.data[spec.response].to_numpy(dtype=float)
    if not spec.date_column:
        return np.full(len(price), np.nan)
    move = trend_effect(model, [pd.Timestamp(when)])[0] - trend_effect(
        model, model.data[spec.date_column])
    return price * np.exp(move) if spec.log_response else price + move


def _periods(dates: pd.Series, unit: str) -> pd.PeriodIndex:
    return pd.PeriodIndex(pd.DatetimeIndex(pd.to_datetime(dates)),
                          freq="Q" if unit == "quarter" else "M")


def market_index(model: FittedModel, when: _dt.date) -> pd.DataFrame:
    """One row per calendar month (quarter with trend_period quarter and a periods trend)
    from the first sale's to the later of the last sale's and the valuation date's, the
    trend evaluated at the period's middle day, then a row for the valuation date itself
    (index 1). ``index`` and its interval at the model's confidence level are unitless
    (1.05: prices 5 % above those at the valuation date); ``sales`` counts the sales used
    in the period; ``mean_residual`` is their mean residual (model scale); ``extrapolated``
    marks dates past the last sale (or before the first), where the last (first) segment
    is carried on."""
    spec = model.spec
    if not spec.date_column:
        return pd.DataFrame(columns=INDEX_COLUMNS)
    from plumbrule.model.design import DAYS_PER_MONTH  # noqa: F401  (units of the trend)
    dates = pd.to_datetime(model.data[spec.date_column])
    unit = spec.trend_period if spec.trend == "periods" else "month"
    v = pd.Timestamp(when)
    first, last = dates.min(), dates.max()
    span = pd.period_range(min(first, v), max(last, v), freq="Q" if unit == "quarter" else "M")
    mids = span.start_time + (span.end_time - span.start_time) / 2
    mids = mids.normalize()
    sale_p = _periods(dates, unit)
    counts = pd.Series(1, index=sale_p).groupby(level=0).size()
    resid = pd.Series(model.fit.resid, index=sale_p).groupby(level=0).mean()
    eval_dates = pd.DatetimeIndex(list(mids) + [v])
    idx = _trend_index(model)
    enc, fit = model.encoding, model.fit
    cols = enc.trend_columns(pd.Series(eval_dates))
    c = cols - cols[-1]                                      # contrast with the valuation date
    off = int(fit.has_intercept)
    b = fit.coef[off:][idx]
    cov = np.asarray(model.cov, dtype=float)[np.ix_([off + j for j in idx],
                                                    [off + j for j in idx])]
    eff = c @ b
    se = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", c, cov, c), 0.0))
    q = model.t_quantile(model.confidence)
    if spec.log_response:
        index, lo, hi = np.exp(eff), np.exp(eff - q * se), np.exp(eff + q * se)
    else:
        base = float(np.mean(fit.fitted)) + float(
            trend_effect(model, [v])[0] - np.mean(trend_effect(model, dates)))
        index, lo, hi = 1 + eff / base, 1 + (eff - q * se) / base, 1 + (eff + q * se) / base
    labels = [str(p) if unit == "month" else f"{p.year}-Q{p.quarter}" for p in span]
    out = pd.DataFrame({
        "period": labels + ["valuation date"], "date": eval_dates,
        "index": index, "ci_low": lo, "ci_high": hi,
        "sales": np.concatenate([counts.reindex(span).fillna(0).to_numpy(dtype=np.int64),
                                 [0]]).astype(np.int64),
        "mean_residual": np.concatenate([resid.reindex(span).to_numpy(dtype=float), [np.nan]]),
        "extrapolated": (eval_dates > last) | (eval_dates < first),
    })
    return out[INDEX_COLUMNS]


# Sales spanning more than this many months are grouped by quarter for the check: fewer,
# fuller groups keep the test's power against a turn (our choice, measured in
# benchmarks/trend_check.py).
QUARTERS_BEYOND = 24


def check_unit(model: FittedModel) -> str:
    """'month' or 'quarter': the sale periods the check compares."""
    dates = pd.to_datetime(model.data[model.spec.date_column])
    from plumbrule.model.design import DAYS_PER_MONTH
    span = (dates.max() - dates.min()).days / DAYS_PER_MONTH
    return "quarter" if span > QUARTERS_BEYOND else "month"


def _check_groups(model: FittedModel, unit: str | None = None
                  ) -> tuple[np.ndarray, list[str]]:
    """Each sale's group for the check — its calendar month or quarter (:func:`check_unit`),
    sparse ones merged with a neighbour as the periods trend merges them
    (min_period_sales) — and the group labels."""
    from plumbrule.model.trend import _merge_small
    dates = model.data[model.spec.date_column]
    unit = unit or check_unit(model)
    per = _periods(dates, unit)
    codes, uniques = pd.factorize(per, sort=True)
    counts = np.bincount(codes, minlength=len(uniques))
    labels = [str(p) if unit == "month" else f"{p.year}-Q{p.quarter}" for p in uniques]
    keep, _ = _merge_small(list(counts), labels, model.spec.min_period_sales, unit)
    group = np.searchsorted(np.asarray(keep), codes, side="right") - 1
    ends = keep[1:] + [len(labels)]
    names = [labels[a] if b - a == 1 else f"{labels[a]} to {labels[b - 1]}"
             for a, b in zip(keep, ends, strict=False)]
    return group, names


def trend_fit_check(model: FittedModel, unit: str | None = None) -> Check:
    """F test that indicators of the sale months (sparse months merged), added to the model,
    explain none of the residuals: the partial F of [X, D] against X, computed from the
    residuals and D made orthogonal to the design with the fit's own Q (no refit)."""
    threshold = f"p < {ALPHA} (F test of sale-period groups on the residuals)"
    spec, fit = model.spec, model.fit
    if not spec.date_column:
        return not_applicable(CHECK_NAME, "No date_column: the model has no trend.", threshold)
    group, names = _check_groups(model, unit)
    g = len(names)
    if g < 2:
        return not_applicable(CHECK_NAME, "The sales used fall in one month (or too few per "
                              "month to compare).", threshold)
    gain, df1 = _indicator_gain(fit, group, g)
    df2 = fit.df_resid - df1
    if df1 == 0:
        return not_applicable(CHECK_NAME, "The trend already has a level for every sale "
                              "month: nothing is left to test.", threshold)
    if df2 < 1:
        return not_applicable(CHECK_NAME, "Too few sales beyond the parameters and months.",
                              threshold)
    tested = nested_f(gain, df1, fit.ssr, df2)
    if tested is None:
        return not_applicable(CHECK_NAME, LEFT_NOTHING, threshold)
    fstat, p = tested
    means = pd.Series(fit.resid).groupby(group).mean().to_numpy()
    worst = int(np.argmax(np.abs(means) * np.sqrt(np.bincount(group))))   # largest |t|
    size = float(means[worst])
    if not spec.log_response:
        size = size / float(np.mean(model.data[spec.response]))
    shown = f"{100 * (np.expm1(size) if spec.log_response else size):+.1f}%"
    verdict = OK if p >= ALPHA else (FAILS if p < FAIL_P and abs(size) >= FAIL_SIZE else WATCH)
    if verdict == OK:
        note = "The residuals show no market movement by sale period that the trend misses."
    else:
        how = ("set trend to piecewise (trend_knots, e.g. every 6 months) or periods"
               if spec.trend == "linear" else "add knots (trend_knots) or use periods")
        note = (f"The market moved in a way the trend misses: sales of {names[worst]} sit "
                f"{shown} off the trend on average, so sales of some months are over- or "
                f"undervalued after the time adjustment; {how}.")
    return Check(CHECK_NAME, fstat, p, threshold, verdict, note, float(df1), "F",
                 "mean residual zero in every sale period")


def merges_check(model: FittedModel) -> Check | None:
    """The periods or segments the trend merged for having too few sales (an ok check that
    logs them), or None when nothing was merged."""
    basis = model.encoding.trend
    if basis is None or not basis.merges:
        return None
    shown = "; ".join(basis.merges[:6]) + (f"; and {len(basis.merges) - 6} more"
                                          if len(basis.merges) > 6 else "")
    return Check("Trend periods merged", float(len(basis.merges)), float("nan"),
                 f"fewer than {model.spec.min_period_sales} sales (min_period_sales)", OK,
                 f"Merged for too few sales: {shown}.")


def _indicator_gain(fit, group: np.ndarray, g: int) -> tuple[float, int]:
    """(‖projection of the residuals on the group indicators D made orthogonal to the
    design‖², the rank of that part of D), in g × g space from group sums: with Q the
    fit's orthogonal factor (centred design), D̃ᵀD̃ = DᵀD − ccᵀ/n − (QᵀD)ᵀ(QᵀD) (c the group
    counts; the ccᵀ/n term with an intercept) and D̃ᵀe = Dᵀe, since e ⊥ [1, Q]. Directions
    of D̃ᵀD̃ (scaled to unit diagonal of DᵀD) below 1e-8 are inside the design (a periods
    trend already fits them) and are left out of the test."""
    counts = np.bincount(group, minlength=g).astype(float)
    qd = np.stack([np.bincount(group, weights=fit.q[:, j], minlength=g)
                   for j in range(fit.q.shape[1])]) if fit.q.shape[1] else np.zeros((0, g))
    gram = np.diag(counts) - qd.T @ qd
    if fit.has_intercept:
        gram -= np.outer(counts, counts) / fit.n
    r = np.bincount(group, weights=fit.resid, minlength=g)
    s = np.sqrt(counts)
    vals, vecs = np.linalg.eigh(gram / np.outer(s, s))
    keep = vals > 1e-8
    if not keep.any():
        return 0.0, 0
    z = vecs[:, keep].T @ (r / s)
    return float(np.sum(z * z / vals[keep])), int(keep.sum())


def trend_checks(model: FittedModel) -> list[Check]:
    """The trend's checks for the checks table: the fit to the sale dates (with a date
    column), then the merges (when any)."""
    if not model.spec.date_column:
        return []
    merged = merges_check(model)
    return [trend_fit_check(model)] + ([merged] if merged else [])


def with_time_adjusted(residuals: pd.DataFrame, model: FittedModel, when: _dt.date
                       ) -> pd.DataFrame:
    """The residual table with ``time_adjusted_price`` (price units) as its last column:
    each sale's price carried to ``when`` by the fitted trend (:func:`time_adjusted_prices`;
    rows in the model's order, as :func:`residual_table` writes them)."""
    return residuals.assign(time_adjusted_price=time_adjusted_prices(model, when))

"""Valuing subject properties: estimates with intervals, log retransformation,
subject checks, and (through :mod:`plumbrule.grid`) the comparable-sales grid.

Every quantity is computed from the fitted model in its working coordinates
(centred, scaled QR): a subject's leverage and the variance of its
estimate come from one triangular solve with R, never from inverting X'X.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any, ClassVar, Iterator, Mapping

import numpy as np
import pandas as pd

from plumbrule import intake
from plumbrule.errors import IntakeError, SettingError, SpecError
from plumbrule.settings import Settings

ESTIMATE_COLUMNS = [
    "subject", "row", "estimate", "se_mean", "se_single", "ci_low", "ci_high", "pi_low",
    "pi_high", "estimate_kind", "flags", "median_estimate", "retransform", "retransform_factor",
    "model_estimate", "model_se_mean", "model_se_single", "leverage", "max_sales_leverage",
    "trend_months", "valuation_date", "confidence", "leverage_limit",
]


@dataclass(frozen=True)
class Subjects:
    """Subject rows typed like the sales: ``data`` has the spec's predictor
    columns (and the date column set to the valuation date); ``labels`` names
    each subject; the index is the subjects sheet's row numbers."""

    data: pd.DataFrame
    labels: pd.Series
    x: np.ndarray
    # (n, 2) x and y of each subject when the settings name coordinate columns (NaN where
    # blank or not a number); None without them
    coords: np.ndarray | None = None


@dataclass(frozen=True)
class Valuation:
    """Estimates (one row per subject), the adjustment grid (one row per
    comparable × feature plus a total row per comparable) and the reconciled
    value (one record; empty without comparables). Money is in the units of
    the sale-price column. ``subjects`` are the subject rows as the model typed them."""

    estimates: pd.DataFrame
    grid: pd.DataFrame
    reconciled: pd.DataFrame
    valuation_date: _dt.date
    settings: Settings
    subjects: Subjects
    # suggested comparables and their bracketing check (suggest_comps; empty when off)
    suggestions: pd.DataFrame = field(default_factory=pd.DataFrame)
    bracketing: pd.DataFrame = field(default_factory=pd.DataFrame)
    # the portfolio total of two or more subjects (valuation/portfolio.py); empty otherwise
    portfolio: pd.DataFrame = field(default_factory=pd.DataFrame)
    # the grid as appraisers read it: lines down the side, subject and comparables across,
    # adjustments rounded to adjustment_rounding (comparables.grid_table); empty without comps
    grid_table: pd.DataFrame = field(default_factory=pd.DataFrame)

    TABLES: ClassVar[tuple[str, ...]] = ("estimates", "grid", "reconciled")   # the JSON order

    def items(self) -> Iterator[tuple[str, pd.DataFrame]]:
        """(name, table) pairs in JSON order."""
        return ((name, getattr(self, name)) for name in self.TABLES)


# --- the entry point --------------------------------------------------------

def valuate(analysis, subjects: Any, comps=(), settings: Settings | Mapping | None = None
            ) -> Valuation:
    """Value ``subjects`` (SheetTable, DataFrame or 2-D values with a header)
    with ``analysis.final_model`` (refitted on every screened sale unless ``final_fit`` is
    'training'); ``comps`` are sheet rows of the sales table (or
    taken from the settings' ``comps``). Returns a frozen :class:`Valuation`."""
    from plumbrule.valuation.comparables import GridRules, adjustment_grid, resolve_comps
    settings = _settings(analysis, settings)
    model = analysis.final_model
    when = settings.valuation_date or _dt.date.today()
    subj = read_subjects(model, subjects, when)
    estimates = estimate_table(model, subj, settings, when)
    rows = comparable_rows(analysis, comps, settings)
    suggested = None
    if settings.suggest_comps:
        from plumbrule.valuation.suggest import suggest_each
        suggested = suggest_each(analysis, subj, settings, when, estimates)
        if not rows and len(subj.data) == 1:      # the user's own comparables come first
            rows = list(suggested[0].rows)
    comp_set = resolve_comps(analysis, rows)
    if comp_set is not None and len(subj.data) > 1:
        raise SpecError(f"Comparables belong to one subject, but {len(subj.data)} subjects "
                        "were given. Value one subject with 'comps', or leave 'comps' empty.",
                        setting="comps")
    # the gap to the model's estimate is added below, with the comparables' names
    grid, reconciled = adjustment_grid(model, subj, comp_set, GridRules.from_settings(settings),
                                       when, estimates=estimates, gap=False)
    from plumbrule.sales import with_ids, with_names
    from plumbrule.valuation.comparables import grid_table, with_gap
    grid = with_ids(grid, analysis.ids, column="comp_row", name="comp_id")
    names = getattr(analysis, "names", None)
    grid = with_names(grid, names, column="comp_row")
    rules = GridRules.from_settings(settings)
    reconciled = with_gap(reconciled, grid, rules.gap)        # the causes by the sales' names
    wide = grid_table(grid, rules.rounding)
    extra = {} if suggested is None else {"suggestions": with_names(suggested[1], names,
                                                                    column="comp_row"),
                                          "bracketing": suggested[2]}
    from plumbrule.valuation.portfolio import portfolio_total
    portfolio = portfolio_total(model, subj.x, estimates, settings.confidence,
                                settings.retransform)
    return Valuation(estimates=estimates, grid=grid, reconciled=reconciled,
                     valuation_date=when, settings=settings, subjects=subj,
                     portfolio=portfolio, grid_table=wide, **extra)


def comparable_rows(analysis, comps, settings: Settings) -> list[int]:
    """Sheet rows of the comparables: ``comps`` when given, else the settings' ``comps``
    (sheet rows) and ``comp_ids`` (IDs, with an id_column)."""
    if comps:
        return list(comps)
    rows = [r for r, _ in settings.comps]
    if settings.comp_ids:
        if analysis.ids is None:
            raise SettingError("Setting 'comp_ids' needs the ID column: set id_column, or list "
                               "sheet rows in comps.", setting="comp_ids")
        from plumbrule.intake.keys import rows_of_ids
        rows += [r for r, _ in rows_of_ids(analysis.ids, settings.comp_ids, "comp_ids")]
    return rows


def _settings(analysis, settings) -> Settings:
    if settings is None:
        return analysis.settings
    if isinstance(settings, Settings):
        return settings
    from plumbrule.analysis import coerce_settings
    return coerce_settings(analysis.settings, **dict(settings))


# --- subjects ---------------------------------------------------------------

def read_subjects(model, subjects: Any, when: _dt.date) -> Subjects:
    """Type and encode the subject rows exactly as the sales were encoded
    (:meth:`Encoding.new_rows`), every subject at the valuation date ``when``."""
    from plumbrule.analysis import as_table
    table = as_table(subjects)
    if table.frame.empty:
        raise IntakeError("The subjects block has no rows under its header. Enter one row per "
                          "subject property.")
    labels = _labels(table.frame)
    enc = model.encoding
    data = enc.new_rows(table, label="subject row", date=pd.Timestamp(when), names=labels,
                        fixed_date=True)
    return Subjects(data=data, labels=labels, x=enc.design(data, label="subject row"),
                    coords=_coordinates(model.spec, table.frame))


def _coordinates(spec, frame: pd.DataFrame) -> np.ndarray | None:
    """The subjects' x and y (x_column, y_column) as floats, NaN where missing."""
    if not (getattr(spec, "x_column", None) and getattr(spec, "y_column", None)):
        return None
    out = np.full((len(frame), 2), np.nan)
    for j, name in enumerate((spec.x_column, spec.y_column)):
        col = next((c for c in frame.columns if str(c).strip().casefold() == name.casefold()),
                   None)
        if col is not None:
            out[:, j] = pd.to_numeric(frame[col], errors="coerce").to_numpy(float)
    return out


def _labels(frame: pd.DataFrame) -> pd.Series:
    """The 'Subject' column's text where given, else 'row N' (subjects sheet)."""
    rows = pd.Series([f"row {r}" for r in frame.index], index=frame.index, dtype=object)
    name = next((c for c in frame.columns if c.strip().casefold() == "subject"), None)
    if name is None:
        return rows
    text = frame[name].map(lambda v: "" if intake.is_blank(v) else str(v).strip())
    return text.where(text != "", rows)


# --- the algebra --------------------------------------------------------------

def working_vectors(fit, x: np.ndarray) -> np.ndarray:
    """v = R_full⁻ᵀ a for each row of ``x`` (m × k, user units), as m × p.

    In working coordinates the design is A = [1/√n, X_s P] = [1/√n, Q]·diag(1, R),
    and a new row is a = [1/√n, ((x − x̄)/‖·‖)P]. Then leverage = ‖v‖² and
    var(x'b) = σ²‖v‖² (classical) or vᵀ·meat·v (sandwich), with no X'X formed.
    """
    from scipy.linalg import solve_triangular
    z = (np.atleast_2d(x) - fit.x_means) / fit.x_norms
    w = solve_triangular(fit.r, z.T, trans="T", check_finite=False).T
    if fit.has_intercept:
        w = np.hstack([np.full((w.shape[0], 1), 1.0 / np.sqrt(fit.n)), w])
    return w


def mean_variance(model, v: np.ndarray) -> np.ndarray:
    """Variance of the estimated mean x'b on the model scale, per row of ``v``;
    respects the model's robust_se choice.

    Robust: vᵀ·meat·v with :meth:`OLSFit.valuation_meat`, so the part of an estimate
    that one sale alone fixes (a one-sale category level) takes the classical
    variance rather than 0. Rounding below 0 is clipped (a variance)."""
    if model.robust_se:
        meat = model.fit.valuation_meat(model.robust_se)
        var = np.einsum("ij,jk,ik->i", v, meat, v)
    else:
        var = model.fit.sigma ** 2 * np.einsum("ij,ij->i", v, v)
    return np.maximum(var, 0.0)


def log_mean_variance(model, v: np.ndarray, kind: str) -> np.ndarray:
    """Variance (log scale, per subject) of log(factor·exp(x'b)), the log of the reported
    mean under retransformation ``kind``: the factor's own sampling error included.

    smearing (delta method; the linearisation of Duan 1983, JASA 78:605, worked out in
    docs/methods.md §9): with e the residuals, S = mean(exp e), dᵢ = exp(eᵢ)/S − 1 and
    x̃ = Σ xᵢexp(eᵢ)/Σ exp(eᵢ), the error of x₀'b + log S is ≈ (x₀ − x̃)'(b − β) + mean(d)
    = Σᵢ (cᵢεᵢ + dᵢ/n) with c = A·Δv (A the working design, Δv = v(x₀) − v(x̃)).
    Classical: s²‖Δv‖² + (Σd²/df)/n + 2(Σc)(Σed/df)/n (Σc = 0 with an intercept);
    robust: Σ sᵢ(cᵢeᵢ + dᵢ/n)² with the HC scale sᵢ. Sales with leverage 1 contribute
    no d (their residual is 0 whatever their price) and their direction takes s².
    lognormal: var(x₀'b) + s⁴/(2·df) (var s² = 2σ⁴/df under normal errors, s² independent
    of b). median: var(x₀'b)."""
    var = mean_variance(model, v)
    if kind == "median":
        return var
    fit = model.fit
    if kind == "lognormal":
        return var + fit.sigma ** 4 / (2.0 * fit.df_resid)
    e, n, df = fit.resid, fit.n, fit.df_resid
    alone = fit.leverage >= 1.0 - 1e-10
    ex = np.exp(e)
    d = np.where(alone, 0.0, ex / ex.mean() - 1.0)
    x_tilde = (ex @ model.x) / ex.sum()
    dv = v - working_vectors(fit, x_tilde)          # the 1/√n parts cancel exactly
    if model.robust_se:
        w = _hc_scale(fit, model.robust_se, alone)
        cross = _design_t(fit, w * e * d)                   # Aᵀ(s·e·d), p-vector
        out = (np.einsum("ij,jk,ik->i", dv, fit.valuation_meat(model.robust_se), dv)
               + 2.0 / n * dv @ cross + float(w @ (d * d)) / n ** 2)
    else:
        sum_c = dv @ _design_t(fit, np.ones(n))             # Σᵢ cᵢ, per subject
        out = (fit.sigma ** 2 * np.einsum("ij,ij->i", dv, dv) + float(d @ d) / df / n
               + 2.0 * sum_c * float(e @ d) / df / n)
    return np.maximum(out, 0.0)


def _hc_scale(fit, kind: str, alone: np.ndarray) -> np.ndarray:
    """sᵢ with ωᵢ = sᵢeᵢ² the HC weights of :meth:`OLSFit.robust_meat` (0 for leverage 1)."""
    if kind == "HC1":
        s = np.full(fit.n, fit.n / fit.df_resid)
    else:
        s = 1.0 / (1.0 - np.where(alone, 0.0, fit.leverage)) ** 2
    return np.where(alone, 0.0, s)


def _design_t(fit, w: np.ndarray) -> np.ndarray:
    """Aᵀw for the working design A = [1/√n, Q] (or Q without an intercept)."""
    qt = fit.q.T @ w
    if fit.has_intercept:
        return np.concatenate([[w.sum() / np.sqrt(fit.n)], qt])
    return qt


# --- estimates ----------------------------------------------------------------

def estimate_table(model, subj: Subjects, settings: Settings, when: _dt.date) -> pd.DataFrame:
    """One row per subject: the estimate on the price scale, its standard errors,
    the confidence interval of the mean (or median) and the prediction interval
    for one sale at ``settings.confidence``, and the subject-check flags."""
    from plumbrule.numeric.distributions import t_ppf
    fit = model.fit
    v = working_vectors(fit, subj.x)
    eta = model.predict(subj.x)
    var_mean = mean_variance(model, v)
    se_m = np.sqrt(var_mean)
    se_s = np.sqrt(var_mean + fit.sigma ** 2)
    q = t_ppf(0.5 + settings.confidence / 2.0, fit.df_resid)
    _check_in_price_range(model, subj, eta + q * se_s)
    lev = np.einsum("ij,ij->i", v, v)
    out = pd.DataFrame({
        "subject": subj.labels.to_numpy(), "row": subj.data.index.to_numpy(dtype=np.int64),
        "model_estimate": eta, "model_se_mean": se_m, "model_se_single": se_s,
        "leverage": lev, "max_sales_leverage": float(np.max(fit.leverage)),
        "leverage_limit": fit.leverage_limit,
        "trend_months": _trend_months(model, when, len(eta)),
        "valuation_date": pd.Timestamp(when), "confidence": settings.confidence,
    })
    if model.spec.log_response:
        se_ci = np.sqrt(log_mean_variance(model, v, settings.retransform))
        out = out.assign(**_log_scale(model, eta, se_ci, se_s, q, settings.retransform))
    else:
        out = out.assign(estimate=eta, se_mean=se_m, se_single=se_s, ci_low=eta - q * se_m,
                         ci_high=eta + q * se_m, pi_low=eta - q * se_s, pi_high=eta + q * se_s,
                         estimate_kind="mean", median_estimate=np.nan, retransform="none",
                         retransform_factor=np.nan)
    out["flags"] = subject_flags(model, subj, _shared_leverage(fit, v), when)
    return out[ESTIMATE_COLUMNS]


# exp() of more than this overflows a float (log of 1.8e308 is 709.78); a price beyond
# 1e300 is no price anyway.
_LOG_PRICE_LIMIT = 300 * np.log(10.0)


def _check_in_price_range(model, subj: Subjects, upper: np.ndarray) -> None:
    """A subject whose estimate or upper prediction bound (``upper``, model scale) is not a
    finite price (cells far outside the sales': exp overflows) is refused by name, never
    left as a blank estimate."""
    limit = _LOG_PRICE_LIMIT if model.spec.log_response else 1e300
    bad = ~(np.abs(upper) < limit)
    if not bad.any():
        return
    from plumbrule.errors import SpecError
    i = int(np.argmax(bad))
    row = int(subj.data.index[i])
    label = subj.labels.iloc[i]
    who = (f"Subject '{label}' (row {row})" if label and label != f"row {row}"
           else f"Subject row {row}")
    raise SpecError(f"{who}: the model gives it no finite price (its values lie far outside "
                    "those of the sales, beyond what the model can extrapolate to). Check its "
                    "cells against the sales'.", row=row)


_KIND = {"smearing": "mean, smearing factor", "lognormal": "mean, lognormal factor",
         "median": "median"}


def _log_scale(model, eta, se_m, se_s, q, kind: str) -> dict:
    """Back to prices. The confidence interval is exp of the log bounds times the
    factor (an interval for the reported mean or median, the factor taken as
    known); the prediction interval is exp of the log bounds alone: a quantile
    interval for one sale's price, which a monotone transform preserves.
    Standard errors on the price scale are the delta-method estimate × se."""
    factor = model.retransform_factor(kind)
    median = np.exp(eta)
    est = factor * median
    return dict(estimate=est, se_mean=est * se_m, se_single=est * se_s,
                ci_low=factor * np.exp(eta - q * se_m), ci_high=factor * np.exp(eta + q * se_m),
                pi_low=np.exp(eta - q * se_s), pi_high=np.exp(eta + q * se_s),
                estimate_kind=_KIND[kind], median_estimate=median, retransform=kind,
                retransform_factor=factor)


def _trend_months(model, when: _dt.date, m: int) -> np.ndarray:
    from plumbrule.model.design import months_since
    origin = model.encoding.date_origin
    if origin is None:
        return np.full(m, np.nan)
    return np.repeat(months_since(pd.Series([pd.Timestamp(when)]), origin), m)


# --- subject checks -------------------------------------------------------------

def _shared_leverage(fit, v: np.ndarray) -> np.ndarray:
    """Each subject's leverage less its part along the directions that one sale alone
    fixes (:meth:`OLSFit.alone_directions`): ‖v‖² − Σ(v·u)². The other sales have no
    part along those directions, so this is the quantity to compare with theirs."""
    lev = np.einsum("ij,ij->i", v, v)
    u = fit.alone_directions()
    return lev - np.einsum("ij,ij->i", v @ u.T, v @ u.T) if len(u) else lev


def subject_flags(model, subj: Subjects, leverage: np.ndarray, when: _dt.date) -> list[str]:
    """Per subject, '; '-joined notes: a value outside the range of the sales used
    (per numeric column and for the valuation date), a category level with one sale
    (the estimate rests on that sale), and leverage above the largest among the sales
    (hidden extrapolation). '' when nothing is flagged.

    ``leverage`` is the subject's leverage less its part along directions one sale alone
    fixes (:func:`_shared_leverage`); it is compared with :attr:`OLSFit.leverage_limit`,
    the largest leverage among the sales below 1, so a one-sale level neither switches the
    check off for every subject (the maximum would be 1) nor trips it for its own subjects
    (they get the one-sale note instead)."""
    spec, sales = model.spec, model.data
    notes: list[list[str]] = [[] for _ in range(len(subj.data))]
    for col in spec.numeric_predictors:
        lo, hi = float(sales[col].min()), float(sales[col].max())
        vals = subj.data[col].to_numpy(dtype=float)
        for i in np.flatnonzero((vals < lo) | (vals > hi)):
            side = "below the smallest" if vals[i] < lo else "above the largest"
            edge = lo if vals[i] < lo else hi
            notes[i].append(f"{col} {vals[i]:,.6g} is {side} in the sales used ({edge:,.6g})")
    if spec.date_column:
        first, last = sales[spec.date_column].min(), sales[spec.date_column].max()
        trend = model.encoding.trend
        note = _date_note(pd.Timestamp(when), first, last,
                          None if trend is None else getattr(trend, "kind", "piecewise"))
        if note:
            for n in notes:
                n.append(note)
    for col in spec.categorical:
        counts = sales[col].value_counts()
        single = subj.data[col].map(counts).to_numpy() == 1
        for i in np.flatnonzero(single):
            notes[i].append(f"its {col} level '{subj.data[col].iloc[i]}' has one sale: its "
                            "value rests on that sale alone")
    top = model.fit.leverage_limit
    for i in np.flatnonzero(leverage > top):
        # With every column in range, high leverage is the hidden kind: the
        # combination of features, not any one of them, is outside the sales.
        kind = "extrapolation" if any("in the sales used" in n for n in notes[i]) else \
            "hidden extrapolation"
        notes[i].append(f"{kind}: leverage {leverage[i]:.4g} exceeds the largest "
                        f"among the sales used ({top:.4g}); the sales do not cover this "
                        "combination of features")
    return ["; ".join(n) for n in notes]


def shared_flags(flags) -> tuple[list[str], list[str]]:
    """(notes every subject carries, each subject's remaining notes '; '-joined): a caution
    common to all subjects of a mass run is said once. With one subject nothing is shared."""
    split = [[f for f in str(x or "").split("; ") if f] for x in flags]
    if len(split) < 2:
        return [], ["; ".join(n) for n in split]
    common = [f for f in split[0] if all(f in n for n in split[1:])]
    return common, ["; ".join(f for f in n if f not in common) for n in split]


def _date_note(when: pd.Timestamp, first: pd.Timestamp, last: pd.Timestamp,
               trend_kind: str | None = None) -> str:
    """The note for a valuation date outside the sale dates ('' inside them). ``trend_kind``
    None is the linear trend (one rate, carried on); 'piecewise' carries the rate of the
    nearest segment, 'periods' the level of the nearest period."""
    from plumbrule.model.design import DAYS_PER_MONTH
    if when > last:
        gap, side, edge, end, way = (when - last).days / DAYS_PER_MONTH, "after", last, \
            "last", "forward"
    elif when < first:
        gap, side, edge, end, way = (first - when).days / DAYS_PER_MONTH, "before", first, \
            "first", "back"
    else:
        return ""
    what = {None: "the market trend", "piecewise": f"the trend's {end} segment",
            "periods": f"the {end} period's level"}.get(trend_kind,
                                                        f"the trend's {end} segment (or period)")
    return (f"valuation date {when.date()} is {gap:.1f} months {side} the {end} sale used "
            f"({edge.date()}): {what} is carried {way}")

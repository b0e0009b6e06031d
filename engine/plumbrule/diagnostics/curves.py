"""Curves read off a fitted model: each curve's effect table, and the per-predictor
linearity check (does a spline improve the fit of a predictor entered as a straight line?).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from plumbrule.diagnostics.checks import Check, not_applicable
from plumbrule.model.curves import KNOT_QUANTILES, CurveBasis, rcs_terms
from plumbrule.model.fitted import FittedModel
from plumbrule.verdicts import OK, WATCH

CURVE_COLUMNS = ["predictor", "kind", "value", "band", "reference", "model_effect", "effect",
                 "ci_low", "ci_high", "scale"]
POINTS = 11          # values shown per spline or square curve, evenly spaced (our choice)
TEST_KNOTS = 4       # the per-predictor test adds a 4-knot spline's two non-linear terms


def curve_table(model: FittedModel) -> pd.DataFrame:
    """One row per shown value of each curve: ``value`` (the predictor's units: the lowest
    and highest sale value and :data:`POINTS` − 2 rounded steps between; for bands the
    band's lowest sale value), ``band`` (its label; '' for a spline or square), ``reference``
    (the value the effects are measured from: the median sale's value), ``model_effect``
    f(value) − f(reference) on the model scale, and ``effect`` with its confidence interval
    ``ci_low``/``ci_high`` in ``scale`` units: 'percent' of the price for a log-price model
    (100·(e^d − 1)), 'price' otherwise. Empty (with its columns) without curves."""
    enc = model.encoding
    if not enc.curves:
        return pd.DataFrame(columns=CURVE_COLUMNS)
    off = int(model.fit.has_intercept)
    cov = np.asarray(model.cov, dtype=float)
    q = model.t_quantile(model.confidence)
    log = model.spec.log_response
    parts = []
    for basis in enc.curves:
        idx = [j for j, t in enumerate(enc.terms) if t.kind == "curve"
               and t.column == basis.column]
        values, bands = _shown_values(basis, model.data[basis.column].to_numpy(dtype=float))
        g = basis.columns(values) - basis.columns(np.array([basis.centre]))
        b = model.fit.coef[[off + j for j in idx]]
        v = cov[np.ix_([off + j for j in idx], [off + j for j in idx])]
        d = g @ b
        se = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", g, v, g), 0.0))
        lo, hi = d - q * se, d + q * se
        conv = (lambda z: 100.0 * np.expm1(z)) if log else (lambda z: z)   # noqa: E731
        parts.append(pd.DataFrame({
            "predictor": basis.column, "kind": basis.kind, "value": values, "band": bands,
            "reference": basis.centre, "model_effect": d, "effect": conv(d),
            "ci_low": conv(lo), "ci_high": conv(hi),
            "scale": "percent" if log else "price"}))
    return pd.concat(parts, ignore_index=True)[CURVE_COLUMNS]


def _shown_values(basis: CurveBasis, x: np.ndarray) -> tuple[np.ndarray, list[str]]:
    x = x[np.isfinite(x)]
    if basis.kind != "bands":
        lo, hi = float(x.min()), float(x.max())
        grid = np.linspace(lo, hi, POINTS)
        if hi > lo:    # round steps (870, 1,040 ... not 871.4): two significant digits
            digits = 1 - int(np.floor(np.log10((hi - lo) / (POINTS - 1))))
            grid[1:-1] = np.round(grid[1:-1], digits)
        return grid, [""] * POINTS
    band = np.searchsorted(np.asarray(basis.breaks), x, side="right")
    lows = np.array([x[band == i].min() for i in range(len(basis.breaks) + 1)])
    return lows, basis.band_labels


# --- the per-predictor linearity check -------------------------------------------

def straight_predictors(model: FittedModel) -> list[tuple[str, int]]:
    """(predictor, design column) of each numeric or logged predictor entered as a straight
    line (no curve) with more than two distinct values, in the spec's order."""
    out = []
    for j, t in enumerate(model.encoding.terms):
        # a yes/no column has no straight-line assumption to test
        if t.kind in ("numeric", "log"):
            x = model.x[:, j]
            lo, hi = x.min(), x.max()
            if ((x > lo) & (x < hi)).any():        # a third value, found without sorting
                out.append((t.column, j))
    return out


def curve_gains(model: FittedModel, columns: list[int]) -> list[tuple[float, int]]:
    """For each design column of ``columns``: (the drop in the residual sum of squares from
    adding the non-linear terms of a 4-knot restricted cubic spline of that column, their
    df). From the fit's Q: the new columns, centred with an intercept, are made orthogonal
    to the design (twice, for working precision; all columns' terms at once) and the
    residuals projected on what is left; df 0 when the values are too few or too repetitive
    for the knots."""
    blocks, owner = [], []
    for pos, column in enumerate(columns):
        x = model.x[:, column]
        t = np.quantile(x, KNOT_QUANTILES[TEST_KNOTS])
        if not np.all(np.diff(t) > 0):
            t = np.quantile(np.unique(x), KNOT_QUANTILES[TEST_KNOTS])
            if not np.all(np.diff(t) > 0):
                continue
        blocks.append(rcs_terms(x, t))
        owner += [pos] * (TEST_KNOTS - 2)
    out = [(0.0, 0)] * len(columns)
    if not blocks:
        return out
    w = np.hstack(blocks)
    if model.fit.has_intercept:
        w -= w.mean(axis=0)
    raw = np.einsum("ij,ij->j", w, w)
    q = model.fit.q
    for _ in range(2):
        w -= np.dot(q, q.T @ w)
    norms = np.sqrt(np.einsum("ij,ij->j", w, w))
    keep = norms ** 2 > 1e-12 * np.maximum(raw, np.finfo(float).tiny)
    owner_a = np.asarray(owner)
    resid = model.fit.resid
    for pos in np.unique(owner_a):
        mine = (owner_a == pos) & keep
        if not mine.any():
            continue
        z = w[:, mine] / norms[mine]
        qz, rz = np.linalg.qr(z)
        diag = np.abs(np.diag(rz))
        ok = diag > 1e-8 * diag.max()
        proj = qz[:, ok].T @ resid
        out[pos] = (float(proj @ proj), int(ok.sum()))
    return out


def linearity_by_predictor(model: FittedModel) -> list[Check]:
    """One check per straight numeric predictor: the partial F test of adding a 4-knot
    restricted cubic spline's two non-linear terms (Harrell 2015, §2.4.6 and §2.7.2), graded
    with a Bonferroni split of 0.05 over the predictors tested, so a correct straight model
    raises a false alarm on any of them at most about one time in twenty."""
    from plumbrule.numeric.distributions import f_sf
    cols = straight_predictors(model)
    if not cols:
        return []
    alpha = 0.05 / len(cols)
    threshold = (f"p < {alpha:.3g} (0.05 split over {len(cols)} predictors, Bonferroni)"
                 if len(cols) > 1 else "p < 0.05")
    out = []
    fit = model.fit
    logged = set(model.spec.log_predictors)
    gains = curve_gains(model, [j for _, j in cols])
    for (name, _), (gain, df1) in zip(cols, gains, strict=True):
        title = f"Linearity: '{name}' as a straight line"
        what = f"log({name})" if name in logged else f"'{name}'"
        fix = (f"Take it out of log_predictors and try curves {name}=spline:4 instead, and "
               "compare." if name in logged else
               f"Try curves {name}=spline:4 (a square and bands are the other shapes) and compare.")
        df2 = fit.df_resid - df1
        if df1 == 0 or df2 < 1:
            out.append(not_applicable(title, f"'{name}' takes too few distinct values (or the "
                                      "sales are too few) to test a curve.", threshold))
            continue
        fstat = (gain / df1) / ((fit.ssr - gain) / df2)
        p = float(f_sf(fstat, df1, df2))
        if p < alpha:
            verdict = WATCH
            note = (f"'{name}' needs a curve: a spline of {what} fits its effect better than "
                    f"a straight line. {fix}")
        else:
            verdict = OK
            note = f"A straight line in {what} describes the effect of '{name}' well enough."
        out.append(Check(title, fstat, p, threshold, verdict, note, float(df1), "F",
                         f"the effect of '{name}' is a straight line"))
    return out

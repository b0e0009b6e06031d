"""Curves read off a fitted model: each curve's effect table, and the per-predictor
linearity check (does a spline improve the fit of a predictor entered as a straight line?).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from plumbrule.diagnostics.checks import LEFT_NOTHING, Check, nested_f, not_applicable
from plumbrule.model.curves import KNOT_QUANTILES, CurveBasis, rcs_into
from plumbrule.model.fitted import FittedModel
from plumbrule.numeric.quantiles import quantiles
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
    df). From the fit's Q: the new columns of all predictors at once, centred with an
    intercept, are made orthogonal to the design and the residuals projected on what is
    left; df 0 when the values are too few or too repetitive for the knots."""
    from scipy.linalg.blas import dgemm     # loaded already by the fit's QR

    fit = model.fit
    n = len(model.x)
    knots = []
    for pos, column in enumerate(columns):
        x = model.x[:, column]
        t = quantiles(x, KNOT_QUANTILES[TEST_KNOTS])     # numpy's quantiles, bit for bit
        if not np.all(np.diff(t) > 0):
            t = quantiles(np.unique(x), KNOT_QUANTILES[TEST_KNOTS])
            if not np.all(np.diff(t) > 0):
                continue
        knots.append((pos, column, t))
    out = [(0.0, 0)] * len(columns)
    if not knots:
        return out
    per = TEST_KNOTS - 2
    k = per * len(knots)
    # one n × (k + 1) block: the new columns, then the residuals, so that a single
    # product gives every column's Gram row and its cross product with the residuals
    wr = np.empty((n, k + 1), order="F")
    w = wr[:, :k]
    for b, (_, column, t) in enumerate(knots):
        rcs_into(model.x[:, column], t, w[:, per * b:per * (b + 1)])
    if fit.has_intercept:
        w -= w.sum(axis=0) / n
    # One pass of Gram–Schmidt against Q: what it leaves inside span(Q) is of the order of
    # rounding, and the residuals are orthogonal to span(Q), so a second pass would move
    # neither the Gram of these columns nor their products with the residuals.
    c = fit.q.T @ w
    done = dgemm(-1.0, fit.q, c, 1.0, w, overwrite_c=True)  # w − Q·c, written into w (an
    if done is not w:                                       # F-ordered float block)
        w[...] = done
    wr[:, k] = fit.resid
    g = dgemm(1.0, w, wr, trans_a=True)                     # k × (k + 1)
    sq = np.diag(g).copy()
    raw = sq + np.einsum("ij,ij->j", c, c)       # ‖centred column‖², by Pythagoras
    keep = sq > 1e-12 * np.maximum(raw, np.finfo(float).tiny)
    norms = np.sqrt(sq)
    for b, (pos, _, _) in enumerate(knots):
        mine = np.flatnonzero(keep[per * b:per * (b + 1)]) + per * b
        if len(mine):
            out[pos] = _block_gain(g, norms, mine, w, fit.resid)
    return out


# Below this 1 − ρ² the two unit columns of a block are factored by QR rather than
# solved from their Gram matrix, which loses about log10(1/(1 − ρ²)) digits (2 at most here).
_GRAM_SAFE = 1e-2


def _block_gain(g: np.ndarray, norms: np.ndarray, mine: np.ndarray, w: np.ndarray,
                resid: np.ndarray) -> tuple[float, int]:
    """(‖projection of the residuals on the columns ``mine`` of ``w``‖², its rank) from the
    Gram rows ``g`` (last column: the products with the residuals) and the column norms."""
    cz = g[mine, -1] / norms[mine]               # unit columns' products with the residuals
    if len(mine) == 1:
        return float(cz[0] ** 2), 1
    if len(mine) == 2:
        rho = g[mine[0], mine[1]] / (norms[mine[0]] * norms[mine[1]])
        s2 = (1.0 - rho) * (1.0 + rho)
        if s2 >= _GRAM_SAFE:    # R = [[1, ρ], [0, √(1 − ρ²)]]: both columns kept
            p2 = (cz[1] - rho * cz[0]) / np.sqrt(s2)
            return float(cz[0] ** 2 + p2 ** 2), 2
    qz, rz = np.linalg.qr(w[:, mine] / norms[mine])
    diag = np.abs(np.diag(rz))
    ok = diag > 1e-8 * diag.max()
    proj = qz[:, ok].T @ resid
    return float(proj @ proj), int(ok.sum())


def linearity_by_predictor(model: FittedModel) -> list[Check]:
    """One check per straight numeric predictor: the partial F test of adding a 4-knot
    restricted cubic spline's two non-linear terms (Harrell 2015, §2.4.6 and §2.7.2), graded
    with a Bonferroni split of 0.05 over the predictors tested, so a correct straight model
    raises a false alarm on any of them at most about one time in twenty."""
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
        tested = nested_f(gain, df1, fit.ssr, df2)
        if tested is None:
            out.append(not_applicable(title, LEFT_NOTHING, threshold))
            continue
        fstat, p = tested
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

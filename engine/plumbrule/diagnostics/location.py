"""Location: is there a pattern on the map the model left in its residuals?

Moran's I of the residuals with k-nearest-neighbour weights (row-standardised), its
expectation and variance under randomisation (Cliff & Ord 1981, *Spatial Processes*,
eqs. 1.35–1.38 as usually quoted; from memory) and a one-sided normal p-value for
positive autocorrelation: neighbours' residuals alike, the sign of a location effect the
model does not carry. Neighbours come from scipy's cKDTree; coordinates in degrees are
turned into 3-D unit vectors first, so the nearest neighbours are those of great-circle
distance (chord length is monotone in it) without any local projection.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from plumbrule.model.location import EARTH_RADIUS_KM


@dataclass(frozen=True)
class MoranResult:
    """Moran's I of one variable: ``i``, its expectation ``expected`` (−1/(n − 1)) and
    ``variance`` under randomisation, the standard score ``z``, the one-sided p-value for
    positive autocorrelation ``p_value``, ``n`` points and ``k`` neighbours each."""

    i: float
    expected: float
    variance: float
    z: float
    p_value: float
    n: int
    k: int


def points(x: np.ndarray, y: np.ndarray, coordinates: str = "projected") -> np.ndarray:
    """The points for neighbour search: (n, 2) projected x, y as given, or for
    ``coordinates='degrees'`` (x longitude, y latitude) (n, 3) unit vectors scaled to
    kilometres on the Earth's mean sphere (chord distances, ≈ great-circle nearby)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    if coordinates != "degrees":
        return np.column_stack([x, y])
    lon, lat = np.radians(x), np.radians(y)
    c = np.cos(lat)
    return EARTH_RADIUS_KM * np.column_stack([c * np.cos(lon), c * np.sin(lon), np.sin(lat)])


def knn_neighbours(pts: np.ndarray, k: int) -> np.ndarray:
    """(n, k) indices of each point's k nearest other points (ties broken by the tree).

    A point never counts as its own neighbour, even where several points share one
    place (then the query may list another before it)."""
    from scipy.spatial import cKDTree
    n = len(pts)
    _, idx = cKDTree(pts).query(pts, k=k + 1)
    idx = np.asarray(idx).reshape(n, k + 1)
    own = idx == np.arange(n)[:, None]
    # a row whose own index is not among its k + 1 (many shared places): drop the last
    own[~own.any(axis=1), k] = True
    return idx[~own].reshape(n, k)


def knn_weights(pts: np.ndarray, k: int):
    """Row-standardised k-nearest-neighbour weights as a scipy CSR matrix (rows sum to 1)."""
    from scipy.sparse import csr_matrix
    n = len(pts)
    nb = knn_neighbours(pts, k)
    rows = np.repeat(np.arange(n), k)
    return csr_matrix((np.full(n * k, 1.0 / k), (rows, nb.ravel())), shape=(n, n))


def morans_i(values: np.ndarray, w) -> MoranResult:
    """Moran's I of ``values`` on weights ``w`` (sparse n × n, zero diagonal) with its
    moments under randomisation (Cliff & Ord 1981):

    I = n/S₀ · z′Wz / z′z, E[I] = −1/(n − 1),
    Var[I] = [n((n² − 3n + 3)S₁ − nS₂ + 3S₀²) − b₂((n² − n)S₁ − 2nS₂ + 6S₀²)]
             / ((n − 1)(n − 2)(n − 3)S₀²) − E[I]²,
    S₀ = Σwᵢⱼ, S₁ = ½Σ(wᵢⱼ + wⱼᵢ)², S₂ = Σ(wᵢ. + w.ᵢ)², b₂ = nΣz⁴/(Σz²)².
    """
    from plumbrule.numeric.distributions import norm_sf
    z = np.asarray(values, float)
    z = z - z.mean()
    n = len(z)
    k = int(round(w.getnnz() / n)) if n else 0
    s0 = float(w.sum())
    sym = w + w.T
    s1 = 0.5 * float(sym.multiply(sym).sum())
    s2 = float(np.sum((np.asarray(w.sum(axis=1)).ravel()
                       + np.asarray(w.sum(axis=0)).ravel()) ** 2))
    zz = float(z @ z)
    i = n / s0 * float(z @ (w @ z)) / zz
    e = -1.0 / (n - 1)
    b2 = n * float(np.sum(z ** 4)) / zz ** 2
    num = (n * ((n * n - 3 * n + 3) * s1 - n * s2 + 3 * s0 * s0)
           - b2 * ((n * n - n) * s1 - 2 * n * s2 + 6 * s0 * s0))
    var = num / ((n - 1) * (n - 2) * (n - 3) * s0 * s0) - e * e
    zscore = (i - e) / np.sqrt(var) if var > 0 else float("nan")
    return MoranResult(i=i, expected=e, variance=float(var), z=float(zscore),
                       p_value=float(norm_sf(zscore)), n=n, k=k)


def morans_i_residuals(residuals: np.ndarray, w, basis: np.ndarray) -> MoranResult:
    """Moran's I of least-squares residuals with their exact mean and variance under
    normal errors (Cliff & Ord 1981, ch. 8; from memory): M = I − QQᵀ with ``basis`` Q the
    orthonormal n × p basis of the fitted columns (constant included),

    E[I] = (n/S₀)·tr(MW)/(n − p),
    Var[I] = (n/S₀)²·[tr(MWMWᵀ) + tr((MW)²) + tr(MW)²] / ((n − p)(n − p + 2)) − E[I]²,

    each trace from Q and W (W sparse) without forming an n × n matrix:
    tr(MW) = tr(W) − tr(QᵀWQ); tr(MWMWᵀ) = ΣWᵢⱼ² − ‖WᵀQ‖² − ‖WQ‖² + ‖QᵀWQ‖²;
    tr((MW)²) = ΣWᵢⱼWⱼᵢ − 2·Σ(WᵀQ ∘ WQ) + tr((QᵀWQ)²).

    Why not the randomisation moments for residuals: residuals are not exchangeable (they
    sum to zero on every fitted column), and with many location terms in the model
    neighbours' residuals are less alike than exchangeable values, so the randomisation
    test calls too few (none in 400 simulated counties with a 5 × 5 surface, against 5 %)."""
    from plumbrule.numeric.distributions import norm_sf
    e = np.asarray(residuals, float)
    q = np.asarray(basis, float)
    n, p = q.shape
    k = int(round(w.getnnz() / n)) if n else 0
    s0 = float(w.sum())
    wq, wtq = np.asarray(w @ q), np.asarray(w.T @ q)
    c = q.T @ wq
    tr_w = float(w.diagonal().sum())
    tr_mw = tr_w - float(np.trace(c))
    tr_mwmwt = (float(w.multiply(w).sum()) - float(np.sum(wtq * wtq))
                - float(np.sum(wq * wq)) + float(np.sum(c * c)))
    tr_mw2 = (float(w.multiply(w.T).sum()) - 2.0 * float(np.sum(wtq * wq))
              + float(np.sum(c * c.T)))
    ratio = n / s0
    expected = ratio * tr_mw / (n - p)
    var = (ratio * ratio * (tr_mwmwt + tr_mw2 + tr_mw * tr_mw) / ((n - p) * (n - p + 2))
           - expected * expected)
    z = e - e.mean()            # the residuals of a fit with a constant already sum to 0
    i = ratio * float(z @ (w @ z)) / float(z @ z)
    zscore = (i - expected) / np.sqrt(var) if var > 0 else float("nan")
    return MoranResult(i=i, expected=float(expected), variance=float(var), z=float(zscore),
                       p_value=float(norm_sf(zscore)), n=n, k=k)


def residual_moran(residuals: np.ndarray, x: np.ndarray, y: np.ndarray,
                   coordinates: str = "projected", k: int = 8,
                   basis: np.ndarray | None = None) -> MoranResult:
    """Moran's I of the residuals of the sales with coordinates, k nearest neighbours each
    (k is cut to n − 1 on a tiny table). The caller leaves out sales without coordinates.
    With ``basis`` (the fit's orthonormal columns, these sales exactly) the moments are
    those of least-squares residuals (:func:`morans_i_residuals`), else randomisation."""
    pts = points(x, y, coordinates)
    k = int(min(k, len(pts) - 1))
    w = knn_weights(pts, k)
    return morans_i(residuals, w) if basis is None else morans_i_residuals(residuals, w, basis)


MAP_COLUMNS = ["row", "x", "y", "residual", "side", "size"]
CHECK_NAME = "Location: residuals alike among neighbours (Moran's I)"
MIN_POINTS = 10     # common practice, no source: the normal approximation needs a few dozen


def location_tables(rows: np.ndarray, residuals: np.ndarray, x: np.ndarray, y: np.ndarray,
                    coordinates: str = "projected", k: int = 8, alpha: float = 0.05,
                    basis: np.ndarray | None = None):
    """(Check, residual map) for the sales with both coordinates.

    The map has row, x, y, residual (model scale), side ('above' / 'below' the model:
    residual ≥ 0 or < 0) and size (|residual| / its largest, 0–1, for the marker). The
    check's statistic is Moran's I, its p-value one-sided (positive autocorrelation);
    'watch' below ``alpha``."""
    import pandas as pd
    from plumbrule.diagnostics.checks import Check, not_applicable
    from plumbrule.verdicts import OK, WATCH
    x, y, res = np.asarray(x, float), np.asarray(y, float), np.asarray(residuals, float)
    has = np.isfinite(x) & np.isfinite(y) & np.isfinite(res)
    left = int((~has).sum())
    big = float(np.max(np.abs(res[has]))) if has.any() else 0.0
    rmap = pd.DataFrame({"row": np.asarray(rows, np.int64)[has], "x": x[has], "y": y[has],
                         "residual": res[has],
                         "side": np.where(res[has] >= 0, "above", "below"),
                         "size": np.abs(res[has]) / big if big > 0 else 0.0},
                        columns=MAP_COLUMNS)
    without = (f" {left} sale{'s' if left != 1 else ''} without both coordinates left out."
               if left else "")
    target = f"p ≥ {alpha:g} (one-sided; k = {k} nearest neighbours, row-standardised)"
    if has.sum() < MIN_POINTS:
        return not_applicable(CHECK_NAME, f"Only {int(has.sum())} sales have coordinates; "
                              f"at least {MIN_POINTS} are needed." + without, target), rmap
    # the residuals' own moments need every fitted sale; with some left out, randomisation
    exact = basis is not None and bool(has.all())
    m = residual_moran(res[has], x[has], y[has], coordinates, k, basis if exact else None)
    flag = m.p_value < alpha
    note = (f"Moran's I {m.i:.3f} (expected {m.expected:.3f} without a pattern, z {m.z:.2f}) "
            f"over {m.n} sales, {m.k} neighbours each. "
            + ("Neighbouring sales' residuals are alike: the model misses an effect of "
               "location (a neighbourhood, a view, a school zone). Add a location term or "
               "the missing feature, and look at the map of residuals."
               if flag else "No pattern on the map the model leaves in its residuals.")
            + without)
    how = ("exact moments of least-squares residuals, normal approximation (Cliff & Ord "
           "1981)" if exact else "normal approximation under randomisation (Cliff & Ord 1981)")
    null = ("no spatial pattern in the errors" if exact
            else "residuals placed at random on the sales' locations")
    return Check(CHECK_NAME, m.i, m.p_value, target, WATCH if flag else OK, note,
                 distribution=how, null=null), rmap

"""The few distribution functions the engine needs, from scipy.special.

Importing scipy.stats costs about half of every command's start-up (it loads every
distribution and much of scipy); scipy.special holds the same numerical routines that
scipy.stats' t, F, χ², normal, binomial and Pearson III call internally. Each function
here returns exactly what the scipy.stats method of the same name returns (the argument
checks and support bounds of scipy's generic wrapper included), checked to 1e-12 in
tests/numeric/test_distributions.py. All return float64 arrays (0-d for scalars) or floats
where noted; probabilities are plain fractions, quantiles are on the statistic's scale.
"""

from __future__ import annotations

import numpy as np


def _valid(*dfs) -> np.ndarray:
    """scipy.stats' argument check of degrees of freedom: finite or infinite, > 0."""
    ok: np.ndarray = np.asarray(True)
    for d in dfs:
        ok = ok & (np.asarray(d, dtype=float) > 0)
    return ok


def _sf_from_zero(value, x, ok):
    """The generic wrapper of a distribution on [0, ∞): sf is 1 at and below 0, nan for bad
    arguments or a nan statistic."""
    x = np.asarray(x, dtype=float)
    out = np.where(x <= 0, 1.0, value)
    return np.where(ok & ~np.isnan(x), out, np.nan)[()]


def _ppf_bounds(value, q, ok, low: float, high: float = np.inf):
    """The generic wrapper of a quantile: the support's ends at q = 0 and 1, nan outside."""
    q = np.asarray(q, dtype=float)
    out = np.where(q == 0, low, np.where(q == 1, high, value))
    return np.where(ok & (q >= 0) & (q <= 1), out, np.nan)[()]


def t_sf(x, df):
    """P(T > x), T ~ Student t with ``df`` degrees of freedom (scipy.stats.t.sf)."""
    from scipy.special import stdtr
    x = np.asarray(x, dtype=float)
    return np.where(_valid(df), stdtr(df, -x), np.nan)[()]


def t_ppf(q, df):
    """The q quantile of Student t with ``df`` degrees of freedom (scipy.stats.t.ppf)."""
    from scipy.special import stdtrit
    with np.errstate(invalid="ignore"):
        return _ppf_bounds(stdtrit(df, q), q, _valid(df), -np.inf)


def f_sf(x, dfn, dfd):
    """P(F > x), F ~ F(dfn, dfd) (scipy.stats.f.sf)."""
    from scipy.special import fdtrc
    with np.errstate(invalid="ignore"):
        return _sf_from_zero(fdtrc(dfn, dfd, np.maximum(x, 0.0)), x, _valid(dfn, dfd))


def f_ppf(q, dfn, dfd):
    """The q quantile of F(dfn, dfd) (scipy.stats.f.ppf)."""
    from scipy.special import fdtri
    with np.errstate(invalid="ignore"):
        return _ppf_bounds(fdtri(dfn, dfd, q), q, _valid(dfn, dfd), 0.0)


def chi2_sf(x, df):
    """P(X > x), X ~ χ²(df) (scipy.stats.chi2.sf)."""
    from scipy.special import chdtrc
    with np.errstate(invalid="ignore"):
        return _sf_from_zero(chdtrc(df, np.maximum(x, 0.0)), x, _valid(df))


def norm_cdf(x):
    """P(Z ≤ x), Z standard normal (scipy.stats.norm.cdf)."""
    from scipy.special import ndtr
    return ndtr(np.asarray(x, dtype=float))[()]


def norm_sf(x):
    """P(Z > x), Z standard normal (scipy.stats.norm.sf)."""
    from scipy.special import ndtr
    return ndtr(-np.asarray(x, dtype=float))[()]


def norm_ppf(q):
    """The q quantile of the standard normal (scipy.stats.norm.ppf)."""
    from scipy.special import ndtri
    return ndtri(np.asarray(q, dtype=float))[()]


def _pearson3(x: float, skew: float, upper: bool) -> float:
    """P(X ≤ x) (or P(X > x) when ``upper``), X Pearson type III with mean 0, sd 1 and
    ``skew`` (scipy.stats.pearson3): a shifted, scaled gamma; normal for |skew| < 1.6e-5
    (scipy's own switch)."""
    from scipy.special import gammainc, gammaincc, ndtr
    if not (np.isfinite(skew) and not np.isnan(x)):
        return float("nan")
    if abs(skew) < 0.000016:
        return float(ndtr(-x if upper else x))
    beta = 2.0 / skew
    alpha = beta * beta
    zeta = -alpha / beta
    tx = beta * (x - zeta)
    # skew < 0 is the mirror image: its cdf is the gamma's sf and the other way round.
    lower_tail = (skew > 0) != upper
    if tx < 0:      # below the gamma's support (scipy's gamma.cdf = 0, gamma.sf = 1 there)
        return 0.0 if lower_tail else 1.0
    return float(gammainc(alpha, tx) if lower_tail else gammaincc(alpha, tx))


def pearson3_cdf(x: float, skew: float) -> float:
    """P(X ≤ x), Pearson III with mean 0, sd 1, ``skew`` (scipy.stats.pearson3.cdf)."""
    return _pearson3(x, skew, upper=False)


def pearson3_sf(x: float, skew: float) -> float:
    """P(X > x), Pearson III with mean 0, sd 1, ``skew`` (scipy.stats.pearson3.sf)."""
    return _pearson3(x, skew, upper=True)


def binom_cdf(k, n: int, p: float):
    """P(B ≤ k), B ~ binomial(n, p) (scipy.stats.binom.cdf: 0 below 0, 1 from n on)."""
    k = np.floor(np.asarray(k, dtype=float))
    inside = np.clip(k, 0, n)
    try:    # the routine scipy.stats.binom.cdf calls (Boost's binomial)
        from scipy.special._ufuncs import _binom_cdf as cdf
        value = cdf(inside, n, p)
    except ImportError:   # pragma: no cover - older or newer scipy without it
        from scipy.special import bdtr
        value = bdtr(inside, n, p)
    return np.where(k < 0, 0.0, np.where(k >= n, 1.0, value))[()]


def binom_ppf(q: float, n: int, p: float) -> float:
    """The smallest k with P(B ≤ k) ≥ q, B ~ binomial(n, p) (scipy.stats.binom.ppf)."""
    if not 0 <= q <= 1:
        return float("nan")
    if q == 0:
        return -1.0
    try:    # the routine scipy.stats.binom.ppf calls (Boost's binomial)
        from scipy.special._ufuncs import _binom_ppf as ppf
        return float(min(ppf(q, n, p), n))
    except ImportError:   # pragma: no cover - bisection on the cdf
        lo, hi = -1, n     # cdf(lo) < q ≤ cdf(hi)
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if binom_cdf(mid, n, p) >= q:
                hi = mid
            else:
                lo = mid
        return float(hi)

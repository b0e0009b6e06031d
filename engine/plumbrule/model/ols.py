"""The least-squares core: centred and scaled Householder QR, rank, covariance, leverage.

The fit is computed in *working coordinates*: each predictor column is centred
(when there is an intercept) and scaled to unit length, then factored by
Householder QR (LAPACK ``geqrf``); the singular values of R reveal the rank.
Coefficients get one step of iterative refinement of the augmented system,
with the residual accumulated in extended precision whenever double precision
could cost digits.
Standard errors come from the inverse of the triangular factor, never from
inverting X'X. All results are mapped back to the user's units at the end.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from plumbrule.errors import FitError, quote_list
from plumbrule.numeric.vectors import dot

_CHUNK = 1 << 13  # rows per block for the extended-precision passes (fits in cache)


@dataclass(frozen=True)
class OLSFit:
    """A least-squares fit in the user's units.

    ``coef``/``cov``/``se`` follow ``names`` (the intercept first when present).
    ``q`` is the thin orthogonal factor of the working design *without* the
    constant column (columns in input order), kept so diagnostics can run
    auxiliary regressions without refactoring. ``vif`` and ``x_means``/
    ``x_norms`` refer to the predictor columns (no intercept), in input order.
    """

    names: tuple[str, ...]
    coef: np.ndarray
    cov: np.ndarray
    se: np.ndarray
    fitted: np.ndarray
    resid: np.ndarray
    leverage: np.ndarray
    n: int
    n_params: int
    df_resid: int
    ssr: float
    tss: float            # centred when there is an intercept, else uncentred
    sigma: float           # residual standard error, response units
    has_intercept: bool
    q: np.ndarray
    r: np.ndarray
    x_means: np.ndarray
    x_norms: np.ndarray
    vif: np.ndarray
    # σmax/σmin of the design plumbrule factors: predictors centred (with an
    # intercept) and scaled to unit length. Centring is deliberate: an intercept's
    # near-dependence on positive predictors (log of area, say) says nothing about
    # the estimates users read.
    cond_number: float
    qty: np.ndarray | None = None   # Qᵀ(y − ȳ): the response in working units

    @property
    def bkw_cond_number(self) -> float:
        """The condition number as Belsley, Kuh and Welsch (1980, ch. 3) define it:
        σmax/σmin of the design with its constant column, every column scaled to unit
        length and *not* centred (the scale their 30/100 guides were set on). Unitless.

        With an intercept [1, X] = [1/√n, Q]·T, T = [[√n, √n·x̄ᵀ], [0, R·diag(‖x − x̄‖)]],
        and [1/√n, Q] has orthonormal columns, so the small T has the same singular values
        and column lengths: no pass over the data. Without one the factored design is
        already X scaled to unit length, uncentred, and κ is ``cond_number``."""
        if not self.has_intercept:
            return self.cond_number
        from scipy.linalg import svdvals
        k = self.r.shape[0]
        t = np.zeros((k + 1, k + 1))
        t[0, 0] = np.sqrt(self.n)
        t[0, 1:] = np.sqrt(self.n) * self.x_means
        t[1:, 1:] = self.r * self.x_norms
        t /= np.sqrt(np.einsum("ij,ij->j", t, t))
        sv = svdvals(t, check_finite=False)
        return float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")

    @property
    def r_squared(self) -> float:
        return 1.0 - self.ssr / self.tss if self.tss > 0 else float("nan")

    def robust_meat(self, kind: str) -> np.ndarray:
        """[1/√n, Q]ᵀ diag(ω) [1/√n, Q] with the HC1 or HC3 weights ω: the middle of
        the sandwich in working coordinates (for coefficients and for new rows)."""
        u2 = self.resid ** 2
        alone = self._alone
        if kind == "HC1":
            w = u2 * (self.n / self.df_resid)
        elif kind == "HC3":
            w = u2 / (1.0 - np.where(alone, 0.0, self.leverage)) ** 2
        else:  # pragma: no cover - validated at the edge
            raise ValueError(kind)
        w[alone] = 0.0
        return _weighted_gram(self.q, w, self.has_intercept)

    @property
    def _alone(self) -> np.ndarray:
        return self.leverage >= 1.0 - 1e-10     # a sale that alone fixes a parameter

    def alone_directions(self) -> np.ndarray:
        """Rows of the working design [1/√n, Q] of the sales with leverage 1, as m × p
        (m = 0 when there are none): orthonormal directions of the working coefficients.

        h_i = 1 means the hat matrix maps e_i to itself, so with u = Aᵀe_i (A the working
        design) Au = e_i: the estimate along u is y_i itself, and for j ≠ i, A_j·u = H_ij = 0:
        no other sale says anything about it (and two such rows are orthogonal)."""
        rows = self.q[self._alone]
        if self.has_intercept:
            rows = np.column_stack([np.full(len(rows), 1.0 / np.sqrt(self.n)), rows])
        return rows

    @property
    def leverage_limit(self) -> float:
        """The largest leverage among the sales whose leverage is below 1 (unitless).

        A sale with leverage 1 (the only sale in a category level, say) sits at 1 whatever
        the other sales are, so it says nothing about how far the rest of the sales spread;
        left in, it would lift the maximum to 1 and no subject would ever exceed it. NaN
        when every sale has leverage 1 (impossible with n > p)."""
        rest = self.leverage[~self._alone]
        return float(rest.max()) if rest.size else float("nan")

    def valuation_meat(self, kind: str) -> np.ndarray:
        """The sandwich middle used for the variance of an estimate (working coordinates):
        :meth:`robust_meat` plus σ²·uuᵀ for each direction u that one sale alone fixes
        (:meth:`alone_directions`).

        Along u the robust meat is 0 (that sale's residual is 0 by construction and no
        other sale loads on u), which would make an estimate resting on that sale look
        exact. Its variance there is var(y_i), which one residual cannot estimate, so the
        classical s² stands in (a homoscedastic assumption for that sale alone; decision
        of this project, derivation in docs/methods.md §9). Other directions keep the HC
        weights; the cross terms are 0 exactly, as cov(y_i, Σ_j (Aw)_j y_j) = (Aw)_i σ_i² = 0
        for w ⊥ u."""
        meat = self.robust_meat(kind)
        u = self.alone_directions()
        if len(u):
            meat = meat + self.sigma ** 2 * (u.T @ u)
        return meat

    def robust_cov(self, kind: str) -> np.ndarray:
        """Heteroscedasticity-consistent covariance, ``kind`` 'HC1' or 'HC3'."""
        alone = self._alone
        meat = self.robust_meat(kind)
        lmat = self._coef_map()
        cov = lmat @ meat @ lmat.T
        if alone.any():
            # Such a sale's residual is 0 by construction, so the robust variance of
            # every coefficient it moves would be understated (a one-sale level would
            # look exact): those coefficients get no robust variance (NaN).
            rows = self.alone_directions()
            sens = lmat @ rows.T
            scale = np.sqrt(np.einsum("ij,ij->i", lmat, lmat))[:, None]
            moved = np.any(np.abs(sens) > 1e-8 * scale, axis=1)
            cov[moved, :] = np.nan
            cov[:, moved] = np.nan
        return cov

    def predictor_correlations(self) -> np.ndarray | None:
        """Pearson correlations of the predictors (k × k, input order), read off
        the triangular factor: the centred unit-length design Xs has XsᵀXs = P RᵀR Pᵀ,
        so no pass over the data. None without an intercept (Xs is not centred)."""
        if not self.has_intercept:
            return None
        g = self.r.T @ self.r
        np.fill_diagonal(g, 1.0)
        return g

    def response_correlations(self) -> np.ndarray | None:
        """Correlation of the response with each predictor (input order):
        Xsᵀ(y − ȳ)/‖y − ȳ‖ = P Rᵀ Qᵀ(y − ȳ)/‖y − ȳ‖. None without an intercept."""
        if not self.has_intercept or self.qty is None or not self.tss > 0:
            return None
        return self.r.T @ self.qty / np.sqrt(self.tss)

    def _coef_map(self) -> np.ndarray:
        """L with cov(coef) = L · cov(working θ·R) · L' (see module doc)."""
        return _coef_map(self.r, self.x_means, self.x_norms,
                         self.n, self.has_intercept)


def fit_ols(x: np.ndarray, y: np.ndarray, names: list[str],
            intercept: bool = True) -> OLSFit:
    """Fit y on the columns of ``x`` (n × k, no constant column) by least squares.

    ``names`` are the k predictor term names (used in rank messages). Raises
    :class:`FitError` when rows are too few or a column is an exact
    combination of others. Returns an :class:`OLSFit` in the user's units.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    n, k = x.shape
    n_params = k + int(intercept)
    if n < n_params + 1:
        raise FitError(
            f"Only {n} usable rows for {n_params} parameters: the fit needs at least "
            f"{n_params + 1}. Add sales or remove predictors.")
    q, r, means, norms, cond = _factor(x, names, intercept)
    coef, resid, qty, tss = _coefficients(x, y, q, r, means, norms, intercept, cond)
    df_resid = n - n_params
    ssr = dot(resid, resid)
    sigma = float(np.sqrt(ssr / df_resid))
    rinv = _solve_r(r, np.eye(k))
    lmat = _coef_map(r, means, norms, n, intercept, rinv)
    leverage = np.einsum("ij,ij->i", q, q)
    if intercept:
        leverage += 1.0 / n
    all_names = (("intercept",) if intercept else ()) + tuple(names)
    return OLSFit(
        names=all_names, coef=coef, cov=sigma ** 2 * (lmat @ lmat.T),
        se=sigma * np.sqrt(np.einsum("ij,ij->i", lmat, lmat)), fitted=y - resid, resid=resid,
        leverage=leverage, n=n, n_params=n_params, df_resid=df_resid, ssr=ssr,
        tss=tss, sigma=sigma, has_intercept=intercept, q=q, r=r,
        x_means=means, x_norms=norms,
        vif=np.einsum("ij,ij->i", rinv, rinv) if intercept else np.full(k, np.nan),
        cond_number=cond, qty=qty)


def _factor(x: np.ndarray, names: list[str], intercept: bool):
    """QR of the working design (columns centred with an intercept, unit length):
    (Q, R, column means, column norms, condition number of the working design). Refuses a
    constant column or an exact combination of columns."""
    n, k = x.shape
    means = _column_means(x) if intercept else np.zeros(k)
    xs = np.empty((n, k), order="F")
    np.subtract(x, means, out=xs)
    if intercept:
        xs -= xs.mean(axis=0)  # second pass removes the rounding left in the mean
    norms = np.sqrt(np.einsum("ij,ij->j", xs, xs))
    _check_constant_columns(norms, names, intercept)
    xs /= norms
    q, r = _qr(xs)      # xs is overwritten: Q takes its place, no second n × k buffer
    del xs
    svals = _singular_values(r)
    _check_rank(svals, x, means, norms, names, intercept)
    cond = float(svals[0] / svals[-1]) if svals[-1] > 0 else float("inf")
    return q, r, means, norms, cond


def _coefficients(x, y, q, r, means, norms, intercept: bool, cond: float):
    """(coefficients in user units, residuals, Qᵀ(y − ȳ), total sum of squares): the
    working solve, refined in extended precision against the data."""
    y_mean = float(np.mean(y)) if intercept else 0.0
    yc = y - y_mean if intercept else y
    qty = q.T @ yc
    tss = dot(yc, yc)
    del yc
    b = _solve_r(r, qty) / norms                      # working coefficients → user units
    quick = _refine_double(x, y, means, norms, q, r, b, y_mean, intercept, cond)
    if quick is not None:
        b_ext, c_ext, res_ext = quick
    else:
        b_ext, c_ext, res_ext = _refine(x, y, means, norms, q, r, b, y_mean, intercept)
    b = b_ext.astype(float)
    # The intercept is a difference of large numbers (ȳ − x̄·b): form it from the
    # extended-precision slopes and constant so the cancellation costs no digits.
    b0 = float(c_ext - np.dot(means.astype(np.longdouble), b_ext))
    coef = np.concatenate([[b0], b]) if intercept else b
    return coef, np.asarray(res_ext, dtype=float), qty, tss


# --- pieces ---------------------------------------------------------------

def _column_means(x: np.ndarray) -> np.ndarray:
    return np.mean(x, axis=0)


def _qr(xs: np.ndarray):
    """Householder QR of the (Fortran-ordered) working design, in place: Q takes
    xs's memory (LAPACK geqrf/orgqr; backward stable, Björck 1996 §2.4).

    Columns are centred and unit length, so no pivoting is needed for accuracy;
    rank is judged from the singular values of R (see :func:`_check_rank`),
    which reveal it more sharply than pivoted diagonals. Returns (Q, R), columns in
    input order.
    """
    from scipy.linalg import qr
    q, r = qr(xs, mode="economic", overwrite_a=True, check_finite=False)
    return q, r


def _singular_values(r: np.ndarray) -> np.ndarray:
    from scipy.linalg import svdvals
    return svdvals(r, check_finite=False) if r.size else np.ones(1)


def _solve_r(r: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    from scipy.linalg import solve_triangular
    return solve_triangular(r, rhs, check_finite=False)


def _coef_map(r, means, norms, n, intercept, rinv=None) -> np.ndarray:
    """L such that cov(coef) = σ² L Lᵀ; rows follow the coefficient order.

    In working coordinates the design is [1/√n, X_s] with R_full = diag(1, R),
    and coef = T·θ with T mapping the centred, scaled fit back to user units.
    """
    rinv = _solve_r(r, np.eye(r.shape[0])) if rinv is None else rinv
    rows = rinv / norms[:, None]                      # slope rows: D⁻¹ R⁻¹
    if not intercept:
        return rows
    k = r.shape[0]
    lmat = np.zeros((k + 1, k + 1))
    lmat[0, 0] = 1.0 / np.sqrt(n)
    lmat[0, 1:] = -(means @ rows)
    lmat[1:, 1:] = rows
    return lmat


def _weighted_gram(q: np.ndarray, w: np.ndarray, intercept: bool) -> np.ndarray:
    """[1/√n, Q]ᵀ diag(w) [1/√n, Q], accumulated in blocks to bound memory."""
    n, k = q.shape
    off = int(intercept)
    g = np.zeros((k + off, k + off))
    for start in range(0, n, _CHUNK):
        qb = q[start:start + _CHUNK]
        wb = w[start:start + _CHUNK]
        g[off:, off:] += (qb * wb[:, None]).T @ qb
        if intercept:
            v = wb @ qb / np.sqrt(n)
            g[0, 1:] += v
            g[1:, 0] += v
            g[0, 0] += wb.sum() / n
    return g


def _blocks(n: int):
    for start in range(0, n, _CHUNK):
        yield slice(start, min(start + _CHUNK, n))


def _residual_ext(x, y, means, b, c):
    """y − c − (x − means)·b accumulated in extended precision, block by block."""
    ld = np.longdouble
    bl, ml, cl = np.asarray(b, dtype=ld), means.astype(ld), ld(c)
    out = np.empty(len(y), dtype=ld)
    for blk in _blocks(len(y)):
        xb = x[blk].astype(ld)
        xb -= ml
        out[blk] = y[blk] - cl - np.einsum("ij,j->i", xb, bl)
    return out


def _residual_and_gradient(x, y, means, b, c):
    """(r, (x − means)ᵀ r) with r = y − c − (x − means)·b, both in extended
    precision, in one pass: each block of x is widened once and used twice."""
    ld = np.longdouble
    bl, ml, cl = np.asarray(b, dtype=ld), means.astype(ld), ld(c)
    out = np.empty(len(y), dtype=ld)
    acc = np.zeros(x.shape[1], dtype=ld)
    for blk in _blocks(len(y)):
        xb = x[blk].astype(ld)
        xb -= ml
        rb = y[blk] - cl - np.einsum("ij,j->i", xb, bl)
        out[blk] = rb
        acc += np.einsum("i,ij->j", rb, xb)
    return out, acc


def _xt_times(x, means, v):
    """(x − means)ᵀ v in extended precision, block by block."""
    ld = np.longdouble
    ml = means.astype(ld)
    acc = np.zeros(x.shape[1], dtype=ld)
    for blk in _blocks(x.shape[0]):
        xb = x[blk].astype(ld)
        xb -= ml
        acc += np.einsum("i,ij->j", v[blk], xb)
    return acc


# A double-precision residual is trusted for refinement when its rounding bound,
# amplified by the condition number, stays below this share of the residual.
_DOUBLE_OK = 1e-13


def _refine_double(x, y, means, norms, q, r, b, c, intercept, cond):
    """One refinement step in double precision, or None when it could cost digits.

    r = y − c′ − x·b (one BLAS pass, c′ = c − means·b) carries a rounding error
    of at most about ε·(‖y‖ + √n|c′| + Σⱼ‖xⱼ‖|bⱼ|). When that bound times the
    condition number is below ``_DOUBLE_OK``·‖r‖ — the usual case for sales data,
    whose residuals are a good share of the price — the refined coefficients
    are as good as the extended-precision step would give (to ~13 digits), at
    a fraction of the cost. Otherwise (near-exact fits, large means, near
    collinearity: the NIST-type problems) the caller uses :func:`_refine`.
    Returns (b, c, residual) like :func:`_refine` (slopes and constant in
    extended precision, the residual in double).
    """
    ld = np.longdouble
    n = len(y)
    c_shift = float(ld(c) - np.dot(means.astype(ld), b.astype(ld)))
    res = np.dot(x, b)
    np.subtract(y, res, out=res)
    res -= c_shift
    col_norms = np.sqrt(norms ** 2 + n * means ** 2) if intercept else norms
    bound = np.finfo(float).eps * (np.sqrt(dot(y, y)) + np.sqrt(n) * abs(c_shift)
                                   + float(np.dot(col_norms, np.abs(b))))
    rnorm = float(np.sqrt(dot(res, res)))
    if not np.isfinite(cond) or cond * bound > _DOUBLE_OK * rnorm:
        return None
    shift = float(np.mean(res)) if intercept else 0.0
    if shift:
        res -= shift
    u = q.T @ res                                     # Xsᵀr in working units
    d_theta = _solve_r(r, u)
    db = d_theta
    b_ext = b.astype(ld) + (db / norms).astype(ld)
    res -= np.dot(q, u)
    return b_ext, ld(c) + ld(shift), res


def _refine(x, y, means, norms, q, r, b, c, intercept, steps=1):
    """Iterative refinement of the augmented system [I A; Aᵀ 0][r; θ] = [y; 0]
    (Björck 1967), residuals accumulated in extended precision.

    Refining the residual together with the coefficients removes the κ²·‖r‖
    term that plain refinement leaves on large-residual problems.
    Returns (b, c, residual), all in extended precision: the slopes and the
    constant keep the digits the correction adds beyond double precision.
    """
    from scipy.linalg import solve_triangular
    ld = np.longdouble
    n = len(y)
    b = np.asarray(b, dtype=ld)
    c = ld(c)
    res = None
    for step in range(steps):
        if res is None:
            # First step: r is formed from θ, so f = y − r − Aθ is exactly zero
            # and Aᵀr comes out of the same pass over the data.
            res, xtr = _residual_and_gradient(x, y, means, b, c)
            f = np.zeros(n, dtype=ld)
        else:
            f = _residual_ext(x, y, means, b, c) - res
            xtr = _xt_times(x, means, res)
        g = -xtr / norms                                    # −Aᵀr in working units
        u = solve_triangular(r, g.astype(float), trans="T", check_finite=False)
        if intercept:
            # The constant column 1/√n has its own equation 1ᵀr = 0: the rounding in
            # ȳ and in the column means leaves Σr ≠ 0, which moves the constant.
            f_mean = np.sum(f) / n
            shift = f_mean + np.sum(res) / n
        else:
            f_mean = shift = ld(0)
        v = (q.T @ (f - f_mean).astype(float) - u) if step else -u
        d_theta = _solve_r(r, v)
        db = d_theta
        b = b + (db / norms).astype(ld)
        c = c + shift
        res = res + (f - shift) - (q @ v).astype(ld)
    return b, c, res


def _rank_tolerance(n: int, k: int) -> float:
    """|R_jj| below this (columns have unit length) means an exact combination."""
    return 10.0 * max(n, k) * np.finfo(float).eps


def _check_constant_columns(norms, names, intercept) -> None:
    zero = [names[j] for j in np.flatnonzero(norms == 0)]
    if not zero:
        return
    if intercept:
        raise FitError(
            f"{quote_list(zero)} has the same value in every used row, so it repeats the "
            "intercept. Remove it from the predictors.", column=zero[0])
    raise FitError(f"{quote_list(zero)} is zero in every used row. Remove it from the "
                   "predictors.", column=zero[0])


def _check_rank(svals, x, means, norms, names, intercept) -> None:
    """σmin/σmax of the unit-length working design below the tolerance means a
    column is (to working precision) an exact combination of the others."""
    tol = _rank_tolerance(x.shape[0], x.shape[1])
    if svals.size == 0 or svals[-1] > tol * svals[0]:
        return
    raise _name_dependency(x, means, norms, names, tol)


def _name_dependency(x, means, norms, names, tol) -> FitError:
    """Find, in the user's column order, the first column that the earlier ones span."""
    xs = (x - means) / norms
    kept: list[int] = []
    for j in range(xs.shape[1]):
        if kept:
            coef, *_ = np.linalg.lstsq(xs[:, kept], xs[:, j], rcond=None)
            gap = np.linalg.norm(xs[:, j] - xs[:, kept] @ coef)
            if gap <= 10 * tol:
                big = np.abs(coef) > 1e-8 * np.abs(coef).max()
                parts = [names[kept[i]] for i in np.flatnonzero(big)]
                if not parts:      # non-finite working values: no combination to name
                    break
                return FitError(
                    f"'{names[j]}' is an exact combination of {quote_list(parts)}: the "
                    "fit cannot separate their effects. Remove one of them.",
                    column=names[j])
        kept.append(j)
    return FitError("The predictors are exactly collinear. Remove a redundant predictor.")



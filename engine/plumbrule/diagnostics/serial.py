"""Serial correlation of residuals in sale-date order, with p-values from the exact null.

Both statistics here are ratios of quadratic forms in the residuals, r = eᵀAe / eᵀe for a
symmetric n × n matrix A: Durbin–Watson (A = DᵀD, D the first difference) and the
time-neighbour correlation (A = (W + Wᵀ)/2, W the row-standardised k-nearest-in-time
graph; Moran's I with S₀ = n). Under the null (errors independent, normal, equal variance)
e = Mε with M = I − UUᵀ, U an orthonormal basis of the design with its constant, so

    P(r ≤ c) = P(Σᵢ (νᵢ − c)·zᵢ² ≤ 0),   zᵢ iid N(0, 1),

with ν the n − p eigenvalues of NᵀAN (N an orthonormal basis of the residual space).
Up to ``EXACT_MAX_N`` sales that probability is computed by Imhof's (1961) inversion
integral; above it r follows a Pearson type III curve with the exact null mean, variance
and skewness of r (from traces of MA; no n × n dense matrix): Durbin–Watson is close to
normal there, the neighbour ratio is skewed to the right at a few hundred sales.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

EXACT_MAX_N = 100      # exact up to here (an (n − p)² eigenproblem); normal above
NEIGHBOURS = 4         # k nearest sales in time for the neighbour check (our choice)


@dataclass(frozen=True)
class RatioTest:
    """A ratio eᵀAe/eᵀe of residuals and its null distribution.

    ``p_lower``/``p_upper`` are P(r ≤ observed) and P(r ≥ observed) under the null;
    ``mean``/``sd`` the exact null mean and standard deviation of r; ``method`` says how
    the probabilities were found ('exact (Imhof)' or 'normal, exact moments')."""

    statistic: float
    mean: float
    sd: float
    p_lower: float
    p_upper: float
    method: str

    @property
    def p_two_sided(self) -> float:
        return float(min(1.0, 2.0 * min(self.p_lower, self.p_upper)))


# --- sale-date order ----------------------------------------------------------

def sale_seconds(data: pd.DataFrame, date_column: str, order: np.ndarray) -> np.ndarray:
    """Sale times in whole seconds (int64), in ``order``."""
    ns = data[date_column].to_numpy(dtype="datetime64[ns]").astype(np.int64)[order]
    return ns // 1_000_000_000


# --- the two matrices A ----------------------------------------------------------

def difference_matrix(n: int):
    """A = DᵀD (scipy CSR, n × n) for the first-difference matrix D ((n − 1) × n): the
    Durbin–Watson numerator is eᵀAe = Σ(eₜ − eₜ₋₁)². Diagonal 1, 2, …, 2, 1; off-diagonal −1."""
    from scipy.sparse import diags
    main = np.full(n, 2.0)
    main[[0, -1]] = 1.0
    off = np.full(n - 1, -1.0)
    return diags([off, main, off], [-1, 0, 1], format="csr")


def durbin_watson_test(e: np.ndarray, basis: np.ndarray) -> RatioTest:
    """Durbin–Watson d = Σ(eₜ − eₜ₋₁)²/Σeₜ² of residuals ``e`` (already in date order) and
    its null distribution; ``basis`` the model's
    :attr:`~plumbrule.model.fitted.FittedModel.date_order_basis` (the same order)."""
    d = float(np.sum(np.diff(e) ** 2) / np.dot(e, e))
    return ratio_test(d, basis, difference_matrix(len(e)))


def neighbour_matrix(seconds: np.ndarray, k: int = NEIGHBOURS):
    """Row-standardised k-nearest-in-time weights W (scipy CSR, n × n) over sales already in
    date order (``seconds`` ascending): (We)ᵢ is the mean residual of sale i's k nearest
    sales in time. In date order those k form a run around i, grown one sale at a time
    toward the smaller time gap; equal gaps go to the nearer place in date order, then to
    the earlier sale. The band of W is at most k wide."""
    from scipy.sparse import csr_matrix
    n = len(seconds)
    k = min(k, n - 1)
    pos = np.arange(n)
    lo, hi = pos.copy(), pos.copy()           # the run [lo, hi] around each sale
    far = np.iinfo(np.int64).max
    for _ in range(k):
        left = np.where(lo > 0, seconds - seconds[np.maximum(lo - 1, 0)], far)
        right = np.where(hi < n - 1, seconds[np.minimum(hi + 1, n - 1)] - seconds, far)
        # place gaps are pos − lo + 1 and hi + 1 − pos
        go_left = (left < right) | ((left == right) & (pos - lo <= hi - pos))
        lo = np.where(go_left, lo - 1, lo)
        hi = np.where(go_left, hi, hi + 1)
    j = np.arange(k)[None, :]
    cols = lo[:, None] + j
    cols = (cols + (cols >= pos[:, None])).ravel()     # skip the sale itself
    # exactly k entries a row, in order: the CSR arrays directly, no COO sort
    return csr_matrix((np.full(n * k, 1.0 / k), cols, np.arange(0, n * k + 1, k)),
                      shape=(n, n))


def neighbour_test(e: np.ndarray, basis: np.ndarray, w) -> RatioTest:
    """I = eᵀWe/eᵀe (Moran's I with S₀ = n: each residual against the mean residual of its
    time neighbours) and its null distribution; eᵀWe = eᵀSe with S = (W + Wᵀ)/2."""
    stat = float(e @ (w @ e) / np.dot(e, e))
    return ratio_test(stat, basis, ((w + w.T) * 0.5).tocsr())


# --- the null distribution of eᵀAe/eᵀe ----------------------------------------------------------

def ratio_test(stat: float, basis: np.ndarray, a) -> RatioTest:
    """Null distribution of r = eᵀAe/eᵀe at ``stat`` for a symmetric sparse (CSR) A.

    Exact (Imhof) up to ``EXACT_MAX_N`` sales; above, a Pearson type III curve with the
    exact null mean, variance and skewness of r (normal when the skewness is 0)."""
    from plumbrule.numeric.distributions import pearson3_cdf, pearson3_sf
    n, p = basis.shape
    mean, sd, skew = ratio_moments(basis, a)
    if n <= EXACT_MAX_N:
        lam = residual_eigenvalues(basis, a)
        below = imhof_below(lam - stat)
        return RatioTest(stat, mean, sd, below, 1.0 - below, "exact (Imhof)")
    z = (stat - mean) / sd if sd > 0 else 0.0
    return RatioTest(stat, mean, sd, pearson3_cdf(z, skew), pearson3_sf(z, skew),
                     "three-moment (Pearson III)")


def ratio_moments(basis: np.ndarray, a) -> tuple[float, float, float]:
    """(mean, sd, skewness) of r = eᵀAe/eᵀe under the null, exactly.

    With B = MAM and ν = n − p, the numerator has cumulants 2^(j−1)(j − 1)!·tr(Bʲ) and,
    r being independent of eᵀe (Pitman 1937; from memory), E rʲ = E(εᵀBε)ʲ / E(χ²_ν)ʲ:
    E r = t₁/ν, E r² = (t₁² + 2t₂)/(ν(ν + 2)), E r³ = (t₁³ + 6t₁t₂ + 8t₃)/(ν(ν + 2)(ν + 4)),
    tⱼ = tr((MA)ʲ). Expanding M = I − UUᵀ leaves traces of A and small p × p products
    with C = UᵀAU (AU and A²U are n × p): no n × n dense matrix is formed."""
    n, p = basis.shape
    nu = float(n - p)
    au = a @ basis
    a2u = a @ au
    c = basis.T @ au
    c2 = au.T @ au                      # UᵀA²U
    t1 = float(a.diagonal().sum()) - float(np.trace(c))
    t2 = _frobenius2(a) - 2.0 * float(np.trace(c2)) + float(np.sum(c * c))
    t3 = (_trace_cube(a) - 3.0 * float(np.sum(au * a2u)) + 3.0 * float(np.sum(c * c2))
          - float(np.trace(c @ c @ c)))
    m1 = t1 / nu
    m2 = (t1 * t1 + 2.0 * t2) / (nu * (nu + 2.0))
    m3 = (t1 ** 3 + 6.0 * t1 * t2 + 8.0 * t3) / (nu * (nu + 2.0) * (nu + 4.0))
    var = max(m2 - m1 * m1, 0.0)
    sd = float(np.sqrt(var))
    third = m3 - 3.0 * m1 * m2 + 2.0 * m1 ** 3
    return m1, sd, float(third / sd ** 3) if sd > 0 else 0.0


def _frobenius2(a) -> float:
    """‖A‖²_F of a sparse matrix: the sum of its squared stored entries."""
    a.sum_duplicates()
    return float(np.dot(a.data, a.data))


def _trace_cube(a) -> float:
    """tr(A³) for a sparse symmetric banded A, from its 2w + 1 diagonals (w its half
    bandwidth: 1 for Durbin–Watson, at most k for the neighbour graph): Σᵢ Σ_(b, c)
    A[i, i+b]·A[i+b, i+b+c]·A[i+b+c, i], O(n·w²) with no product matrix formed."""
    n = a.shape[0]
    coo = a.tocoo()
    if not coo.nnz:
        return 0.0
    w = int(np.max(np.abs(coo.row - coo.col)))
    pad = 2 * w
    diags = {}
    for off in range(-w, w + 1):               # diags[off][pad + i] = A[i, i + off]
        d = np.zeros(n + 2 * pad)
        start = pad + max(0, -off)
        vals = a.diagonal(off)
        d[start:start + len(vals)] = vals
        diags[off] = d
    total = 0.0
    for b in range(-w, w + 1):
        for c in range(-w, w + 1):
            back = -(b + c)
            if abs(back) > w:
                continue
            total += float(np.dot(diags[b][pad:pad + n] * diags[c][pad + b:pad + b + n],
                                  diags[back][pad + b + c:pad + b + c + n]))
    return total


def residual_eigenvalues(basis: np.ndarray, a) -> np.ndarray:
    """The n − p eigenvalues of NᵀAN, N an orthonormal basis of the residual space
    (the last n − p columns of the complete QR factor of ``basis``)."""
    from scipy.linalg import eigvalsh, qr
    n, p = basis.shape
    full, _ = qr(basis, mode="full", check_finite=False)
    nb = full[:, p:]
    g = nb.T @ (a @ nb)
    return eigvalsh(0.5 * (g + g.T), check_finite=False)


def imhof_below(lam: np.ndarray) -> float:
    """P(Σ λᵢ zᵢ² ≤ 0) for iid standard normal zᵢ, by Imhof's (1961, Biometrika 48) formula
    P(Q > 0) = ½ + (1/π) ∫₀^∞ sin θ(u) / (u ρ(u)) du, θ(u) = ½ Σ arctan(λᵢu),
    ρ(u) = Π (1 + λᵢ²u²)^¼ (scipy ``quad``; the weights are scaled to max |λ| = 1 first,
    which leaves the probability unchanged; absolute accuracy about 1e-9)."""
    from scipy.integrate import quad
    big = float(np.max(np.abs(lam))) if lam.size else 0.0
    if big == 0:
        return 1.0
    lam = lam / big
    lam = lam[np.abs(lam) > 1e-13]
    if np.all(lam > 0):
        return 0.0
    if np.all(lam < 0):
        return 1.0

    def integrand(u: float) -> float:
        lu = lam * u
        theta = 0.5 * np.arctan(lu).sum()
        log_rho = 0.25 * np.log1p(lu * lu).sum()
        return float(np.sin(theta) * np.exp(-log_rho) / u)     # exp(−log ρ): quiet underflow

    val, _ = quad(integrand, 0.0, np.inf, limit=400, epsabs=1e-11, epsrel=1e-9)
    return float(np.clip(0.5 - val / np.pi, 0.0, 1.0))

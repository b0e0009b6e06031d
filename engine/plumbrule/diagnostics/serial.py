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
from typing import Any

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


class Handoff:
    """An n × p basis its holder gives up to one test (:func:`neighbour_test`): the test
    takes it (:meth:`take`) and lets it go as soon as its products with the basis are
    formed, before the larger work that follows (``shape`` stays readable)."""

    def __init__(self, basis: np.ndarray) -> None:
        self._basis: np.ndarray | None = basis
        self.shape: tuple[int, ...] = basis.shape

    def take(self) -> np.ndarray:
        """The basis (once: the holder lets it go)."""
        basis, self._basis = self._basis, None
        if basis is None:
            raise ValueError("this basis was taken already")
        return basis


def _taken(basis: np.ndarray | Handoff) -> np.ndarray:
    return basis.take() if isinstance(basis, Handoff) else basis


# --- sale-date order ----------------------------------------------------------

def sale_seconds(data: pd.DataFrame, date_column: str, order: np.ndarray) -> np.ndarray:
    """Sale times in whole seconds (int64), in ``order``."""
    ns = data[date_column].to_numpy(dtype="datetime64[ns]").astype(np.int64)[order]
    return ns // 1_000_000_000


# --- the two matrices A ----------------------------------------------------------

@dataclass(frozen=True)
class BandMatrix:
    """A symmetric n × n matrix of half bandwidth w by its upper diagonals:
    ``upper[o][i] = A[i, i + o]`` (o = 0 … w, each of length n − o)."""

    upper: tuple[np.ndarray, ...]

    @property
    def n(self) -> int:
        return len(self.upper[0])

    @property
    def width(self) -> int:
        return len(self.upper) - 1

    def diagonal(self, off: int) -> np.ndarray:
        """A[i, i + off] for each i where it exists (off may be negative: A is symmetric)."""
        return self.upper[abs(off)]

    def trace(self) -> float:
        return float(np.sum(self.upper[0]))

    def frobenius2(self) -> float:
        """‖A‖²_F: the main diagonal's squares and twice each off-diagonal's."""
        d0 = self.upper[0]
        return float(np.dot(d0, d0)) + 2.0 * sum(float(np.dot(d, d)) for d in self.upper[1:])

    def trace_cube(self) -> float:
        """tr(A³) = Σ over closed walks i → i+b → i+b+c → i of the three entries, for steps
        (b, c, d), b + c + d = 0, all within the band: O(n·w²), no product matrix formed.
        A walk's sum is the same for its three rotations and (A symmetric) its reversal,
        so each such family is summed once, times its size; a step on an all-zero
        diagonal (the neighbour matrix's main one) adds nothing."""
        n, w = self.n, self.width
        used = {o for o in range(-w, w + 1) if np.any(self.upper[abs(o)])}
        families: dict[tuple[int, ...], int] = {}
        for b in range(-w, w + 1):
            for c in range(-w, w + 1):
                steps = (b, c, -(b + c))
                if all(x in used for x in steps):
                    rev = (-steps[2], -steps[1], -steps[0])
                    key = min(t[i:] + t[:i] for t in (steps, rev) for i in range(3))
                    families[key] = families.get(key, 0) + 1
        total = 0.0
        for (b, c, back), size in families.items():
            lo, hi = max(0, -b, -(b + c)), n - max(0, b, b + c)   # rows i with a whole walk
            if hi <= lo:
                continue
            walk = np.dot(self._rows(b, lo, hi) * self._rows(c, lo + b, hi + b),
                          self._rows(back, lo + b + c, hi + b + c))
            total += size * float(walk)
        return total

    def _rows(self, off: int, start: int, stop: int) -> np.ndarray:
        """A[i, i + off] for rows start ≤ i < stop (a view of the stored diagonal)."""
        shift = max(0, -off)
        return self.upper[abs(off)][start - shift:stop - shift]

    def dense(self) -> np.ndarray:
        """A as an n × n array (the exact small-sample path; checks)."""
        n = self.n
        out = np.zeros((n, n))
        idx = np.arange(n)
        for o, d in enumerate(self.upper):
            out[idx[:n - o], idx[o:]] = d
            out[idx[o:], idx[:n - o]] = d
        return out

    def times(self, x: np.ndarray) -> np.ndarray:
        """A @ x for an n-vector or n × m block x; each row's terms are added in column
        order (2w + 1 shifted updates: meant for small n)."""
        n, w = self.n, self.width
        out = np.zeros(x.shape)
        for off in range(-w, w + 1):
            d = self.diagonal(off)
            if x.ndim > 1:
                d = d[:, None]
            if off >= 0:
                out[:n - off] += d * x[off:]
            else:
                out[-off:] += d * x[:n + off]
        return out

    def basis_terms(self, u: np.ndarray | Handoff) -> tuple[np.ndarray, np.ndarray, float]:
        """(UᵀAU, UᵀA²U, tr(UᵀA³U)) for an n × p block U."""
        u = _taken(u)
        au = self.times(u)
        return u.T @ au, au.T @ au, float(np.vdot(au, self.times(au)))


@dataclass(frozen=True)
class DifferenceMatrix(BandMatrix):
    """A = DᵀD for the first difference D ((n − 1) × n): the Durbin–Watson numerator is
    eᵀAe = Σ(eₜ − eₜ₋₁)². Diagonal 1, 2, …, 2, 1; off-diagonal −1."""

    def basis_terms(self, u: np.ndarray | Handoff) -> tuple[np.ndarray, np.ndarray, float]:
        """Through G = DU ((n − 1) × p, numpy diff): UᵀAU = GᵀG, UᵀA²U = GᵀTG and
        tr(UᵀA³U) = tr(GᵀT²G) with T = DDᵀ (diagonal 2, off-diagonal −1), so T G is never
        formed: GᵀTG = 2GᵀG − (Y + Yᵀ) with Y = Σ Gᵢᵀ Gᵢ₊₁, and T² has diagonal 6 (5 at
        both ends), first off-diagonal −4, second 1."""
        g = np.diff(_taken(u), axis=0)
        # a constant first column differences to exact zeros: left out of the products (its
        # rows and columns of UᵀAU and UᵀA²U are zero), a seventh of their cost at p = 15
        skip = int(len(g) > 0 and not g[:, 0].any())
        h = g[:, skip:]
        y = h[:-1].T @ h[1:]
        c = np.zeros((u.shape[1],) * 2)
        c2 = np.zeros_like(c)
        c[skip:, skip:] = h.T @ h
        c2[skip:, skip:] = 2.0 * c[skip:, skip:] - (y + y.T)
        ends = float(np.dot(g[0], g[0])) + float(np.dot(g[-1], g[-1]))
        cube = (6.0 * float(np.vdot(g, g)) - ends - 8.0 * float(np.trace(y))
                + 2.0 * float(np.vdot(g[:-2], g[2:])))
        return c, c2, cube


def difference_matrix(n: int) -> DifferenceMatrix:
    """The Durbin–Watson matrix DᵀD for ``n`` sales (see :class:`DifferenceMatrix`)."""
    main = np.full(n, 2.0)
    main[[0, -1]] = 1.0
    return DifferenceMatrix((main, np.full(n - 1, -1.0)))


def durbin_watson_test(e: np.ndarray, basis: np.ndarray) -> RatioTest:
    """Durbin–Watson d = Σ(eₜ − eₜ₋₁)²/Σeₜ² of residuals ``e`` (already in date order) and
    its null distribution; ``basis`` the model's
    :attr:`~plumbrule.model.fitted.FittedModel.date_order_basis` (the same order)."""
    d = float(np.sum(np.diff(e) ** 2) / np.dot(e, e))
    return ratio_test(d, basis, difference_matrix(len(e)))


@dataclass(frozen=True)
class NeighbourMatrix(BandMatrix):
    """S = (W + Wᵀ)/2 for the row-standardised k-nearest-in-time weights W (``weights``,
    scipy CSR, exactly k entries 1/k a row): its band (at most k wide) gives the traces,
    W itself the products with a basis (SU = (WU + WᵀU)/2, one compiled pass each)."""

    weights: Any = None

    def basis_terms(self, u: np.ndarray | Handoff) -> tuple[np.ndarray, np.ndarray, float]:
        """UᵀSU, UᵀS²U = VᵀV and tr(UᵀS³U) = tr(VᵀSV) = tr(VᵀWV), V = SU. A handed-off
        basis is let go once UᵀSU is formed: V and WV (n × p each) need not meet it."""
        w = self.weights
        u = _taken(u)
        v = ((w + w.T) * 0.5) @ u        # S in CSR once: cheaper than WU and WᵀU apart
        usu = u.T @ v
        del u
        return usu, v.T @ v, float(np.vdot(v, w @ v))


def neighbour_counts(seconds: np.ndarray, k: int = NEIGHBOURS) -> np.ndarray:
    """For sales already in date order (``seconds`` ascending), how many of each sale's k
    nearest sales in time come before it in date order (int8; the rest come after).

    In date order the k nearest form a run around the sale. A candidate b places before
    or a after is ranked by (time gap, place gap, the earlier first): equal gaps go to
    the nearer place in date order, then to the earlier sale. The k nearest are the k
    best of the two ranked lists, so the b-th earlier sale is among them exactly when it
    ranks above the (k + 1 − b)-th later one; counted over b (no loop over the sales)."""
    n = len(seconds)
    k = min(k, n - 1)
    before = np.zeros(n, dtype=np.int8)
    for b in range(1, k + 1):                     # the b-th earlier, (k + 1 − b)-th later
        a = k + 1 - b
        wins = np.zeros(n, dtype=bool)            # no sale b places before: never
        if n - a > b:                             # both candidates exist for b ≤ i < n − a
            gap_b = seconds[b:n - a] - seconds[:n - a - b]
            gap_a = seconds[b + a:] - seconds[b:n - a]
            wins[b:n - a] = gap_b <= gap_a if 2 * b <= k + 1 else gap_b < gap_a
        wins[max(b, n - a):] = True               # no sale a places after: always
        before += wins
    return before


def neighbour_matrix(before: np.ndarray, k: int = NEIGHBOURS) -> NeighbourMatrix:
    """S = (W + Wᵀ)/2 and W from :func:`neighbour_counts`: sale i's k nearest are the run
    of k + 1 sales from i − before[i] in date order, less i itself. S[i, i + o] is 1/(2k)
    for each of the two sales that counts the other among its nearest."""
    from scipy.sparse import csr_matrix
    n = len(before)
    k = min(k, n - 1)
    index = np.dtype(np.int32 if n * k < 2 ** 31 else np.int64)   # scipy's own index type
    b = before.astype(index)
    pos = np.arange(n, dtype=index)
    cols = (pos - b)[:, None] + np.arange(k, dtype=index)
    cols += cols >= pos[:, None]                  # skip the sale itself
    # exactly k entries a row, columns ascending: the CSR arrays directly, no sort
    w = csr_matrix((np.full(n * k, 1.0 / k), cols.ravel(),
                    np.arange(0, n * k + 1, k, dtype=index)), shape=(n, n))
    upper = [np.zeros(n)]
    for o in range(1, k + 1):
        mine = b[:n - o] <= k - o                 # i + o is among i's nearest
        theirs = b[o:] >= o                       # i is among (i + o)'s nearest
        upper.append((mine.astype(float) + theirs) * (0.5 / k))
    return NeighbourMatrix(tuple(upper), weights=w)


def neighbour_test(e: np.ndarray, basis: np.ndarray | Handoff, s: NeighbourMatrix
                   ) -> RatioTest:
    """I = eᵀWe/eᵀe (Moran's I with S₀ = n: each residual against the mean residual of its
    time neighbours) and its null distribution; eᵀWe = eᵀSe with S = (W + Wᵀ)/2. A
    :class:`Handoff` basis is let go as soon as the test is done with it."""
    stat = float(e @ (s.weights @ e) / np.dot(e, e))
    return ratio_test(stat, basis, s)


# --- the null distribution of eᵀAe/eᵀe ----------------------------------------------------------

def ratio_test(stat: float, basis: np.ndarray | Handoff, a: BandMatrix) -> RatioTest:
    """Null distribution of r = eᵀAe/eᵀe at ``stat`` for a symmetric banded A.

    Exact (Imhof) up to ``EXACT_MAX_N`` sales; above, a Pearson type III curve with the
    exact null mean, variance and skewness of r (normal when the skewness is 0)."""
    from plumbrule.numeric.distributions import pearson3_cdf, pearson3_sf
    n, p = basis.shape
    if n <= EXACT_MAX_N:        # the eigenvalues read the basis again: no handing off
        basis = _taken(basis)
    mean, sd, skew = ratio_moments(basis, a)
    if n <= EXACT_MAX_N:
        assert isinstance(basis, np.ndarray)
        lam = residual_eigenvalues(basis, a)
        below = imhof_below(lam - stat)
        return RatioTest(stat, mean, sd, below, 1.0 - below, "exact (Imhof)")
    z = (stat - mean) / sd if sd > 0 else 0.0
    return RatioTest(stat, mean, sd, pearson3_cdf(z, skew), pearson3_sf(z, skew),
                     "three-moment (Pearson III)")


def ratio_moments(basis: np.ndarray | Handoff, a: BandMatrix) -> tuple[float, float, float]:
    """(mean, sd, skewness) of r = eᵀAe/eᵀe under the null, exactly.

    With B = MAM and ν = n − p, the numerator has cumulants 2^(j−1)(j − 1)!·tr(Bʲ) and,
    r being independent of eᵀe (Pitman 1937; from memory), E rʲ = E(εᵀBε)ʲ / E(χ²_ν)ʲ:
    E r = t₁/ν, E r² = (t₁² + 2t₂)/(ν(ν + 2)), E r³ = (t₁³ + 6t₁t₂ + 8t₃)/(ν(ν + 2)(ν + 4)),
    tⱼ = tr((MA)ʲ). Expanding M = I − UUᵀ leaves traces of A and small p × p products
    with C = UᵀAU and UᵀA²U (:meth:`BandMatrix.basis_terms`): no n × n dense matrix."""
    n, p = basis.shape
    nu = float(n - p)
    c, c2, cube = a.basis_terms(basis)
    t1 = a.trace() - float(np.trace(c))
    t2 = a.frobenius2() - 2.0 * float(np.trace(c2)) + float(np.sum(c * c))
    t3 = (a.trace_cube() - 3.0 * cube + 3.0 * float(np.sum(c * c2))
          - float(np.trace(c @ c @ c)))
    m1 = t1 / nu
    m2 = (t1 * t1 + 2.0 * t2) / (nu * (nu + 2.0))
    m3 = (t1 ** 3 + 6.0 * t1 * t2 + 8.0 * t3) / (nu * (nu + 2.0) * (nu + 4.0))
    var = max(m2 - m1 * m1, 0.0)
    sd = float(np.sqrt(var))
    third = m3 - 3.0 * m1 * m2 + 2.0 * m1 ** 3
    return m1, sd, float(third / sd ** 3) if sd > 0 else 0.0


def residual_eigenvalues(basis: np.ndarray, a: BandMatrix) -> np.ndarray:
    """The n − p eigenvalues of NᵀAN, N an orthonormal basis of the residual space
    (the last n − p columns of the complete QR factor of ``basis``)."""
    from scipy.linalg import eigvalsh, qr
    n, p = basis.shape
    full, _ = qr(basis, mode="full", check_finite=False)
    nb = full[:, p:]
    g = nb.T @ a.times(nb)
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

"""plumbrule.numeric.distributions against scipy.stats, the reference it stands in for.

Every function must give scipy.stats' number (to 1e-12 relative, in practice bit for bit),
including its answers at the ends of the support and for invalid degrees of freedom.
"""

import numpy as np
import pytest
import scipy.stats as st

from plumbrule.numeric import distributions as d

X = np.array([-np.inf, -40.0, -3.0, -1e-300, 0.0, 1e-12, 0.5, 1.96, 3.0, 40.0, 1e6,
              np.inf, np.nan])
Q = np.array([-0.1, 0.0, 1e-300, 1e-10, 0.0005, 0.025, 0.05, 0.5, 0.95, 0.975,
              1 - 1e-12, 1.0, 1.5, np.nan])
DF = [-1.0, 0.0, 0.5, 1.0, 2.0, 3.0, 7.0, 29.0, 199_989.0, 1e9, np.nan]


def same(a, b):
    a, b = np.asarray(a, float), np.asarray(b, float)
    assert a.shape == b.shape
    assert np.array_equal(np.isnan(a), np.isnan(b)), (a, b)
    ok = ~np.isnan(a)
    assert np.array_equal(a[ok] == np.inf, b[ok] == np.inf)
    assert np.array_equal(a[ok] == -np.inf, b[ok] == -np.inf)
    fin = ok & np.isfinite(a)
    np.testing.assert_allclose(a[fin], b[fin], rtol=1e-12, atol=0)


@pytest.mark.parametrize("df", DF)
def test_t(df):
    same(d.t_sf(X, df), st.t.sf(X, df))          # reference: scipy.stats.t
    same(d.t_ppf(Q, df), st.t.ppf(Q, df))
    same(d.t_sf(1.5, df), st.t.sf(1.5, df))      # scalars stay scalars
    assert np.ndim(d.t_ppf(0.975, df)) == 0


@pytest.mark.parametrize("df", DF)
def test_chi2(df):
    same(d.chi2_sf(X, df), st.chi2.sf(X, df))    # reference: scipy.stats.chi2


@pytest.mark.parametrize("dfn", [0.0, 1.0, 2.0, 11.0, np.nan])
@pytest.mark.parametrize("dfd", [0.0, 1.0, 5.0, 17.0, 199_980.0, np.nan])
def test_f(dfn, dfd):
    same(d.f_sf(X, dfn, dfd), st.f.sf(X, dfn, dfd))     # reference: scipy.stats.f
    same(d.f_ppf(Q, dfn, dfd), st.f.ppf(Q, dfn, dfd))


def test_normal():
    same(d.norm_cdf(X), st.norm.cdf(X))          # reference: scipy.stats.norm
    same(d.norm_sf(X), st.norm.sf(X))
    same(d.norm_ppf(Q), st.norm.ppf(Q))
    n = 1000
    p = (np.arange(1, n + 1) - 0.375) / (n + 0.25)
    same(d.norm_ppf(p), st.norm.ppf(p))


@pytest.mark.parametrize("skew", [-3.0, -0.4, -1e-5, 0.0, 1e-5, 2e-5, 0.3, 1.0, 4.0, np.nan,
                                  np.inf])
def test_pearson3(skew):
    for x in [-30.0, -5.0, -2.0, -0.5, 0.0, 0.7, 1.9, 4.0, 30.0, np.nan]:
        # reference: scipy.stats.pearson3 (mean 0, sd 1)
        same(d.pearson3_cdf(x, skew), st.pearson3.cdf(x, skew))
        same(d.pearson3_sf(x, skew), st.pearson3.sf(x, skew))


@pytest.mark.parametrize("n", [1, 2, 5, 10, 33, 100, 1001, 20_000, 1_000_000])
def test_binomial(n):
    k = np.arange(-2, min(n, 2000) + 2)
    same(d.binom_cdf(k, n, 0.5), st.binom.cdf(k, n, 0.5))     # reference: scipy.stats.binom
    for q in [0.0, 1e-9, 0.0005, 0.025, 0.05, 0.25, 0.5, 1.0]:
        assert d.binom_ppf(q, n, 0.5) == st.binom.ppf(q, n, 0.5)


def test_median_rank_unchanged():
    # The order-statistic interval for the median (ratios.median_rank), recomputed here with
    # scipy.stats.binom as it was written before: same rank, same coverage.
    from plumbrule.ratios import median_rank

    def reference(n, level):
        alpha2 = (1.0 - level) / 2.0
        k = np.arange(0, (n - 1) // 2 + 1)
        ok = k[st.binom.cdf(k, n, 0.5) <= alpha2]
        if not len(ok):
            return 0, None
        j = int(ok.max()) + 1
        return j, 1.0 - 2.0 * st.binom.cdf(j - 1, n, 0.5)

    for n in [1, 5, 6, 9, 30, 101, 2000, 54_321]:
        for level in [0.9, 0.95, 0.99]:
            j, cov = median_rank(n, level)
            rj, rcov = reference(n, level)
            assert j == rj
            if rcov is not None:
                assert abs(cov - rcov) <= 1e-12 * rcov

"""Trend shapes on a simulated market with a known bent path (tests/simulated_market.py,
our own invention): recovery within stated tolerances, and the check that catches a
straight line fitted to it. The partial F is checked against statsmodels' compare_f_test."""

import numpy as np
import pandas as pd
import pytest

from plumbrule.analysis import analyze
from plumbrule.diagnostics.trend import _check_groups, trend_fit_check
from plumbrule.errors import SettingError
from plumbrule.settings import parse_settings
from simulated_market import RATES, SETTINGS, bent_market, bent_path, straight_market


def _fit(data, **kw):
    return analyze(data, SETTINGS, **kw)


def test_piecewise_recovers_the_segment_rates():
    a = _fit(bent_market(n=3000, seed=7, noise=0.08), trend="piecewise",
             trend_knots="2024-07-01,2025-07-01")
    c = a.tables.coefficients.set_index("term")
    est = c.loc[c.index.str.startswith("Sale date"), "estimate"].to_numpy()
    se = c.loc[c.index.str.startswith("Sale date"), "std_error"].to_numpy()
    # the known rates (simulated_market.RATES) within 3 standard errors
    assert np.all(np.abs(est - np.array(RATES)) < 3 * se)


def test_periods_recover_the_path_by_quarter():
    d = bent_market(n=3000, seed=8, noise=0.08)
    a = _fit(d, trend="periods", trend_period="quarter")
    c = a.tables.coefficients.set_index("term")
    est = c.loc[c.index.str.startswith("Sale date:"), "estimate"].to_numpy()
    months = (d["Sale date"] - d["Sale date"].min()).dt.days / (365.2425 / 12)
    q = pd.PeriodIndex(d["Sale date"], freq="Q")
    true = pd.Series(bent_path(months.to_numpy())).groupby(q).mean().to_numpy()
    # each quarter's level against the first within 0.02 on the log scale (2 %), our tolerance
    assert np.max(np.abs(est - (true[1:] - true[0]))) < 0.02


def test_check_catches_the_bent_market_and_matches_statsmodels():
    import statsmodels.api as sm
    a = _fit(bent_market(n=600, seed=1))
    chk = a.tables.checks.set_index("check").loc["Trend fits the sale dates"]
    assert chk["verdict"] in ("watch", "fails") and chk["p_value"] < 0.05
    m = a.model
    group, _ = _check_groups(m)
    dummies = pd.get_dummies(group, drop_first=True).astype(float).to_numpy()
    x = sm.add_constant(m.x)
    full = sm.OLS(m.y, np.column_stack([x, dummies])).fit()
    f, p, df = full.compare_f_test(sm.OLS(m.y, x).fit())   # statsmodels reference
    got = trend_fit_check(m)
    assert got.statistic == pytest.approx(f, rel=1e-9) and got.p_value == pytest.approx(p,
                                                                                         rel=1e-7)


def test_piecewise_fit_passes_the_check_on_the_bent_market():
    a = _fit(bent_market(n=600, seed=2), trend="piecewise", trend_knots="2024-07-01,2025-07-01")
    chk = a.tables.checks.set_index("check").loc["Trend fits the sale dates"]
    assert chk["verdict"] == "ok"


def test_straight_market_false_alarms_near_nominal():
    # seeded Monte Carlo, 60 straight markets: nominal 5 %; allow up to 15 % (binomial
    # 60 × 0.05 has a 99.9 % quantile of 9); benchmarks/trend_check.py runs more
    alarms = sum(trend_fit_check(_fit(straight_market(n=400, seed=500 + s)).model).p_value < 0.05
                 for s in range(60))
    assert alarms <= 9


def test_market_index_is_one_at_the_valuation_date_and_prices_adjusted():
    a = _fit(bent_market(n=600, seed=3), trend="piecewise", valuation_date="2026-03-01")
    mi = a.tables.market_index
    last = mi.iloc[-1]
    assert last["period"] == "valuation date" and last["index"] == pytest.approx(1.0)
    assert mi["extrapolated"].iloc[-1]
    r = a.tables.residuals
    # appended after the older columns; only the sale's name columns (issue 14) come later
    assert list(r.columns[list(r.columns).index("time_adjusted_price") + 1:]) in (
        [], ["sale", "sale_price", "sale_date"])


def test_knots_setting_parses_dates_and_every():
    assert parse_settings(trend_knots="every 6 months").trend_knots == 6
    assert parse_settings(trend_knots="2025-01-01,2024-07-01").trend_knots[0].month == 7
    with pytest.raises(SettingError, match="trend_knots"):
        parse_settings(trend_knots="sometimes")

# The live block's piecewise and period formulas: tests/workbook/test_live_formulas.py
# (Python evaluator) and tests/workbook/test_libreoffice.py (LibreOffice recalculation).


def test_the_demo_market_bends_and_the_check_says_so():
    """The invented town's market rises, goes flat, then falls (demo/town.py, our own
    numbers): the straight line the demo settings fit is caught by the trend check, and a
    piecewise trend with knots at the turns recovers the known rates (3 standard errors)."""
    from plumbrule.cli.demo import demo_settings
    from plumbrule.demo.town import MARKET_RATES, demo_sales
    sales = demo_sales()
    settings = {k: v for k, v in demo_settings().items() if v is not None}
    line = analyze(sales, settings).tables.checks.set_index("check")
    assert line.loc["Trend fits the sale dates", "verdict"] == "fails"
    bent = analyze(sales, {**settings, "trend": "piecewise",
                           "trend_knots": "2024-07-01,2025-07-01"})
    assert bent.tables.checks.set_index("check").loc["Trend fits the sale dates",
                                                     "verdict"] == "ok"
    c = bent.tables.coefficients.set_index("term")
    rates = c.loc[c.index.str.startswith("Sale date"), ["estimate", "std_error"]].to_numpy()
    assert np.all(np.abs(rates[:, 0] - np.array(MARKET_RATES)) < 3 * rates[:, 1])

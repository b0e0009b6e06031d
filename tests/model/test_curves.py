"""Curves (model/curves.py): the restricted cubic spline against a hand-built
Durrleman–Simon / Harrell truncated-power basis and patsy's natural cubic regression spline,
the fit against statsmodels OLS on the same basis, bands against pandas.cut, and a simulated
market of our own with a known age curve."""

import numpy as np
import pandas as pd
import pytest

from plumbrule.analysis import analyze
from plumbrule.errors import PlumbError, SettingError
from plumbrule.model.curves import KNOT_QUANTILES, default_knots, rcs_terms
from plumbrule.settings import parse_settings


def _hand_rcs(x, t):
    """Harrell, Regression Modeling Strategies 2nd ed. (2015), eq. 2.25, written out term by
    term with scalar arithmetic (Durrleman and Simon 1989), each column divided by
    (t_k - t_1)^2 as Hmisc's rcspline.eval does by default (norm=2: "in original units of x")."""
    k = len(t)
    out = np.empty((len(x), k - 2))
    def p(xi, v):
        return max(xi - v, 0.0) ** 3

    for i, xi in enumerate(x):
        for j in range(k - 2):
            val = (p(xi, t[j]) - p(xi, t[k - 2]) * (t[k - 1] - t[j]) / (t[k - 1] - t[k - 2])
                   + p(xi, t[k - 1]) * (t[k - 2] - t[j]) / (t[k - 1] - t[k - 2]))
            out[i, j] = val / (t[k - 1] - t[0]) ** 2
    return out


def curved_market(n=2000, seed=3, noise=0.10):
    """Our own market: log price falls 0.008 per year of age, levelling off at 60 years
    (f(a) = -0.008 a + 0.008 a²/120, flat at 60, older houses a little dearer after)."""
    rng = np.random.default_rng(seed)
    area = rng.normal(1600, 350, n).clip(700, 3500).round()
    age = rng.integers(1, 90, n).astype(float)
    logp = 11.6 + 0.00045 * area + age_curve(age) + rng.normal(0, noise, n)
    return pd.DataFrame({"Price": np.round(np.exp(logp), 0), "Living area": area, "Age": age})


def age_curve(a):
    a = np.asarray(a, dtype=float)
    return -0.008 * a + 0.008 * a * a / 120.0


@pytest.mark.parametrize("k", [3, 4, 5, 6, 7])
def test_spline_terms_match_the_hand_built_formula(k):
    rng = np.random.default_rng(k)
    x = rng.uniform(0, 100, 300)
    t = np.quantile(x, KNOT_QUANTILES[k])
    ours = rcs_terms(x, t)
    assert np.max(np.abs(ours - _hand_rcs(x, t))) < 1e-12 * max(1.0, np.max(np.abs(ours)))


def test_spline_spans_patsys_natural_cubic_spline_and_is_linear_outside():
    from patsy import dmatrix
    rng = np.random.default_rng(11)
    x = np.sort(rng.uniform(0, 100, 400))
    t = np.quantile(x, KNOT_QUANTILES[5])
    ours = np.column_stack([np.ones_like(x), x, rcs_terms(x, t)])
    # patsy's cr: the natural cubic regression spline with the same knots (Wood 2006) spans
    # the same k-dimensional space as the restricted cubic spline (Stone and Koo 1985)
    cr = np.asarray(dmatrix("cr(x, knots=inner, lower_bound=lo, upper_bound=hi) - 1",
                            {"x": x, "inner": t[1:-1], "lo": t[0], "hi": t[-1]}))
    inside = (x >= t[0]) & (x <= t[-1])
    coef, *_ = np.linalg.lstsq(cr[inside], ours[inside], rcond=None)
    assert np.max(np.abs(cr[inside] @ coef - ours[inside])) < 1e-9 * np.max(np.abs(ours))
    # restricted: linear beyond the outer knots (second differences vanish there)
    beyond = np.linspace(t[-1], t[-1] + 50, 7)
    assert np.max(np.abs(np.diff(rcs_terms(beyond, t), 2, axis=0))) < 1e-9
    below = np.linspace(t[0] - 50, t[0], 7)
    assert np.max(np.abs(rcs_terms(below, t))) == 0.0


def test_fit_matches_statsmodels_on_the_same_basis():
    import statsmodels.api as sm
    d = curved_market(n=800, seed=5)
    a = analyze(d, response="Price", predictors="Living area,Age", log_response=True,
                curves="Age=spline:4", folds=0)
    basis = a.encoding.curve("Age")
    x = np.column_stack([d["Living area"], d["Age"], rcs_terms(d["Age"].to_numpy(),
                                                               np.asarray(basis.knots))])
    ref = sm.OLS(np.log(d["Price"].to_numpy()), sm.add_constant(x)).fit()   # statsmodels
    c = a.tables.coefficients
    assert list(c["term"]) == ["intercept", "Living area", "Age", "Age (spline 1)",
                               "Age (spline 2)"]
    np.testing.assert_allclose(c["estimate"], ref.params, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(c["std_error"], ref.bse, rtol=1e-9)


def test_knots_are_harrells_quantiles():
    rng = np.random.default_rng(2)
    v = rng.uniform(0, 80, 500)
    # Harrell (2015) Table 2.3, 4 knots: 0.05, 0.35, 0.65, 0.95; R's quantile type 7 is
    # numpy's default
    np.testing.assert_allclose(default_knots(v, 4, "Age"),
                               np.quantile(v, [0.05, 0.35, 0.65, 0.95]), rtol=0, atol=0)
    small = np.arange(1.0, 51.0)      # under 100 values: outer knots the 5th from each end
    k = default_knots(small, 4, "Age")
    assert k[0] == 5.0 and k[-1] == 46.0


def test_bands_match_pandas_cut():
    d = curved_market(n=500, seed=9)
    breaks = [20, 40, 60]
    a = analyze(d, response="Price", predictors="Living area,Age", log_response=True,
                curves="Age=bands:20,40,60", folds=0)
    cut = pd.cut(d["Age"], [-np.inf, *breaks, np.inf], right=False)   # [lo, hi) bands
    ind = pd.get_dummies(cut).astype(float).to_numpy()
    ref = a.encoding.curve("Age").reference        # the band holding the median age
    assert ref == int(np.searchsorted(breaks, d["Age"].median(), side="right"))
    want = np.delete(ind, ref, axis=1)
    got = a.model.x[:, 1:]
    np.testing.assert_array_equal(got, want)


def test_simulated_age_curve_is_recovered():
    d = curved_market(n=3000, seed=3, noise=0.10)
    a = analyze(d, response="Price", predictors="Living area,Age", log_response=True,
                curves="Age=spline:5", folds=0)
    tab = a.tables.curves
    tab = tab[tab["predictor"] == "Age"]
    ref = float(tab["reference"].iloc[0])
    truth = age_curve(tab["value"]) - age_curve(ref)
    # our tolerance: within 0.02 on the log scale (2 % of price) everywhere from the youngest
    # to the oldest house with 3000 sales and 10 % noise
    err = np.abs(tab["model_effect"].to_numpy() - truth)
    print("largest error of the age effect (log scale):", err.max())
    assert err.max() < 0.02
    # and it levels off: the slope past 60 is small against the young houses' slope
    b = a.encoding.curve("Age")
    fine = np.linspace(60, 85, 26)
    coef = a.fit.coef[2:]
    f = b.columns(fine) @ coef
    assert abs(f[-1] - f[0]) < 0.05 < abs(coef[0] * 50)


def test_curve_settings_refuse_bad_specs():
    with pytest.raises(SettingError, match="curves.*spline takes a number of knots from 3"):
        parse_settings(curves="Age=spline:9")
    with pytest.raises(SettingError, match="break points must rise"):
        parse_settings(curves="Age=bands:40,20")
    with pytest.raises(SettingError, match="bands need break points as numbers"):
        parse_settings(curves="Age=bands:ten")
    with pytest.raises(SettingError, match="is not Column=spline:N"):
        parse_settings(curves="Age=wiggle")
    got = parse_settings(curves="Age=spline:4; Living area=square; Lot size=bands:5000,10000")
    assert got.curves == (("Age", "spline", (4.0,)), ("Living area", "square", ()),
                          ("Lot size", "bands", (5000.0, 10000.0)))


def test_curve_specs_refused_against_the_sales():
    d = curved_market(n=200, seed=1)
    d["Kind"] = np.where(d["Age"] > 40, "old", "new")
    d["Few"] = np.where(d["Age"] > 40, 1.0, 2.0)
    base = dict(response="Price", log_response=True, folds=0)
    cases = [
        (dict(predictors="Age", curves="Agee=square"), "no column 'Agee'"),
        (dict(predictors="Age", curves="Living area=square"), "not among the predictors"),
        (dict(predictors="Age,Kind", categorical="Kind", curves="Kind=square"), "categorical"),
        (dict(predictors="Age,Few", curves="Few=spline:4"), "too few for a spline"),
        (dict(predictors="Age", curves="Age=bands:100,200"), "holds no sale"),
    ]
    for kw, words in cases:
        with pytest.raises(SettingError, match=words) as err:
            analyze(d, {**base, **kw})
        assert "curves" in str(err.value) and "\n" not in str(err.value)
        assert isinstance(err.value, PlumbError)


def test_subjects_get_the_fit_time_basis():
    d = curved_market(n=400, seed=4)
    a = analyze(d, response="Price", predictors="Living area,Age", log_response=True,
                curves="Age=spline:4", folds=0)
    subj = a.encoding.new_rows(pd.DataFrame({"Living area": [1500.0], "Age": [70.0]}))
    x = a.encoding.design(subj)
    t = np.asarray(a.encoding.curve("Age").knots)
    np.testing.assert_allclose(x[0, 1:], np.concatenate([[70.0], rcs_terms(np.array([70.0]),
                                                                            t)[0]]))


# --- the per-predictor linearity check ----------------------------------------------------

def _straight(n, seed):
    rng = np.random.default_rng(seed)
    area = rng.normal(1600, 350, n).round()
    age = rng.integers(1, 90, n).astype(float)
    logp = 11.6 + 0.00045 * area - 0.004 * age + rng.normal(0, 0.10, n)
    return pd.DataFrame({"Price": np.exp(logp), "Living area": area, "Age": age})


def test_linearity_check_names_the_bent_predictor_and_matches_statsmodels():
    import statsmodels.api as sm
    from plumbrule.diagnostics.curves import linearity_by_predictor
    d = curved_market(n=600, seed=8)
    a = analyze(d, response="Price", predictors="Living area,Age", log_response=True, folds=0)
    c = a.tables.checks.set_index("check")
    age = c.loc["Linearity: 'Age' as a straight line"]
    assert age["verdict"] == "watch" and "'Age' needs a curve" in age["note"]
    assert c.loc["Linearity: 'Living area' as a straight line", "verdict"] == "ok"
    # statsmodels' compare_f_test of the same nested pair: straight model vs + the two
    # non-linear terms of a 4-knot spline at the quantiles 0.05, 0.35, 0.65, 0.95 (Harrell)
    m = a.model
    x = sm.add_constant(m.x)
    t = np.quantile(d["Age"], KNOT_QUANTILES[4])
    full = sm.OLS(m.y, np.column_stack([x, rcs_terms(d["Age"].to_numpy(), t)])).fit()
    f, p, df = full.compare_f_test(sm.OLS(m.y, x).fit())
    got = [k for k in linearity_by_predictor(m) if "'Age'" in k.name][0]
    assert got.statistic == pytest.approx(f, rel=1e-9) and got.p_value == pytest.approx(p,
                                                                                         rel=1e-7)
    assert got.df == df == 2
    # the check is not repeated for a predictor that has its curve
    b = analyze(d, response="Price", predictors="Living area,Age", log_response=True, folds=0,
                curves="Age=spline:4")
    assert "Linearity: 'Age' as a straight line" not in set(b.tables.checks["check"])


def _harrell_knots(x):
    """Harrell's 4 default knots (2015, Table 2.3) by numpy's quantile, over the distinct
    values when ties make two equal."""
    t = np.quantile(x, KNOT_QUANTILES[4])
    return t if np.all(np.diff(t) > 0) else np.quantile(np.unique(x), KNOT_QUANTILES[4])


@pytest.mark.filterwarnings("ignore:The design matrix is rank-deficient")   # 'Few', meant
@pytest.mark.parametrize("intercept", [True, False])
def test_every_linearity_check_matches_statsmodels_including_a_three_valued_predictor(
        intercept):
    """All predictors tested at once, each against statsmodels' compare_f_test of its own
    nested pair. 'Few' takes three values: on three points 1, x and the two spline terms
    span only three dimensions, so one spline column is redundant (statsmodels counts the
    rank: df 1); 'Four' and 'Five' keep both."""
    import statsmodels.api as sm
    from plumbrule.diagnostics.curves import linearity_by_predictor
    d = curved_market(n=400, seed=9)
    names = ["Living area", "Age", "Few", "Four", "Five"]
    for j, name in enumerate(names[2:]):
        d[name] = np.random.default_rng(j + 1).integers(0, j + 3, len(d)).astype(float)
    a = analyze(d, response="Price", predictors=",".join(names), log_response=True, folds=0,
                no_intercept=not intercept)
    m = a.model
    x = sm.add_constant(m.x) if intercept else m.x
    small = sm.OLS(m.y, x).fit()
    got = {k.name: k for k in linearity_by_predictor(m)}
    assert len(got) == len(names)
    for name in names:
        v = d[name].to_numpy()
        full = sm.OLS(m.y, np.column_stack([x, rcs_terms(v, _harrell_knots(v))])).fit()
        f, p, df = full.compare_f_test(small)
        k = got[f"Linearity: '{name}' as a straight line"]
        assert k.df == df == (1 if name == "Few" else 2), name
        assert k.statistic == pytest.approx(f, rel=1e-9), name
        assert k.p_value == pytest.approx(p, rel=1e-7), name


@pytest.mark.parametrize("n", [300, 2 * (1 << 14) + 77])    # one block of rows; three
def test_spline_terms_are_written_into_a_slice_of_a_wider_block(n):
    from plumbrule.model.curves import rcs_into
    rng = np.random.default_rng(4)
    x = rng.uniform(0, 100, n)
    t = np.quantile(x, KNOT_QUANTILES[4])
    block = np.full((n, 5), 7.0, order="F")
    rcs_into(x, t, block[:, 2:4])
    want = _hand_rcs(x, t)
    assert np.max(np.abs(block[:, 2:4] - want)) < 1e-12 * np.max(np.abs(want))
    assert np.all(block[:, [0, 1, 4]] == 7.0)      # the neighbours are left alone


def test_linearity_check_false_alarm_rate_on_a_straight_model():
    from plumbrule.diagnostics.curves import linearity_by_predictor
    from plumbrule.model.fitted import fit_model
    from plumbrule.model.spec import build_spec
    reps, alarms, single = 300, 0, 0
    for seed in range(reps):
        d = _straight(300, 1000 + seed)
        spec = build_spec(parse_settings(response="Price", predictors="Living area,Age",
                                         log_response=True), d.columns)
        checks = linearity_by_predictor(fit_model(spec, d))
        alarms += any(k.verdict != "ok" for k in checks)
        single += checks[1].p_value < 0.05
    rate = alarms / reps
    print(f"false alarms: {alarms}/{reps} = {rate:.3f}; Age alone at 0.05: {single}/{reps}")
    # Bonferroni keeps the family rate at most 0.05; 300 reps: 0.05 + 3 binomial s.e. = 0.088
    assert rate < 0.088
    # the single test at its nominal 5 % (binomial 3 s.e. band over 300 reps)
    assert 0.05 - 0.038 < single / reps < 0.05 + 0.038


def test_spline_group_gvif_is_invariant_and_does_not_fail():
    from plumbrule.diagnostics.checks import collinearity_by_predictor
    d = curved_market(n=800, seed=6)
    a = analyze(d, response="Price", predictors="Living area,Age", log_response=True, folds=0,
                curves="Age=spline:4")
    per = collinearity_by_predictor(a.model).set_index("predictor")
    assert per.loc["Age", "kind"] == "curve" and per.loc["Age", "df"] == 3
    # the spline's own columns are highly inflated one by one ...
    assert a.tables.coefficients["vif"].max() > 10
    # ... but as a group (Fox and Monette 1992) Age is unrelated to Living area here
    assert per.loc["Age", "gvif_root"] < 1.05
    c = a.tables.checks.set_index("check")
    assert c.loc["Multicollinearity: largest GVIF^(1/(2df))", "verdict"] == "ok"
    assert c.loc["Multicollinearity: largest VIF", "verdict"] == "ok"
    # GVIF does not depend on the basis of the group (Fox and Monette 1992): another basis
    # of the same spline space (the columns mixed by an invertible matrix) gives the same
    rng = np.random.default_rng(0)
    block = a.model.x[:, 1:] @ (np.eye(3) + rng.normal(0, 1, (3, 3)))
    x = np.column_stack([a.model.x[:, 0], block])
    r = np.corrcoef(x, rowvar=False)
    ld = lambda m: np.linalg.slogdet(m)[1]   # noqa: E731
    gvif = np.exp(ld(r[:1, :1]) + ld(r[1:, 1:]) - ld(r))
    assert per.loc["Age", "gvif"] == pytest.approx(gvif, rel=1e-9)


# --- the comparable-sales grid ---------------------------------------------------------

def test_grid_adjustment_of_a_curve_is_the_curve_difference():
    from plumbrule.valuation.estimates import valuate
    d = curved_market(n=300, seed=12)
    a = analyze(d, response="Price", predictors="Living area,Age", curves="Age=spline:4",
                folds=0)     # a price-scale model: the adjustments add
    subj = pd.DataFrame({"Subject": ["9 Quill Lane"], "Living area": [1650.0], "Age": [66.0]})
    v = valuate(a, subj, comps=[2, 5])
    g = v.grid
    basis = a.encoding.curve("Age")
    b = a.fit.coef[2:5]
    for row in (2, 5):
        comp_age = float(a.clean.data.loc[row, "Age"])
        want = ((basis.columns(np.array([66.0])) - basis.columns(np.array([comp_age])))
                @ b)[0]
        hit = g[(g["comp_row"] == row) & (g["feature"] == "Age")].iloc[0]
        assert hit["kind"] == "curve"
        assert hit["adjustment"] == pytest.approx(want, rel=1e-12, abs=1e-9)
        assert hit["difference"] == pytest.approx(66.0 - comp_age)
    # a price model's adjusted price is the subject's estimate plus the comp's own residual
    # (P_c + (x_s − x_c)·b = x_s·b + e_c), so the curve enters as the model does
    tot = g[g["kind"] == "total"].set_index("comp_row")
    resid = pd.Series(a.fit.resid, index=a.model.data.index)
    est = v.estimates["estimate"].iloc[0]
    np.testing.assert_allclose(tot["adjusted_price"], est + resid[[2, 5]], rtol=1e-10)


def test_condition_number_takes_a_curve_in_any_basis():
    from plumbrule.diagnostics.checks import condition_number
    d = curved_market(n=600, seed=13)
    a = analyze(d, response="Price", predictors="Living area,Age", log_response=True, folds=0,
                curves="Age=spline:4")
    got = condition_number(a.model).statistic

    def bkw(x):
        # Belsley, Kuh and Welsch (1980): [1, X] with unit-length, uncentred columns
        z = np.column_stack([np.ones(len(x)), x])
        z = z / np.linalg.norm(z, axis=0)
        sv = np.linalg.svd(z, compute_uv=False)
        return sv[0] / sv[-1]

    def orthogonal_block(x, cols):
        # the curve's columns as an orthonormal basis of their centred span, rotated so the
        # first column carries the block's whole mean (our definition; the figure must not
        # depend on which basis of the curve was fitted)
        xg = x[:, cols]
        qc, r = np.linalg.qr(xg - xg.mean(axis=0))
        means = (xg @ np.linalg.inv(r)).mean(axis=0)
        u, _, _ = np.linalg.svd(means[:, None])          # u[:, 0] ∝ the mean direction
        out = x.copy()
        out[:, cols] = xg @ np.linalg.inv(r) @ u
        return out

    x = a.model.x
    assert got == pytest.approx(bkw(orthogonal_block(x, [1, 2, 3])), rel=1e-8)
    # the same from another basis of the spline's span (columns mixed by an invertible matrix)
    mixed = x.copy()
    mixed[:, 1:] = x[:, 1:] @ (np.eye(3) + np.random.default_rng(1).normal(0, 1, (3, 3)))
    assert got == pytest.approx(bkw(orthogonal_block(mixed, [1, 2, 3])), rel=1e-8)
    assert got < 30 < bkw(x)      # the raw spline columns alone would read as near-dependent


# --- the same setting on every surface --------------------------------------------------

def test_cli_option_and_json_table(tmp_path):
    import json
    import subprocess
    import sys
    d = curved_market(n=300, seed=14)
    path = tmp_path / "sales.csv"
    d.to_csv(path, index=False)
    proc = subprocess.run([sys.executable, "-m", "plumbrule", "fit", str(path), "--response",
                           "Price", "--predictors", "Living area,Age", "--log-response",
                           "--folds", "0", "--curves", "Age=spline:4", "--json"],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
    out = json.loads(proc.stdout)
    keys = list(out)    # new tables go at the end (the JSON contract): only newer after curves
    assert keys.index("curves") > keys.index("market_index")
    assert set(keys[keys.index("curves") + 1:]) <= {"assessed_estimates", "sales_chasing",
                                                    "residual_map", "check_questions"}
    assert list(out["curves"][0]) == ["predictor", "kind", "value", "band", "reference",
                                      "model_effect", "effect", "ci_low", "ci_high", "scale"]
    bad = subprocess.run([sys.executable, "-m", "plumbrule", "fit", str(path), "--response",
                          "Price", "--predictors", "Living area,Age", "--curves", "Age=spline:2"],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode != 0 and "curves" in bad.stderr and "3 to 7" in bad.stderr


def test_worksheet_functions_take_the_setting():
    from plumbrule import sheet_functions as sf
    d = curved_market(n=200, seed=15)
    cells = [list(d.columns)] + d.to_numpy().tolist()
    got = sf.PLUMB_COEFS(cells, "Price", "Living area,Age",
                         [["log_response", True], ["curves", "Age=square"]])
    terms = [row[0] for row in got[1:]]
    assert terms == ["intercept", "Living area", "Age", "Age²"]


def test_a_spline_that_takes_up_every_residual_is_not_applicable_not_a_crash():
    """Eight sales, two of them the same sale entered twice (duplicates kept): the straight
    model leaves two residual degrees of freedom and the spline's one usable term fits what
    is left exactly, so the F ratio would be 0/0 in rounding. The check says so instead of
    raising (found by the intake property test). The nested F of a plain case still equals
    scipy's F tail (scipy.stats.f.sf)."""
    from scipy import stats

    from plumbrule.diagnostics.checks import LEFT_NOTHING, nested_f
    from plumbrule.intake import table_from_values
    block = [["a", "eh", "dagah", "fd"],
             [0.0, 0.0, 772691.4968121423, "Millbank"],
             [322564.2583855592, 0.0, "7.9%", 3],
             [0.0, 311067.93604738655, 468719.01096341526, True],
             [314546.39705280086, 424599, "(8,631)", "Old Quay"],
             [1.0, 0.0, 1.0, "Millbank"],
             [229318.33146693543, "2,299,653", "(15,667)", True],
             [314546.39705280086, 424599, "(8,631)", "Old Quay"],
             [877103.5750399325, 1.0, 252815.04188639575, "Millbank"]]
    a = analyze(table_from_values(block), response="a", predictors="eh,dagah,fd",
                categorical="fd", duplicates="keep", folds=0)
    c = a.tables.checks.set_index("check")
    assert LEFT_NOTHING in set(c["note"])
    assert c.loc[c["note"] == LEFT_NOTHING, "verdict"].eq("n/a").all()
    assert nested_f(5.0, 2, 5.0, 3) is None and nested_f(0.0, 1, 0.0, 4) is None
    f, p = nested_f(3.0, 2, 10.0, 17)
    assert f == pytest.approx((3.0 / 2) / (7.0 / 17), rel=1e-15)
    assert p == pytest.approx(stats.f.sf(f, 2, 17), rel=1e-10)

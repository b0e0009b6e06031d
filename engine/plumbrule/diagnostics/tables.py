"""Fitted model → the tables users read (our own column names; no rounding)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from plumbrule.diagnostics.checks import CHECK_COLUMNS, Check
from plumbrule.model.fitted import FittedModel

COEF_COLUMNS = ["term", "estimate", "std_error", "t", "p_value", "ci_low", "ci_high",
                "std_beta", "vif"]
RESIDUAL_COLUMNS = ["row", "actual", "fitted", "residual", "standardized_residual",
                    "studentized_residual", "leverage", "cooks_distance"]


def coefficient_table(model: FittedModel) -> pd.DataFrame:
    """One row per term. std_beta = estimate × sd(x)/sd(y) on the model scale
    (for an indicator, sd of the 0/1 column); vif is blank for the intercept."""
    from plumbrule.numeric.distributions import t_ppf, t_sf
    fit = model.fit
    est, se = fit.coef, model.se
    with np.errstate(divide="ignore", invalid="ignore"):
        tval = est / se
    p = 2.0 * t_sf(np.abs(tval), fit.df_resid)
    q = t_ppf(0.5 + model.confidence / 2.0, fit.df_resid)
    n = fit.n
    if fit.has_intercept:   # x_norms are the norms of the centred columns: no pass over x
        sd_x = fit.x_norms / np.sqrt(n - 1)
        sd_y = float(np.sqrt(fit.tss / (n - 1)))
    else:
        sd_x = np.std(model.x, axis=0, ddof=1)
        sd_y = float(np.std(model.y, ddof=1))
    slopes = est[int(fit.has_intercept):]
    std_beta = slopes * sd_x / sd_y if sd_y > 0 else np.full_like(slopes, np.nan)
    pad = [np.nan] if fit.has_intercept else []
    return pd.DataFrame({
        "term": list(fit.names), "estimate": est, "std_error": se, "t": tval, "p_value": p,
        "ci_low": est - q * se, "ci_high": est + q * se,
        "std_beta": np.concatenate([pad, std_beta]),
        "vif": np.concatenate([pad, fit.vif]),
    })[COEF_COLUMNS]


EFFECT_COLUMNS = ["term", "kind", "column", "reference", "scale", "effect"]


def effect_table(model: FittedModel) -> pd.DataFrame:
    """Each coefficient as an effect on the price, one row per term (intercept: NaN).

    ``scale`` says the unit of ``effect``: 'percent' (log price: 100·(e^b − 1) per unit,
    per month or against the reference level), 'percent per 1 percent' (log price on a
    logged feature: the elasticity b), 'price' (price units per unit, per month or
    against the reference level) or 'price per 1 percent' (price on a logged feature:
    b/100, to first order).
    """
    fit, enc = model.fit, model.encoding
    terms = {t.name: t for t in enc.terms}
    refs = dict(enc.levels)
    log_y = enc.spec.log_response
    rows = []
    for name, b in zip(fit.names, fit.coef, strict=True):
        t = terms.get(name)
        if t is None:
            rows.append((name, "intercept", "", "", "", np.nan))
            continue
        ref = refs[t.column][0] if t.kind == "level" else ""
        if t.kind == "log":
            scale, effect = ("percent per 1 percent", b) if log_y else ("price per 1 percent",
                                                                       b / 100.0)
        else:
            scale, effect = ("percent", 100.0 * np.expm1(b)) if log_y else ("price", b)
        rows.append((name, t.kind, t.column, ref, scale, float(effect)))
    return pd.DataFrame(rows, columns=EFFECT_COLUMNS)


def typical_spread(model: FittedModel) -> tuple[float, str]:
    """One residual standard error on the price: (value, unit) — a share (e^σ − 1, e.g.
    0.12) for a log-price model, price units otherwise."""
    sigma = float(model.fit.sigma)
    return (float(np.expm1(sigma)), "share") if model.spec.log_response else (sigma, "price")


def fit_table(model: FittedModel, n_dropped: int = 0, extra: dict | None = None,
              retransform: str = "smearing") -> pd.DataFrame:
    """One record of model-level figures. ``scale`` names the model's scale ('log price' or
    'price'): r_squared, adj_r_squared, f_stat, resid_std_error, rmse, mae, the likelihood
    and AIC/BIC are on it. On the price scale, always: ``mape`` (percent) and
    r_squared_price_scale, rmse_price_scale, mae_price_scale, with the fitted values
    retransformed as the estimates are (``retransform``)."""
    from plumbrule.numeric.distributions import f_sf
    from plumbrule.validation import error_figures
    fit = model.fit
    n, p = fit.n, fit.n_params
    df_model = p - int(fit.has_intercept)
    r2 = fit.r_squared
    adj = 1.0 - (1.0 - r2) * (n - int(fit.has_intercept)) / fit.df_resid
    f_stat = _f_statistic(model, r2, df_model)
    f_p = float(f_sf(f_stat, df_model, fit.df_resid)) if df_model > 0 else np.nan
    loglik = -0.5 * n * (np.log(2.0 * np.pi) + np.log(fit.ssr / n) + 1.0)
    mae = float(np.mean(np.abs(fit.resid)))
    if model.spec.log_response:
        price = model.data[model.spec.response].to_numpy(float)
        on_price = error_figures(price, model.fitted_prices(retransform), model.y, fit.fitted)
    else:
        on_price = error_figures(model.y, fit.fitted, model.y, fit.fitted)
    rec = {
        "n_used": n, "n_dropped": int(n_dropped), "n_params": p, "df_resid": fit.df_resid,
        "r_squared": r2, "adj_r_squared": adj, "f_stat": f_stat, "f_p_value": f_p,
        "resid_std_error": fit.sigma, "rmse": float(np.sqrt(fit.ssr / n)),
        "mae": mae, "mape": on_price["mape"], "log_likelihood": loglik,
        "aic": -2.0 * loglik + 2.0 * p, "bic": -2.0 * loglik + np.log(n) * p,
        "se_type": model.robust_se or "classical",
        "response": model.encoding.response_name,
        "scale": "log price" if model.spec.log_response else "price",
        "r_squared_price_scale": on_price["r_squared"],
        "rmse_price_scale": on_price["rmse"], "mae_price_scale": on_price["mae"],
    }
    rec.update(extra or {})
    return pd.DataFrame([rec])


def _f_statistic(model: FittedModel, r2: float, df_model: int) -> float:
    """Overall F: classical from R², or the robust Wald form when robust SEs are on."""
    fit = model.fit
    if df_model <= 0:
        return np.nan
    if not model.robust_se:
        return (r2 / df_model) / ((1.0 - r2) / fit.df_resid) if r2 < 1 else np.inf
    off = int(fit.has_intercept)
    b = fit.coef[off:]
    v = model.cov[off:, off:]
    # Undefined when a coefficient has no robust variance (a sale alone fixes it)
    # or the robust covariance is singular to working precision.
    if not np.all(np.isfinite(v)):
        return float("nan")
    d = np.sqrt(np.diag(v))
    if not np.all(d > 0):
        return float("nan")
    corr = v / np.outer(d, d)
    eig = np.linalg.eigvalsh(corr)
    if not eig[0] > 1e-12 * eig[-1]:
        return float("nan")
    z = b / d
    return float(z @ np.linalg.solve(corr, z) / df_model)


def checks_table(checks: list[Check]) -> pd.DataFrame:
    """One row per check, question by question (the ``question`` column says which:
    diagnostics/questions.py)."""
    from plumbrule.diagnostics.questions import in_question_order
    rows = [{"check": c.name, **{k: getattr(c, k) for k in CHECK_COLUMNS[1:]}} for c in checks]
    return in_question_order(pd.DataFrame(rows, columns=CHECK_COLUMNS))


def residual_table(model: FittedModel) -> pd.DataFrame:
    """One row per sale used (sheet row), on the model scale. The columns share
    the fit's arrays (copy=False; pandas copy-on-write keeps them safe), so a
    million-row table costs no second copy."""
    fit, infl = model.fit, model.influence
    return pd.DataFrame({
        "row": model.rows.astype(np.int64, copy=False), "actual": model.y, "fitted": fit.fitted,
        "residual": fit.resid, "standardized_residual": infl.standardized,
        "studentized_residual": infl.studentized, "leverage": fit.leverage,
        "cooks_distance": infl.cooks_distance,
    }, copy=False)[RESIDUAL_COLUMNS]


def normal_scores(z: np.ndarray) -> pd.DataFrame:
    """The points of a normal quantile plot: the finite values of ``z`` in ascending order
    (``ordered``) beside the standard normal quantile at Blom's plotting position
    (i − 3/8)/(n + 1/4) (``normal_quantile``; Blom 1958). Both in the units of ``z``."""
    from plumbrule.numeric.distributions import norm_ppf
    z = np.sort(z[np.isfinite(z)])
    n = len(z)
    theo = norm_ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))
    return pd.DataFrame({"normal_quantile": theo, "ordered": z})


def correlation_table(model: FittedModel) -> pd.DataFrame:
    """Pearson correlations of the response (model scale) and every design term."""
    names = [model.encoding.response_name] + model.encoding.names
    fit = model.fit
    rxx, rxy = fit.predictor_correlations(), fit.response_correlations()
    if rxx is not None and rxy is not None:
        # From the QR factor and Qᵀy (see OLSFit): no second pass over the design.
        k = len(rxy)
        r = np.empty((k + 1, k + 1))
        r[0, 0] = 1.0
        r[0, 1:] = r[1:, 0] = rxy
        r[1:, 1:] = rxx
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            r = np.corrcoef(np.column_stack([model.y, model.x]), rowvar=False)
    frame = pd.DataFrame(np.atleast_2d(r), columns=names)
    frame.insert(0, "term", names)
    return frame

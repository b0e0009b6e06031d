"""A portfolio total: the sum of the subjects' estimates with an honest interval.

The subjects' estimates share one set of coefficients, so their errors are correlated: the
variance of the total is 1'X_s V X_s'1 = Σᵢⱼ xᵢ'V xⱼ, not Σ xᵢ'V xᵢ. In the working
coordinates of :func:`plumbrule.valuation.estimates.working_vectors` a row's vector v(x) is
affine in x with a constant part, so Σᵢ v(xᵢ) is one p-vector and the total's variance is
one quadratic form in it: no m × m matrix is ever formed.

Price-scale model: exact t interval for the total of the means; for a future total of the m
sales, the independent sale-level variance m·s² is added.

Log model: total T = Σ factor·exp(xᵢ'b). Delta method on the log scale: the relative error
of T is Σ wᵢ·(error of log estimateᵢ), wᵢ = estimateᵢ/T; every part of that error is linear
in v, and Σ wᵢ = 1, so it equals the error of one row at the estimate-weighted mean design
row x_w = Σ wᵢxᵢ, whose variance (retransformation factor's own error included) is
:func:`log_mean_variance`. CI: T·exp(±q·se). The future total's sale-level spread: each
price's relative variance κ = Var(e^u)/E(e^u)² (smearing: mean(e^{2e})/mean(e^e)² − 1;
lognormal: exp(s²) − 1); the sum matched to a lognormal by its mean and variance (Fenton
1960, IRE Trans. Commun. Syst. CS-8:57–67, from memory), the log-scale estimation variance
added. With one subject under the lognormal factor this is the single-sale interval.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

PORTFOLIO_COLUMNS = [
    "n", "total", "se_total", "ci_low", "ci_high", "se_single_total", "pi_low", "pi_high",
    "method", "confidence", "naive_ci_low", "naive_ci_high", "naive_pi_low", "naive_pi_high",
    "naive_ci_ratio", "naive_pi_ratio", "independent_ci_low", "independent_ci_high", "note",
]

METHOD_PRICE = "exact t, full covariance of the estimates"
METHOD_LOG = ("delta method on the log scale (retransformation factor's error included); "
              "prediction interval: lognormal match of the sum (Fenton 1960)")


def portfolio_total(model, x: np.ndarray, estimates: pd.DataFrame, confidence: float,
                    retransform: str) -> pd.DataFrame:
    """One row: the total of the subjects' estimates (price units), its standard error, the
    confidence interval of the total of the means and the prediction interval of the total of
    one sale of each, at ``confidence``; beside them the naive sums of the individual
    intervals, their width as a multiple of the honest one, and the interval that treats the
    estimates as independent. Empty (the columns only) for fewer than two subjects.
    ``x`` is the subjects' design (m × k, user units), ``estimates`` their estimate table."""
    return total_from_sums(model, portfolio_sums(model, x, estimates, retransform),
                           confidence, retransform)


def portfolio_sums(model, x: np.ndarray, estimates: pd.DataFrame, retransform: str
                   ) -> dict[str, Any]:
    """The sums the total needs, over the rows of ``x`` (design) and ``estimates`` (their
    estimate table): sums of two blocks add (:func:`add_sums`), so a roll too large to hold
    at once is totalled block by block. Money in price units."""
    est = estimates["estimate"].to_numpy(dtype=float)
    out: dict[str, Any] = dict(
        m=len(x), sum_x=x.sum(axis=0), sum_est=float(est.sum()),
        sum_var=float(np.sum(estimates["se_mean"].to_numpy(dtype=float) ** 2)),
        ci_low=float(estimates["ci_low"].sum()), ci_high=float(estimates["ci_high"].sum()),
        pi_low=float(estimates["pi_low"].sum()), pi_high=float(estimates["pi_high"].sum()))
    if model.spec.log_response:
        mean_kind = "lognormal" if retransform == "lognormal" else "smearing"
        mean_each = model.retransform_factor(mean_kind) * np.exp(model.predict(x))
        out.update(sum_est_x=est @ x, sum_mean=float(mean_each.sum()),
                   sum_mean_sq=float(mean_each @ mean_each))
    else:
        out["sum_eta"] = float(model.predict(x).sum())
    return out


def add_sums(a: dict[str, Any] | None, b: dict[str, Any]) -> dict[str, Any]:
    """The sums of two blocks of subjects (``a`` None: the first block)."""
    return dict(b) if a is None else {k: a[k] + b[k] for k in b}


def total_from_sums(model, sums: dict[str, Any], confidence: float, retransform: str
                    ) -> pd.DataFrame:
    """The row of :func:`portfolio_total` from the :func:`portfolio_sums` of all subjects."""
    m = int(sums["m"])
    if m < 2:
        return pd.DataFrame(columns=PORTFOLIO_COLUMNS)
    from plumbrule.valuation.estimates import log_mean_variance, mean_variance, working_vectors
    fit = model.fit
    q = model.t_quantile(confidence)
    if not model.spec.log_response:
        total = sums["sum_eta"]
        # v(x) is affine in x: Σᵢ v(xᵢ) = m·v(Σx/m), so one working vector serves
        vs = m * working_vectors(fit, (sums["sum_x"] / m)[None, :])
        se = float(np.sqrt(mean_variance(model, vs)[0]))
        se_s = float(np.sqrt(se ** 2 + m * fit.sigma ** 2))
        ci = (total - q * se, total + q * se)
        pi = (total - q * se_s, total + q * se_s)
        indep = float(np.sqrt(sums["sum_var"]))
        ind = (total - q * indep, total + q * indep)
        method = METHOD_PRICE
    else:
        total = sums["sum_est"]
        xw = sums["sum_est_x"] / total
        vw = working_vectors(fit, xw[None, :])
        s_log = float(np.sqrt(log_mean_variance(model, vw, retransform)[0]))
        se = total * s_log
        ci = (total * np.exp(-q * s_log), total * np.exp(q * s_log))
        # the future total's mean: its factor is a mean factor even when medians are reported
        mean_kind = "lognormal" if retransform == "lognormal" else "smearing"
        mean_total = sums["sum_mean"]
        kappa = _relative_sale_variance(fit, mean_kind)
        s2_sum = float(np.log1p(kappa * sums["sum_mean_sq"] / mean_total ** 2))
        s_log_m = s_log if mean_kind == retransform else float(
            np.sqrt(log_mean_variance(model, vw, mean_kind)[0]))
        s_pi = float(np.sqrt(s2_sum + s_log_m ** 2))
        centre = np.log(mean_total) - s2_sum / 2.0
        pi = (float(np.exp(centre - q * s_pi)), float(np.exp(centre + q * s_pi)))
        se_s = mean_total * float(np.sqrt(np.expm1(s2_sum) + s_log_m ** 2))
        indep_rel = float(np.sqrt(sums["sum_var"])) / total
        ind = (total * np.exp(-q * indep_rel), total * np.exp(q * indep_rel))
        method = METHOD_LOG
    naive_ci = (sums["ci_low"], sums["ci_high"])
    naive_pi = (sums["pi_low"], sums["pi_high"])
    ci_ratio = (naive_ci[1] - naive_ci[0]) / (ci[1] - ci[0])
    pi_ratio = (naive_pi[1] - naive_pi[0]) / (pi[1] - pi[0])
    row = dict(n=m, total=total, se_total=se, ci_low=float(ci[0]), ci_high=float(ci[1]),
               se_single_total=se_s, pi_low=float(pi[0]), pi_high=float(pi[1]), method=method,
               confidence=confidence, naive_ci_low=naive_ci[0], naive_ci_high=naive_ci[1],
               naive_pi_low=naive_pi[0], naive_pi_high=naive_pi[1], naive_ci_ratio=ci_ratio,
               naive_pi_ratio=pi_ratio, independent_ci_low=float(ind[0]),
               independent_ci_high=float(ind[1]),
               note=_note(ci_ratio, pi_ratio, ci, ind))
    return pd.DataFrame([row], columns=PORTFOLIO_COLUMNS)


def _relative_sale_variance(fit, kind: str) -> float:
    """Var(e^u)/E(e^u)², unitless: nonparametric from the residuals (smearing) or exp(s²) − 1."""
    if kind == "lognormal":
        return float(np.expm1(fit.sigma ** 2))
    ex = np.exp(fit.resid)
    return max(float(np.mean(ex * ex) / np.mean(ex) ** 2 - 1.0), 0.0)


def _note(ci_ratio: float, pi_ratio: float, ci, ind) -> str:
    """What adding the individual intervals would have done, in words."""
    narrow = (ci[1] - ci[0]) / (ind[1] - ind[0])
    return (f"adding the subjects' intervals would overstate the total's confidence interval "
            f"{ci_ratio:.2f}× and its prediction interval {pi_ratio:.2f}×; treating the "
            f"estimates as independent would give a confidence interval {1 / narrow:.2f}× the "
            "honest one (they share one set of coefficients)")

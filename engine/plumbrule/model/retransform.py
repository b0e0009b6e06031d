"""The one retransformation from the log scale to prices.

A log-price model predicts E[log price]; exp of it is the median price. The mean price is
exp(x'b) times a factor: Duan's smearing factor mean(exp(residual)) (Duan 1983, JASA 78:605),
or the lognormal factor exp(s²/2); 'median' reports exp(x'b) itself (factor 1).
"""

from __future__ import annotations

import numpy as np

from plumbrule.numeric.vectors import dot

# What each choice multiplies exp(x'b) by, in words a reader of the workbook can check.
FACTOR_NOTES = {
    "smearing": "Duan's smearing factor (mean of exp(residual))",
    "lognormal": "lognormal factor exp(sigma²/2)",
    "median": "1: the median estimate exp(prediction) is reported",
    "price": "1: the model is in prices",
}


def retransform_factor(resid: np.ndarray, method: str = "smearing",
                       df_resid: int | None = None) -> float:
    """Factor (unitless) turning exp(log-scale prediction) into a price estimate.

    smearing: mean(exp(residual)); lognormal: exp(s²/2) with s² = Σe²/df_resid;
    median: 1 (the estimate is the median price).
    """
    resid = np.asarray(resid, dtype=float)
    if method == "median":
        return 1.0
    if method == "lognormal":
        df = len(resid) if df_resid is None else df_resid
        return float(np.exp(0.5 * dot(resid, resid) / df))
    return float(np.mean(np.exp(resid)))


def price_estimates(pred: np.ndarray, log_response: bool, factor: float = 1.0) -> np.ndarray:
    """Model-scale predictions → estimates in price units."""
    return np.exp(pred) * factor if log_response else np.asarray(pred, dtype=float)

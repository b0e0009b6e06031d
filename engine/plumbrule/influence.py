"""Per-sale residual diagnostics: standardized and studentized residuals, Cook's distance."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .ols import OLSFit


@dataclass(frozen=True)
class Influence:
    """Arrays aligned with the fitted rows (response units for residuals)."""

    standardized: np.ndarray   # e / (s·√(1−h))           (internally studentized)
    studentized: np.ndarray    # e / (s₍ᵢ₎·√(1−h))         (externally studentized)
    cooks_distance: np.ndarray # e² h / (p s² (1−h)²)


def influence(fit: OLSFit) -> Influence:
    """Leave-one-out quantities from the hat values, without refitting.

    Rows with leverage 1 (a sale that alone determines a parameter) get NaN.
    """
    e, h = fit.resid, fit.leverage
    with np.errstate(divide="ignore", invalid="ignore"):
        one_minus_h = np.where(h < 1.0 - 1e-12, 1.0 - h, np.nan)
        s2 = fit.sigma ** 2
        standardized = e / np.sqrt(s2 * one_minus_h)
        df = fit.df_resid - 1
        s2_loo = (fit.ssr - e ** 2 / one_minus_h) / df if df > 0 else np.full_like(e, np.nan)
        studentized = e / np.sqrt(np.where(s2_loo > 0, s2_loo, np.nan) * one_minus_h)
        cooks = standardized ** 2 * h / (one_minus_h * fit.n_params)
    return Influence(standardized, studentized, cooks)

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
        standardized = e / np.sqrt(one_minus_h)
        standardized /= fit.sigma                        # e / (s·√(1−h))
        df = fit.df_resid - 1
        if df > 0:
            # s²₍ᵢ₎ = (SSR − e²/(1−h)) / (ν − 1), formed in place to spare n-row copies
            s2_loo = standardized * standardized
            s2_loo *= -fit.sigma ** 2
            s2_loo += fit.ssr
            s2_loo /= df
            s2_loo[~(s2_loo > 0)] = np.nan
            studentized = standardized * fit.sigma
            studentized /= np.sqrt(s2_loo)
            del s2_loo
        else:
            studentized = np.full_like(e, np.nan)
        cooks = standardized * standardized
        cooks *= h
        cooks /= one_minus_h
        cooks /= fit.n_params
    return Influence(standardized, studentized, cooks)

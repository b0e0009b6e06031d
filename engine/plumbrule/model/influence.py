"""Per-sale residual diagnostics: standardized and studentized residuals, Cook's distance."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from plumbrule.model.ols import OLSFit


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
        root = np.where(h < 1.0 - 1e-12, 1.0 - h, np.nan)
        np.sqrt(root, out=root)                          # √(1−h), blank where h = 1
        standardized = e / root
        standardized /= fit.sigma                        # e / (s·√(1−h))
        df = fit.df_resid - 1
        if df > 0:
            # s²₍ᵢ₎ = (SSR − e²/(1−h)) / (ν − 1), formed in place to spare n-row copies
            work = standardized * standardized
            work *= -fit.sigma ** 2
            work += fit.ssr
            work /= df
            work[~(work > 0)] = np.nan
            np.sqrt(work, out=work)                      # s₍ᵢ₎
            studentized = standardized * fit.sigma
            studentized /= work
            del work
        else:
            studentized = np.full_like(e, np.nan)
        cooks = standardized * standardized              # r² h / (p (1−h))
        cooks *= h
        root *= root
        cooks /= root
        cooks /= fit.n_params
    return Influence(standardized, studentized, cooks)

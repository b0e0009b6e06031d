"""A fitted hedonic model: the encoding, the design it was fitted on, and the fit."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd

from plumbrule.model.design import Encoding, make_encoding
from plumbrule.model.influence import Influence, influence
from plumbrule.model.ols import OLSFit, fit_ols
from plumbrule.model.order import date_order
from plumbrule.model.retransform import FACTOR_NOTES, price_estimates, retransform_factor
from plumbrule.model.spec import ModelSpec
from plumbrule.numeric.vectors import dot


@dataclass(frozen=True)
class FittedModel:
    """Everything downstream (checks, tables, valuation) reads from this.

    ``data`` holds the clean rows used in the fit (index: sheet rows); ``x`` is
    their design matrix without the constant column, ``y`` the response on the
    model scale (logged when the spec says so).
    """

    spec: ModelSpec
    encoding: Encoding
    data: pd.DataFrame
    x: np.ndarray
    y: np.ndarray
    fit: OLSFit
    robust_se: str | None = None
    confidence: float = 0.95

    @property
    def rows(self) -> np.ndarray:
        return self.data.index.to_numpy()

    @cached_property
    def influence(self) -> Influence:
        return influence(self.fit)

    @cached_property
    def residual_moments(self) -> tuple[float, float]:
        """(skewness, Pearson kurtosis) of the residuals with biased moments
        (the form Jarque–Bera uses); computed once for every check that reads them."""
        d = self.fit.resid - self.fit.resid.mean()
        d2 = d * d
        m2 = float(np.mean(d2))
        if m2 == 0:
            return float("nan"), float("nan")
        n = len(d)   # third and fourth moments as products: no more n-row temporaries
        return dot(d2, d) / n / m2 ** 1.5, dot(d2, d2) / n / m2 ** 2

    @cached_property
    def sale_order(self) -> np.ndarray | None:
        """Positions of the sales used in sale-date order (ties by the sales' own values,
        see :func:`plumbrule.model.order.date_order`); None without a date column."""
        if not self.spec.date_column:
            return None
        return date_order(self.data, self.spec.date_column)

    @cached_property
    def date_order_basis(self) -> np.ndarray | None:
        """An orthonormal basis of the design with its constant, rows in sale-date order
        ([1/√n, Q]: Q's columns are centred with an intercept; n × p, C order); formed
        once for the serial checks that read it. None without a date column."""
        if self.sale_order is None:
            return None
        q = self.fit.q
        if self.fit.has_intercept:
            # the constant joins Q's columns first (a plain column copy) and every row is
            # gathered once with np.take: far cheaper than fancy-indexing Q, then stacking
            q = np.empty((self.fit.n, q.shape[1] + 1), order="F")
            q[:, 0] = 1.0 / np.sqrt(self.fit.n)
            q[:, 1:] = self.fit.q
        return np.take(q, self.sale_order, axis=0)

    def forget(self, *names: str) -> None:
        """Drop the cached properties ``names`` (work arrays a stage is done with); read
        again, each is formed afresh, the same."""
        for name in names:
            self.__dict__.pop(name, None)

    def taken(self, name: str):
        """The cached property ``name``, dropped from the cache: the caller holds the only
        reference (the last step to read a large work array)."""
        value = getattr(self, name)
        self.forget(name)
        return value

    @cached_property
    def cov(self) -> np.ndarray:
        """The covariance used for inference: classical, or HC1/HC3 when asked."""
        if self.robust_se:
            return self.fit.robust_cov(self.robust_se)
        return self.fit.cov

    @cached_property
    def valuation_cov(self) -> np.ndarray:
        """The coefficient covariance behind a subject's intervals (coefficient order): the
        classical one, or with robust_se L·valuation_meat·Lᵀ — the HC sandwich with the
        classical variance along the directions a sale with leverage 1 alone fixes, finite
        where :attr:`cov` is blank (see :meth:`OLSFit.valuation_meat`)."""
        if not self.robust_se:
            return self.fit.cov
        lmat = self.fit._coef_map()
        return lmat @ self.fit.valuation_meat(self.robust_se) @ lmat.T

    @cached_property
    def se(self) -> np.ndarray:
        if self.robust_se:
            return np.sqrt(np.diag(self.cov))
        return self.fit.se

    def t_quantile(self, level: float) -> float:
        """The two-sided Student t quantile for a ``level`` interval (e.g. 0.95) on the
        residual degrees of freedom: the multiplier of every interval this model reports."""
        from plumbrule.numeric.distributions import t_ppf
        return float(t_ppf(0.5 + level / 2.0, self.fit.df_resid))

    def retransform_factor(self, method: str) -> float:
        """The factor (unitless) that turns exp(log prediction) into a price estimate under
        ``method`` (smearing / lognormal / median); 1 for a price-scale model."""
        if not self.spec.log_response:
            return 1.0
        return retransform_factor(self.fit.resid, method, self.fit.df_resid)

    def factor_note(self, method: str) -> str:
        """What :meth:`retransform_factor` is, in words."""
        return FACTOR_NOTES[method if self.spec.log_response else "price"]

    def fitted_prices(self, method: str) -> np.ndarray:
        """The fitted values of the sales used, in price units (retransformed by ``method``)."""
        return price_estimates(self.fit.fitted, self.spec.log_response,
                               self.retransform_factor(method))

    def predict(self, x: np.ndarray) -> np.ndarray:
        """x'b on the model scale (log price for log models) for design rows ``x``,
        formed around the column means so nothing cancels against a large intercept."""
        fit = self.fit
        if not fit.has_intercept:
            return np.atleast_2d(x) @ fit.coef
        b = fit.coef[1:]
        centre = fit.coef[0] + fit.x_means @ b
        return centre + (np.atleast_2d(x) - fit.x_means) @ b


def fit_model(spec: ModelSpec, data: pd.DataFrame, robust_se: str | None = None,
              confidence: float = 0.95) -> FittedModel:
    """Encode ``data`` by ``spec``, fit by least squares, return the model."""
    _check_enough(spec, data)
    encoding = make_encoding(spec, data)
    x = encoding.design(data)
    y = encoding.response(data)
    _check_response_varies(spec, y, data)
    fit = fit_ols(x, y, encoding.names, intercept=spec.intercept)
    return FittedModel(spec=spec, encoding=encoding, data=data, x=x, y=y, fit=fit,
                       robust_se=robust_se, confidence=confidence)


def _check_enough(spec: ModelSpec, data: pd.DataFrame) -> None:
    """Too few sales for the parameters (each categorical counted as its levels less one,
    at least one) fit nothing: said before a level count of the few rows is blamed."""
    cats = set(spec.categorical)
    k = int(spec.intercept) + int(bool(spec.date_column)) + sum(
        max(int(data[c].nunique()) - 1, 1) if c in cats else _width(spec, c)
        for c in spec.predictors)
    if len(data) < k + 1:
        from plumbrule.errors import FitError
        raise FitError(f"Only {len(data)} usable rows for {k} parameters: the fit needs at "
                       f"least {k + 1}. Add sales, fill in the blank cells of the rows left "
                       "out, or remove predictors.")


def _width(spec: ModelSpec, column: str) -> int:
    """Design columns of a numeric predictor: 1, or its curve's (model/curves.py)."""
    shape = spec.curve_for(column)
    if shape is None or shape[0] == "square":
        return 2 if shape else 1
    return int(shape[1][0]) - 1 if shape[0] == "spline" else len(shape[1])


def _check_response_varies(spec: ModelSpec, y: np.ndarray, data: pd.DataFrame) -> None:
    """A response with one value in every sale leaves nothing to explain (R² would be 0/0,
    the F statistic and AIC infinite): refused with the value."""
    if not spec.intercept or len(y) == 0 or np.ptp(y) > 0:
        return
    from plumbrule.errors import FitError
    from plumbrule.numbers import readable
    value = data[spec.response].iloc[0]
    raise FitError(f"Column '{spec.response}' (the response) is {readable(float(value))} in "
                   f"every one of the {len(y)} sales used, so the model has nothing to explain."
                   " Check that 'response' names the sale-price column and that the prices "
                   "were pasted as values.", column=spec.response, setting="response")

"""Spec + clean table → design matrix, with the encoding captured for new rows.

The :class:`Encoding` fixes everything that depends on the sales used to fit:
category levels and their reference, the date origin of the trend. Subjects and
comparables are encoded with the same object, so their columns line up exactly.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import SpecError, quote_list
from .spec import ModelSpec

DAYS_PER_MONTH = 365.2425 / 12.0   # mean Gregorian month, so a trend is "per month"


@dataclass(frozen=True)
class Term:
    """One column of the design: ``kind`` is numeric, log, level or trend."""

    name: str
    column: str
    kind: str
    level: str | None = None


@dataclass(frozen=True)
class Encoding:
    spec: ModelSpec
    terms: tuple[Term, ...]
    levels: tuple[tuple[str, tuple[str, ...]], ...]     # column → levels, reference first
    date_origin: pd.Timestamp | None

    @property
    def names(self) -> list[str]:
        return [t.name for t in self.terms]

    @property
    def response_name(self) -> str:
        r = self.spec.response
        return f"log({r})" if self.spec.log_response else r

    def reference(self, column: str) -> str:
        return dict(self.levels)[column][0]

    def design(self, data: pd.DataFrame, label: str = "row") -> np.ndarray:
        """n × k float matrix (Fortran order) for rows of ``data`` (clean, typed).

        ``label`` names the rows in messages ('row' for sales, 'subject row' ...).
        """
        x = np.empty((len(data), len(self.terms)), order="F")
        levels = dict(self.levels)
        for col, known in levels.items():
            _check_levels(data[col], known, col, label)
        for j, t in enumerate(self.terms):
            if t.kind == "numeric":
                x[:, j] = data[t.column].to_numpy(dtype=float)
            elif t.kind == "log":
                x[:, j] = _log(data[t.column], t.column, label, "log_predictors")
            elif t.kind == "level":
                x[:, j] = (data[t.column].to_numpy(dtype=object) == t.level).astype(float)
            else:  # trend
                x[:, j] = months_since(data[t.column], self.date_origin)
        return x

    def response(self, data: pd.DataFrame) -> np.ndarray:
        y = data[self.spec.response]
        if self.spec.log_response:
            return _log(y, self.spec.response, "row", "log_response")
        return y.to_numpy(dtype=float)


def months_since(dates: pd.Series, origin: pd.Timestamp) -> np.ndarray:
    """Months (mean Gregorian month) from ``origin`` to each date."""
    delta = (pd.to_datetime(dates) - origin).to_numpy(dtype="timedelta64[ns]")
    return delta.astype(np.int64) / (86400e9 * DAYS_PER_MONTH)


def make_encoding(spec: ModelSpec, data: pd.DataFrame) -> Encoding:
    """Capture levels (reference first) and the date origin from the fitting rows."""
    terms: list[Term] = []
    levels: list[tuple[str, tuple[str, ...]]] = []
    for col in spec.predictors:
        if col in spec.categorical:
            lv = _levels(data[col], col, spec.reference_for(col))
            levels.append((col, lv))
            terms.extend(Term(f"{col}: {lvl}", col, "level", lvl) for lvl in lv[1:])
        elif col in spec.log_predictors:
            terms.append(Term(f"log({col})", col, "log"))
        else:
            terms.append(Term(col, col, "numeric"))
    origin = None
    if spec.date_column:
        origin = pd.Timestamp(pd.to_datetime(data[spec.date_column]).min())
        terms.append(Term(f"{spec.date_column} (months)", spec.date_column, "trend"))
    return Encoding(spec=spec, terms=tuple(terms), levels=tuple(levels), date_origin=origin)


def _levels(col: pd.Series, name: str, reference: str | None) -> tuple[str, ...]:
    counts = col.value_counts()
    if len(counts) < 2:
        only = counts.index[0] if len(counts) else ""
        raise SpecError(f"Categorical predictor '{name}' has only one level ('{only}') in the "
                        "rows used, so it explains nothing. Remove it from the predictors.",
                        column=name, setting="categorical")
    names = sorted(counts.index, key=lambda v: (-counts[v], str(v)))
    if reference is not None:
        match = [v for v in names if str(v).casefold() == reference.casefold()]
        if not match:
            raise SpecError(f"Setting 'reference_levels': '{name}' has no level '{reference}'. "
                            f"Levels are: {quote_list(sorted(names)[:10])}.",
                            setting="reference_levels", column=name)
        ref = match[0]
    else:
        ref = names[0]   # the most frequent level, ties broken alphabetically
    rest = sorted(v for v in names if v != ref)
    return (ref, *rest)


def _check_levels(col: pd.Series, known: tuple[str, ...], name: str, label: str) -> None:
    unseen = ~col.isin(known)
    if unseen.any():
        row = unseen.idxmax()
        raise SpecError(f"{label.capitalize()} {row}, column '{name}': level '{col[row]}' does not "
                        "occur in the sales used, so the model has no effect for it. Use one of "
                        f"{quote_list(known[:8])}{' ...' if len(known) > 8 else ''}.",
                        column=name, row=int(row))


def _log(values: pd.Series, name: str, label: str, setting: str) -> np.ndarray:
    v = values.to_numpy(dtype=float)
    bad = ~(v > 0)
    if bad.any():
        i = int(np.argmax(bad))
        raise SpecError(f"Column '{name}', {label} {values.index[i]}: the logarithm needs a "
                        f"positive value, found {v[i]:g}. Correct the cell or take '{name}' out "
                        f"of '{setting}'.", column=name, row=int(values.index[i]), setting=setting)
    return np.log(v)

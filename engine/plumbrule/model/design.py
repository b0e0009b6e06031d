"""Spec + clean table → design matrix, with the encoding captured for new rows.

The :class:`Encoding` fixes everything that depends on the sales used to fit:
category levels and their reference, the date origin of the trend. Subjects and
comparables are encoded with the same object, so their columns line up exactly.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from plumbrule.errors import SpecError, quote_list
from plumbrule.model.curves import CurveBasis, build_curve
from plumbrule.model.spec import ModelSpec
from plumbrule.model.location import LocationBasis
from plumbrule.model.trend import TrendBasis, build_trend

DAYS_PER_MONTH = 365.2425 / 12.0   # mean Gregorian month, so a trend is "per month"


@dataclass(frozen=True)
class Term:
    """One column of the design: ``kind`` is numeric, log, level, curve (one of a curved
    predictor's columns, model/curves.py) or trend."""

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
    trend: TrendBasis | None = None     # piecewise / periods (model/trend.py); None: linear
    curves: tuple[CurveBasis, ...] = ()   # curved predictors (model/curves.py), spec order

    def curve(self, column: str) -> CurveBasis | None:
        """The curve of ``column``, None when it enters as a straight line."""
        return next((c for c in self.curves if c.column == column), None)
    location: LocationBasis | None = None   # the location surface (model/location.py)

    @property
    def names(self) -> list[str]:
        return [t.name for t in self.terms]

    @property
    def response_name(self) -> str:
        r = self.spec.response
        return f"log({r})" if self.spec.log_response else r

    def reference(self, column: str) -> str:
        return dict(self.levels)[column][0]

    @property
    def input_columns(self) -> tuple[str, ...]:
        """The columns new rows must carry: predictors, then the date column."""
        cols = tuple(dict.fromkeys(t.column for t in self.terms))
        return cols

    def design(self, data: pd.DataFrame, label: str = "row") -> np.ndarray:
        """n × k float matrix (Fortran order) for rows of ``data`` (clean, typed:
        floats, labels, datetime64 — see :meth:`new_rows`), without the constant.

        ``label`` names the rows in messages ('row' for sales, 'subject row' ...).
        Raises :class:`SpecError` for a missing column, an unseen category level,
        a non-positive value to log, or a blank value.
        """
        absent = [c for c in self.input_columns if c not in data.columns]
        if absent:
            raise SpecError(f"The {label}s have no column {quote_list(absent)}; the model needs "
                            f"{quote_list(self.input_columns)}. Add the missing column.",
                            column=absent[0])
        x = np.empty((len(data), len(self.terms)), order="F")
        levels = dict(self.levels)
        for col, known in levels.items():
            _check_levels(data[col], known, col, label)
        for j, t in enumerate(self.terms):
            if t.kind == "numeric":
                x[:, j] = _floats(data[t.column], t.column, label)
            elif t.kind == "log":
                x[:, j] = _log(data[t.column], t.column, label, "log_predictors")
            elif t.kind == "level":
                x[:, j] = (data[t.column].to_numpy(dtype=object) == t.level).astype(float)
        for basis in self.curves:
            idx = [j for j, t in enumerate(self.terms) if t.kind == "curve"
                   and t.column == basis.column]
            x[:, idx] = basis.columns(_floats(data[basis.column], basis.column, label))
        trend = [j for j, t in enumerate(self.terms) if t.kind == "trend"]
        if trend:
            x[:, trend] = self.trend_columns(data[self.terms[trend[0]].column])
        if self.location is not None:
            loc = [j for j, t in enumerate(self.terms) if t.kind == "location"]
            b = self.location
            x[:, loc] = b.columns(_floats(data[b.x_column], b.x_column, label),
                                  _floats(data[b.y_column], b.y_column, label))
        _check_finite(x, data.index, self.terms, label)
        return x

    def trend_columns(self, dates: pd.Series) -> np.ndarray:
        """The trend's design block for ``dates``: months since the origin (linear), or
        the piecewise / period columns of :class:`plumbrule.model.trend.TrendBasis`."""
        months = months_since(dates, self.date_origin)
        if self.trend is None:
            return months[:, None]
        return self.trend.columns(dates, months)

    def response(self, data: pd.DataFrame, label: str = "row") -> np.ndarray:
        """The response on the model scale (logged when the spec says so)."""
        y = data[self.spec.response]
        if self.spec.log_response:
            return _log(y, self.spec.response, label, "log_response")
        return y.to_numpy(dtype=float)

    def new_rows(self, source, label: str = "subject row", date: pd.Timestamp | None = None,
                 names: pd.Series | None = None, fixed_date: bool = False) -> pd.DataFrame:
        """New rows (subjects) typed exactly as the sales were: the one path from cells to
        model inputs for anything valued.

        ``source`` is a SheetTable, a DataFrame (headers as columns) or a 2-D block of
        values. Headers are matched as the settings match them. A blank or unreadable cell,
        or a category level the sales do not have, is an error naming the row (a subject
        cannot be dropped), except the date column: blank dates, or all dates when the rows
        have no date column (or ``fixed_date``), take ``date`` (e.g. the valuation date).
        ``names`` (sheet row → name) lets messages say "Subject 'A' (row 2)".
        Returns a DataFrame indexed by sheet row with the :attr:`input_columns`.
        """
        from plumbrule import intake
        table = source if isinstance(source, intake.SheetTable) else (
            intake.table_from_frame(source) if isinstance(source, pd.DataFrame)
            else intake.table_from_values(source))
        spec, frame = self.spec, table.frame
        noun = label.removesuffix(" row")
        found = {c: None if fixed_date and c == spec.date_column else _find(c, table.columns)
                 for c in self.input_columns}
        absent = [c for c, hit in found.items() if hit is None
                  and not (c == spec.date_column and date is not None)]
        if absent:
            raise SpecError(f"The {label}s have no column {quote_list(absent)}; the model needs "
                            f"{quote_list(self.input_columns)}. Add the missing column (same "
                            "header as in the sales).", column=absent[0])
        cols = {c: hit for c, hit in found.items() if hit is not None}
        typed: dict[str, pd.Series] = {}
        for c in self.input_columns:
            typed[c] = self._typed_column(table, cols.get(c), c, date, noun, names)
        out = pd.DataFrame(typed, index=frame.index)
        from plumbrule.intake.levels import canonical_levels
        for col, known in self.levels:
            pairs = [(a, b) for c, a, b in spec.level_map if c == col]
            out[col] = canonical_levels(out[col], known, pairs)   # 'kestrel park' is 'Kestrel Park'
            _check_levels(out[col], known, col, label, names)
        return out

    def _typed_column(self, table, source: str | None, c: str,
                      date: pd.Timestamp | None, noun: str, names: pd.Series | None
                      ) -> pd.Series:
        """One input column typed like the sales; a missing value is an IntakeError."""
        from plumbrule import intake
        from plumbrule.errors import IntakeError
        spec, frame = self.spec, table.frame
        if source is None:      # date column absent (or fixed): every row takes ``date``
            return pd.Series(pd.Timestamp(date), index=frame.index, dtype="datetime64[ns]")
        cell = frame[source]
        if c in spec.categorical or c == spec.date_column:
            cell = intake.text_cells(table, source)     # a CSV's text, not its numbers
        try:
            if c in spec.categorical:
                values, reasons = intake.to_labels(cell, source)
            elif c == spec.date_column:
                values, reasons = intake.to_dates(cell, source, spec.date_format)
            else:
                values, reasons = intake.to_numbers(cell, source)
        except IntakeError as err:
            raise IntakeError(f"{noun.capitalize()}s: {err}", column=c, row=err.row) from None
        if c == spec.date_column and date is not None:
            fill = reasons.notna()
            values, reasons = values.where(~fill, pd.Timestamp(date)), reasons.where(~fill)
        missing = reasons.notna()
        if missing.any():
            row = missing.idxmax()
            fix = ("Fill it in, or give the valuation date." if c == spec.date_column
                   else "Fill it in: the model needs it to give an estimate.")
            what = reasons[row]
            what = "is blank" if what == "blank" else "holds an " + what
            raise IntakeError(f"{_who(noun, row, names)}, column '{c}': the cell {what}. "
                              f"{fix}", column=c, row=int(row))
        return values


def months_since(dates: pd.Series, origin: pd.Timestamp) -> np.ndarray:
    """Months (mean Gregorian month, 30.436875 days) from ``origin`` to each date;
    NaN where a date is missing."""
    ns = pd.to_datetime(dates).to_numpy(dtype="datetime64[ns]")
    nat = np.isnat(ns)
    ns, o = ns.view(np.int64), int(pd.Timestamp(origin).value)
    # exact in int64 nanoseconds while the gap fits (292 years); a wider gap (dates typed
    # centuries apart) in floats rather than wrapping round
    fits = (ns >= max(o - 2 ** 63 + 1, -(2 ** 63) + 1)) & (ns <= min(o + 2 ** 63 - 1,
                                                                      2 ** 63 - 1))
    with np.errstate(over="ignore"):
        delta = np.where(fits, (ns - o).astype(float), ns.astype(float) - float(o))
    months = delta / (86400e9 * DAYS_PER_MONTH)
    return np.where(nat, np.nan, months)


def _find(name: str, columns) -> str | None:
    from plumbrule.model.spec import match_column
    try:
        return match_column(name, columns, "")
    except SpecError:
        return None


def _floats(values: pd.Series, name: str, label: str) -> np.ndarray:
    try:
        return values.to_numpy(dtype=float)
    except (TypeError, ValueError):
        raise SpecError(f"Column '{name}' of the {label}s holds text where the model needs "
                        "numbers. Pass the rows through Encoding.new_rows first.",
                        column=name) from None


def _check_finite(x: np.ndarray, index: pd.Index, terms, label: str) -> None:
    bad = ~np.isfinite(x)
    if bad.any():
        i, j = np.argwhere(bad)[0]
        col = terms[j].column
        raise SpecError(f"{label.capitalize()} {index[i]}, column '{col}': the value is blank "
                        "or not a finite number. Fill it in: the model needs it.",
                        column=col, row=int(index[i]))


def make_encoding(spec: ModelSpec, data: pd.DataFrame) -> Encoding:
    """Capture levels (reference first) and the date origin from the fitting rows."""
    terms: list[Term] = []
    levels: list[tuple[str, tuple[str, ...]]] = []
    curves: list[CurveBasis] = []
    for col in spec.predictors:
        shape = spec.curve_for(col)
        if shape is not None:
            basis = build_curve(shape[0], shape[1], col, _floats(data[col], col, "row"))
            curves.append(basis)
            terms.extend(Term(name, col, "curve") for name in basis.names)
        elif col in spec.categorical:
            lv = _levels(data[col], col, spec.reference_for(col))
            levels.append((col, lv))
            terms.extend(Term(f"{col}: {lvl}", col, "level", lvl) for lvl in lv[1:])
        elif col in spec.log_predictors:
            terms.append(Term(f"log({col})", col, "log"))
        else:
            terms.append(Term(col, col, "numeric"))
    origin, trend = None, None
    if spec.date_column:
        origin = pd.Timestamp(pd.to_datetime(data[spec.date_column]).min())
        trend = build_trend(spec, data[spec.date_column], origin)
        names = trend.names if trend else [f"{spec.date_column} (months)"]
        terms.extend(Term(name, spec.date_column, "trend") for name in names)
    location = None
    if spec.location_columns:
        from plumbrule.model.location import build_location
        xc, yc = spec.location_columns
        location = build_location(data[xc].to_numpy(float), data[yc].to_numpy(float),
                                  spec.location_surface, xc, yc, spec.coordinates)
        terms.extend(Term(name, yc if name == "location: y" else xc, "location")
                     for name in location.names)
    return Encoding(spec=spec, terms=tuple(terms), levels=tuple(levels), date_origin=origin,
                    trend=trend, curves=tuple(curves), location=location)


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


def _who(noun: str, row, names: pd.Series | None = None) -> str:
    """'Subject 'A' (row 2)' when the row has a name of its own, else 'Subject row 2'."""
    name = None if names is None else names.get(row)
    if name and name != f"row {row}":
        return f"{noun.capitalize()} '{name}' (row {row})"
    return f"{noun.capitalize()} row {row}"


def _check_levels(col: pd.Series, known: tuple[str, ...], name: str, label: str,
                  names: pd.Series | None = None) -> None:
    unseen = ~col.isin(known)
    if unseen.any():
        import difflib
        row = unseen.idxmax()
        value = col[row]
        folded = [k for k in known if str(k).casefold() == str(value).strip().casefold()]
        close = folded or difflib.get_close_matches(str(value), [str(k) for k in known], n=1,
                                                    cutoff=0.6)
        hint = (f"Did you mean '{close[0]}'?" if close else
                f"Use one of {quote_list(known[:8])}{' ...' if len(known) > 8 else ''}.")
        shown = "a blank" if _is_missing(value) else f"level '{value}'"
        raise SpecError(f"{_who(label.removesuffix(' row'), row, names)}, column '{name}': "
                        f"{shown} does not occur in the sales used, so the model has no effect "
                        "for it. " + hint, column=name, row=int(row))


def _is_missing(value) -> bool:
    return value is None or (isinstance(value, float) and value != value)


def _log(values: pd.Series, name: str, label: str, setting: str) -> np.ndarray:
    v = _floats(values, name, label)
    bad = ~(v > 0) & ~np.isnan(v)    # a blank is reported by _check_finite
    if bad.any():
        i = int(np.argmax(bad))
        undo = (f"turn off '{setting}'" if setting == "log_response"
                else f"take '{name}' out of '{setting}'")
        raise SpecError(f"Column '{name}', {label} {values.index[i]}: the logarithm needs a "
                        f"positive value, found {v[i]:g}. Correct the cell or {undo}.",
                        column=name, row=int(values.index[i]), setting=setting)
    with np.errstate(invalid="ignore"):
        return np.log(v)

"""The "try a subject" block: native spreadsheet formulas that value one subject.

``write_live_block(ws, analysis, valuation, anchor_row) -> int`` starts from the first
subject the valuation typed (``valuation.subjects``); without a valuation, from the first
sale used.

The block holds everything the formulas need as plain cells, all taken from the engine:
the coefficients, the covariance matrix the engine used for its intervals (classical or
robust), sigma, the t quantile and (log models) the retransformation factor. The design
row is built by formulas from editable feature cells, so a colleague without Python
changes a feature and the estimate moves. Only SUMPRODUCT, SQRT, LN, EXP, IF, MAX, MIN,
DATE and COUNTIF are used: Excel and LibreOffice evaluate them the same way without array
entry. A curve (model/curves.py) is written out as the engine builds it: a restricted cubic
spline as sums of truncated cubes MAX(x−t,0)^3, a square as x^2, bands as IF indicators. A
piecewise trend's columns are the months spent in each segment (MIN/MAX of the months since
the origin against the knots), a periods trend's the indicator of the period the valuation
date falls in (comparisons with DATE(...) of each period's first day), exactly the columns
:class:`plumbrule.model.trend.TrendBasis` gives the engine.
``x0'·Cov·x0`` is two SUMPRODUCT passes: a helper column ``Cov·x0`` (one SUMPRODUCT per
term over a covariance column, which equals its row because Cov is symmetric), then
``SUMPRODUCT(x0, Cov·x0)``.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from plumbrule.intake.cells import is_blank
from plumbrule.model.design import DAYS_PER_MONTH
from plumbrule.workbook.cells import DATE as _DATE, MONEY as _MONEY, set_fill, set_font

NAMES = ("plumb_live_estimate", "plumb_live_pi_low", "plumb_live_pi_high")

_INPUT_FILL = "FFF4C2"     # pale yellow: cells a user may change
_HEAD_FILL = "DCE6E4"
_COEF = "0.000000000"
_DATE_INPUT, _ORIGIN_INPUT = "__valuation_date__", "__origin__"


@dataclass(frozen=True)
class LiveCells:
    """Addresses of the result cells (absolute, on the block's sheet)."""

    estimate: str
    pi_low: str
    pi_high: str


@dataclass(frozen=True)
class _Start:
    """What the block starts from, every figure the engine's."""

    subject: dict[str, Any]        # predictor column → typed value
    origin: str                    # a note when the values are not a subject's
    level: float                   # interval level, e.g. 0.95
    t: float                       # two-sided t quantile on the residual df
    factor: float                  # retransformation factor (1 for a price model)
    factor_note: str
    valuation_date: _dt.datetime
    figures: dict[str, float]      # the engine's estimate, pi_low, pi_high for this subject


@dataclass(frozen=True)
class _Layout:
    """Rows of the block's parts, computed before anything is written."""

    heading: int
    inputs: int          # first feature row
    results: int         # first result row
    constants: int       # "How the spreadsheet computes it" heading
    terms: int           # term table header
    end: int             # last row of the term table


def write_live_block(ws, analysis, valuation, anchor_row: int) -> int:
    """Write the block into ``ws`` from ``anchor_row``; return the next free row.

    Creates the workbook defined names plumb_live_estimate, plumb_live_pi_low and
    plumb_live_pi_high (price units) pointing at the block's result cells.
    """
    if analysis.final_model.encoding.location is not None:
        # the surface's bumps have no live formulas yet; figures that disagree with the
        # engine's would mislead
        ws.cell(row=anchor_row, column=1,
                value=("Try a subject: not available with a location surface yet; use the "
                       "estimates above, or set location_surface = 0 for the live cells."))
        return anchor_row + 2
    start = _start(analysis, valuation)
    lay = _layout(analysis, start, anchor_row)
    w = _Writer(ws)
    _heading(w, start, lay)
    inputs, level_cells = _inputs(w, analysis, start, lay)
    consts = _constants(w, analysis.final_model, start, lay)
    first, last = _terms(w, analysis.final_model, inputs, level_cells, lay)
    live = _results(w, analysis.final_model, start, inputs, level_cells, consts, first, last, lay)
    _define_names(ws, live)
    for col, width in (("A", 38), ("B", 16), ("C", 30)):
        ws.column_dimensions[col].width = max(ws.column_dimensions[col].width or 0, width)
    return lay.end + 2


# --- what the block starts from and where its parts go ------------------------

def _start(analysis, valuation) -> _Start:
    model = analysis.final_model
    cols = list(model.spec.predictors)
    if valuation is not None and len(valuation.subjects.data):
        settings = valuation.settings
        row = valuation.subjects.data.iloc[0]
        subject, origin = {c: row[c] for c in cols}, ""
        when = valuation.valuation_date
        est = valuation.estimates.iloc[0]
        figures = {k: float(est[k]) for k in ("estimate", "pi_low", "pi_high")}
    else:
        settings = analysis.settings
        first = model.data.iloc[0]
        subject = {c: first[c] for c in cols}
        origin = (f"No subject was valued, so the cells start from the first sale used (sheet "
                  f"row {model.data.index[0]}). Enter the property you want to value.")
        when = settings.valuation_date or _dt.date.today()
        figures = {}
    level = float(settings.confidence)
    note = model.factor_note(settings.retransform)
    if valuation is not None and model.spec.log_response and settings.retransform != "median":
        note += ", as the valuation used"
    ts = pd.Timestamp(when)
    return _Start(subject=subject, origin=origin, level=level, t=model.t_quantile(level),
                  factor=model.retransform_factor(settings.retransform),
                  factor_note=note,
                  valuation_date=_dt.datetime(ts.year, ts.month, ts.day), figures=figures)


def _layout(analysis, start: _Start, anchor: int) -> _Layout:
    """Heading, a blank row, the feature table, the results right under the inputs (a
    reader sees the value move), then the numbers they are computed from."""
    spec = analysis.final_model.spec
    n_levels = sum(1 for c in spec.predictors if c in dict(analysis.final_model.encoding.levels))
    inputs = anchor + (2 if start.origin else 1) + 2 + 1       # heading rows, blank, header
    n_inputs = len(spec.predictors) + (2 if spec.date_column else 0)
    results = inputs + n_inputs + 1
    constants = results + 8 + n_levels + 1
    terms = constants + 1 + 3 + 1
    return _Layout(heading=anchor, inputs=inputs, results=results, constants=constants,
                   terms=terms, end=terms + len(analysis.final_model.fit.names))


def _heading(w: _Writer, start: _Start, lay: _Layout) -> None:
    r = lay.heading
    w.text(r, 1, "Try a subject", bold=True, size=13)
    w.text(r + 1, 1, "Change a yellow cell and the spreadsheet recomputes the estimate and its "
                     f"{start.level:.0%} prediction interval itself, from the coefficients and "
                     "covariance written below; no Python is needed.", italic=True)
    if start.origin:
        w.text(r + 2, 1, start.origin, italic=True)
    for c, head in enumerate(("Feature", "Value", "How the model uses it", "Choices"), start=1):
        w.text(lay.inputs - 1, c, head, bold=True, fill=_HEAD_FILL)


# --- the parts --------------------------------------------------------------------

def _inputs(w: _Writer, analysis, start: _Start, lay: _Layout
            ) -> tuple[dict[str, str], dict[tuple[str, str], str]]:
    """The yellow feature cells: (column → absolute address, (column, level) → address)."""
    model, ws = analysis.final_model, w.ws
    spec, enc = model.spec, model.encoding
    inputs: dict[str, str] = {}
    level_cells: dict[tuple[str, str], str] = {}
    levels = dict(enc.levels)
    r = lay.inputs
    for col in spec.predictors:
        w.text(r, 1, col)
        value = start.subject.get(col)
        if col in levels:
            value = levels[col][0] if is_blank(value) else str(value)
            w.text(r, 2, value, fill=_INPUT_FILL)
            w.text(r, 3, f"category; '{levels[col][0]}' is the reference level")
            w.text(r, 4, "pick one:", italic=True)
            for j, lvl in enumerate(levels[col]):
                w.text(r, 5 + j, lvl)
                level_cells[(col, lvl)] = _abs(r, 5 + j)
            _level_list(ws, ws.cell(row=r, column=2).coordinate, _abs(r, 5),
                        _abs(r, 4 + len(levels[col])), col)
        else:
            number = float(value) if not is_blank(value) else float(  # type: ignore[arg-type]
                np.median(model.data[col].to_numpy(dtype=float)))
            w.value(r, 2, number, fmt=_number_format(model.data[col]), fill=_INPUT_FILL)
            curve = enc.curve(col)
            w.text(r, 3, "as its logarithm (must be above 0)" if col in spec.log_predictors
                   else f"as a curve: {curve.describe()}" if curve else "as the number")
        inputs[col] = _abs(r, 2)
        r += 1
    if spec.date_column:
        w.text(r, 1, "Valuation date")
        w.value(r, 2, start.valuation_date, fmt=_DATE, fill=_INPUT_FILL)
        w.text(r, 3, _trend_words(enc.trend, spec.date_column))
        inputs[_DATE_INPUT] = _abs(r, 2)
        w.text(r + 1, 1, "Earliest sale (trend origin)")
        w.value(r + 1, 2, enc.date_origin.to_pydatetime(), fmt=_DATE)
        w.text(r + 1, 3, "fixed when the model was fitted")
        inputs[_ORIGIN_INPUT] = _abs(r + 1, 2)
    return inputs, level_cells


def _constants(w: _Writer, model, start: _Start, lay: _Layout) -> dict[str, str]:
    """t quantile, sigma and the retransformation factor as cells: name → address."""
    r = lay.constants
    w.text(r, 1, "How the spreadsheet computes it", bold=True)
    rows = [("t", "t quantile", start.t,
             f"two-sided {start.level:.0%}, {model.fit.df_resid} degrees of freedom"),
            ("sigma", "Residual standard error (sigma)", float(model.fit.sigma), "model scale"),
            ("factor", "Retransformation factor", start.factor, start.factor_note)]
    out = {}
    for i, (key, label, value, note) in enumerate(rows, start=r + 1):
        w.text(i, 1, label)
        w.value(i, 2, value, fmt="0.000000000")
        w.text(i, 3, note)
        out[key] = _abs(i, 2)
    return out


def _terms(w: _Writer, model, inputs, level_cells, lay: _Layout) -> tuple[int, int]:
    """The term table: coefficient, the subject's design value (a formula), Cov·x0, and the
    covariance matrix beside it. Returns (first, last) term rows."""
    head = lay.terms
    names = list(model.fit.names)
    k = len(names)
    heads = ("Term", "Coefficient", "Subject's design value", "Covariance × design value")
    for c, h in enumerate(heads, start=1):
        w.text(head, c, h, bold=True, fill=_HEAD_FILL)
    w.text(head - 1, 5, f"Covariance of the coefficients ({model.fit.n} sales, "
                        f"{'robust ' + model.robust_se if model.robust_se else 'classical'})",
           bold=True)
    for j, name in enumerate(names):
        w.text(head, 5 + j, name, bold=True, fill=_HEAD_FILL)
    first, last = head + 1, head + k
    x_range = f"$C${first}:$C${last}"
    terms = {t.name: t for t in model.encoding.terms}
    trend = iter(_trend_formulas(model.encoding.trend, inputs))
    cov = np.asarray(model.valuation_cov, dtype=float)   # the one the engine's intervals use
    for i, name in enumerate(names):
        row = first + i
        w.text(row, 1, name)
        w.value(row, 2, float(model.fit.coef[i]), fmt=_COEF)
        term = terms.get(name)
        formula = (next(trend) if term is not None and term.kind == "trend"
                   else _design_formula(term, inputs, level_cells, model.encoding))
        w.formula(row, 3, formula, "0.000000")
        col_letter = _letter(5 + i)
        w.formula(row, 4, f"=SUMPRODUCT(${col_letter}${first}:${col_letter}${last},{x_range})",
                  "0.00E+00")
        for j in range(k):
            w.value(row, 5 + j, float(cov[i, j]), fmt="0.00E+00")
    return first, last


def _results(w: _Writer, model, start: _Start, inputs, level_cells, consts, first: int,
             last: int, lay: _Layout) -> LiveCells:
    """The estimate and its intervals first, then the pieces they are built from, then one
    check per category input."""
    r = lay.results
    x_range = f"$C${first}:$C${last}"
    lp = f"SUMPRODUCT($B${first}:$B${last},{x_range})"
    quad = f"SUMPRODUCT({x_range},$D${first}:$D${last})"
    t, sigma, factor = consts["t"], consts["sigma"], consts["factor"]
    lp_cell, se_mean, se_one = _abs(r + 5, 2), _abs(r + 6, 2), _abs(r + 7, 2)
    log = model.spec.log_response
    if log:
        est = f"=EXP({lp_cell})*{factor}"
        lo, hi = f"=EXP({lp_cell}-{t}*{se_one})", f"=EXP({lp_cell}+{t}*{se_one})"
        clo, chi = f"=EXP({lp_cell}-{t}*{se_mean})", f"=EXP({lp_cell}+{t}*{se_mean})"
        note = "exp of the model prediction × the retransformation factor"
    else:
        est = f"={lp_cell}"
        lo, hi = f"={lp_cell}-{t}*{se_one}", f"={lp_cell}+{t}*{se_one}"
        clo, chi = f"={lp_cell}-{t}*{se_mean}", f"={lp_cell}+{t}*{se_mean}"
        note = "the model prediction"
    engine = {k: f"; plumbrule's figure for the first subject: {v:,.0f}"
              for k, v in start.figures.items() if np.isfinite(v)}
    rows = [("Estimate", est, _MONEY, note + engine.get("estimate", "")),
            ("Prediction interval for one sale, low", lo, _MONEY,
             ("exp of the lower log bound" if log else "") + engine.get("pi_low", "")),
            ("Prediction interval for one sale, high", hi, _MONEY,
             ("exp of the upper log bound" if log else "") + engine.get("pi_high", "")),
            ("Confidence interval of the mean, low", clo, _MONEY, ""),
            ("Confidence interval of the mean, high", chi, _MONEY, ""),
            ("Model prediction (model scale)", f"={lp}", "0.000000", "x0 · coefficients"),
            ("Standard error of the mean estimate", f"=SQRT(MAX({quad},0))", "0.000000",
             "sqrt(x0' Cov x0)"),
            ("Standard error for one sale", f"=SQRT({sigma}^2+MAX({quad},0))", "0.000000",
             "sqrt(sigma² + x0' Cov x0)")]
    for i, (label, formula, fmt, text) in enumerate(rows, start=r):
        big = label == "Estimate"
        w.text(i, 1, label, bold=big)
        cell = w.formula(i, 2, formula, fmt)
        if big:
            set_font(cell, bold=True)
        w.text(i, 3, text.strip("; "))
    r += len(rows)
    levels = dict(model.encoding.levels)
    for col, cell in inputs.items():
        if col in levels:
            w.text(r, 1, f"Check: {col}")
            w.formula(r, 2, f'=IF(COUNTIF({_row_of(level_cells, col)},{cell})=0,'
                            f'"not a level the model knows","ok")')
            r += 1
    return LiveCells(_abs(lay.results, 2), _abs(lay.results + 1, 2), _abs(lay.results + 2, 2))


# --- what goes into the cells -----------------------------------------------

def _design_formula(term, inputs, level_cells, encoding) -> str:
    if term is None:                     # the intercept
        return "=1"
    if term.kind == "curve":             # truncated cubes, a square or band indicators
        basis = encoding.curve(term.column)
        return basis.formulas(inputs[term.column])[basis.names.index(term.name)]
    if term.kind == "numeric":
        return f"={inputs[term.column]}"
    if term.kind == "log":
        return f"=LN({inputs[term.column]})"
    if term.kind != "level":
        raise ValueError(f"the live block has no formula for a '{term.kind}' term")
    return f"=IF({inputs[term.column]}={level_cells[(term.column, term.level)]},1,0)"


def _trend_formulas(basis, inputs) -> list[str]:
    """The trend terms' design formulas, in term order: months since the origin (linear),
    or the piecewise / period columns written by :meth:`TrendBasis.formulas`."""
    if _DATE_INPUT not in inputs:
        return []
    months = f"({inputs[_DATE_INPUT]}-{inputs[_ORIGIN_INPUT]})/{DAYS_PER_MONTH!r}"
    if basis is None:
        return [f"={months}"]
    return basis.formulas(f"({months})", inputs[_DATE_INPUT])


def _trend_words(basis, column: str) -> str:
    if basis is None:
        return f"market trend from the earliest sale up to this date ('{column}')"
    if basis.kind == "piecewise":
        return (f"market trend up to this date, a rate per segment between the knots "
                f"('{column}'; beyond the last sale the last segment's rate)")
    return (f"the level of the period this date falls in ('{column}'; after the last period "
            "the last period's level)")


def _number_format(col: pd.Series) -> str:
    v = col.to_numpy(dtype=float)
    return "#,##0" if np.all(v == np.round(v)) else "#,##0.0##"


# --- openpyxl plumbing ------------------------------------------------------

def _letter(c: int) -> str:
    from openpyxl.utils import get_column_letter
    return get_column_letter(c)


def _abs(row: int, col: int) -> str:
    return f"${_letter(col)}${row}"


def _row_of(level_cells, col) -> str:
    cells = [a for (c, _), a in level_cells.items() if c == col]
    return f"{cells[0]}:{cells[-1]}"


def _level_list(ws, target: str, first: str, last: str, col: str) -> None:
    from openpyxl.worksheet.datavalidation import DataValidation
    dv = DataValidation(type="list", formula1=f"{first}:{last}", allow_blank=False,
                        showErrorMessage=True, errorTitle="Not a known level",
                        error=f"Pick a level of '{col}' from the list; the model has no "
                              "effect for other levels."[:255])
    dv.add(target)
    ws.add_data_validation(dv)


def _define_names(ws, live: LiveCells) -> None:
    from plumbrule.workbook.cells import define_name
    for name, cell in zip(NAMES, (live.estimate, live.pi_low, live.pi_high), strict=False):
        define_name(ws.parent, name, ws.title, cell.replace("$", ""))


class _Writer:
    """Cells written as values of their own type; text never becomes a formula."""

    def __init__(self, ws):
        self.ws = ws

    def text(self, row, col, value, bold=False, italic=False, size=None, fill=None):
        from plumbrule.workbook.cells import put
        cell = put(self.ws, row, col, "" if value is None else str(value))   # text stays text
        if bold or italic or size:
            set_font(cell, bold=bold, italic=italic, size=size)
        if fill:
            set_fill(cell, fill)
        return cell

    def formula(self, row, col, formula: str, fmt=None):
        """A formula we wrote (never user text)."""
        cell = self.ws.cell(row=row, column=col, value=formula)
        if fmt:
            cell.number_format = fmt
        return cell

    def value(self, row, col, value, fmt=None, fill=None):
        from plumbrule.workbook.cells import put
        cell = put(self.ws, row, col, value, fmt)
        if fill:
            set_fill(cell, fill)
        return cell

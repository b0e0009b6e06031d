"""The "try a subject" block: native spreadsheet formulas that value one subject.

Interface (agreed with the workbook core): ``write_live_block(ws, analysis,
valuation, anchor_row, subjects=None) -> int``. ``subjects`` is an optional
extension: the subject rows the valuation was made for (the block starts from
the first one); without it the block looks for ``valuation.subjects``, then for
the feature columns in ``valuation.estimates``, then falls back to the first
sale used.

The block holds everything the formulas need as plain cells: the coefficients,
the covariance matrix the engine used for its intervals (classical or robust),
sigma, the t quantile and (log models) the retransformation factor. The design
row is built by formulas from editable feature cells, so a colleague without
Python changes a feature and the estimate moves. Only SUMPRODUCT, SQRT, LN,
EXP, IF, MAX and COUNTIF are used: Excel and LibreOffice evaluate them the same
way without array entry. ``x0'·Cov·x0`` is two SUMPRODUCT passes: a helper
column ``Cov·x0`` (one SUMPRODUCT per term over a covariance column, which
equals its row because Cov is symmetric), then ``SUMPRODUCT(x0, Cov·x0)``.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass

import numpy as np
import pandas as pd

from plumbrule.intake.cells import is_blank
from plumbrule.model.design import DAYS_PER_MONTH
from plumbrule.workbook.cells import DATE as _DATE, MONEY as _MONEY

NAMES = ("plumb_live_estimate", "plumb_live_pi_low", "plumb_live_pi_high")

_INPUT_FILL = "FFF4C2"     # pale yellow: cells a user may change
_HEAD_FILL = "DCE6E4"
_COEF = "0.000000000"


@dataclass(frozen=True)
class LiveCells:
    """Addresses of the result cells (absolute, on the block's sheet)."""

    estimate: str
    pi_low: str
    pi_high: str


def write_live_block(ws, analysis, valuation, anchor_row: int, subjects=None) -> int:
    """Write the block into ``ws`` from ``anchor_row``; return the next free row.

    Creates the workbook defined names plumb_live_estimate, plumb_live_pi_low and
    plumb_live_pi_high (price units) pointing at the block's result cells.
    """
    model = analysis.model
    enc = model.encoding
    spec = model.spec
    subject, origin = _first_subject(analysis, valuation, subjects, ws.parent)
    level = _confidence(analysis, valuation)
    w = _Writer(ws)
    r = anchor_row
    w.text(r, 1, "Try a subject", bold=True, size=13)
    r += 1
    w.text(r, 1, "Change a yellow cell and the spreadsheet recomputes the estimate and its "
                 f"{level:.0%} prediction interval itself, from the coefficients and covariance "
                 "written below; no Python is needed.", italic=True)
    if origin:
        r += 1
        w.text(r, 1, origin, italic=True)
    r += 2
    for c, head in enumerate(("Feature", "Value", "How the model uses it", "Choices"), start=1):
        w.text(r, c, head, bold=True, fill=_HEAD_FILL)
    r += 1

    inputs: dict[str, str] = {}        # column → absolute address of its input cell
    level_cells: dict[tuple[str, str], str] = {}
    levels = dict(enc.levels)
    for col in spec.predictors:
        w.text(r, 1, col)
        cell = ws.cell(row=r, column=2)
        if col in levels:
            value = subject.get(col)
            value = levels[col][0] if is_blank(value) else str(value)
            w.text(r, 2, value, fill=_INPUT_FILL)
            w.text(r, 3, f"category; '{levels[col][0]}' is the reference level")
            w.text(r, 4, "pick one:", italic=True)
            for j, lvl in enumerate(levels[col]):
                w.text(r, 5 + j, lvl)
                level_cells[(col, lvl)] = _abs(r, 5 + j)
            _level_list(ws, cell.coordinate, _abs(r, 5), _abs(r, 4 + len(levels[col])), col)
        else:
            value = _number(subject.get(col))
            if value is None:
                value = float(np.median(model.data[col].to_numpy(dtype=float)))
            w.value(r, 2, value, fmt=_number_format(model.data[col]), fill=_INPUT_FILL)
            w.text(r, 3, "as its logarithm (must be above 0)" if col in spec.log_predictors
                   else "as the number")
        inputs[col] = _abs(r, 2)
        r += 1
    if spec.date_column:
        vdate = _valuation_date(analysis, valuation)
        w.text(r, 1, "Valuation date")
        w.value(r, 2, vdate, fmt=_DATE, fill=_INPUT_FILL)
        w.text(r, 3, f"market trend from the earliest sale up to this date ('{spec.date_column}')")
        inputs["__valuation_date__"] = _abs(r, 2)
        r += 1
        w.text(r, 1, "Earliest sale (trend origin)")
        w.value(r, 2, enc.date_origin.to_pydatetime(), fmt=_DATE)
        w.text(r, 3, "fixed when the model was fitted")
        inputs["__origin__"] = _abs(r, 2)
        r += 1
    r += 1

    # The results sit right under the inputs (a reader sees the value move); the
    # numbers they are computed from follow below.
    res_top = r
    n_checks = sum(1 for col in inputs if col in levels)
    r = res_top + 8 + n_checks + 1
    w.text(r, 1, "How the spreadsheet computes it", bold=True)
    r += 1

    # --- the model's numbers, then the term table with the design row -----
    consts = _constants(analysis, valuation, model, level)
    labels = [("t quantile", consts["t"], f"two-sided {level:.0%}, {model.fit.df_resid} "
               "degrees of freedom"),
              ("Residual standard error (sigma)", consts["sigma"], "model scale"),
              ("Retransformation factor", consts["factor"], consts["factor_note"])]
    addr = {}
    for label, value, note in labels:
        w.text(r, 1, label)
        w.value(r, 2, value, fmt="0.000000000")
        w.text(r, 3, note)
        addr[label] = _abs(r, 2)
        r += 1
    r += 1

    head = r
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
    terms = {t.name: t for t in enc.terms}
    cov = np.asarray(model.cov, dtype=float)
    for i, name in enumerate(names):
        row = first + i
        w.text(row, 1, name)
        w.value(row, 2, float(model.fit.coef[i]), fmt=_COEF)
        ws.cell(row=row, column=3, value=_design_formula(terms.get(name), inputs, level_cells))
        ws.cell(row=row, column=3).number_format = "0.000000"
        col_letter = _letter(5 + i)
        ws.cell(row=row, column=4,
                value=f"=SUMPRODUCT(${col_letter}${first}:${col_letter}${last},{x_range})")
        ws.cell(row=row, column=4).number_format = "0.00E+00"
        for j in range(k):
            w.value(row, 5 + j, float(cov[i, j]), fmt="0.00E+00")
    end = last + 1
    r = res_top

    # --- results -----------------------------------------------------------
    lp = f"SUMPRODUCT($B${first}:$B${last},{x_range})"
    quad = f"SUMPRODUCT({x_range},$D${first}:$D${last})"
    t, sigma, factor = addr["t quantile"], addr["Residual standard error (sigma)"], \
        addr["Retransformation factor"]
    # rows: the estimate and its intervals first, then the pieces they are built from
    lp_cell, se_mean, se_one = _abs(r + 5, 2), _abs(r + 6, 2), _abs(r + 7, 2)
    log = spec.log_response
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
    engine = _engine_figures(valuation)
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
    cells = {}
    for label, formula, fmt, note in rows:
        big = label in ("Estimate",)
        w.text(r, 1, label, bold=big)
        c = ws.cell(row=r, column=2, value=formula)
        c.number_format = fmt
        if big:
            from openpyxl.styles import Font
            c.font = Font(bold=True)
        w.text(r, 3, note.strip("; "))
        cells[label] = _abs(r, 2)
        r += 1
    for col, cell in inputs.items():
        if col in levels:
            w.text(r, 1, f"Check: {col}")
            ws.cell(row=r, column=2, value=f'=IF(COUNTIF({_row_of(level_cells, col)},{cell})=0,'
                                           f'"not a level the model knows","ok")')
            r += 1
    live = LiveCells(cells["Estimate"], cells["Prediction interval for one sale, low"],
                     cells["Prediction interval for one sale, high"])
    _define_names(ws, live)
    ws.column_dimensions["A"].width = max(ws.column_dimensions["A"].width or 0, 38)
    ws.column_dimensions["B"].width = max(ws.column_dimensions["B"].width or 0, 16)
    ws.column_dimensions["C"].width = max(ws.column_dimensions["C"].width or 0, 30)
    return end + 1


# --- what goes into the cells -----------------------------------------------

def _design_formula(term, inputs, level_cells) -> str:
    if term is None:                     # the intercept
        return "=1"
    if term.kind == "numeric":
        return f"={inputs[term.column]}"
    if term.kind == "log":
        return f"=LN({inputs[term.column]})"
    if term.kind == "level":
        return f"=IF({inputs[term.column]}={level_cells[(term.column, term.level)]},1,0)"
    return f"=({inputs['__valuation_date__']}-{inputs['__origin__']})/{DAYS_PER_MONTH!r}"


def _constants(analysis, valuation, model, level) -> dict:
    sigma = float(model.fit.sigma)
    out = {"t": model.t_quantile(level), "sigma": sigma,
           "factor": 1.0, "factor_note": "1: the model is in prices"}
    if model.spec.log_response:
        out["factor"], out["factor_note"] = _factor(analysis, valuation, model)
    return out


def _factor(analysis, valuation, model) -> tuple[float, str]:
    """The factor the valuation multiplied exp(x0·b) by, as the valuation reports it."""
    est = _estimates(valuation)
    if est is not None and len(est):
        row = est.iloc[0]
        for name in ("factor", "retransform_factor", "smearing_factor"):
            if name in est.columns and _number(row[name]) is not None:
                return float(row[name]), _factor_note(row, valuation, analysis)
        for name in ("median_estimate", "estimate_median"):
            if name in est.columns and _number(row[name]):
                return float(row["estimate"]) / float(row[name]), _factor_note(row, valuation,
                                                                               analysis)
    kind = _retransform(analysis, valuation)
    if kind == "median":
        return 1.0, "1: the median estimate exp(prediction) is reported"
    if kind == "lognormal":
        return float(np.exp(model.fit.sigma ** 2 / 2.0)), "lognormal factor exp(sigma²/2)"
    return float(np.mean(np.exp(model.fit.resid))), "Duan's smearing factor, mean of exp(residual)"


def _factor_note(row, valuation, analysis) -> str:
    kind = str(row.get("estimate_kind", "") or _retransform(analysis, valuation))
    if "median" in kind.lower():
        return "1: the median estimate exp(prediction) is reported"
    if "lognormal" in kind.lower():
        return "lognormal factor exp(sigma²/2), as the valuation used"
    return "Duan's smearing factor (mean of exp(residual)), as the valuation used"


def _retransform(analysis, valuation) -> str:
    st = getattr(valuation, "settings", None) or analysis.settings
    return getattr(st, "retransform", "smearing")


def _confidence(analysis, valuation) -> float:
    st = getattr(valuation, "settings", None) or analysis.settings
    return float(getattr(st, "confidence", analysis.model.confidence))


def _valuation_date(analysis, valuation) -> _dt.datetime:
    for source in (valuation, getattr(valuation, "settings", None)):
        d = getattr(source, "valuation_date", None)
        if d is not None:
            return _as_datetime(d)
    est = _estimates(valuation)
    if est is not None and "valuation_date" in est.columns and len(est):
        return _as_datetime(est["valuation_date"].iloc[0])
    d = analysis.settings.valuation_date
    return _as_datetime(d if d is not None else _dt.date.today())


def _as_datetime(d) -> _dt.datetime:
    ts = pd.Timestamp(d)
    return _dt.datetime(ts.year, ts.month, ts.day)


def _estimates(valuation):
    est = getattr(valuation, "estimates", None)
    return est if isinstance(est, pd.DataFrame) else None


def _first_subject(analysis, valuation, subjects, book=None) -> tuple[dict, str]:
    """Feature values of the first subject (column → value) and a note when they are
    not a subject's. From
    ``subjects``, ``valuation.subjects``, the workbook's Subjects sheet (the row the
    valuation names), else the first sale used."""
    cols = list(analysis.spec.predictors)
    sources = [subjects, getattr(valuation, "subjects", None)]
    for source in sources + [_subject_from_book(book, analysis, valuation)]:
        frame = _as_frame(source)
        if frame is not None and len(frame) and any(c in frame.columns for c in cols):
            frame = _typed(analysis, valuation, frame)
            row = frame.iloc[0]
            return {c: row[c] for c in cols if c in frame.columns}, ""
    first = analysis.model.data.iloc[0]
    return {c: first[c] for c in cols}, (
        f"No subject was valued, so the cells start from the first sale used (sheet row "
        f"{analysis.model.data.index[0]}). Enter the property you want to value.")


def _subject_from_book(book, analysis, valuation):
    """The first valued subject's row of the 'Subjects' sheet, as a one-row frame."""
    est = _estimates(valuation)
    if book is None or est is None or "row" not in est.columns or "Subjects" not in book.sheetnames:
        return None
    ws = book["Subjects"]
    row = int(est["row"].iloc[0])
    wanted = {c.casefold() for c in analysis.spec.predictors}
    for r in range(1, row):
        header = [c.value for c in ws[r]]
        names = [str(h).strip() if h is not None else "" for h in header]
        if wanted & {n.casefold() for n in names}:
            values = [c.value for c in ws[row]][:len(names)]
            values += [None] * (len(names) - len(values))
            keep = [i for i, n in enumerate(names) if n]
            return pd.DataFrame([[values[i] for i in keep]], columns=[names[i] for i in keep],
                                index=[row])
    return None


def _typed(analysis, valuation, frame: pd.DataFrame) -> pd.DataFrame:
    """Subject cells typed exactly as the valuation typed them (text numbers, case of
    column names); the frame as given when that is not possible."""
    from plumbrule.errors import PlumbError
    try:
        from plumbrule.valuation.estimates import read_subjects
        when = _valuation_date(analysis, valuation)
        return read_subjects(analysis.model, frame.iloc[:1], when).data
    except (PlumbError, ImportError, KeyError, TypeError, ValueError):
        return frame


def _as_frame(source):
    if source is None:
        return None
    if isinstance(source, pd.DataFrame):
        return source
    for attr in ("frame", "data"):            # SheetTable.frame, CleanData.data
        frame = getattr(source, attr, None)
        if isinstance(frame, pd.DataFrame):
            return frame
    try:
        values = list(source)
        return pd.DataFrame(values[1:], columns=values[0])
    except (TypeError, ValueError, IndexError):
        return None


def _engine_figures(valuation) -> dict:
    """'; plumbrule wrote 412,300' notes, so a reader sees the live cell matches."""
    est = _estimates(valuation)
    if est is None or not len(est):
        return {}
    row = est.iloc[0]
    out = {}
    for key in ("estimate", "pi_low", "pi_high"):
        v = _number(row.get(key))
        if v is not None:
            out[key] = f"; plumbrule's figure for the first subject: {v:,.0f}"
    return out


def _number(v):
    if v is None or isinstance(v, bool):
        return None
    try:
        x = float(str(v).replace(",", "").replace("$", "")) if isinstance(v, str) else float(v)
    except (TypeError, ValueError):
        return None
    return None if x != x else x


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
        from openpyxl.styles import Font, PatternFill
        from plumbrule.workbook.cells import put
        cell = put(self.ws, row, col, "" if value is None else str(value))   # text stays text
        if bold or italic or size:
            cell.font = Font(bold=bold, italic=italic, size=size)
        if fill:
            cell.fill = PatternFill("solid", fgColor=fill)
        return cell

    def value(self, row, col, value, fmt=None, fill=None):
        from openpyxl.styles import PatternFill
        from plumbrule.workbook.cells import put
        cell = put(self.ws, row, col, value, fmt)
        if fill:
            cell.fill = PatternFill("solid", fgColor=fill)
        return cell

"""Worksheet functions for desktop Excel through xlwings (open-source decorators).

Each function takes the sales block as raw cells (header row first, ``ndim=2``;
intake does the typing), the response, the predictors and an optional settings
range, and returns a table with a header row that spills. The functions are
thin: they parse their arguments, ask the engine (``analysis.analyze``,
``value.valuate``) through the content cache in :mod:`plumbrule.sheet_cache`,
and turn the engine's table into cells. They compute no statistic.

Cells never see a traceback: a :class:`PlumbError` becomes one cell
"plumbrule: <message>", anything else one cell naming an internal error.
Missing numbers become empty cells, numpy scalars Python floats, text stays
under Excel's 255-character limit for arrays, and no result exceeds a sheet.

Register in Excel with the xlwings add-in: ``UDF MODULES`` = ``plumbrule.sheet_functions``,
then *Import Functions* (see docs/excel.md).
"""

from __future__ import annotations

import datetime as _dt
import functools
from typing import Any, Callable

from plumbrule import __version__
from plumbrule.intake.cells import error_text, is_blank
from plumbrule.errors import PlumbError, SettingError
from plumbrule.render.plain import plain_value
from plumbrule.excel.cache import SheetCache, small_key
from plumbrule.excel import handles

try:   # without Excel (Linux, macOS, CI) these decorators only mark the functions
    import xlwings as xw
except ImportError:  # pragma: no cover - xlwings is a dependency; keep the module importable
    class _NoXlwings:
        __version__ = "not installed"

        @staticmethod
        def func(f=None, **kw):
            return f if f is not None else (lambda g: g)

        @staticmethod
        def arg(*a, **kw):
            return lambda g: g

        @staticmethod
        def ret(*a, **kw):
            return lambda g: g

    xw = _NoXlwings()  # type: ignore[assignment]

CATEGORY = "plumbrule"
MAX_ROWS = 1_048_576          # Excel's sheet: rows × columns
MAX_COLUMNS = 16_384
MAX_TEXT = 254                # a text cell inside an array must stay under 255 characters
PREFIX = "plumbrule: "

CACHE = SheetCache()

# Argument help shown in Excel's function wizard (each under 255 characters).
DOC_SALES = ("The sales table with its header row, e.g. Sales[#All] (one row per sale; row "
             "numbers count the header as row 1), or a PLUMB_MODEL cell to reuse its fit.")
DOC_RESPONSE = ("Header of the sale-price column, e.g. \"Sale price\" "
                "(blank: the settings' response).")
DOC_PREDICTORS = ("Headers of the columns that explain the price: comma-separated text "
                  "(\"Living area,Lot size,Age\") or a range of header cells.")
DOC_SETTINGS = ("Optional two-column range: setting name, value (e.g. log_response, TRUE). "
                "Names as on the Settings sheet.")
DOC_SUBJECT = ("The subject properties with a header row: the same predictor columns as the "
               "sales (the price may be absent).")
DOC_MODELS = ("Candidate models with a header row: Model (a name), then setting names "
              "(trend, log_response, predictors…); one row per candidate, blank = as in the "
              "settings.")
DOC_COMPS = ("Sheet row numbers of comparable sales (up to 10): \"12,40,57\" or a range "
             "holding the row numbers.")


# --- turning engine tables into cells ----------------------------------------------

def text_cell(text: str) -> str:
    """Text shortened to fit an array cell (under 255 characters), marked with …"""
    return text if len(text) <= MAX_TEXT else text[:MAX_TEXT - 1] + "\u2026"


def cell(v: Any) -> Any:
    """One engine value → what a cell can hold: float, bool, text, datetime or None."""
    if isinstance(v, str):
        return text_cell(v)
    if isinstance(v, (list, tuple, set, frozenset)):
        return text_cell("; ".join(str(p) for p in v if p is not None and p != ""))
    v = plain_value(v)                                   # NaN/inf/NaT: an empty cell, never 0
    if v is None or isinstance(v, (bool, float, _dt.date, _dt.time)):
        return v
    if isinstance(v, int):
        return float(v)
    return text_cell(str(v))


_AS_IS = frozenset({str, type(None)})     # cells cell() returns unchanged when short


def frame_cells(frame) -> list[list[Any]]:
    """A DataFrame → header row + one row of cells per record, cut to a sheet's size."""
    import numpy as np
    columns = list(frame.columns)[:MAX_COLUMNS]
    body_rows = min(len(frame), MAX_ROWS - 1)
    cut = len(frame) - body_rows
    if cut:
        body_rows -= 1                                   # room for the note
    part = frame.iloc[:body_rows]
    cols = []
    for name in columns:
        s = part[name]
        if s.dtype.kind == "f":
            a = s.to_numpy(dtype=float)
            col = a.astype(object)
            col[~np.isfinite(a)] = None
            cols.append(col.tolist())
        elif s.dtype.kind in "iu":
            cols.append(s.to_numpy(dtype=float).tolist())
        elif s.dtype.kind == "b":
            cols.append([bool(v) for v in s.tolist()])
        elif s.dtype == np.dtype("datetime64[ns]"):        # naive dates, years 1678-2261
            # numpy gives datetime.datetime (None for NaT) in C: what cell() gives.
            cols.append(s.to_numpy().astype("datetime64[us]").tolist())
        else:
            vals = s.tolist()
            if set(map(type, vals)) <= _AS_IS and max(map(len, filter(None, vals)),
                                                       default=0) <= MAX_TEXT:
                cols.append(vals)                # short text and blanks: cell() keeps them
            else:
                cols.append([cell(v) for v in vals])
    out = [[text_cell(str(c)) for c in columns]]
    out.extend(map(list, zip(*cols, strict=False)) if cols else ([] for _ in range(body_rows)))
    if cut:
        note: list = [None] * len(columns)
        note[0] = text_cell(f"\u2026 {cut + 1} more rows not shown "
                            f"(a sheet holds {MAX_ROWS:,} rows)")
        out.append(note)
    return out


def record_cells(frame, label: str = "measure") -> list[list[Any]]:
    """A one-record table → two columns (measure, value), one row per field."""
    if len(frame) == 0:
        return [[label, "value"]]
    rec = frame.iloc[0]
    return [[label, "value"]] + [[text_cell(str(k)), cell(v)] for k, v in rec.items()]


class Cells(list):
    """Rows already turned into cells (a cached rendering): passed through as is."""


def to_cells(result: Any) -> Any:
    """Whatever a function body returns → cells (a table, or one cell)."""
    if type(result) is Cells:
        return list(result)
    if hasattr(result, "iloc") and hasattr(result, "columns"):
        return frame_cells(result)
    if isinstance(result, list):
        rows = [[cell(v) for v in (r if isinstance(r, (list, tuple)) else [r])[:MAX_COLUMNS]]
                for r in result[:MAX_ROWS]]
        return rows
    return cell(result)


def error_cell(exc: BaseException) -> str:
    """The one cell a function shows instead of a traceback."""
    if isinstance(exc, PlumbError):
        return text_cell(PREFIX + _in_function_words(exc))
    head = f"{PREFIX}internal error ({type(exc).__name__}): "
    tail = " \u2014 please report"
    msg = " ".join(str(exc).split())
    room = MAX_TEXT - len(head) - len(tail)
    if len(msg) > room:
        msg = msg[:room - 1] + "\u2026"
    return head + msg + tail


# Settings a worksheet function takes as its own arguments rather than from the range.
_ARGUMENT_SETTINGS = ("response", "predictors", "comps")


def _in_function_words(exc: PlumbError) -> str:
    """The message as a worksheet user sees the setting: an argument of the function for
    response / predictors / comps, a row of the settings range for the rest."""
    text = str(exc)
    name = exc.setting
    if name in _ARGUMENT_SETTINGS:
        return text.replace(f"Setting '{name}'", f"Argument '{name}'", 1)
    return text


def cell_safe(fn: Callable) -> Callable:
    """Wrap a function body: its result becomes cells, every exception one cell.
    ``functools.wraps`` keeps the name, docstring and signature xlwings reads."""
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        try:
            return to_cells(fn(*args, **kwargs))
        except Exception as exc:      # noqa: BLE001 - a cell must never show a traceback
            return error_cell(exc)
    return wrapper


# --- arguments ------------------------------------------------------------------

def _flat(value: Any) -> list[Any]:
    if isinstance(value, (list, tuple)):
        out = []
        for v in value:
            out.extend(_flat(v))
        return out
    return [value]


def _error_value(v: Any) -> str | None:
    return error_text(v)


def _cells_given(value: Any, what: str) -> list[Any]:
    cells = [v for v in _flat(value) if not is_blank(v)]
    for v in cells:
        err = _error_value(v)
        if err:
            raise SettingError(f"Argument '{what}': a cell holds the error value {err}. "
                               "Fix that cell or leave it blank.", setting=what)
    return cells


def response_arg(value: Any) -> str | None:
    """The response header from text or one cell; None when blank."""
    cells = _cells_given(value, "response")
    if len(cells) > 1:
        raise SettingError("Argument 'response': give one column header, not a range of "
                           f"{len(cells)} cells.", setting="response")
    return str(cells[0]).strip() if cells else None


def predictors_arg(value: Any) -> tuple[str, ...] | None:
    """Headers from comma-separated text (one cell) or a range of header cells."""
    cells = _cells_given(value, "predictors")
    if not cells:
        return None
    if len(cells) == 1:
        return tuple(p.strip() for p in str(cells[0]).split(",") if p.strip())
    return tuple(str(c).strip() for c in cells)


def settings_arg(block: Any) -> dict[str, Any]:
    """A two-column range (setting name, value) → raw settings (see
    :func:`plumbrule.settings.settings_from_rows`)."""
    from plumbrule.settings import settings_from_rows
    if isinstance(block, dict):                        # from Python: {name: value}
        block = [[k, v] for k, v in block.items()]
    if is_blank(block):
        return {}
    rows = block if isinstance(block, list) and all(isinstance(r, list) for r in block) else [
        _flat(block)]
    return settings_from_rows(rows)


def comps_arg(value: Any) -> tuple[int, ...] | None:
    """Sheet rows of comparables from a number, comma text or a range of numbers."""
    from plumbrule.settings import parse_settings
    cells = _cells_given(value, "comps")
    if not cells:
        return None
    texts = [str(int(c)) if isinstance(c, float) and c.is_integer() else str(c) for c in cells]
    rows = parse_settings(comps=",".join(texts)).comps
    return tuple(r for r, _ in rows)


def resolve_settings(response: Any, predictors: Any, settings: Any):
    """The typed Settings for a call: the settings range, with the response and
    predictors arguments taking precedence when given."""
    from plumbrule.settings import parse_settings
    raw = settings_arg(settings)
    r = response_arg(response)
    p = predictors_arg(predictors)
    if r is not None:
        raw["response"] = r
    if p is not None:
        raw["predictors"] = p
    return parse_settings(raw)


# --- the engine, through the cache ------------------------------------------------

class _Fitted:
    """A cached analysis and the valuations made from it (bounded)."""

    __slots__ = ("analysis", "valuations", "rendered", "handles")
    MAX_VALUATIONS = 32

    def __init__(self, analysis) -> None:
        self.analysis = analysis
        self.valuations: dict = {}
        self.rendered: dict = {}
        self.handles: dict = {}          # the model cell's full settings → its handle id

    def cells(self, name: str, build: Callable) -> Cells:
        """``build(analysis)`` as cells, rendered once; fresh row lists per call."""
        done = self.rendered.get(name)
        if done is None:
            done = self.rendered[name] = to_cells(build(self.analysis))
        return Cells(map(list, done)) if isinstance(done, list) else done


def _model_settings(s):
    """Settings without the valuation group: valuations share one fit."""
    from dataclasses import fields
    from plumbrule.settings import REGISTRY, Settings
    defaults = Settings()
    return s.replace(**{f.name: getattr(defaults, f.name) for f in fields(s)
                        if f.name in REGISTRY and REGISTRY[f.name].group == "value"})


_PARSED: dict = {}     # (response, predictors, settings cells) → (settings, model settings,
#                        the text of the analysis key) — or, for a handle, the settings


def _parsed(response: Any, predictors: Any, settings: Any):
    """resolve_settings, _model_settings and the repr of the cache key ("analysis", model
    settings), remembered for the small argument blocks."""
    key = small_key((response, predictors, settings))
    hit = _PARSED.get(key)
    if hit is None:
        s = resolve_settings(response, predictors, settings)
        if len(_PARSED) >= 64:
            _PARSED.pop(next(iter(_PARSED)))
        m = _model_settings(s)
        hit = _PARSED[key] = (s, m, repr(("analysis", m)))
    return hit


def fitted(sales: Any, response: Any, predictors: Any, settings: Any) -> tuple[_Fitted, Any]:
    """The analysis for these cells and arguments (one fit per distinct content), and the
    call's full settings. ``sales`` may be a PLUMB_MODEL cell's handle instead of the block."""
    from plumbrule.analysis import analyze
    first = handles.one_text(sales)
    if type(first) is str:
        hid = handles.handle_id(first)
        if hid is not None:
            return _from_handle(hid, response, predictors, settings)
        if first.startswith(PREFIX):          # the model cell shows an error: show it too
            from plumbrule.errors import IntakeError
            raise IntakeError(first[len(PREFIX):])
    s, m, key_text = _parsed(response, predictors, settings)
    if is_blank(sales) or not isinstance(sales, (list, tuple)):
        from plumbrule.errors import IntakeError
        raise IntakeError("Argument 'sales': select the sales table including its header row, "
                          "e.g. Sales[#All].")
    from plumbrule.intake.table import used_rows
    sales = used_rows(sales)          # a whole-column reference: only the rows with sales
    holder = CACHE.get_or_compute(sales, ("analysis", m),
                                  lambda rows: _Fitted(analyze(rows, m)),
                                  cache_errors=(PlumbError,), loose_columns=_numeric_columns,
                                  key_text=key_text)
    return holder, s


def _from_handle(hid: str, response: Any, predictors: Any,
                 settings: Any) -> tuple[_Fitted, Any]:
    """The fit a PLUMB_MODEL cell's handle names, with this cell's valuation settings."""
    held = handles.look_up(hid)
    if held is None:
        from plumbrule.errors import IntakeError
        raise IntakeError(f"Argument 'sales': the model {hid} is not held by this Python "
                          "session (Python was restarted, or more than "
                          f"{handles.MAX_HANDLES} models are in use). Recalculate its "
                          "PLUMB_MODEL cell (Ctrl+Alt+F9 recalculates every cell).")
    holder, s = held
    return holder, _cell_settings(hid, s, response, predictors, settings)


def _cell_settings(hid: str, s, response: Any, predictors: Any, settings: Any):
    """The model cell's settings ``s`` with the valuation settings this cell gives. A
    setting that would change the fit must be left out or equal the model cell's."""
    if is_blank(response) and is_blank(predictors) and is_blank(settings):
        return s
    key = small_key((hid, response, predictors, settings))
    hit = _PARSED.get(key)
    if hit is not None:
        return hit
    from plumbrule.settings import REGISTRY, normalise_name, parse_settings
    raw = {normalise_name(k): v for k, v in settings_arg(settings).items()}
    r, p = response_arg(response), predictors_arg(predictors)
    if r is not None:
        raw["response"] = r
    if p is not None:
        raw["predictors"] = p
    given = parse_settings(raw)
    own = {}
    for name in raw:
        if name not in REGISTRY or is_blank(raw[name]):
            continue
        if REGISTRY[name].group == "value":
            own[name] = getattr(given, name)
        elif getattr(given, name) != getattr(s, name):
            raise SettingError(
                f"Setting '{name}' differs from the one of model {hid}: a cell given a "
                "model handle uses that model. Change it on the PLUMB_MODEL cell, or leave it "
                "out here.", setting=name)
    out = s.replace(**own) if own else s
    if len(_PARSED) >= 64:
        _PARSED.pop(next(iter(_PARSED)))
    _PARSED[key] = out
    return out


def model_handle(sales, response, predictors, settings) -> str:
    """The handle text of the fit these arguments give (a new id for new content)."""
    holder, s = fitted(sales, response, predictors, settings)
    hid = holder.handles.get(s)
    if hid is None:
        hid = holder.handles[s] = handles.mint((holder, s))
    else:
        handles.hold(hid, (holder, s))
    fit = holder.analysis.fit
    return (f"{handles.PREFIX}{hid}: fitted on {fit.n:,} sales, {fit.n_params} terms")


def _numeric_columns(holder: _Fitted, rows: list) -> frozenset:
    """Block column indices the analysis reads only as numbers: intake reads TRUE as 1
    there, so a TRUE/1 swap cannot change the result. Label and date columns, and
    columns the analysis does not read, keep the strict type check."""
    spec = holder.analysis.spec
    labels = set(spec.categorical) | {spec.date_column, holder.analysis.settings.ratio_by}
    numeric = set(spec.numeric_columns) - labels
    return frozenset(j for j, h in enumerate(rows[0])
                     if isinstance(h, str) and h.strip() in numeric)


def model_cells(name: str, build: Callable, sales, response, predictors, settings) -> Cells:
    """The cells of one analysis table (``build(analysis)``), cached with the fit."""
    return fitted(sales, response, predictors, settings)[0].cells(name, build)


def analysis_for(sales, response, predictors, settings=None):
    """The engine's :class:`~plumbrule.analysis.Analysis` these arguments give."""
    return fitted(sales, response, predictors, settings)[0].analysis


def valuation_for(sales, response, predictors, subject, comps, settings):
    """The engine's :class:`~plumbrule.value.Valuation` (cached beside its fit)."""
    return _valuation(sales, response, predictors, subject, comps, settings)[2]


def valuation_cells(name: str, build: Callable, sales, response, predictors, subject,
                    comps, settings) -> Cells:
    """The cells of one valuation table (``build(valuation)``), rendered once per
    valuation: a recalculation's further cells copy rows instead of rendering a frame."""
    holder, key, valuation = _valuation(sales, response, predictors, subject, comps,
                                        settings)
    done = holder.rendered.get((name, key))
    if done is None:
        done = holder.rendered[(name, key)] = to_cells(build(valuation))
    return Cells(map(list, done)) if isinstance(done, list) else done


def _valuation(sales, response, predictors, subject, comps, settings):
    """(holder, key, valuation): the valuation these arguments give and its key among
    the holder's valuations."""
    from plumbrule.valuation.estimates import valuate
    holder, s = fitted(sales, response, predictors, settings)
    comp_rows = comps_arg(comps)
    if comp_rows is None:
        comp_rows = tuple(r for r, _ in s.comps)
    if is_blank(subject):
        from plumbrule.errors import IntakeError
        raise IntakeError("Argument 'subject': select the subject rows including their "
                          "header row.")
    when = s.valuation_date or _dt.date.today()        # "today" moves: part of the key
    key = (small_key(subject), comp_rows, s, when)
    hit = holder.valuations.get(key)
    if hit is None:
        try:
            hit = valuate(holder.analysis, subject, comps=comp_rows,
                          settings=s.replace(valuation_date=when))
        except PlumbError as exc:
            hit = exc
        if len(holder.valuations) >= _Fitted.MAX_VALUATIONS:
            gone = next(iter(holder.valuations))
            holder.valuations.pop(gone)
            for k in [k for k in holder.rendered if type(k) is tuple and k[1] == gone]:
                holder.rendered.pop(k)
        holder.valuations[key] = hit
    if isinstance(hit, PlumbError):
        raise hit.with_traceback(None)
    return holder, key, hit


def _table(analysis, name: str):
    return analysis.tables.table(name)


# Ranges are read keeping what the user typed (xlwings' value converter options):
# err_to_str gives an error cell as its text ("#N/A") instead of None, so the row is
# logged with its error, not as blank; dates stay datetimes; empty cells stay None (never
# 0 or ""). See docs/excel.md, "How ranges are read".
KEEP_TYPED = dict(err_to_str=True, dates=_dt.datetime, empty=None)

# Argument help per parameter name; every model function takes a subset of these.
ARGS: dict[str, dict[str, Any]] = {
    "sales": dict(ndim=2, doc=DOC_SALES, **KEEP_TYPED),
    "response": dict(doc=DOC_RESPONSE),
    "predictors": dict(doc=DOC_PREDICTORS),
    "subject": dict(ndim=2, doc=DOC_SUBJECT, **KEEP_TYPED),
    "subjects": dict(ndim=2, doc=DOC_SUBJECT, **KEEP_TYPED),
    "comps": dict(doc=DOC_COMPS, **KEEP_TYPED),
    "settings": dict(ndim=2, doc=DOC_SETTINGS, **KEEP_TYPED),
    "models": dict(ndim=2, doc=DOC_MODELS, **KEEP_TYPED),
}


def sheet_function(fn: Callable) -> Callable:
    """Register ``fn`` with xlwings' open-source decorators: one argument description
    per parameter (from :data:`ARGS`; ranges as raw 2-D values, never the DataFrame
    converter), the returned table spilled as it is, and no traceback in a cell.
    The same as stacking @xw.func / @xw.arg … / @xw.ret / @cell_safe by hand."""
    import inspect
    wrapped = xw.ret(transpose=False)(cell_safe(fn))
    for name in reversed(list(inspect.signature(fn).parameters)):
        wrapped = xw.arg(name, **ARGS[name])(wrapped)
    return xw.func(category=CATEGORY, call_in_wizard=False)(wrapped)



# --- the worksheet functions -----------------------------------------------------
# Every function taking ``sales`` also takes a PLUMB_MODEL cell there (its handle text).
# sheet_function adds the metadata xlwings' Import Functions turns into VBA (name,
# arguments, help); PLUMB_INFO, with no arguments and recalculated always, spells it out.

@sheet_function
def PLUMB_MODEL(sales, response, predictors, settings=None):
    ("Fits the model once and shows its handle (one text cell). Give that cell as the first "
     "argument of other PLUMB_ functions instead of the sales: they then reuse this fit.")
    return model_handle(sales, response, predictors, settings)


@sheet_function
def PLUMB_COEFS(sales, response, predictors, settings=None):
    ("Coefficient table of the hedonic model: term, estimate, std_error, t, p_value, ci_low, "
     "ci_high, std_beta, vif. One row per term; spills.")
    return model_cells("coefficients", lambda a: _table(a, "coefficients"),
                       sales, response, predictors, settings)


@sheet_function
def PLUMB_FIT(sales, response, predictors, settings=None):
    ("Fit statistics of the model in two columns, measure and value: rows used and set aside, "
     "R², adjusted R², F, RMSE, MAE, MAPE, AIC, BIC…")
    return model_cells("fit", lambda a: record_cells(_table(a, "fit")),
                       sales, response, predictors, settings)


@sheet_function
def PLUMB_CHECKS(sales, response, predictors, settings=None):
    ("Assumption checks of least squares, one row each: statistic, p_value, threshold, verdict"
     " (ok / watch / fails) and what it means for a valuation.")
    return model_cells("checks", lambda a: _table(a, "checks"),
                       sales, response, predictors, settings)



@sheet_function
def PLUMB_SCREEN(sales, response, predictors, settings=None):
    ("The sales set aside, one row each: sheet row, column, value, rule, limit and reason "
     "(screening rules and rows with missing values).")
    return model_cells("screen", screen_table, sales, response, predictors, settings)


def screen_table(analysis):
    """Every sale set aside: the engine's screening log and missing-value rows in one."""
    return analysis.tables.set_aside


@sheet_function
def PLUMB_RATIOS(sales, response, predictors, settings=None):
    ("Sales-ratio study (holdout sales, or cross-validated estimates without a holdout): "
     "median ratio and interval, COD, PRD, PRB, value slope, each with its target and "
     "verdict.")
    return model_cells("ratios", ratio_table, sales, response, predictors, settings)


def ratio_table(analysis):
    """The engine's ratio study (in-sample, labelled so, without holdout or folds)."""
    return analysis.tables.ratio_study


@sheet_function
def PLUMB_VALUE(sales, response, predictors, subject, settings=None):
    ("Estimated value of each subject on the price scale, with confidence and prediction "
     "intervals and flags. A statistical estimate, not an appraisal.")
    return valuation_cells("estimates", lambda v: v.estimates, sales, response, predictors,
                           subject, None, settings)


@sheet_function
def PLUMB_GRID(sales, response, predictors, subject, comps, settings=None):
    ("Adjustment grid: for each comparable and feature the subject and comp values, the model-"
     "derived adjustment, market-conditions, net and gross totals.")
    valuation = valuation_for(sales, response, predictors, subject, comps, settings)
    return _with_comparables(valuation).grid


def _with_comparables(valuation):
    """The valuation, provided it has a grid (comparables were given)."""
    if len(valuation.grid) == 0:
        raise SettingError("The adjustment grid needs comparables: give their sheet rows in "
                           "the comps argument (e.g. 12,40,57) or the setting comps.",
                           setting="comps")
    return valuation


@sheet_function
def PLUMB_RECONCILE(sales, response, predictors, subject, comps, settings=None):
    ("Reconciled value from the adjustment grid in two columns, measure and value: value, "
     "range, spread and the weights given to each comparable.")
    valuation = _with_comparables(valuation_for(sales, response, predictors, subject, comps,
                                                settings))
    return record_cells(valuation.reconciled)


@sheet_function
def PLUMB_SUGGEST(sales, response, predictors, subject, settings=None):
    ("Suggested comparables for the first subject: the sales the model adjusts least (gross "
     "adjustment as a share of the price), best first, with net, gross and adjusted price. "
     "suggest_comps (default 4), comp_same and comp_months in settings.")
    from plumbrule.valuation.suggest import DEFAULT_SUGGESTIONS
    holder, s = fitted(sales, response, predictors, settings)
    n = s.suggest_comps or DEFAULT_SUGGESTIONS
    raw = {**settings_arg(settings), "suggest_comps": n, "comps": None, "comp_ids": None}
    block = [["setting", "value"]] + [[k, v] for k, v in raw.items()]
    valuation = valuation_for(sales, response, predictors, subject, None, block)
    return valuation.suggestions


@sheet_function
def PLUMB_TOTAL(sales, response, predictors, subjects, settings=None):
    ("Total value of two or more subjects (a portfolio) with its confidence and prediction "
     "intervals from the full covariance of the estimates, and the naive sums beside them.")
    valuation = valuation_for(sales, response, predictors, subjects, None, settings)
    if len(valuation.portfolio) == 0:
        from plumbrule.errors import IntakeError
        raise IntakeError("Argument 'subjects': a total needs two or more subject rows under "
                          "the header.")
    return record_cells(valuation.portfolio)


@sheet_function
def PLUMB_COMPARE(sales, models, settings=None):
    ("Candidate models compared on the same sales, holdout and folds: one row each, best "
     "first by compare_by (default out-of-sample MAPE), chosen marked, then the reason.")
    return comparison_cells(sales, models, settings)


def comparison_cells(sales, models, settings) -> Cells:
    """The engine's comparison table as cells, then a blank row and the reason, one sentence
    a row (a cell of an array holds under 255 characters). Cached by content, like a fit."""
    from plumbrule.compare import candidates_from_rows, compare
    from plumbrule.errors import IntakeError
    first = handles.one_text(sales)
    if type(first) is str and handles.handle_id(first) is not None:
        raise IntakeError("Argument 'sales': PLUMB_COMPARE fits every candidate itself; give "
                          "it the sales table (e.g. Sales[#All]), not a PLUMB_MODEL cell.")
    if is_blank(sales) or not isinstance(sales, (list, tuple)):
        raise IntakeError("Argument 'sales': select the sales table including its header row, "
                          "e.g. Sales[#All].")
    block = models if isinstance(models, list) else [_flat(models)]
    candidates = candidates_from_rows(block, where="models range (its first cell is A1)")
    if not candidates:
        raise SettingError("Argument 'models': no candidate. Select a range with a header "
                           "row (Model, then setting names) and one row per candidate.",
                           setting="models")
    s = resolve_settings(None, None, settings)
    from plumbrule.intake.table import used_rows
    sales = used_rows(sales)

    def build(rows):
        result = compare(rows, s, candidates)
        out = frame_cells(result.table)
        width = len(out[0])
        out.append([None] * width)
        for sentence in _sentences(result.reason):
            out.append([text_cell(sentence)] + [None] * (width - 1))
        return Cells(out)
    done = CACHE.get_or_compute(sales, ("compare", small_key(block), s), build,
                                cache_errors=(PlumbError,))
    return Cells(map(list, done))


def _sentences(text: str) -> list[str]:
    import re
    return [p for p in re.split(r"(?<=[.!?])\s+(?=[A-Z'])", text) if p]


@xw.func(category=CATEGORY, volatile=True)
@xw.ret(transpose=False)
@cell_safe
def PLUMB_INFO():
    ("plumbrule version, Python and library versions, and the state of the fit cache (entries,"
     " hits, misses, memory), as two columns: item, value.")
    return info_rows()


def info_rows() -> list[list[Any]]:
    from importlib import metadata
    import platform
    rows: list[list[Any]] = [["item", "value"], ["plumbrule", __version__],
                             ["python", platform.python_version()]]
    for lib in ("numpy", "scipy", "pandas", "statsmodels", "python-calamine", "openpyxl",
                "xlwings"):
        try:
            rows.append([lib, metadata.version(lib)])
        except metadata.PackageNotFoundError:
            rows.append([lib, "not installed"])
    st = CACHE.stats()
    rows += [["cache_entries", st.entries], ["cache_hits", st.hits],
             ["cache_misses", st.misses], ["cache_evictions", st.evictions],
             ["cache_mb", st.approx_bytes / 2**20], ["cache_max_entries", st.max_entries],
             ["cache_max_mb", st.max_bytes / 2**20], ["model_handles", handles.held()]]
    return rows


FUNCTIONS = (PLUMB_MODEL, PLUMB_COEFS, PLUMB_FIT, PLUMB_CHECKS, PLUMB_SCREEN, PLUMB_RATIOS,
             PLUMB_VALUE, PLUMB_GRID, PLUMB_RECONCILE, PLUMB_SUGGEST, PLUMB_TOTAL, PLUMB_COMPARE,
             PLUMB_INFO)

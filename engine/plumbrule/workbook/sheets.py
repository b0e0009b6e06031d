"""The result sheets plumbrule writes: Model, Screening, Validation, Valuation.

Each writer takes the worksheet and the engine's tables and lays them out; no
statistic is computed here. Numbers keep full precision; number formats show
money, percentages, ratios and 3 significant digits for statistics.
"""

from __future__ import annotations

from typing import Any, Callable

import numpy as np
import pandas as pd

from plumbrule.render.wording import CAUTION, final_fit_text, validation_text
from plumbrule.workbook.cells import (
    DATE,
    TITLE_COLOUR,
    INTEGER,
    MONEY,
    PERCENT,
    RATIO,
    define_name,
    fit_for_print,
    merge,
    note,
    put,
    set_alignment,
    set_fill,
    set_font,
    sig3,
    title,
    write_frame,
    write_pairs,
)

# Words on screen for the engine's column names (the tables keep their own names).
_WORDS = {
    "r_squared": "R²", "adj_r_squared": "adjusted R²", "p_value": "p-value", "f_p_value":
    "p-value of F", "std_error": "std error", "std_beta": "std beta", "vif": "VIF",
    "ci_low": "CI low", "ci_high": "CI high", "pi_low": "PI low", "pi_high": "PI high",
    "cod": "COD", "cov": "COV", "prd": "PRD", "prb": "PRB", "prb_ci_low": "PRB CI low",
    "prb_ci_high": "PRB CI high", "value_slope": "value slope", "value_slope_ci_low":
    "value slope CI low", "value_slope_ci_high": "value slope CI high", "rmse": "RMSE",
    "mae": "MAE", "mape": "MAPE (%)",
    "rmse_model": "RMSE (model scale)", "r_squared_model": "R² (model scale)", "aic": "AIC",
    "bic": "BIC", "se_mean": "std error of the mean", "se_single": "std error of one sale",
    "n": "sales", "comp_row": "comparable (sheet row)", "row": "sheet row", "id": "ID",
    "comp_id": "comparable (ID)", "merged_into": "merged into",
}
_FIT_WORDS = {
    "n_used": "Sales used in the fit", "n_dropped": "Rows dropped (missing values)",
    "n_holdout": "Sales held out for testing", "n_screened": "Sales set aside by screening",
    "n_params": "Parameters", "df_resid": "Residual degrees of freedom",
    "r_squared": "R² (model scale)", "adj_r_squared": "Adjusted R² (model scale)",
    "f_stat": "F statistic", "f_p_value": "p-value of F",
    "resid_std_error": "Residual standard error (model scale)", "rmse": "RMSE (model scale)",
    "mae": "MAE (model scale)", "mape": "MAPE (% of price)", "log_likelihood": "Log-likelihood",
    "aic": "AIC", "bic": "BIC", "se_type": "Standard errors", "response": "Response",
    "scale": "Model scale", "r_squared_price_scale": "R² (price scale)",
    "rmse_price_scale": "RMSE (price scale)", "mae_price_scale": "MAE (price scale)",
    "final_fit": "Final model fitted on (final_fit)",
    "n_training": "Training sales (the model validation tests)",
}
_MONEY_COLUMNS = {
    "sale_price", "se_mean", "se_single", "ci_low", "ci_high", "pi_low", "pi_high", "value",
    "range_low", "range_high", "spread", "adjustment", "adjustment_alone", "net_adjustment",
    "gross_adjustment", "adjusted_price", "median_estimate", "model_estimate", "estimate",
    "assessed",
}
_RATIO_COLUMNS = {"ratio", "median_ratio", "median_ci_low", "median_ci_high", "mean_ratio",
                  "weighted_mean_ratio", "prd", "prb", "prb_ci_low", "prb_ci_high", "value_slope",
                  "value_slope_ci_low", "value_slope_ci_high", "weight", "retransform_factor"}


def label(column: str) -> str:
    """Screen words for an engine column name."""
    return _WORDS.get(column, column.replace("_", " "))


def _price_scale_formats(frame: pd.DataFrame) -> dict[str, Any]:
    """Formats for a table whose money columns are on the price scale."""
    out: dict[str, Any] = {}
    for c in frame.columns:
        if c in _MONEY_COLUMNS:
            out[c] = MONEY
        elif c in _RATIO_COLUMNS:
            out[c] = RATIO
        elif c.endswith("_pct") or c.startswith("share") or c.endswith("_share"):
            out[c] = PERCENT
        elif c in ("cod", "cov"):
            out[c] = "0.0"
        else:
            out[c] = _default_format(frame[c], c)
    return out


def _default_format(col: pd.Series, name: str) -> Any:
    if name == "row" or name.endswith("_row") or name == "n" or name.startswith("n_") \
            or name.startswith("rows_") or name in ("excluded", "fold", "folds"):
        return INTEGER
    if "share" in name or name.endswith("_pct"):
        return PERCENT
    if col.dtype.kind in "iu":
        return INTEGER
    if col.dtype.kind == "f" or col.dtype == object:
        return sig3
    return None


def _stat_formats(frame: pd.DataFrame) -> dict[str, Any]:
    return {c: _default_format(frame[c], c) for c in frame.columns}


def _widths(
    ws, frame: pd.DataFrame, left: int = 1, minimum: float = 10, maximum: float = 48
) -> None:
    from openpyxl.utils import get_column_letter
    for j, c in enumerate(frame.columns):
        letter = get_column_letter(left + j)
        longest = len(label(str(c)))
        col = frame[c]
        if len(col) and (col.dtype == object or pd.api.types.is_string_dtype(col.dtype)):
            # text: wide enough for most of it
            lengths = [len(v) if isinstance(v, str) else 0 for v in col.head(2000).tolist()]
            longest = max(longest, int(np.quantile(lengths, 0.9)))   # as Series.quantile
        width = max(minimum, min(maximum, longest + 2))
        if c in ("sale", "comp_sale"):        # an address with its ID: wide enough to read
            width = max(width, 30)
        if ws.column_dimensions[letter].width is None or ws.column_dimensions[letter].width < width:
            ws.column_dimensions[letter].width = width


WIDE, FEW = 10, 5     # a table this wide with this few rows is printed measure by measure


class Placed:
    """Where a table's values went: ``cell(column, i)`` is the address of row ``i``'s
    value of ``column`` (a table of few rows and many columns is written turned, one
    column per row of the table, so that it prints on a page's width)."""

    def __init__(self, frame: pd.DataFrame | None, first: int, turned: bool):
        self.columns = list(frame.columns) if frame is not None else []
        self.first, self.turned = first, turned

    def cell(self, column: str, i: int = 0) -> str:
        j = self.columns.index(column)
        return _cell(2 + i, self.first + j) if self.turned else _cell(1 + j, self.first + i)


def _table(ws, r: int, heading: str, frame: pd.DataFrame | None, formats: dict | None = None,
           empty: str = "None.", explain: str | None = None) -> tuple[int, int]:
    """Heading, optional one-line explanation, the table; returns (first data row, next row)."""
    placed, nxt = _placed_table(ws, r, heading, frame, formats, empty, explain, turn=False)
    return placed.first, nxt


def _placed_table(ws, r: int, heading: str, frame: pd.DataFrame | None,
                  formats: dict | None = None, empty: str = "None.",
                  explain: str | None = None, turn: bool | None = None) -> tuple[Placed, int]:
    """As :func:`_table`; a table of at most FEW rows and more than WIDE columns is turned
    (``turn`` None: decided by its shape). Returns (where its values are, next row)."""
    r = title(ws, r, heading)
    if explain:
        r = note(ws, r, explain)
    if frame is None or len(frame) == 0:
        r = note(ws, r, empty)
        return Placed(frame, r, False), r + 1
    if turn is None:
        turn = len(frame) <= FEW and len(frame.columns) > WIDE
    fmts = formats if formats is not None else _stat_formats(frame)
    if not turn:
        labels = {c: label(str(c)) for c in frame.columns}
        first = r + 1
        r = write_frame(ws, frame, r, 1, fmts, labels)
        _widths(ws, frame)
        return Placed(frame, first, False), r + 1
    return Placed(frame, r, True), _turned(ws, r, frame, fmts)


def _turned(ws, r: int, frame: pd.DataFrame, formats: dict) -> int:
    """One row per column of ``frame`` (its label in column A), one column per record."""
    from openpyxl.utils import get_column_letter
    for j, c in enumerate(frame.columns):
        put(ws, r + j, 1, label(str(c)), style="plumb_label")
        fmt = formats.get(c)
        for i, v in enumerate(frame[c].tolist()):
            put(ws, r + j, 2 + i, v, fmt(v) if callable(fmt) else fmt)
    for i in range(len(frame)):
        dim = ws.column_dimensions[get_column_letter(2 + i)]
        dim.width = max(dim.width if dim.customWidth and dim.width else 0, 14)
    label_dim = ws.column_dimensions["A"]
    longest = max(len(label(str(c))) for c in frame.columns) + 2
    label_dim.width = max(label_dim.width if label_dim.customWidth and label_dim.width else 0,
                          min(34, longest))
    return r + len(frame.columns) + 1


def _col(frame: pd.DataFrame, name: str) -> int:
    return list(frame.columns).index(name) + 1


def _cell(col: int, row: int) -> str:
    from openpyxl.utils import get_column_letter
    return f"{get_column_letter(col)}{row}"


# --- Model -----------------------------------------------------------------

def write_model(ws, analysis, stamp) -> None:
    """The model in one sentence, its effects in words, the coefficients in detail, the
    fit figures, the checks question by question, the audit stamp; below the printed
    area, the covariance of the estimates (for the live block's formulas)."""
    for letter, width in zip("ABCDEFGHIJ", (40, 12, 12, 12, 12, 24, 12, 12, 12, 24),
                             strict=True):
        ws.column_dimensions[letter].width = width
    r = title(ws, 1, "Model")
    r = note(ws, r, model_sentence(analysis)) + 1
    r = _effects(ws, r, analysis)
    r = _coefficients(ws, r, analysis)
    from plumbrule.workbook.curve_tables import write_curves
    r = write_curves(ws, r, analysis)
    r = _fit_figures(ws, r, analysis)
    r = _checks_by_question(ws, r, analysis)
    r = _market_index(ws, r, analysis.tables.market_index)
    r = title(ws, r, "Audit stamp")
    r = write_pairs(ws, stamp.rows(), r)
    ws.freeze_panes = None
    printed = r - 1
    # the covariance matrix feeds the live block's formulas; a reader does not print it
    _covariance(ws, r + 1, analysis)
    fit_for_print(ws, last_col=LAST_MODEL_COL, last_row=printed)


LAST_MODEL_COL = 10      # column J: the checks' note ends there


def _effects(ws, r: int, analysis) -> int:
    """Each term's effect on the price in words, with its p-value."""
    from plumbrule.render.effects import effect_phrases
    coefs = analysis.tables.coefficients
    words = effect_phrases(analysis.final_model)
    r = title(ws, r, "What each feature does to the price")
    r = note(ws, r, "Each effect holds the other features fixed; the p-value says how likely "
                    "an effect this large would be by chance if the feature had none.")
    for j, head in enumerate(("Term", "Effect on the price", "", "", "p-value"), start=1):
        put(ws, r, j, head, style="plumb_header")
    merge(ws, r, 2, r, 4)
    r += 1
    for term, phrase, p in zip(coefs["term"], words, coefs["p_value"], strict=True):
        if not phrase:
            continue
        put(ws, r, 1, term, style="plumb_label")
        put(ws, r, 2, phrase)
        merge(ws, r, 2, r, 4)
        put(ws, r, 5, p, sig3(p))
        r += 1
    return r + 1


_COEF_ORDER = ["term", "estimate", "ci_low", "ci_high", "p_value", "std_error", "t",
               "std_beta", "vif"]
_COEF_WORDS = {"ci_low": "interval from", "ci_high": "interval to", "std_beta": "beta"}


def _coefficients(ws, r: int, analysis) -> int:
    """The coefficients on the model's scale, named for the live block and the sheet
    functions (plumb_coef_terms, plumb_coef_estimates)."""
    book = ws.parent
    coefs = analysis.tables.coefficients
    shown = coefs[[c for c in _COEF_ORDER if c in coefs.columns]
                  + [c for c in coefs.columns if c not in _COEF_ORDER]]
    scale = "the log of the price" if analysis.spec.log_response else "the price"
    conf = f"{analysis.final_model.confidence:.0%}"
    r = title(ws, r, "The coefficients in detail")
    r = note(ws, r, f"On the model's scale ({scale}). Interval: the {conf} confidence interval "
                    "of each estimate; beta: the estimate in standard deviations; VIF: how much "
                    "the other features inflate its variance.")
    labels = {c: _COEF_WORDS.get(c, label(str(c))) for c in shown.columns}
    first = r + 1
    r = write_frame(ws, shown, r, 1, _stat_formats(shown), labels) + 1
    last = first + len(shown) - 1
    define_name(book, "plumb_coef_terms", ws.title, f"{_cell(1, first)}:{_cell(1, last)}")
    est = _col(shown, "estimate")
    define_name(book, "plumb_coef_estimates", ws.title,
                f"{_cell(est, first)}:{_cell(est, last)}")
    return r


# the fit figures in reading order: the sales, the error on prices, then the model's scale
_FIT_ORDER = ("n_used", "n_holdout", "n_screened", "n_dropped", "mape",
              "r_squared_price_scale", "rmse_price_scale", "mae_price_scale", "r_squared",
              "adj_r_squared", "resid_std_error", "rmse", "mae", "f_stat", "f_p_value",
              "log_likelihood", "aic", "bic", "n_params", "df_resid", "se_type", "response",
              "scale")


def _fit_figures(ws, r: int, analysis) -> int:
    """Model-level figures as label/value pairs; plumb_r_squared and plumb_n_used named."""
    book = ws.parent
    fit_frame = analysis.tables.fit
    fit = fit_frame.iloc[0]
    names = [k for k in _FIT_ORDER if k in fit_frame.columns] \
        + [k for k in fit_frame.columns if k not in _FIT_ORDER]
    r = title(ws, r, "How closely the model fits")
    pairs = [(_FIT_WORDS.get(k, label(k)), fit[k]) for k in names]
    fmt = {_FIT_WORDS.get(k, label(k)): (INTEGER if k.startswith(("n_", "df_")) else sig3)
           for k in names}
    top = r
    r = write_pairs(ws, pairs, r, 1, fmt) + 1
    define_name(book, "plumb_r_squared", ws.title, _cell(2, top + names.index("r_squared")))
    define_name(book, "plumb_n_used", ws.title, _cell(2, top + names.index("n_used")))
    return r


QUESTION_TITLES = {
    "the data": "The data", "the shape of the relationship": "The shape of the relationship",
    "the spread of errors": "The spread of errors", "independence": "Independence",
    "normality": "Normality", "collinearity": "Collinearity", "influence": "Influence",
}
VERDICT_FILL = {"ok": "DCEFDC", "watch": "FCE9C4", "fails": "F6CFCB", "n/a": "E8E8E8"}


def _checks_by_question(ws, r: int, analysis) -> int:
    """One band per question (its verdict and sentence), its checks below it."""
    checks = analysis.tables.checks
    questions = analysis.tables.check_questions
    r = title(ws, r, "Checks, question by question")
    r = note(ws, r, "Each question's verdict is that of its worst check: ok, watch or fails "
                    "against the threshold shown; the last column says what it means for a "
                    "valuation.")
    if not len(checks):
        return note(ws, r, "No checks were run.") + 1
    for j, head in ((1, "Check"), (2, "Verdict"), (3, "Statistic"), (4, "p-value"),
                    (5, "Flagged when"), (7, "What it means for the valuation")):
        put(ws, r, j, head, style="plumb_header")
    for j in (6, 8, 9, 10):
        put(ws, r, j, "", style="plumb_header")
    r += 1
    for q in questions.itertuples(index=False):
        head = put(ws, r, 1, QUESTION_TITLES.get(q.question, q.question))
        set_font(head, bold=True, color=TITLE_COLOUR)
        v = put(ws, r, 2, q.verdict)
        set_fill(v, VERDICT_FILL.get(str(q.verdict), "FFFFFF"))
        set_font(v, bold=True)
        set_alignment(v, horizontal="center", vertical="top")
        put(ws, r, 3, q.sentence)
        merge(ws, r, 3, r, LAST_MODEL_COL)
        r += 1
        for c in checks[checks["question"] == q.question].itertuples(index=False):
            set_alignment(put(ws, r, 1, c.check), indent=1, wrap_text=True,
                                                         vertical="top")
            set_alignment(put(ws, r, 2, c.verdict), horizontal="center")
            put(ws, r, 3, c.statistic, sig3(c.statistic))
            put(ws, r, 4, c.p_value, sig3(c.p_value))
            set_alignment(put(ws, r, 5, c.threshold), indent=1, wrap_text=True,
                                                             vertical="top")
            merge(ws, r, 5, r, 6)
            put(ws, r, 7, c.note)
            merge(ws, r, 7, r, LAST_MODEL_COL)
            r += 1
    return r + 1


def _market_index(ws, r: int, index: pd.DataFrame) -> int:
    """The market index of the fitted trend (nothing without a date column)."""
    if index is None or not len(index):
        return r
    fmt: dict[str, Any] = {c: RATIO for c in ("index", "ci_low", "ci_high")}
    fmt.update(date=DATE, sales=INTEGER, mean_residual=sig3)
    _, r = _table(ws, r, "Market index (1.000 = prices at the valuation date)", index, fmt,
                  explain="Prices of each month as a share of prices at the valuation date, "
                          "read from the fitted trend, with its confidence interval; sales and "
                          "their mean residual per month; extrapolated: past the last sale or "
                          "before the first.")
    return r


def _time_adjusted(analysis) -> pd.DataFrame:
    """Sheet row (and ID), sale price and the price carried to the valuation date, one row
    per sale of the model that values (the residual table's order)."""
    res = analysis.tables.residuals
    model = analysis.final_model
    keep = [c for c in ("row", "id") if c in res.columns]
    out = res[keep].copy()
    out["sale_price"] = model.data[model.spec.response].to_numpy()
    out["time_adjusted_price"] = res["time_adjusted_price"].to_numpy()
    return out


def _covariance(ws, r: int, analysis) -> int:
    """The k×k covariance matrix of the estimates (model scale), named plumb_coef_cov."""
    import numpy as np
    names = list(analysis.final_model.fit.names)
    cov = np.asarray(analysis.final_model.cov, dtype=float)
    r = title(ws, r, "Covariance of the estimates (model scale)")
    r = note(ws, r, "Used by the live block on the Valuation sheet; same term order as the "
                    "coefficients.")
    for j, nm in enumerate(names):
        put(ws, r, 2 + j, nm, style="plumb_header")
    for i, nm in enumerate(names):
        put(ws, r + 1 + i, 1, nm, style="plumb_label")
        for j in range(len(names)):
            put(ws, r + 1 + i, 2 + j, cov[i, j], "0.000E+00")
    k = len(names)
    from openpyxl.utils import get_column_letter
    for j in range(k):      # '-1.234E-05' and the term names must show whole, not ###
        dim = ws.column_dimensions[get_column_letter(2 + j)]
        dim.width = max(dim.width if dim.customWidth and dim.width else 0, 12,
                        min(30, len(names[j]) + 2))
    define_name(ws.parent, "plumb_coef_cov", ws.title, f"{_cell(2, r + 1)}:{_cell(1 + k, r + k)}")
    return r + k + 2


def _printed_columns(ws, last_row: int) -> int:
    """The last column a table uses above ``last_row`` (notes are wrapped to it)."""
    names = ws.parent._named_styles.names      # cell.style, read by the cell's style id
    skip = {i for i, n in enumerate(names) if n in ("plumb_note", "plumb_title")}
    cols = [c for (r, c), cell in ws._cells.items() if r <= last_row
            and cell._value is not None
            and (cell._style.xfId if cell._style is not None else 0) not in skip]
    return max(cols, default=2)


def model_sentence(analysis) -> str:
    """The model in one sentence, saying which sales it was fitted on."""
    fit = analysis.tables.fit.iloc[0]
    k = int(fit["n_params"]) - int(analysis.final_model.fit.has_intercept)
    resp = str(fit["response"])
    extra = []
    if int(fit["n_screened"]):
        extra.append(f"{int(fit['n_screened'])} set aside by screening")
    if int(fit["n_dropped"]):
        extra.append(f"{int(fit['n_dropped'])} dropped for missing values")
    tail = f" ({'; '.join(extra)})" if extra else ""
    return (f"{resp} explained by {k} terms by least squares. {final_fit_text(fit)}{tail}. "
            f"R² = {float(fit['r_squared']):.3f}"
            + (f" on the log scale ({float(fit['r_squared_price_scale']):.3f} on prices)."
               if analysis.spec.log_response else "."))


# --- Screening ---------------------------------------------------------------

def write_screening(ws, analysis) -> None:
    t = analysis.tables
    r = title(ws, 1, "Screening: the sales set aside, and why")
    r = note(ws, r, "Rules run in a fixed order before the fit; every row set aside is listed "
                    "with the rule, the limit and the reason.") + 1
    _, r = _placed_table(ws, r, "Summary", t.screen_summary, turn=True,
                         empty="No screening rule is set (see trim_percentiles, iqr_fence, "
                               "influence_screen, exclude_rows in Settings).")
    _, r = _table(ws, r, "Rows set aside", t.screen_log, empty="No rows were set aside.")
    _, r = _table(ws, r, "Rows dropped for missing values", t.dropped_rows,
                  empty="No rows had missing values in the columns used.")
    _, r = _table(ws, r, "Category spellings merged", t.level_merges,
                  empty="Every category level has one spelling.",
                  explain="Spellings that differ only in case or spacing are one level, under "
                          "the most frequent spelling; level_map in Settings maps others.")
    printed = r - 1
    if analysis.spec.date_column and "time_adjusted_price" in t.residuals:
        # one row per sale used, as long as the Sales sheet: kept below the printed area (a
        # printout of the screening stays a few pages; the rows stay on the sheet)
        frame = _time_adjusted(analysis)
        r = note(ws, r + 1, "Below the printed area: every sale used, priced at the valuation "
                            "date (print it by selecting it).")
        _table(ws, r, "Sales used, priced at the valuation date", frame,
               {**_stat_formats(frame), "sale_price": MONEY, "time_adjusted_price": MONEY},
               explain="time adjusted price: each sale's price carried from its sale date to "
                       "the valuation date by the fitted market trend (the market-conditions "
                       "adjustment).")
    ws.freeze_panes = None
    fit_for_print(ws, last_col=_printed_columns(ws, printed), last_row=printed)


# --- Validation --------------------------------------------------------------

def write_validation(ws, analysis) -> None:
    t = analysis.tables
    book = ws.parent
    r = title(ws, 1, "Validation and the sales-ratio study")
    r = note(ws, r, validation_text(t.fit.iloc[0]) + ".")
    r = note(ws, r, "Training and holdout figures side by side: a model that does much worse "
                    "on sales it never saw is over-fitted.") + 1
    val = t.validation
    _, r = _table(ws, r, "Accuracy on training and held-out sales", val,
                  _price_scale_formats(val),
                  empty="No holdout or cross-validation was run (set holdout or folds).")
    study = t.ratio_study
    placed, r = _placed_table(ws, r, "Sales-ratio study (ratio = estimate / sale price)", study,
                              _price_scale_formats(study),
                              empty="No ratio study (it needs a holdout or cross-validation).",
                              explain="Targets from the IAAO Standard on Ratio Studies (2013); "
                                      "with fewer than 20 sales the verdicts say the sample is "
                                      "too small.")
    for measure in ("cod", "prd", "prb", "value_slope"):
        if len(study):
            define_name(book, f"plumb_{measure}", ws.title, placed.cell(measure))
        else:
            define_name(book, f"plumb_{measure}", ws.title, _cell(2, r))
    est = t.holdout_estimates
    _, r = _table(ws, r, "Estimates for the held-out sales", est,
                  _price_scale_formats(est), empty="No holdout.")
    if len(t.assessed_estimates):
        roll = t.assessed_estimates
        _, r = _table(ws, r, "Assessments on the roll against the sale prices", roll,
                      _price_scale_formats(roll),
                      explain="Ratio = assessed value / sale price; its study is in the ratio "
                              "study above (sample 'assessed'). Value ranges are cut on the "
                              "assessed value.")
    if len(t.sales_chasing):
        _, r = _table(ws, r, "Sales chasing: did sold parcels' values move toward their prices?",
                      t.sales_chasing,
                      explain="Tests after the IAAO Standard on Ratio Studies (2013). Changes "
                              "are proportions (0.05 = +5 %), CODs percent.")
    if len(t.residual_map):
        _table(ws, r, "Residuals on the map", t.residual_map,
               explain="Each sale's residual (model scale) at its coordinates; the location "
                       "check (Moran's I) is on the Model sheet's checks.")
    ws.freeze_panes = None
    fit_for_print(ws, last_col=_printed_columns(ws, ws.max_row))


# --- Valuation ---------------------------------------------------------------

def write_valuation(ws, analysis, valuation, live: Callable | None = None) -> int:
    """Estimates, reconciled value, adjustment grid; then the live block. Returns next row."""
    book = ws.parent
    r = title(ws, 1, "Valuation")
    r = note(ws, r, CAUTION) + 1
    if valuation is None:
        r = note(ws, r, "No subjects: enter properties to value on the Subjects sheet and run "
                        "again.")
        for i, nm in enumerate(("plumb_estimate", "plumb_pi_low", "plumb_pi_high")):
            define_name(book, nm, ws.title, _cell(2 + i, r))
        r += 2
    else:
        est = valuation.estimates
        conf = f"{float(est['confidence'].iloc[0]):.0%}" if len(est) else ""
        placed, r = _placed_table(ws, r, "Estimates for the subjects", est,
                                  _price_scale_formats(est),
                                  explain=f"PI low / PI high: {conf} prediction interval for one "
                                          "sale; CI: interval for the mean price of such "
                                          "properties.")
        for nm, col in (("plumb_estimate", "estimate"), ("plumb_pi_low", "pi_low"),
                        ("plumb_pi_high", "pi_high")):
            define_name(book, nm, ws.title, placed.cell(col))
        rec = valuation.reconciled
        _, r = _placed_table(ws, r, "Reconciled value from the comparables", rec,
                      _price_scale_formats(rec),
                      empty="No comparables: list Sales sheet rows on the Comps sheet.")
        wide = getattr(valuation, "grid_table", None)
        if wide is not None and len(wide):
            step = valuation.settings.adjustment_rounding
            r = title(ws, r, "Adjustment grid")
            r = note(ws, r, "Model-derived adjustments"
                     + (f", rounded to {step:,.0f}" if step else "")
                     + "; the net adjustment is the sum of the adjustments shown and the "
                       "adjusted price is the sale price plus the net. The unrounded figures "
                       "are in the detail below.")
            r = write_grid_table(ws, r, wide) + 1
        grid = valuation.grid
        _, r = _table(ws, r, "Adjustment grid in detail (unrounded, one line per comparable "
                      "and feature)", grid, _price_scale_formats(grid),
                      empty="No comparables.")
    ws.freeze_panes = None
    if live is not None:
        r = live(ws, analysis, valuation, r + 1)
    fit_for_print(ws, last_col=_printed_columns(ws, ws.max_row))
    return r


_GRID_VALUE_FORMATS = {"price": MONEY, "net": '+0.0%;-0.0%;0.0%', "gross": PERCENT,
                       "weight": RATIO, "row": INTEGER}


def grid_comparables(wide: pd.DataFrame) -> list[int]:
    """The comparables' numbers (1, 2, …) in a grid_table."""
    return [int(c.split("_")[1]) for c in wide.columns
            if c.startswith("comp_") and not c.endswith("_adjustment")]


def write_grid_table(ws, r: int, wide: pd.DataFrame, comps: list[int] | None = None,
                     left: int = 1, widths: bool = True) -> int:
    """The grid as appraisers read it (valuation.grid_table): lines down the side, the
    subject and comparables ``comps`` (default all) across, a value and an adjustment
    column each. Returns the next free row."""
    from openpyxl.utils import get_column_letter
    comps = comps or grid_comparables(wide)
    heads = ["", "Subject"]
    for i in comps:
        heads += [f"Comparable {i}", "Adjustment"]
    for j, h in enumerate(heads):
        c = put(ws, r, left + j, h, style="plumb_header")
        if j:
            set_alignment(c, horizontal="right")
    r += 1
    for rec in wide.to_dict("records"):
        kind = rec["kind"]
        put(ws, r, left, rec["line"], style="plumb_label")
        vfmt = _GRID_VALUE_FORMATS.get(kind)
        notes: list[int] = []
        values = [rec["subject"]] + [v for i in comps
                                     for v in (rec[f"comp_{i}"], rec[f"comp_{i}_adjustment"])]
        for j, v in enumerate(values, start=1):
            is_adj = j >= 2 and j % 2 == 1
            if kind == "row" and j == 1:
                v = None         # the subject's row is on another sheet
            fmt = ((MONEY if kind not in ("feature", "market", "net") else '+#,##0;-#,##0;0')
                   if is_adj else vfmt)
            if fmt is None and kind == "feature" and isinstance(v, (int, float)) \
                    and not isinstance(v, bool):
                fmt = "#,##0" if float(v).is_integer() else "#,##0.0##"
            c = put(ws, r, left + j, v, fmt)
            if kind == "notes" and isinstance(v, str) and v:
                set_alignment(c, wrap_text=True, vertical="top")
                notes.append(left + j)
            elif not isinstance(v, str) or kind != "sale":
                set_alignment(c, horizontal="right", vertical="top")
        for col in notes:        # the note over the comparable's two columns
            merge(ws, r, col, r, col + 1)
        if kind == "notes":
            longest = max([len(str(v)) for v in values if isinstance(v, str)] + [0])
            ws.row_dimensions[r].height = 15 * max(1, -(-longest // 28))
        r += 1
    if widths:
        for j in range(len(heads)):
            letter = get_column_letter(left + j)
            want = 30 if j == 0 else 14
            if (ws.column_dimensions[letter].width or 0) < want:
                ws.column_dimensions[letter].width = want
    return r

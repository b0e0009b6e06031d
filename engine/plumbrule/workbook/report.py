"""The Report sheet: what the analysis found, written for a reader who must act.

``write_report(book, analysis, valuation, stamp) -> None`` fills ``book['Report']``
(created here when the writer has not made it) and puts the charts' source data
on a ``Chart data`` sheet (a result sheet: a rerun replaces it). Every number is
read from the analysis and valuation tables; this module only arranges,
formats and explains them. Charts are native workbook charts (openpyxl.chart),
so they redraw in Excel and LibreOffice and print to PDF.
"""

from __future__ import annotations

import math
from typing import Any

import pandas as pd

from plumbrule.diagnostics.tables import effect_table, typical_spread
from plumbrule.numbers import is_number, money
from plumbrule.render.wording import (CAUTION, final_fit_text, gap_sentence, gap_warning,
                                      in_words, validation_text)
from plumbrule.verdicts import FAILS, NA, OK, WATCH
from plumbrule.workbook import cells
from plumbrule.workbook.cells import (MONEY, PERCENT, merge, put, set_alignment, set_fill,
                                      set_font, sig3)

DASH = "—"   # a money figure that is absent
CAUTIONS = (
    CAUTION,
    "The model describes the sales it was fitted on. For a property unlike them (see the "
    "flags beside each estimate) the estimate is an extrapolation and may be far off.",
    "The intervals assume the checks above hold. Where a check says 'watch' or 'fails', treat "
    "the interval as approximate and read that check's note.",
    "Every sale set aside is listed with its rule on the Screening sheet; a reader should "
    "agree with each before relying on the value.",
    "Ratio-study targets are those of the IAAO Standard on Ratio Studies (2013) unless the "
    "settings changed them; local rules may set others.",
)
REPORT, CHART_DATA = "Report", "Chart data"
WIDTHS = {"A": 34, "B": 15, "C": 15, "D": 15, "E": 15, "F": 15, "G": 52}
LAST_COL = 7
CHART_W, CHART_H = 15.0, 8.5     # cm; two side by side fill the printed width
VERDICT_FILL = {OK: "DCEFDC", WATCH: "FCE9C4", FAILS: "F6CFCB", NA: "E8E8E8"}


def write_report(book, analysis, valuation, stamp) -> None:
    """Fill the Report sheet (text, tables, charts, cautions, audit stamp)."""
    cells.ensure_styles(book)
    ws = book[REPORT] if REPORT in book.sheetnames else book.create_sheet(REPORT, 0)
    if CHART_DATA in book.sheetnames:
        del book[CHART_DATA]
    data_ws = book.create_sheet(CHART_DATA)
    for col, width in WIDTHS.items():
        ws.column_dimensions[col].width = width
    ctx = _Context(analysis, valuation, stamp)
    r = _header(ws, ctx)
    r = _headline(ws, ctx, r + 1)
    r = _before_relying(ws, ctx, r + 1)
    r = _valuation(ws, ctx, r + 1)
    r = _checks(ws, ctx, _page_break(ws, r))
    r = _screening(ws, ctx, r + 1)
    r = _ratio_study(ws, ctx, r + 1)
    r = _charts(ws, data_ws, ctx, _page_break(ws, r))
    r = _cautions(ws, _page_break(ws, r))
    r = _stamp(ws, stamp, r + 1)
    _top_align(ws)
    _page_setup(ws, r)
    cells.fit_for_print(ws, last_col=LAST_COL, landscape=True, last_row=r)
    data_ws.sheet_properties.tabColor = "9FB3BD"
    data_ws.sheet_state = "hidden"     # printing the workbook should not print the points


# --- what the sections read ---------------------------------------------------

class _Context:
    def __init__(self, analysis, valuation, stamp):
        self.analysis = analysis
        self.valuation = valuation
        self.stamp = stamp
        self.model = analysis.final_model
        self.spec = analysis.final_model.spec
        self.tables = analysis.tables
        self.fit = analysis.tables.fit.iloc[0]
        self.log = bool(self.spec.log_response)
        self.response = self.spec.response
        est = valuation.estimates if valuation is not None else None
        self.estimates = est if est is not None and len(est) else None
        rec = valuation.reconciled if valuation is not None else None
        self.reconciled = rec if rec is not None and len(rec) else None
        settings = valuation.settings if valuation is not None else analysis.settings
        self.level = float(settings.confidence)
        self.retransform = settings.retransform

    def table(self, name):
        t = self.tables.table(name)
        return t if len(t) else None


# --- sections -------------------------------------------------------------------

def long_date(d) -> str:
    """5 January 2026."""
    d = pd.Timestamp(d)
    return f"{d.day} {d:%B %Y}"


def report_title(ctx) -> str:
    """A title that names the job: 'Valuation of 14 Lantern Row, effective 5 January 2026';
    for many subjects their number; without subjects the model and its sales."""
    if ctx.estimates is None:
        return f"Model of {ctx.response} from {int(ctx.fit['n_used']):,} sales"
    when = long_date(ctx.valuation.valuation_date)
    n = len(ctx.estimates)
    what = (str(ctx.estimates["subject"].iloc[0]) if n == 1 else f"{n:,} properties")
    return f"Valuation of {what}, effective {when}"


ASSIGNMENT = (("Client", "client"), ("Intended use", "intended_use"),
              ("Effective date", "valuation_date"), ("Prepared by", "prepared_by"),
              ("Property rights", "property_rights"))


def _assignment(ws, ctx, r) -> int:
    """The assignment as the Settings sheet states it; a blank setting stays blank (the
    effective date is the valuation date the estimates are made for)."""
    settings = ctx.valuation.settings if ctx.valuation is not None else ctx.analysis.settings
    for label, name in ASSIGNMENT:
        value = getattr(settings, name, None)
        if name == "valuation_date" and ctx.valuation is not None:
            value = ctx.valuation.valuation_date
        put(ws, r, 1, label, style="plumb_label")
        _wrapped(ws, r, 2, long_date(value) if name == "valuation_date" and value else value,
                 span=LAST_COL - 1)
        r += 1
    return r


def _header(ws, ctx) -> int:
    r = cells.title(ws, 1, report_title(ctx))
    when, src = ctx.stamp.local_time(), ctx.stamp.source
    put(ws, r, 1, f"Prepared by plumbrule {ctx.stamp.version}"
                  f"{' on ' + when if when else ''}{' from ' + src if src else ''}.",
        style="plumb_note")
    r = _assignment(ws, ctx, r + 1)
    c = _wrapped(ws, r, 1, CAUTION, span=LAST_COL)
    set_font(c, bold=True, color="7A2E1F")
    set_fill(c, "FBEFE9")
    r += 2
    r = _section(ws, r, "The model in one sentence")
    _wrapped(ws, r, 1, model_sentence(ctx), span=LAST_COL)
    return r + 1


def model_sentence(ctx) -> str:
    """'The logarithm of Sale price is explained by … ; it accounts for …'."""
    spec, enc = ctx.spec, ctx.model.encoding
    levels = dict(enc.levels)
    parts = []
    for col in spec.predictors:
        if col in levels:
            parts.append(f"{col} ({len(levels[col])} levels, each compared with "
                         f"'{levels[col][0]}')")
        elif col in spec.log_predictors:
            parts.append(f"{col} (as a logarithm)")
        elif enc.curve(col) is not None:
            parts.append(f"{col} (as a curve: {enc.curve(col).describe()})")
        else:
            parts.append(col)
    if spec.date_column:
        parts.append(f"a market trend per month since {enc.date_origin.date()} "
                     f"('{spec.date_column}')")
    what = f"The logarithm of {ctx.response}" if ctx.log else ctx.response
    joined = ", ".join(parts[:-1]) + " and " + parts[-1] if len(parts) > 1 else parts[0]
    n = int(ctx.fit["n_used"])
    r2 = float(ctx.fit["r_squared"])
    spread_value, unit = typical_spread(ctx.model)
    shown = f"{spread_value:.0%}" if unit == "share" else f"{spread_value:,.0f}"
    spread = (f"a single sale typically lies within about ±{shown} of the model "
              "(one residual standard error)")
    scale = "of the log price" if ctx.log else "of the price"
    return (f"{what} is explained by {joined}, fitted by least squares to {n:,} sales; the "
            f"model accounts for {r2:.1%} of the variation {scale}, and {spread}. "
            f"{final_fit_text(ctx.fit)}.")


def _headline(ws, ctx, r) -> int:
    r = _section(ws, r, "Headline numbers")
    rows: list[tuple[str, Any, Any, str, str]] = []   # label, value, value2, format, comment
    if ctx.estimates is not None:
        e = ctx.estimates.iloc[0]
        rows.append((f"Estimate for {e.get('subject', 'the subject')}", e["estimate"], None,
                     MONEY, _kind_text(e)))
        rows.append((f"{ctx.level:.0%} prediction interval for one sale", e["pi_low"],
                     e["pi_high"], MONEY, "low and high: where the price of one such sale "
                     "should fall"))
    if ctx.reconciled is not None:
        rec = ctx.reconciled.iloc[0]
        rows.append(("Reconciled value from the comparables", rec.get("value"), None, MONEY,
                     f"adjusted prices range {money(rec.get('range_low'), DASH)} to "
                     f"{money(rec.get('range_high'), DASH)}"))
    n_used = int(ctx.fit["n_used"])
    rows.append(("Sales used in the fit", n_used, None, "#,##0",
                 _set_aside_text(ctx)))
    rows.append(("Share of variation explained (R²)", ctx.fit["r_squared"], None, PERCENT,
                 f"adjusted R² {float(ctx.fit['adj_r_squared']):.1%}"
                 + (f", on the log scale; on prices {float(ctx.fit['r_squared_price_scale']):.1%}"
                    if ctx.log else "")))
    trend = _trend(ctx)
    if trend:
        rows.append(trend)
    rs = ctx.table("ratio_study")
    if rs is not None:
        first = rs.iloc[0]
        where = _sample_text(first)
        for key, label, fmt in (("median_ratio", "Median ratio", "0.000"), ("cod", "COD", "0.0"),
                                ("prd", "PRD", "0.000"), ("prb", "PRB", "0.000"),
                                ("value_slope", "Value slope", "0.000")):
            if key in rs.columns:
                rows.append((f"{label} ({where})", first[key], None, fmt,
                             _verdict_of(rs, 0, key)))
    for label, v1, v2, fmt, comment in rows:
        put(ws, r, 1, label, style="plumb_label")
        c = put(ws, r, 2, v1, fmt)
        set_font(c, bold=True)
        if v2 is not None:
            set_font(put(ws, r, 3, v2, fmt), bold=True)
        _wrapped(ws, r, 4, comment, span=LAST_COL - 3, style="plumb_note")
        r += 1
    return r


def _before_relying(ws, ctx, r) -> int:
    """The points a reader must look at before using the value, most serious first."""
    r = _section(ws, r, "Before relying on the value")
    items = attention_items(ctx)
    if not items:
        items = ["Nothing is flagged: no check fails or asks for a look, the subject lies "
                 "within the sales used, and the ratio study meets its targets."]
    for text in items:
        _wrapped(ws, r, 1, "• " + text, span=LAST_COL)
        r += 1
    return r


def attention_items(ctx, limit: int = 8) -> list[str]:
    """Plain sentences: failed checks, then subject flags, ratio-study measures off
    target, and checks marked 'watch' (at most ``limit``, with a pointer to the rest)."""
    fails, watch, other = [], [], []
    checks = ctx.table("checks")
    if checks is not None:
        for _, c in checks.iterrows():
            if c["verdict"] == FAILS:
                fails.append(f"{c['check']} fails: {in_words(c['note'])}")
            elif c["verdict"] == WATCH:
                watch.append(f"{c['check']} (watch): {in_words(c['note'])}")
    if ctx.estimates is not None:
        from plumbrule.valuation.estimates import shared_flags
        common, own = shared_flags(ctx.estimates["flags"])
        if common:
            other.append(f"Every subject ({len(ctx.estimates):,}): {'; '.join(common)}.")
        shown = 0
        for subject, flags in zip(ctx.estimates["subject"], own, strict=False):
            if flags and shown < 5:
                other.append(f"Subject {subject}: {flags}.")
                shown += 1
        rest = sum(bool(f) for f in own) - shown
        if rest > 0:
            other.append(f"{rest:,} more subjects carry notes of their own: see the Valuation "
                         "sheet.")
    rs = ctx.table("ratio_study")
    if rs is not None:
        first = rs.iloc[0]
        off = [f"{label} {_verdict_of(rs, 0, key)}" for key, label, _, _ in _MEASURES
               if _verdict_of(rs, 0, key) not in ("", OK)]
        if off:
            note = first.get("note") if isinstance(first.get("note"), str) else ""
            other.append(f"Ratio study ({_sample_text(first)}): {', '.join(off)}. {note}".strip())
    items = fails + other + watch
    if len(items) > limit:
        rest = len(items) - (limit - 1)
        items = items[:limit - 1] + [f"… and {rest} more points: the checks under 'What the "
                                     "checks found', the subjects on the Valuation sheet."]
    return items


def _flags(e) -> str:
    v = e.get("flags")
    return v.strip() if isinstance(v, str) else ""


def _kind_text(e) -> str:
    kind = str(e.get("estimate_kind", "") or "")
    text = f"the {kind} estimate" if kind else "the model's estimate"
    if "valuation_date" in e and pd.notna(e["valuation_date"]):
        text += f", valued at {pd.Timestamp(e['valuation_date']).date()}"
    return text


def _set_aside_text(ctx) -> str:
    parts = []
    n_screened = int(ctx.fit["n_screened"])
    n_dropped = int(ctx.fit["n_dropped"])
    n_holdout = int(ctx.fit["n_holdout"])
    if n_screened:
        parts.append(f"{n_screened:,} set aside by screening")
    if n_dropped:
        parts.append(f"{n_dropped:,} dropped for missing values")
    if n_holdout:
        refit = str(ctx.fit.get("final_fit", "all")) == "all"
        parts.append(f"{n_holdout:,} held out to test the model"
                     + (", then included in the final fit" if refit else ", not in the fit"))
    return "; ".join(parts) if parts else "no sale was set aside"


def _trend(ctx):
    if not ctx.spec.date_column:
        return None
    coef = ctx.tables.coefficients
    effects = effect_table(ctx.model)
    trend = effects[effects["kind"] == "trend"]
    if not len(trend):
        return None
    name = trend["term"].iloc[0]
    p = float(coef.loc[coef["term"] == name, "p_value"].iloc[0])
    effect = float(trend["effect"].iloc[0])
    if ctx.log:
        return ("Market trend per month", effect / 100.0, None, "0.00%",
                f"prices change by this share each month (p-value {p:.3g})")
    return ("Market trend per month", effect, None, MONEY,
            f"price change per month (p-value {p:.3g})")


def _valuation(ws, ctx, r) -> int:
    r = _section(ws, r, "The valuation")
    if ctx.estimates is None:
        _wrapped(ws, r, 1, "No subject was valued. Enter the subject's features on the Subjects "
                           "sheet and run plumbrule again.", span=LAST_COL)
        return r + 1
    est = ctx.estimates
    r = _heads(ws, r, ["Subject", "Estimate", "Interval low", "Interval high", "Mean low",
                       "Mean high", "What to watch"], numeric=(2, 3, 4, 5, 6))
    from plumbrule.valuation.estimates import shared_flags
    common, own = shared_flags(est["flags"])
    for (_, e), flags in zip(est.head(50).iterrows(), own, strict=False):
        put(ws, r, 1, e.get("subject"))
        for j, key in enumerate(("estimate", "pi_low", "pi_high", "ci_low", "ci_high"), start=2):
            put(ws, r, j, e.get(key), MONEY)
        _wrapped(ws, r, 7, flags or ("as every subject: see 'Before relying on the value'"
                                     if common else "nothing flagged"), span=1)
        r += 1
    if len(est) > 50:
        r = cells.note(ws, r, f"… and {len(est) - 50} more subjects on the Valuation sheet.")
    _wrapped(ws, r, 1, f"'Interval' is the {ctx.level:.0%} prediction interval for the price of "
                       f"one sale of such a property; 'Mean' is the {ctx.level:.0%} confidence "
                       "interval of the average price of many such properties."
                       + (" The model is in logs: the intervals are exp of the log-scale bounds"
                          " and so are not symmetric about the estimate." if ctx.log else ""),
             span=LAST_COL, style="plumb_note")
    r += 1
    if ctx.reconciled is not None:
        rec = ctx.reconciled.iloc[0]
        text = (f"Sales comparison: the comparables' adjusted prices reconcile to "
                f"{money(rec.get('value'), DASH)} (range {money(rec.get('range_low'), DASH)} to "
                f"{money(rec.get('range_high'), DASH)}). The grid below shows the adjustments "
                "rounded; the unrounded detail is on the Valuation sheet.")
        _wrapped(ws, r, 1, text, span=LAST_COL)
        r += 1
        if gap_warning(rec):
            c = _wrapped(ws, r, 1, "The two values disagree: " + gap_sentence(rec) + ".",
                         span=LAST_COL)
            set_font(c, bold=True, color="7A2E1F")
            r += 1
        r = _grid(ws, ctx, _page_break(ws, r))     # the grid on a page of its own
    return r


def _grid(ws, ctx, r) -> int:
    """The adjustment grid, two comparables per band so it stays within the printed width."""
    from plumbrule.workbook.sheets import grid_comparables, write_grid_table
    wide = getattr(ctx.valuation, "grid_table", None)
    if wide is None or not len(wide):
        return r
    r = _section(ws, r, "Adjustment grid")
    step = ctx.valuation.settings.adjustment_rounding
    _wrapped(ws, r, 1, "Model-derived adjustments" + (f", rounded to {step:,.0f}" if step else "")
             + ": each turns a difference between the subject and the comparable into money. "
             "The net adjustment is the sum of the adjustments shown; the adjusted price is the "
             "sale price plus the net.", span=LAST_COL, style="plumb_note")
    r += 1
    comps = grid_comparables(wide)
    for k in range(0, len(comps), 2):
        r = write_grid_table(ws, r, wide, comps[k:k + 2], widths=False) + 1
    return r


def _checks(ws, ctx, r) -> int:
    r = _section(ws, r, "What the checks found")
    checks = ctx.table("checks")
    if checks is None:
        return cells.note(ws, r, "No checks were run.")
    counts = checks["verdict"].value_counts()
    summary = ", ".join(f"{int(counts.get(v, 0))} {v}" for v in (OK, WATCH, FAILS)
                        if counts.get(v, 0))
    act = ("Nothing fails." if not counts.get(FAILS, 0) else
           "Resolve each 'fails' before relying on the value.")
    if counts.get(WATCH, 0):
        act += " Read each 'watch': it says what it means for the valuation."
    _wrapped(ws, r, 1, f"{summary}. {act}", span=LAST_COL)
    r += 1
    r = _heads(ws, r, ["Check", "Verdict", "Statistic", "p-value", "Flagged when", "",
                       "What it means for the valuation"], numeric=(3, 4))
    from plumbrule.workbook.sheets import QUESTION_TITLES
    set_alignment(ws.cell(row=r - 1, column=5), horizontal="left", indent=2)
    questions = ctx.table("check_questions")
    question = None
    for _, c in checks.iterrows():
        if questions is not None and c.get("question") != question:
            question = c.get("question")
            band = questions[questions["question"] == question]
            if len(band):      # the question: its verdict and sentence, its checks below
                q = band.iloc[0]
                set_font(put(ws, r, 1, QUESTION_TITLES.get(question, question)),
                    bold=True, color=cells.TITLE_COLOUR)
                v = put(ws, r, 2, q["verdict"])
                set_fill(v, VERDICT_FILL.get(str(q["verdict"]), "FFFFFF"))
                set_font(v, bold=True)
                set_alignment(v, horizontal="center", vertical="top")
                _wrapped(ws, r, 3, q["sentence"], span=LAST_COL - 2)
                r += 1
        set_alignment(put(ws, r, 1, c["check"]), wrap_text=True, vertical="top",
                                                        indent=1 if question else 0)
        v = str(c["verdict"])
        vc = put(ws, r, 2, v)
        set_fill(vc, VERDICT_FILL.get(v, "FFFFFF"))
        set_alignment(vc, horizontal="center", vertical="top")
        put(ws, r, 3, c["statistic"], sig3(c["statistic"]))
        put(ws, r, 4, c["p_value"], sig3(c["p_value"]))
        thr = put(ws, r, 5, in_words(c["threshold"]))
        set_alignment(thr, horizontal="left", wrap_text=True, vertical="top", indent=2)
        merge(ws, r, 5, r, 6)
        _wrapped(ws, r, 7, in_words(c["note"]), span=1,
                 lines_with=(in_words(c["threshold"]), 30))
        r += 1
    r = cells.note(ws, r, "'A rule of thumb' marks a threshold of common practice with no "
                          "published source; the Model sheet gives each threshold's source.")
    return _largest_residuals(ws, ctx, r + 1)


def _largest_residuals(ws, ctx, r, n: int = 5) -> int:
    """The sales the model misses most (by studentized residual), named as a reader names
    them."""
    res = ctx.table("residuals")
    if res is None or "studentized_residual" not in res.columns:
        return r
    top = res.reindex(res["studentized_residual"].abs().sort_values(
        ascending=False, kind="stable").index).head(n)
    _wrapped(ws, r, 1, "The sales the model misses most (largest studentized residuals): "
                       "check each is an ordinary sale recorded correctly.", span=LAST_COL)
    r += 1
    r = _heads(ws, r, ["Sale", "Sale price", "Sale date", "Model's price", "Studentized",
                       "", "Sheet row on Sales"], numeric=(2, 3, 4, 5))
    fitted = _fitted_prices(ctx, top)
    for (_, e), est in zip(top.iterrows(), fitted, strict=False):
        put(ws, r, 1, e.get("sale", f"row {e['row']}"))
        put(ws, r, 2, e.get("sale_price"), MONEY)
        put(ws, r, 3, _date_or_none(e.get("sale_date")))
        put(ws, r, 4, est, MONEY)
        put(ws, r, 5, e.get("studentized_residual"), "+0.00;-0.00")
        _wrapped(ws, r, 7, f"row {int(e['row'])}", span=1)
        r += 1
    return r


def _fitted_prices(ctx, rows) -> list:
    """The model's price for each sale in ``rows`` (the fitted prices of the sales used)."""
    prices = pd.Series(ctx.model.fitted_prices(ctx.retransform), index=ctx.model.data.index)
    return [prices.get(int(r)) for r in rows["row"]]


def _date_or_none(v):
    return None if v is None or pd.isna(v) else pd.Timestamp(v).date()


def _screening(ws, ctx, r) -> int:
    r = _section(ws, r, "Sales set aside")
    log = ctx.table("screen_log")
    dropped = ctx.table("dropped_rows")
    summary = ctx.table("screen_summary")
    sentences = []
    if summary is not None and "kind" in summary.columns:
        rows = summary[summary["kind"] == "rows"]
        if len(rows):
            rec = rows.iloc[0]
            sentences.append(f"Screening looked at {int(rec['rows_before']):,} complete sales and "
                             f"set {int(rec['excluded']):,} aside "
                             f"({float(rec['share_excluded']):.1%}), leaving "
                             f"{int(rec['rows_after']):,}.")
        for _, rule in summary[summary["kind"] == "rule"].iterrows():
            sentences.append(f"The {rule['item']} rule set aside {int(rule['excluded']):,} of "
                             f"{int(rule['rows_before']):,}.")
        per_col = summary[(summary["kind"] == "column") & (summary["excluded"] > 0)]
        if len(per_col):
            parts = [f"{c['item']} {int(c['excluded']):,}" for _, c in per_col.iterrows()]
            sentences.append("Sales set aside by the column that caught them: "
                             + ", ".join(parts) + ".")
    elif log is None:
        sentences.append("No screening rule was set, so every complete sale entered the fit. "
                         "Settings such as trim_percentiles, iqr_fence or influence_screen set "
                         "unusual sales aside by a rule you can defend.")
    if dropped is not None:
        sentences.append(f"{len(dropped):,} sheet rows were dropped because a used cell was "
                         "blank or an error value; the Screening sheet lists them.")
    if log is not None and summary is None:
        sentences.append(f"{len(log):,} sales were set aside; each is listed on the Screening "
                         "sheet with its rule.")
    merges = ctx.table("level_merges")
    if merges is not None:
        shown = "; ".join(f"'{m['spelling']}' as '{m['merged_into']}' ({m['column']})"
                          for _, m in merges.head(4).iterrows())
        more = f" and {len(merges) - 4} more" if len(merges) > 4 else ""
        sentences.append(f"Category spellings that differ only in case or spacing were read as "
                         f"one level: {shown}{more} (listed on the Screening sheet).")
    _wrapped(ws, r, 1, " ".join(sentences) or "No sale was set aside.", span=LAST_COL)
    r += 1
    if log is not None:
        show = log.head(15)
        r = _heads(ws, r, ["Sale", "Sale price", "Sale date", "Rule", "Value", "Limit",
                           "Reason"], numeric=(2, 3, 5, 6))
        for _, e in show.iterrows():
            put(ws, r, 1, e.get("sale", f"row {e.get('row')}"))
            put(ws, r, 2, e.get("sale_price"), MONEY)
            put(ws, r, 3, _date_or_none(e.get("sale_date")))
            put(ws, r, 4, e.get("rule"))
            put(ws, r, 5, e.get("value"), _value_format(e.get("value")))
            put(ws, r, 6, e.get("limit"), _value_format(e.get("limit")))
            row = e.get("row")
            where = f" (Sales sheet row {int(row)})" if is_number(row) else ""
            _wrapped(ws, r, 7, f"{e.get('reason')}{where}", span=1)
            r += 1
        if len(log) > len(show):
            r = cells.note(ws, r, f"… and {len(log) - len(show)} more on the Screening sheet.")
    return r


_MEASURES = (("median_ratio", "Median ratio", "0.000", "0.90 to 1.10"),
             ("cod", "COD", "0.0", None),
             ("prd", "PRD", "0.000", "0.98 to 1.03"),
             ("prb", "PRB", "0.000", "within ±0.05"),
             ("value_slope", "Value slope", "0.000", "interval includes 0"))
_TABLE_MEASURES = _MEASURES[:4]     # the numeric columns; the value slope is in the verdicts


def _group_text(s) -> str:
    """A ratio-study record's group; the assessments on the roll are marked as such."""
    group = str(s.get("stratum", "all"))
    return f"Roll (assessed): {group}" if s.get("sample") == "assessed" else group


def _ratio_study(ws, ctx, r) -> int:
    r = _section(ws, r, "Sales-ratio study (estimate ÷ sale price)")
    rs = ctx.table("ratio_study")
    if rs is None:
        _wrapped(ws, r, 1, "No ratio study was run: the model was not tested on sales it has "
                           "not seen. Set 'holdout' (e.g. 0.3), 'holdout_recent' or 'folds' to "
                           "run it.", span=LAST_COL)
        return r + 1
    where = _sample_text(rs.iloc[0])
    if where == "holdout":
        text = ("Ratios of sales held out of the training fit: the model they test never saw "
                f"them. {validation_text(ctx.fit)}.")
    else:
        text = ("No holdout was set aside; the ratios use cross-validated estimates (each sale "
                "valued by a model fitted without it). A holdout of recent sales is the stricter "
                "test in a moving market.")
    _wrapped(ws, r, 1, text, span=LAST_COL)
    r += 1
    from plumbrule.ratios import COD_TARGETS
    cod_max = COD_TARGETS.get(ctx.analysis.settings.property_class)
    cod_target = "" if cod_max is None else f"{cod_max:g} or less"
    r = _heads(ws, r, ["Group", "Sales", "Median ratio", "COD", "PRD", "PRB", "Verdicts"],
               numeric=(2, 3, 4, 5, 6))
    for i, (_, s) in enumerate(rs.head(40).iterrows()):
        put(ws, r, 1, _group_text(s))
        put(ws, r, 2, s.get("n"), "#,##0")
        for j, (key, _, fmt, _) in enumerate(_TABLE_MEASURES, start=3):
            put(ws, r, j, s.get(key), fmt)
        verdicts = [f"{_verdict_label(s, key, label)}: {_verdict_of(rs, i, key)}"
                    for key, label, _, _ in _MEASURES if _verdict_of(rs, i, key)]
        _wrapped(ws, r, 7, "; ".join(verdicts), span=1)
        r += 1
    if "note" in rs.columns:
        for _, s in rs.head(40).iterrows():
            if isinstance(s["note"], str) and s["note"].strip():
                _wrapped(ws, r, 1, f"{_group_text(s)}: {s['note']}", span=LAST_COL)
                r += 1
    targets = "; ".join(f"{label} {_target_of(rs, key, target or cod_target)}"
                        for key, label, _, target in _MEASURES)
    _wrapped(ws, r, 1, f"Targets: {targets} (IAAO Standard on Ratio Studies, 2013, unless the "
                       "settings changed them). A median ratio near 1 means the model values at "
                       "market level; a low COD means uniform values; PRD and PRB near their "
                       "targets mean cheap and dear properties are valued alike. Noise in sale "
                       "prices by itself pushes PRD up and PRB down; the value slope (ratios "
                       "against the estimate) is not pushed by it.",
             span=LAST_COL, style="plumb_note")
    return r + 1


def _cautions(ws, r) -> int:
    r = _section(ws, r, "Cautions")
    for text in CAUTIONS:
        _wrapped(ws, r, 1, "• " + text, span=LAST_COL)
        r += 1
    return r


def _stamp(ws, stamp, r) -> int:
    r = _section(ws, r, "Audit stamp")
    for label, value in stamp.rows():
        put(ws, r, 1, label, style="plumb_label")
        _wrapped(ws, r, 2, value, span=LAST_COL - 1)
        r += 1
    return r


# --- charts -----------------------------------------------------------------------

def _charts(ws, data_ws, ctx, r) -> int:
    from plumbrule.workbook import report_charts as rc
    r = _section(ws, r, "Charts")
    _wrapped(ws, r, 1, "Their data are on the hidden sheet 'Chart data' (unhide it to see "
                       "them). Each chart shows every sale "
                       f"used, or an evenly spaced sample of {rc.MAX_POINTS:,} when there are more "
                       "(the title says so).", span=LAST_COL, style="plumb_note")
    r += 1
    charts = rc.build_charts(data_ws, ctx)
    row_step = 17       # rows a chart of CHART_H cm covers at the default row height
    top = r
    for i, chart in enumerate(charts):
        if i and i % 4 == 0:                  # two rows of charts per printed page
            top = _page_break(ws, top + 2 * row_step) + 1   # a chart's frame must not
        col = "A" if i % 2 == 0 else "E"                    # straddle the page edge
        chart.width, chart.height = CHART_W, CHART_H
        ws.add_chart(chart, f"{col}{top + ((i % 4) // 2) * row_step}")
    if not charts:
        return r
    return top + (((len(charts) - 1) % 4) // 2 + 1) * row_step


# --- cell helpers ---------------------------------------------------------------------

def _heads(ws, r, heads, numeric=()) -> int:
    """A header band; headers over number columns are right-aligned like their numbers."""
    for j, h in enumerate(heads, start=1):
        c = put(ws, r, j, h, style="plumb_header")
        if j == LAST_COL:
            set_alignment(c, horizontal="left", wrap_text=True, vertical="top", indent=2)
        if j in numeric:
            set_alignment(c, horizontal="right", wrap_text=True, vertical="top")
    return r + 1


def _section(ws, r, text) -> int:
    from openpyxl.styles import Border, Side
    c = put(ws, r, 1, text)
    set_font(c, bold=True, size=12, color=cells.TITLE_COLOUR)
    line = Side(style="medium", color=cells.TITLE_COLOUR)
    for col in range(1, LAST_COL + 1):     # cell.border = Border(bottom=line), by id
        cells.set_look(ws.cell(row=r, column=col), "_borders", "borderId", ("section rule",),
                       lambda: Border(bottom=line))
    return r + 1


def _wrapped(ws, r, col, text, span=1, style=None, lines_with=None):
    """Text wrapped across ``span`` columns; the row grows to fit (an estimate:
    spreadsheets do not refit merged rows on open)."""
    text = "" if text is None else _plain_text(text)
    c = put(ws, r, col, text, style=style)
    # notes beside right-aligned numbers: indent them so the two do not touch
    set_alignment(c, horizontal="left", wrap_text=True, vertical="top",
                            indent=2 if col > 1 else 0)
    if span > 1:
        merge(ws, r, col, r, col + span - 1)
    width = sum(WIDTHS.get(_letter(k), 10) for k in range(col, col + span))
    lines = _lines(text, width)
    if lines_with:
        lines = max(lines, _lines(*lines_with))
    current = ws.row_dimensions[r].height or 15
    ws.row_dimensions[r].height = max(current, 15 * lines)
    return c


def _lines(text: str, width: float) -> int:
    per_line = max(10, int(width * 1.1))     # characters per line at the default font
    return sum(max(1, math.ceil(len(part) / per_line)) for part in str(text).split("\n"))


def _letter(k: int) -> str:
    from openpyxl.utils import get_column_letter
    return get_column_letter(k)


def _page_setup(ws, last_row: int) -> None:
    ws.print_area = f"A1:{_letter(LAST_COL)}{last_row}"
    ws.page_setup.orientation = "landscape"
    ws.page_setup.paperSize = ws.PAPERSIZE_A4
    ws.page_setup.fitToWidth = 1
    ws.page_setup.fitToHeight = 0
    ws.sheet_properties.pageSetUpPr.fitToPage = True
    ws.sheet_view.showGridLines = False
    ws.oddFooter.center.text = "plumbrule report: a statistical estimate, not an appraisal"


def _verdict_label(s, key: str, label: str) -> str:
    """A measure's label in the verdict list; the value slope, which has no column of its
    own in the table, with its figure and interval."""
    if key != "value_slope" or not _is_number(s.get(key)):
        return label
    text = f"{label} {s[key]:+.3f}"
    lo, hi = s.get("value_slope_ci_low"), s.get("value_slope_ci_high")
    if _is_number(lo) and _is_number(hi):
        text += f" ({lo:+.3f} to {hi:+.3f})"
    return text


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _verdict_of(frame: pd.DataFrame, i: int, key: str) -> str:
    short = key.replace("_ratio", "")
    for name in (f"{key}_verdict", f"{short}_verdict", f"verdict_{key}"):
        if name in frame.columns:
            v = frame[name].iloc[i]
            return "" if v is None or (isinstance(v, float) and v != v) else str(v)
    return ""


def _target_of(frame: pd.DataFrame, key: str, default: str) -> str:
    short = key.replace("_ratio", "")
    for name in (f"{key}_target", f"{short}_target"):
        if name in frame.columns and len(frame) and isinstance(frame[name].iloc[0], str):
            return frame[name].iloc[0]
    return default


def _page_break(ws, r) -> int:
    """Start the next section on a new printed page; returns its first row."""
    from openpyxl.worksheet.pagebreak import Break
    ws.row_breaks.append(Break(id=r))
    return r + 1


def _top_align(ws) -> None:
    """Numbers beside wrapped text sit at the top of the row, like the text."""
    looks = cells.Looks(ws.parent)     # alignments read and set by id (see cells.Looks)
    for row in ws.iter_rows():
        for c in row:
            if c._value is not None:
                horizontal, indent, wrap, vertical = looks.alignment(c)
                if vertical != "top":
                    looks.align(c, horizontal, indent, wrap, "top")


def _sample_text(rec) -> str:
    """'holdout' or 'cross-validated': which estimates the ratio study used."""
    sample = str(rec.get("sample", "holdout") or "holdout")
    return "holdout" if sample.startswith("holdout") else "cross-validated"


def _value_format(v):
    """Whole numbers as whole numbers, anything else to 3 significant digits."""
    if not is_number(v):
        return None
    return "#,##0" if float(v) == round(float(v)) else sig3(v)


def _plain_text(v) -> str:
    if isinstance(v, dict):
        return "; ".join(f"{k}={x}" for k, x in v.items())
    return "" if v is None else str(v)

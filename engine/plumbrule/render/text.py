"""Analysis tables → readable text for the terminal, in plumbrule's own layout.

Written for an appraiser reading the result: each effect is said in words first
("+7.6% for Good against Average", "+0.62% per 1% of Living area"), the checks come
question by question, those that need attention with their plain sentence, and every
left-out row is listed by its sheet row. The engine's tables are not rounded; only this
writer formats numbers.
"""

from __future__ import annotations

import math

import pandas as pd

from plumbrule.diagnostics.tables import typical_spread
from plumbrule.numbers import money, p_value, readable
from plumbrule.render.terminal import visible
from plumbrule.render.wording import CAUTION, final_fit_text, validation_text
from plumbrule.verdicts import Verdict


def text_table(frame: pd.DataFrame, columns=None, headers=None, limit: int | None = None,
         formats: dict | None = None, indent: str = "  ") -> str:
    """A plain aligned grid: text left, numbers right, two spaces between columns."""
    columns = list(columns or frame.columns)
    headers = list(headers or columns)
    formats = formats or {}
    rows = frame[columns].head(limit) if limit else frame[columns]
    cells = [[formats.get(c, readable)(v) for c, v in zip(columns, r, strict=False)]
             for r in rows.itertuples(index=False, name=None)]
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(headers)]
    numeric = [frame[c].dtype.kind in "fiu" for c in columns]

    def line(vals):
        return (
            indent
            + "  ".join(
                v.rjust(w) if isnum else v.ljust(w)
                for v, w, isnum in zip(vals, widths, numeric, strict=False)
            ).rstrip()
        )

    out = [line(headers), indent + "  ".join("-" * w for w in widths)] + [line(r) for r in cells]
    if limit and len(frame) > limit:
        out.append(f"{indent}... and {len(frame) - limit} more")
    return "\n".join(out)


def effect_words(result) -> list[str]:
    """Each coefficient said in words, on the price scale where it has one."""
    from plumbrule.render.effects import effect_phrases
    return effect_phrases(result.final_model)


def _header(result) -> list[str]:
    fit = result.tables.fit.iloc[0]
    enc = result.encoding
    lines = [f"plumbrule  hedonic model of {enc.response_name}"]
    facts = [f"{int(fit['n_used']):,} sales used", f"{int(fit['n_dropped']):,} rows left out "
             "(missing values)"]
    if "n_screened" in fit and int(fit["n_screened"]):
        facts.append(f"{int(fit['n_screened']):,} set aside by screening")
    if "n_holdout" in fit and int(fit["n_holdout"]):
        facts.append(f"{int(fit['n_holdout']):,} held out for testing")
    facts.append(f"{int(fit['n_params'])} coefficients")
    lines.append("  " + " | ".join(facts))
    if "n_holdout" in fit and int(fit["n_holdout"]):
        lines.append("  " + final_fit_text(fit))
    if enc.levels:
        lines.append("  reference levels: " + "; ".join(f"{c} = {lv[0]}" for c, lv in enc.levels))
    if enc.date_origin is not None:
        lines.append(f"  market trend counted in months from the earliest sale, "
                     f"{enc.date_origin.date().isoformat()}")
    return lines


def _fit_block(result) -> list[str]:
    fit = result.tables.fit.iloc[0]
    log_y = result.encoding.spec.log_response
    sigma = float(fit["resid_std_error"])
    if log_y:
        spread = (f"{readable(sigma)} on the log scale: a typical sale lies within about "
                  f"{100 * typical_spread(result.final_model)[0]:.1f} % of the model")
    else:
        spread = f"{readable(sigma)}: a typical sale lies within about this amount of the model"
    scale = " (log scale)" if log_y else ""
    rows = [
        ("R²" + scale, f"{fit['r_squared']:.4f}   (adjusted {fit['adj_r_squared']:.4f})"
         + ("" if result.encoding.spec.intercept else "; no intercept, so measured from zero")),
    ]
    if log_y:
        rows.append(("R² (price scale)", f"{fit['r_squared_price_scale']:.4f}   (fitted prices "
                     "retransformed as the estimates are)"))
    rows += [
        ("F statistic", f"{readable(fit['f_stat'])}   (p {p_value(fit['f_p_value'])})"),
        ("residual std error", spread),
        ("mean absolute % error", f"{fit['mape']:.2f} % of the sale price"
         if math.isfinite(fit["mape"]) else "n/a (a price of 0)"),
        ("AIC / BIC", f"{readable(fit['aic'])} / {readable(fit['bic'])}"),
        ("standard errors", str(fit.get("se_type", "classical"))),
    ]
    w = max(len(k) for k, _ in rows)
    return ["How well the model fits"] + [f"  {k.ljust(w)}  {v}" for k, v in rows]


def _words_block(result) -> list[str]:
    """What a reader acts on first: each feature's effect on the price, in words."""
    coefs = result.tables.coefficients.copy()
    coefs["meaning"] = effect_words(result)
    shown = coefs[coefs["meaning"] != ""]
    return ["What each feature does to " + result.encoding.response_name
            + " (the others held fixed)",
            text_table(shown, ["term", "meaning", "p_value"], ["term", "effect", "p"],
                       formats={"p_value": p_value})]


def _effects_block(result) -> list[str]:
    coefs = result.tables.coefficients.copy()
    level = int(round(100 * result.final_model.confidence))
    coefs["interval"] = [f"{readable(lo)} to {readable(hi)}" for lo, hi in
                         zip(coefs["ci_low"], coefs["ci_high"], strict=False)]
    cols = ["term", "estimate", "interval", "p_value", "std_error", "t", "std_beta", "vif"]
    heads = ["term", "estimate", f"{level} % interval", "p", "std error", "t", "beta", "VIF"]
    scale = "log price" if result.encoding.spec.log_response else "price"
    return [f"The coefficients in detail (on the {scale} scale)",
            text_table(coefs, cols, heads, formats={"p_value": p_value})]


def _checks_block(result) -> list[str]:
    """The checks question by question: the question's verdict and sentence, then its
    checks."""
    checks = result.tables.checks
    questions = result.tables.check_questions
    out = ["Checks, question by question"]
    if not len(checks):
        return out + ["  No checks were run."]
    for q in questions.itertuples(index=False):
        out.append(f"  {q.question}: {q.verdict}. {q.sentence}")
        group = checks[checks["question"] == q.question]
        out.append(text_table(group, ["verdict", "check", "statistic", "p_value", "threshold"],
                              ["verdict", "check", "value", "p", "flagged when"],
                              formats={"p_value": p_value}, indent="      "))
    attention = checks[checks["verdict"].isin(Verdict.needing_attention())]
    if len(attention):
        out += ["", "What needs attention"]
        out += [
            f"  - {c}: {n}" for c, n in zip(attention["check"], attention["note"], strict=False)
        ]
    return out


def _dropped_block(result, limit: int = 20) -> list[str]:
    d = result.tables.dropped_rows
    if not len(d):
        return []
    return ["Rows left out for missing values (sheet rows)",
            text_table(d, ["row", "column", "reason"], ["row", "column", "reason"], limit=limit)]


_OTHER = {
    "screen_log": ("Sales set aside by screening", ["row", "rule", "reason"]),
    "validation": ("Validation", ["set", "n", "r_squared", "rmse", "mae", "mape", "note"]),
    "ratio_study": ("Sales-ratio study", ["sample", "stratum", "n", "median_ratio", "cod", "prd",
                                          "prb", "value_slope", "median_verdict", "cod_verdict",
                                          "prd_verdict", "prb_verdict", "value_slope_verdict"]),
    "curves": ("Curves: effect relative to the median sale's value (percent of the price for "
               "a log model, else price)", ["predictor", "value", "band", "effect", "ci_low",
                                            "ci_high"]),
    "sales_chasing": ("Sales chasing (assessments on the roll)",
                      ["test", "sold", "unsold", "difference", "p_value", "verdict"]),
}


def _other_blocks(result) -> list[str]:
    out = []
    for name, (title, cols) in _OTHER.items():
        t = result.tables.table(name)
        if not len(t):
            continue
        cols = [c for c in cols if c in t.columns] or list(t.columns)
        out += ["", title]
        if name == "validation":
            out.append("  " + validation_text(result.tables.fit.iloc[0]))
        out.append(text_table(t, cols, limit=30))
    return out


def render_analysis(result) -> str:
    """The whole analysis as text (what ``plumbrule fit`` prints)."""
    parts = _header(result) + [""] + _words_block(result) + [""] + _effects_block(result)
    parts += [""] + _fit_block(result) + [""] + _checks_block(result)
    dropped = _dropped_block(result)
    if dropped:
        parts += [""] + dropped
    parts += _other_blocks(result)
    parts += ["", CAUTION]
    return visible("\n".join(parts))      # a header's ESC or NUL shown, never obeyed


def headline_text(h: dict) -> str:
    """The headline (:func:`plumbrule.headline.headline`) as a few aligned lines."""
    def num(v, fmt):
        return "n/a" if v is None else format(v, fmt)

    def cash(v):
        return money(v, "n/a")
    lines = [f"  Sales used in the fit   {h['n_used']:,}",
             f"  R²                      {num(h['r_squared'], '.3f')}",
             f"  COD / PRD / PRB         {num(h.get('cod'), '.1f')} / {num(h.get('prd'), '.3f')}"
             f" / {num(h.get('prb'), '.3f')}  (sales-ratio study: {h.get('ratio_sample')})"]
    if h.get("estimate") is not None:
        lines += [f"  Subject                 {h.get('subject')}",
                  f"  Estimate                {cash(h['estimate'])}"
                  f"  (prediction interval {cash(h['pi_low'])} to {cash(h['pi_high'])})"]
        if h.get("reconciled_value") is not None:
            lines.append(f"  From the comparables    {cash(h['reconciled_value'])}")
    return visible("\n".join(lines))


# --- the adjustment grid as appraisers read it ------------------------------------------

def _grid_value(kind: str, v) -> str:
    """One cell of a grid_table value column, by the kind of its line."""
    if v is None or (not isinstance(v, str) and pd.isna(v)):
        return ""
    if isinstance(v, pd.Timestamp):
        return v.strftime("%d %b %Y").lstrip("0")
    if kind in ("net", "gross"):
        return f"{100 * float(v):+.1f}%" if kind == "net" else f"{100 * float(v):.1f}%"
    if kind == "price":
        return money(v)
    if kind == "weight":
        return f"{float(v):.3f}"
    if kind == "row":
        return f"row {int(v)}"
    if isinstance(v, float):
        return f"{v:,.6g}"
    return str(v)


def _grid_money(kind: str, v) -> str:
    if v is None or pd.isna(v):
        return ""
    if kind in ("feature", "market", "net"):
        return "0" if float(v) == 0 else f"{float(v):+,.0f}"
    return money(v)


def grid_text(wide: pd.DataFrame, indent: str = "  ") -> list[str]:
    """A valuation's ``grid_table`` as aligned lines: features down the side, the subject
    and each comparable across (its value, then its adjustment); each comparable's notes
    below the grid. [] without comparables."""
    if wide is None or not len(wide) or "comp_1" not in wide.columns:
        return []
    n = sum(1 for c in wide.columns if c.startswith("comp_") and not c.endswith("_adjustment"))
    heads = ["", "subject"]
    for i in range(1, n + 1):
        heads += [f"comparable {i}", "adjustment"]
    body, notes = [], []
    for rec in wide.to_dict("records"):
        kind = rec["kind"]
        if kind == "notes":
            notes = [(i, rec[f"comp_{i}"]) for i in range(1, n + 1) if rec[f"comp_{i}"]]
            continue
        cells = [rec["line"], _grid_value(kind, rec["subject"])]
        for i in range(1, n + 1):
            cells += [_grid_value(kind, rec[f"comp_{i}"]),
                      _grid_money(kind, rec[f"comp_{i}_adjustment"])]
        body.append(cells)
    widths = [max(len(r[j]) for r in [heads] + body) for j in range(len(heads))]

    def line(vals):
        return indent + "  ".join(v.ljust(w) if j == 0 else v.rjust(w)
                                  for j, (v, w) in enumerate(zip(vals, widths, strict=True))
                                  ).rstrip()
    out = [line(heads), indent + "  ".join("-" * w for w in widths)]
    out += [line(r) for r in body]
    for i, text in notes:
        out.append(f"{indent}comparable {i}: {text}")
    return out

"""Analysis tables → readable text for the terminal, in plumbrule's own layout."""

from __future__ import annotations

import math

import pandas as pd


def _num(v) -> str:
    if isinstance(v, str):
        return v
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return ""
    if isinstance(v, (int,)) or (hasattr(v, "is_integer") and float(v).is_integer()
                                 and abs(v) < 1e15 and not isinstance(v, float)):
        return f"{int(v):,}"
    v = float(v)
    if v == 0:
        return "0"
    if abs(v) >= 1e5 or abs(v) < 1e-3:
        return f"{v:.4g}"
    return f"{v:,.4g}" if abs(v) < 1000 else f"{v:,.1f}"


def grid(frame: pd.DataFrame, columns=None, headers=None, limit: int | None = None) -> str:
    """A plain aligned grid: text left, numbers right, two spaces between columns."""
    columns = list(columns or frame.columns)
    headers = list(headers or columns)
    rows = frame[columns].head(limit) if limit else frame[columns]
    cells = [[_num(v) for v in r] for r in rows.itertuples(index=False, name=None)]
    widths = [max([len(h)] + [len(r[i]) for r in cells]) for i, h in enumerate(headers)]
    numeric = [frame[c].dtype.kind in "fiu" for c in columns]
    def line(vals):
        return "  ".join(v.rjust(w) if isnum else v.ljust(w)
                         for v, w, isnum in zip(vals, widths, numeric)).rstrip()
    out = [line(headers), line(["-" * w for w in widths])] + [line(r) for r in cells]
    if limit and len(frame) > limit:
        out.append(f"... {len(frame) - limit} more")
    return "\n".join(out)


def render_analysis(result) -> str:
    t = result.tables
    fit = t["fit"].iloc[0]
    parts = []
    parts.append(f"plumbrule model of {fit['response']} on {int(fit['n_params'])} parameters, "
                 f"{int(fit['n_used']):,} sales used, {int(fit['n_dropped']):,} rows dropped")
    parts.append("")
    parts.append(f"R-squared {fit['r_squared']:.4f} (adjusted {fit['adj_r_squared']:.4f}); "
                 f"typical error {_num(fit['resid_std_error'])}; mean absolute % error "
                 f"{_num(fit['mape'])}%; standard errors: {fit['se_type']}")
    parts.append("")
    parts.append("Effects")
    parts.append(grid(t["coefficients"], ["term", "estimate", "std_error", "p_value", "ci_low",
                                          "ci_high", "std_beta", "vif"],
                      ["term", "effect", "std error", "p", "low", "high", "beta", "VIF"]))
    parts.append("")
    parts.append("Checks")
    parts.append(grid(t["checks"], ["verdict", "check", "statistic", "p_value"],
                      ["verdict", "check", "value", "p"]))
    for name in ("screen_log", "validation", "ratio_study"):
        if name in t and len(t[name]):
            parts.append("")
            parts.append(name.replace("_", " ").capitalize())
            parts.append(grid(t[name], limit=30))
    if len(t["dropped_rows"]):
        parts.append("")
        parts.append("Rows dropped for missing values")
        parts.append(grid(t["dropped_rows"], limit=20))
    parts.append("")
    parts.append("A statistical estimate, not an appraisal: the licensed appraiser's judgement, "
                 "USPAP and local rules govern.")
    return "\n".join(parts)

"""``plumbrule value``: fit the model to the sales, value the subjects, and (with
``--comps``) build the adjustment grid. Text in plumbrule's own layout, or one
JSON object with the keys ``estimates``, ``grid`` and ``reconciled``."""

from __future__ import annotations

import json

import pandas as pd

from plumbrule.numbers import money
from plumbrule.render.wording import CAUTION, gap_sentence, gap_warning


def run_value(args, inputs) -> int:
    """Handler for the ``value`` subcommand (``inputs``: cli.inputs.Inputs); returns the
    exit status (0)."""
    from plumbrule.analysis import analyze
    from plumbrule.valuation.estimates import valuate
    analysis = analyze(inputs.sales, inputs.settings, for_valuation=True)
    result = valuate(analysis, subjects_of(args, inputs), inputs.comps)
    print(valuation_json(result) if getattr(args, "json", False)
          else render_valuation(result, analysis))
    return 0


def subjects_of(args, inputs):
    """The subject properties: --subjects, else the workbook's Subjects sheet."""
    from plumbrule.errors import SettingError
    from plumbrule.intake import read_table
    if getattr(args, "subjects", None):
        return read_table(args.subjects)
    if inputs.subjects is not None:
        return inputs.subjects
    raise SettingError(f"plumbrule {args.command} needs the subject properties: give "
                       "--subjects SUBJECTS.csv, or a plumbrule workbook with a Subjects sheet.")


# --- JSON ---------------------------------------------------------------------

def valuation_json(result) -> str:
    """One JSON object: estimates (records), grid (records), reconciled (one
    object with value, weights [{row, weight}], range [low, high], the gap to the model's
    estimate; null without comparables), plus valuation_date and the caution; then
    portfolio (two or more subjects) and grid_table (with comparables: one record per line
    of the grid as appraisers read it)."""
    from plumbrule.render.json import frame_records
    out = {
        "estimates": frame_records(result.estimates),
        "grid": frame_records(result.grid),
        "reconciled": reconciled_record(result),
        "valuation_date": result.valuation_date.isoformat(),
        "caution": CAUTION,
    }
    if len(result.portfolio):       # two or more subjects: their total (valuation/portfolio.py)
        out["portfolio"] = frame_records(result.portfolio)[0]
    if len(result.grid_table):      # the grid as appraisers read it, rounded (issue 14)
        out["grid_table"] = frame_records(result.grid_table)
    return json.dumps(out, allow_nan=False, ensure_ascii=False)


def reconciled_record(result) -> dict | None:
    from plumbrule.render.json import frame_records, jsonable
    if result.reconciled.empty:
        return None
    rec = frame_records(result.reconciled)[0]
    totals = result.grid[result.grid["kind"] == "total"]
    rec["weights_text"] = rec.pop("weights")
    rec["weights"] = [{"row": int(r), "weight": jsonable(w)}
                      for r, w in zip(totals["comp_row"], totals["weight"], strict=False)]
    rec["range"] = [rec["range_low"], rec["range_high"]]
    return rec


# --- text -----------------------------------------------------------------------

def render_valuation(result, analysis) -> str:
    est = result.estimates
    model = analysis.final_model
    lines = [f"plumbrule valuation as of {result.valuation_date.isoformat()} "
             f"({model.fit.n:,} sales in the model of {model.encoding.response_name}, "
             f"{int(100 * est['confidence'].iloc[0] + 0.5)}% intervals)", ""]
    from plumbrule.valuation.estimates import shared_flags
    common, own = shared_flags(est["flags"])
    for flag in common:        # a caution every subject carries, said once
        lines.append(f"Every subject ({len(est):,}): {flag}")
    if common:
        lines.append("")
    for rec, flags in zip(est.itertuples(index=False), own, strict=True):
        lines += _subject_lines(rec, flags)
    if len(result.portfolio):
        lines += _portfolio_lines(result.portfolio.iloc[0])
    if not result.grid.empty:
        lines += _grid_lines(result)
    lines += ([] if lines[-1] == "" else [""]) + [CAUTION]
    from plumbrule.render.terminal import visible
    return visible("\n".join(lines))


def _subject_lines(rec, flags: str | None = None) -> list[str]:
    out = [f"Subject {rec.subject} (subjects row {rec.row})",
           f"  estimate        {money(rec.estimate)}  ({rec.estimate_kind})",
           f"  likely mean     {money(rec.ci_low)} to {money(rec.ci_high)}"
           f"   (standard error {money(rec.se_mean)})",
           f"  one sale        {money(rec.pi_low)} to {money(rec.pi_high)}"
           f"   (standard error {money(rec.se_single)})"]
    if rec.retransform != "none":
        out.append(f"  median estimate {money(rec.median_estimate)}; factor "
                   f"{rec.retransform_factor:.5f} ({rec.retransform})")
    limit = ("" if not rec.leverage_limit < rec.max_sales_leverage else
             f"; {rec.leverage_limit:.4f} leaving out sales alone in their level")
    out.append(f"  leverage        {rec.leverage:.4f} (largest among the sales "
               f"{rec.max_sales_leverage:.4f}{limit})")
    for flag in filter(None, (rec.flags if flags is None else flags).split("; ")):
        out.append(f"  watch: {flag}")
    out.append("")
    return out


def _portfolio_lines(rec) -> list[str]:
    return [f"Portfolio of {rec.n} subjects",
            f"  total           {money(rec.total)}",
            f"  likely total    {money(rec.ci_low)} to {money(rec.ci_high)}",
            f"  total of sales  {money(rec.pi_low)} to {money(rec.pi_high)}",
            f"  method          {rec.method}",
            f"  note: {rec.note}", ""]


def _grid_lines(result) -> list[str]:
    from plumbrule.render.text import grid_text
    step = result.settings.adjustment_rounding
    rounding = f", adjustments rounded to {step:,.0f}" if step else ""
    out = [f"Adjustment grid (model-derived adjustments{rounding}; net = the sum of the "
           "adjustments shown)"] + grid_text(result.grid_table)
    out += _reconciled_lines(result)
    return out


def _long_grid_lines(result) -> list[str]:
    """The grid one comparable at a time, unrounded (the detail)."""
    g = result.grid
    out = ["Comparables, adjusted to the subject"]
    for row, block in g.groupby("comp_row", sort=False):
        feats = block[block["kind"] != "total"]
        tot = block[block["kind"] == "total"].iloc[0]
        cells = [[f, _cell(s), _cell(c), money(a)] for f, s, c, a in
                 zip(feats["feature"], feats["subject_value"], feats["comp_value"],
                     feats["adjustment"], strict=False)]
        out += ["", f"Comparable: sales row {row}, sold for {money(tot.sale_price)}",
                _layout(["feature", "subject", "comparable", "adjustment"], cells),
                f"  net {money(tot.net_adjustment)} ({100 * tot.net_pct:+.1f}%), gross "
                f"{money(tot.gross_adjustment)} ({100 * tot.gross_pct:.1f}%), adjusted price "
                f"{money(tot.adjusted_price)}, weight {tot.weight:.3f}"]
        for flag in filter(None, str(tot["flags"]).split("; ")):
            out.append(f"  watch: {flag}")
    return out + _reconciled_lines(result)


def _reconciled_lines(result) -> list[str]:
    out = []
    rec = result.reconciled.iloc[0]
    out += ["", f"Reconciled value {money(rec.value)} ({rec.weighting} weights); adjusted "
            f"prices {money(rec.range_low)} to {money(rec.range_high)} (spread "
            f"{100 * rec.spread_pct:.1f}% of the value); model estimate "
            f"{money(rec.model_estimate)}"]
    for flag in filter(None, str(rec["flags"]).split("; ")):
        out.append(f"  watch: {flag}")
    if gap_warning(rec):
        out.append(f"  watch: {gap_sentence(rec)}")
    return out


def _layout(headers, cells) -> str:
    """Text columns left, the money column (last) right-aligned."""
    widths = [max(len(h), *(len(r[i]) for r in cells)) for i, h in enumerate(headers)]
    def line(vals):
        return "  " + "  ".join(v.rjust(w) if i == len(vals) - 1 else v.ljust(w)
                                for i, (v, w) in enumerate(zip(vals, widths, strict=False)))
    return "\n".join([line(headers)] + [line(r) for r in cells])


def _cell(v) -> str:
    if isinstance(v, pd.Timestamp):
        return str(v.date())
    if isinstance(v, float):
        return f"{v:,.6g}"
    return str(v)

"""``plumbrule comps``: suggest comparables for a subject — the sales the model must adjust
least — with their adjustments, the bracketing check and the grid for them. Text in
plumbrule's own layout, or one JSON object with the keys ``suggestions``, ``bracketing``,
``estimates``, ``grid``, ``reconciled`` (and ``your_comps`` when comparables were given)."""

from __future__ import annotations

import json

from plumbrule.numbers import money
from plumbrule.render.wording import CAUTION


def run_comps(args, inputs) -> int:
    """Handler for the ``comps`` subcommand; returns the exit status (0)."""
    from plumbrule.analysis import analyze
    from plumbrule.cli.value import subjects_of
    from plumbrule.valuation.estimates import comparable_rows, valuate
    from plumbrule.valuation.suggest import DEFAULT_SUGGESTIONS
    analysis = analyze(inputs.sales, inputs.settings)
    subjects = subjects_of(args, inputs)
    s = inputs.settings
    n = s.suggest_comps or DEFAULT_SUGGESTIONS
    own = comparable_rows(analysis, inputs.comps, s)
    first = _first_subject(subjects)
    result = valuate(analysis, first, (), s.replace(suggest_comps=n, comps=(), comp_ids=()))
    theirs = valuate(analysis, first, own, s.replace(suggest_comps=0)) if own else None
    if getattr(args, "json", False):
        print(comps_json(result, theirs))
    else:
        print(render_comps(result, theirs, analysis))
    return 0


def _first_subject(subjects):
    """Suggestions are for one subject: the first row of the subjects."""
    from plumbrule.analysis import as_table
    from plumbrule.intake import SheetTable
    table = as_table(subjects)
    return SheetTable(table.frame.iloc[:1], table.sheet, table.header_row)


def comps_json(result, theirs) -> str:
    """One JSON object (see the module docstring); money in the price's units."""
    from plumbrule.cli.value import reconciled_record
    from plumbrule.render.json import frame_records
    out = {
        "suggestions": frame_records(result.suggestions),
        "bracketing": frame_records(result.bracketing),
        "estimates": frame_records(result.estimates),
        "grid": frame_records(result.grid),
        "reconciled": reconciled_record(result),
        "valuation_date": result.valuation_date.isoformat(),
        "caution": CAUTION,
    }
    if theirs is not None:
        out["your_comps"] = frame_records(theirs.grid[theirs.grid["kind"] == "total"])
    return json.dumps(out, allow_nan=False, ensure_ascii=False)


def render_comps(result, theirs, analysis) -> str:
    """The suggestions, the bracketing check, and the grid of the suggested comparables."""
    from plumbrule.cli.value import _grid_lines, _layout
    from plumbrule.render.terminal import visible
    sug = result.suggestions
    est = result.estimates.iloc[0]
    ids = analysis.ids
    lines = [f"Suggested comparables for {est['subject']} as of "
             f"{result.valuation_date.isoformat()}: the sales the model adjusts least "
             f"(gross adjustment as a share of the price); model estimate "
             f"{money(est['estimate'])}", ""]
    cells = []
    for rec in sug.itertuples(index=False):
        name = getattr(rec, "comp_sale", None) or f"row {rec.comp_row}"
        if not getattr(rec, "comp_sale", None) and ids is not None and rec.comp_row in ids.index:
            name += f" ({ids.loc[rec.comp_row]})"
        date = "" if _missing(rec.sale_date) else str(rec.sale_date)[:10]
        cells.append([str(rec.rank), name, money(rec.sale_price), date,
                      money(rec.net_adjustment), f"{100 * rec.gross_pct:.1f}%",
                      money(rec.adjusted_price)])
    lines.append(_layout(["#", "sale", "price", "sold", "net", "gross", "adjusted price"],
                         cells))
    why = [f"  #{r.rank}: {r.chosen_for}" for r in sug.itertuples(index=False)
           if r.chosen_for != "smallest gross adjustment"]
    lines += why + ["", "Do they bracket the subject?"]
    for rec in result.bracketing.itertuples(index=False):
        mark = {True: "yes", False: "no"}.get(rec.bracketed, "n/a")
        detail = f" ({rec.note})" if rec.note else ""
        lines.append(f"  {rec.feature:<20} {mark:<4} {rec.adjusted_down} down, "
                     f"{rec.adjusted_up} up{detail}")
    if theirs is not None:
        t = theirs.grid[theirs.grid["kind"] == "total"]
        s = sug["gross_pct"]
        lines += ["", f"Your comparables need gross adjustments of {100 * t['gross_pct'].min():.1f}"
                  f"% to {100 * t['gross_pct'].max():.1f}% (mean {100 * t['gross_pct'].mean():.1f}"
                  f"%); the suggested ones {100 * s.min():.1f}% to {100 * s.max():.1f}% (mean "
                  f"{100 * s.mean():.1f}%). Your own comparables stay in use for the workbook "
                  "and 'value'."]
    lines += [""] + _grid_lines(result) + ["", "Suggestions are a starting point: check each "
              "sale's condition, terms and location before relying on it.", CAUTION]
    return visible("\n".join(lines))


def _missing(v) -> bool:
    import pandas as pd
    return v is None or (not isinstance(v, str) and bool(pd.isna(v)))

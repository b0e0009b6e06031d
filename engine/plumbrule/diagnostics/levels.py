"""Checks of the category levels a model learns from: levels with too few sales, and
spellings one edit apart (a typo the merging of case and spacing cannot catch)."""

from __future__ import annotations

import pandas as pd

from plumbrule.diagnostics.checks import Check
from plumbrule.intake.levels import one_edit_apart
from plumbrule.model.fitted import FittedModel
from plumbrule.verdicts import WATCH


def level_checks(model: FittedModel, merges: pd.DataFrame, min_sales: int) -> list[Check]:
    """A watch per categorical column with levels below ``min_sales`` sales (common
    practice, no source: 5 by default), and one per column with two levels one edit
    apart. ``merges`` (the level_merges table) is named in the notes where it applies."""
    out = []
    for col, known in model.encoding.levels:
        counts = model.data[col].value_counts()
        few = counts[counts < min_sales].sort_values(kind="stable")
        if len(few):
            shown = ", ".join(f"'{lvl}' ({n})" for lvl, n in few.head(8).items())
            more = f" and {len(few) - 8} more" if len(few) > 8 else ""
            out.append(Check(f"Category levels with few sales: {col}", float(len(few)),
                             float("nan"), f"at least {min_sales} sales per level", WATCH,
                             f"{shown}{more} of the sales used. A level with one sale fits "
                             "that sale exactly; with a few, its effect rests on those sales "
                             "alone. Merge it with a similar level or gather more sales."))
        frequent = set(counts[counts >= min_sales].index)
        pairs = [(a, b) for a, b in one_edit_apart(known) if a in frequent or b in frequent]
        if pairs:
            shown = "; ".join(f"'{a}' and '{b}'" for a, b in pairs[:6])
            out.append(Check(f"Category spellings one edit apart: {col}", float(len(pairs)),
                             float("nan"), "no two levels one edit apart", WATCH,
                             f"{shown}: a typo? If they are one level, map the spelling with "
                             "the level_map setting (e.g. "
                             f"{col}: {pairs[0][1] if pairs[0][0] in frequent else pairs[0][0]}"
                             f"={pairs[0][0] if pairs[0][0] in frequent else pairs[0][1]})."))
    return out

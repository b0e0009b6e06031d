"""Each coefficient said in words on the price, the same words on every surface:
"+7.6% for Good against Average", "+0.62% per 1% of Living area", "+0.31% per month"."""

from __future__ import annotations

import math

from plumbrule.diagnostics.tables import effect_table


def percent(x: float) -> str:
    """A signed percentage in percent units, two significant figures below 10:
    '+7.6%', '+0.62%', '-12%'."""
    if abs(x) >= 10:
        return f"{x:+.0f}%"
    return f"{x:+.1f}%" if abs(x) >= 1 else f"{x:+.2f}%"


def _amount(x: float) -> str:
    return f"{x:+,.0f}" if abs(x) >= 100 else f"{x:+.3g}"


def effect_phrases(model) -> list[str]:
    """One phrase per term of ``model`` in term order ('' for the intercept and for an
    effect that is not a number)."""
    terms = {t.name: t for t in model.encoding.terms}
    out = []
    for e in effect_table(model).itertuples(index=False):
        if e.kind == "intercept" or not math.isfinite(e.effect):
            out.append("")
            continue
        if e.kind == "curve":       # one column of a curve: read the curve table instead
            out.append("part of a curve (see Curves)")
            continue
        term = terms.get(e.term)
        if e.kind == "level":
            level = term.level if term is not None and term.level is not None else e.term
            unit = f"for {level} against {e.reference}"
        elif e.kind == "trend":
            unit = "per month"
        elif e.scale in ("percent per 1 percent", "price per 1 percent"):
            unit = f"per 1% of {e.column}"
        else:
            unit = f"per unit of {e.column}"
        if e.scale.startswith("percent"):
            out.append(f"{percent(e.effect)} {unit}")
        else:
            out.append(f"{_amount(e.effect)} {unit}")
    return out

"""The headline of a run: the few numbers a reader looks at first (and the workbook's
plumb_ defined names hold), as plain values on the price scale."""

from __future__ import annotations

from typing import Any


def headline(analysis, valuation) -> dict[str, Any]:
    """Sales used, R², the ratio study's COD / PRD / PRB and its sample, and the first
    subject's estimate, prediction interval and reconciled value (None where absent)."""
    fit = analysis.tables.fit.iloc[0]
    out: dict[str, Any] = {"r_squared": fit["r_squared"], "n_used": int(fit["n_used"])}
    study = analysis.tables.ratio_study
    for m in ("cod", "prd", "prb", "value_slope"):
        out[m] = study[m].iloc[0] if len(study) else None
    out["ratio_sample"] = study["sample"].iloc[0] if len(study) else None
    if valuation is not None and len(valuation.estimates):
        e = valuation.estimates.iloc[0]
        out.update(subject=e["subject"], estimate=e["estimate"], pi_low=e["pi_low"],
                   pi_high=e["pi_high"])
        if len(valuation.reconciled):
            out["reconciled_value"] = valuation.reconciled["value"].iloc[0]
    return out

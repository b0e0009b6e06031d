"""A :class:`plumbrule.compare.Comparison` → the ``--json`` object and the terminal text."""

from __future__ import annotations

from typing import Any

from plumbrule.render.wording import CAUTION

TEXT_COLUMNS = ["rank", "name", "n", "adj_r_squared", "aic", "bic", "cv_mape", "holdout_mape",
                "holdout_rmse", "median_ratio", "cod", "prd", "prb", "vertical_equity",
                "max_vif", "checks_watch", "checks_fail"]
TEXT_HEADERS = ["#", "model", "sales", "adj R² (price)", "AIC", "BIC", "CV MAPE %",
                "holdout MAPE %", "holdout RMSE", "median ratio", "COD", "PRD", "PRB",
                "vertical equity", "largest VIF", "watch", "fails"]


def comparison_object(comparison) -> dict[str, Any]:
    """``comparison`` (one record per candidate, best first, ``chosen`` true for one) and
    ``reason``, then the criterion, the model the results follow and the caution."""
    from plumbrule.render.json import frame_records
    return {"comparison": frame_records(comparison.table), "reason": comparison.reason,
            "compare_by": comparison.criterion, "use_model": comparison.used,
            "caution": CAUTION}


def comparison_json(comparison) -> str:
    from plumbrule.render.json import dumps
    return dumps(comparison_object(comparison))


def comparison_text(comparison) -> str:
    from plumbrule.render.text import text_table
    table = comparison.table.copy()
    table["name"] = [f"{n} *" if c else str(n) for n, c in zip(table["name"], table["chosen"],
                                                                strict=True)]
    cols = [c for c in TEXT_COLUMNS if c != "holdout_mape" or table["n_holdout"].any()]
    heads = [h for c, h in zip(TEXT_COLUMNS, TEXT_HEADERS, strict=True) if c in cols]
    fmt = {c: _two for c in ("cv_mape", "holdout_mape", "cod")}
    fmt.update({c: _four for c in ("adj_r_squared", "median_ratio", "prd", "prb")})
    lines = ["Candidate models, judged on the same sales, holdout and folds "
             "(* chosen):", "", text_table(table, cols, heads, formats=fmt), ""]
    lines += ["Changes from the Settings:"]
    lines += [f"  {n}: {c}" for n, c in zip(comparison.table["name"],
                                            comparison.table["changes"], strict=True)]
    lines += ["", comparison.reason,
              "AIC and BIC are on each model's own scale (log price for a log model): compare "
              "them only between candidates of the same response.",
              "Choosing among models on the same sales flatters the winner a little; confirm "
              "it on new sales.", "", CAUTION]
    return "\n".join(lines)


def _two(v) -> str:
    return "" if v is None or v != v else f"{v:.2f}"


def _four(v) -> str:
    return "" if v is None or v != v else f"{v:.4f}"


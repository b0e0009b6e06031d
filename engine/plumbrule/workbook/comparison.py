"""The Comparison result sheet and the Report's "Candidate models compared" section, written
when the Models sheet lists candidates (:class:`plumbrule.compare.Comparison`)."""

from __future__ import annotations

from plumbrule.render.wording import CAUTION
from plumbrule.workbook.cells import MONEY, RATIO, note, put, title, write_frame

SHEET = "Comparison"
LABELS = {
    "rank": "Rank", "name": "Model", "chosen": "Chosen", "used": "Results follow",
    "changes": "Settings that differ", "response": "Response", "n": "Training sales",
    "n_holdout": "Holdout sales", "n_params": "Parameters",
    "adj_r_squared": "Adjusted R² (price)", "adj_r_squared_scale": "Adjusted R² on",
    "aic": "AIC", "bic": "BIC", "cv_mape": "CV MAPE %", "cv_rmse": "CV RMSE",
    "holdout_mape": "Holdout MAPE %", "holdout_rmse": "Holdout RMSE",
    "ratio_sample": "Ratio study on", "median_ratio": "Median ratio", "cod": "COD",
    "prd": "PRD", "prb": "PRB", "vertical_equity": "Vertical equity",
    "max_vif": "Largest VIF", "checks_watch": "Checks: watch", "checks_fail": "Checks: fails",
    "note": "Note", "oos_mape": "Out-of-sample MAPE %", "oos_rmse": "Out-of-sample RMSE",
}
FORMATS = {"adj_r_squared": "0.0000", "aic": "#,##0.0", "bic": "#,##0.0", "cv_mape": "0.00",
           "holdout_mape": "0.00", "oos_mape": "0.00", "cv_rmse": MONEY, "holdout_rmse": MONEY,
           "oos_rmse": MONEY, "median_ratio": RATIO, "cod": "0.00", "prd": RATIO, "prb": RATIO,
           "max_vif": "0.00"}


def write_comparison(ws, comparison) -> None:
    """One row per candidate, best first; the reason and the cautions above it."""
    r = title(ws, 1, "Candidate models compared")
    r = note(ws, r, "Every candidate was fitted on the same training sales and judged on the "
                    "same holdout sales and folds; the screening is that of the model the "
                    "results follow.")
    r = note(ws, r, comparison.reason)
    r = note(ws, r, "AIC and BIC are on each model's own scale (log price for a log model): "
                    "compare them only between candidates of the same response. MAPE and RMSE "
                    "are on the price scale for every candidate.")
    r = note(ws, r, "Choosing among many models on the same sales flatters the winner: prefer "
                    "a simpler model when the figures are close, and confirm on new sales.")
    r = note(ws, r, CAUTION) + 1
    frame = comparison.table
    write_frame(ws, frame, r, 1, {c: FORMATS[c] for c in frame.columns if c in FORMATS},
                {c: LABELS.get(c, c) for c in frame.columns})
    widths = {"B": 22, "E": 44, "F": 18}
    from openpyxl.utils import get_column_letter
    for j in range(1, frame.shape[1] + 1):
        letter = get_column_letter(j)
        ws.column_dimensions[letter].width = widths.get(letter, 13)
    ws.freeze_panes = ws.cell(row=r + 1, column=3)


def add_to_report(ws, comparison) -> None:
    """Append "Candidate models compared" below the Report's last row (which candidates were
    tried, their out-of-sample figures, why the chosen one) and widen the print area."""
    from plumbrule.workbook import report
    r = (ws.max_row or 1) + 2
    r = report._section(ws, r, "Candidate models compared")
    t = comparison.table
    oos = "holdout" if t["n_holdout"].max() else "cross-validated"
    r = report._heads(ws, r, ["Model", f"MAPE % ({oos})", f"RMSE ({oos})", "COD", "PRD",
                              "Checks watch / fail", "Settings that differ"],
                      numeric=(2, 3, 4, 5))
    for _, row in t.iterrows():
        mark = " (chosen)" if row["chosen"] else ""
        mark += " (results)" if row["used"] else ""
        put(ws, r, 1, f"{row['name']}{mark}")
        put(ws, r, 2, _num(row["oos_mape"]), "0.00")
        put(ws, r, 3, _num(row["oos_rmse"]), MONEY)
        put(ws, r, 4, _num(row["cod"]), "0.00")
        put(ws, r, 5, _num(row["prd"]), RATIO)
        put(ws, r, 6, f"{int(row['checks_watch'])} / {int(row['checks_fail'])}")
        report._wrapped(ws, r, 7, row["changes"])
        r += 1
    report._wrapped(ws, r, 1, comparison.reason, span=report.LAST_COL)
    r += 1
    report._wrapped(ws, r, 1, "Every candidate was judged on the same sales, holdout and folds "
                              "(the Comparison sheet has every figure). Choosing on the same "
                              "sales flatters the winner a little.", span=report.LAST_COL)
    # the same print pass as the rest of the Report: wrapped headers, row heights, print area
    from plumbrule.workbook import cells
    cells.fit_for_print(ws, last_col=report.LAST_COL, landscape=True, last_row=r)


def _num(v):
    return None if v is None or v != v else float(v)

"""The Report's two charts of the market over the sale dates (issue 13 §1): the market index
with its confidence band, and the residuals by sale date with each month's mean. Both render
the engine's ``market_index`` table (diagnostics/trend.py) and the fit's residuals; nothing
is computed here. No date column: no chart."""

from __future__ import annotations

import numpy as np
import pandas as pd

from plumbrule.workbook.report_charts import (BLUE, GREY, ORANGE, _axis_range, _line, _points,
                                              _sample, _scatter)
from plumbrule.workbook.report_charts import date_serials as _serial

_DATE_AXIS = "mmm yyyy"


def build(book, ctx) -> list:
    """The market-index chart and the residuals-by-month chart (none without a date)."""
    index = ctx.table("market_index")
    if index is None or ctx.spec.date_column is None:
        return []
    return [c for c in (market_index_chart(book, ctx, index),
                        residuals_by_month(book, ctx, index)) if c is not None]


def market_index_chart(book, ctx, index: pd.DataFrame):
    """The index (1.000 at the valuation date) by period, with its confidence band."""
    rows = index[~index["extrapolated"].astype(bool)] if "extrapolated" in index else index
    if len(rows) < 2:
        return None
    x = _serial(rows["date"])
    cols = book.block("Market index", ["Date", "Index", "CI low", "CI high"],
                      [x, rows["index"].to_numpy(float), rows["ci_low"].to_numpy(float),
                       rows["ci_high"].to_numpy(float)])
    level = f"{ctx.level:.0%}"
    chart = _scatter("Market index over the sale dates (1.000 at the valuation date)",
                     "Sale date", "Index")
    chart.series.append(_line(book.ref(cols[1]), book.ref(cols[0]), "Index", BLUE, 2))
    chart.series.append(_line(book.ref(cols[2]), book.ref(cols[0]), f"{level} interval", GREY))
    chart.series.append(_line(book.ref(cols[3]), book.ref(cols[0]), f"{level} interval", GREY))
    chart.x_axis.number_format = _DATE_AXIS
    chart.y_axis.number_format = "0.00"
    _axis_range(chart.x_axis, float(x.min()), float(x.max()), nice=False)
    lo = float(np.nanmin(rows["ci_low"].to_numpy(float)))
    hi = float(np.nanmax(rows["ci_high"].to_numpy(float)))
    _axis_range(chart.y_axis, lo, hi)
    chart.x_axis.crosses = "min"
    return chart


def residuals_by_month(book, ctx, index: pd.DataFrame):
    """Each sale's residual against its sale date, and the mean residual of its month: a
    market the trend follows keeps the means near zero."""
    model = ctx.model
    dates = model.data[ctx.spec.date_column]
    resid = np.asarray(model.fit.resid, dtype=float)
    if len(resid) < 3 or "mean_residual" not in index:
        return None
    idx, note = _sample(len(resid))
    x = _serial(dates.to_numpy()[idx])
    unit = "log price" if ctx.log else "price"
    cols = book.block("Residuals by sale date" + note, ["Sale date", f"Residual ({unit})"],
                      [x, resid[idx]])
    chart = _scatter(f"Residuals by sale date, with each period's mean{note}", "Sale date",
                     f"Residual ({unit})")
    chart.series.append(_points(book.ref(cols[1]), book.ref(cols[0]), "Sales used", BLUE))
    rows = index[index["sales"] > 0]
    mx = _serial(rows["date"])
    mc = book.block("Mean residual by period", ["Date", "Mean residual"],
                    [mx, rows["mean_residual"].to_numpy(float)])
    chart.series.append(_line(book.ref(mc[1]), book.ref(mc[0]), "Period mean", ORANGE, 2))
    lo, hi = float(min(x.min(), mx.min())), float(max(x.max(), mx.max()))
    zc = book.block("Zero line (dates)", ["x", "y"], [np.array([lo, hi]), np.zeros(2)])
    chart.series.append(_line(book.ref(zc[1]), book.ref(zc[0]), "No error", GREY))
    chart.x_axis.number_format = _DATE_AXIS
    chart.y_axis.number_format = "0.00" if ctx.log else "#,##0"
    _axis_range(chart.x_axis, lo, hi, nice=False)
    chart.x_axis.crosses = "min"
    return chart

"""Charts of the assessments on the roll and of location (drawn for report_charts.py).

Ratios of assessed value to sale price against the assessed value (vertical equity) and
against the sale date; the map of the residuals, x against y, blue where the sale sold
above the model, red below, the marker larger as the residual is (three size bands, the
upper thirds of |residual|: one series per colour and band, which Excel and LibreOffice
draw alike). Data blocks go to the 'Chart data' sheet like every other chart's.
"""

from __future__ import annotations

import numpy as np

from plumbrule.workbook import report_charts as rc


def build(book, ctx) -> list:
    """The charts for the tables present (assessed_estimates, residual_map); may be none."""
    charts = [ratio_vs_assessed(book, ctx), ratio_vs_date(book, ctx), residual_map(book, ctx)]
    return [c for c in charts if c is not None]


def _assessed(ctx):
    est = ctx.table("assessed_estimates")
    if est is None or not len(est) or "in_study" not in est.columns:
        return None
    est = est[est["in_study"].to_numpy(bool)]
    return est if len(est) else None


def ratio_vs_assessed(book, ctx):
    est = _assessed(ctx)
    if est is None:
        return None
    v, r = est["assessed"].to_numpy(float), est["ratio"].to_numpy(float)
    idx, note = rc._sample(len(v))
    cols = book.block("Roll ratios against assessed value" + note,
                      ["Assessed value", "Ratio (assessed / price)"], [v[idx], r[idx]])
    chart = rc._scatter(f"Roll: ratio against assessed value{note}", "Assessed value",
                        "Assessed / sale price")
    chart.series.append(rc._points(book.ref(cols[1]), book.ref(cols[0]), "Sales", rc.BLUE))
    lo, hi = float(v.min()), float(v.max())
    med = float(np.median(r))
    lc = book.block("Median ratio line", ["x", "y"], [np.array([lo, hi]), np.array([med, med])])
    chart.series.append(rc._line(book.ref(lc[1]), book.ref(lc[0]), "Median ratio", rc.GREY))
    chart.x_axis.number_format = "#,##0"
    chart.y_axis.number_format = "0.00"
    rc._axis_range(chart.x_axis, lo, hi)
    chart.x_axis.crosses = "min"
    return chart


def ratio_vs_date(book, ctx):
    est = _assessed(ctx)
    if est is None or "sale_date" not in est.columns or not est["sale_date"].notna().any():
        return None
    est = est[est["sale_date"].notna()]
    serial = rc.date_serials(est["sale_date"].to_numpy())
    r = est["ratio"].to_numpy(float)
    idx, note = rc._sample(len(r))
    cols = book.block("Roll ratios against sale date" + note,
                      ["Sale date (serial)", "Ratio (assessed / price)"], [serial[idx], r[idx]])
    chart = rc._scatter(f"Roll: ratio against sale date{note}", "Sale date",
                        "Assessed / sale price")
    chart.series.append(rc._points(book.ref(cols[1]), book.ref(cols[0]), "Sales", rc.BLUE))
    chart.x_axis.number_format = "mmm yyyy"
    chart.y_axis.number_format = "0.00"
    rc._axis_range(chart.x_axis, float(serial.min()), float(serial.max()), nice=False)
    chart.x_axis.crosses = "min"
    chart.legend = None
    return chart


def residual_map(book, ctx):
    m = ctx.table("residual_map")
    if m is None or not len(m) or "x" not in m.columns:
        return None
    idx, note = rc._sample(len(m))
    m = m.iloc[idx]
    x, y = m["x"].to_numpy(float), m["y"].to_numpy(float)
    size = m["size"].to_numpy(float)
    above = m["side"].to_numpy(object) == "above"
    cuts = np.quantile(size, [1 / 3, 2 / 3]) if len(size) >= 3 else np.array([0.0, 0.0])
    band = np.searchsorted(cuts, size, side="right")
    chart = rc._scatter(f"Map of residuals (blue above the model, red below){note}", "x", "y")
    for side_mask, name, colour in ((above, "above", rc.BLUE), (~above, "below", rc.RED)):
        for b, (marker, word) in enumerate(((3, "small"), (5, "middling"), (8, "large"))):
            sel = side_mask & (band == b)
            if not sel.any():
                continue
            cols = book.block(f"Residual map: {name}, size band {b + 1}", ["x", "y"],
                              [x[sel], y[sel]])
            chart.series.append(rc._points(book.ref(cols[1]), book.ref(cols[0]),
                                           f"{name} the model ({word})",
                                           colour, size=marker))
    chart.x_axis.number_format = chart.y_axis.number_format = "General"
    rc._axis_range(chart.x_axis, float(x.min()), float(x.max()))
    rc._axis_range(chart.y_axis, float(y.min()), float(y.max()))
    chart.x_axis.crosses = "min"
    chart.y_axis.crosses = "min"
    return chart

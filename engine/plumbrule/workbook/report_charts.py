"""Native workbook charts for the Report sheet (drawn for report.py).

Each chart's source data is written to the 'Chart data' sheet as a small block
(a title row, a header row, then the points) and the chart refers to it, so the
numbers behind every picture stay inspectable. Large books are sampled evenly
(deterministic: every k-th sale in sheet order; the chart title says so).

Box plots: openpyxl has no box chart, so each box is drawn exactly on a
scatter chart as one line tracing the quartile box, the median and whiskers
from the minimum to the maximum (a five-number box plot), with the limits screening used
as markers: the IQR rule's fences (k·IQR; on the logarithm for a column the model logs,
drawn back in the column's units) when that rule ran, else the percentile trim's limits,
else none. Only columns with more than a handful of distinct values get a box. The same
geometry in Excel and LibreOffice.
"""

from __future__ import annotations

import math

import numpy as np

from plumbrule.workbook.cells import put, write_values
from plumbrule.workbook.save import number_column

MAX_POINTS = 2000
MIN_BOX_VALUES = 10     # a box plot needs more distinct values than this (a rule of thumb)
BLUE, ORANGE, GREY, DARK, RED = "2F6690", "D98324", "8A9BA8", "1F3A4D", "B23A48"


def build_charts(ws, ctx) -> list:
    """Write the data blocks into ``ws`` and return the charts (not yet placed)."""
    book = _Blocks(ws)
    charts = [estimate_vs_price(book, ctx), residuals_vs_estimate(book, ctx),
              normal_quantiles(book, ctx), standardized_coefficients(book, ctx)]
    charts += box_plots(book, ctx)
    from plumbrule.workbook import trend_charts
    charts += trend_charts.build(book, ctx)
    from plumbrule.workbook import roll_charts
    charts += roll_charts.build(book, ctx)
    return [c for c in charts if c is not None]


# --- the charts -------------------------------------------------------------------

def estimate_vs_price(book, ctx):
    price, est = _training_prices(ctx)
    idx, note = _sample(len(price))
    cols = book.block("Estimate against sale price" + note,
                      ["Sale price (sales used)", "Estimate"], [price[idx], est[idx]])
    chart = _scatter(f"Estimate against sale price{note}", "Sale price", "Estimate")
    chart.series.append(_points(book.ref(cols[1]), book.ref(cols[0]), "Sales used", BLUE))
    lo, hi = float(min(price.min(), est.min())), float(max(price.max(), est.max()))
    hold = ctx.table("holdout_estimates")
    if hold is not None and {"sale_price", "estimate"} <= set(hold.columns):
        hp, he = hold["sale_price"].to_numpy(float), hold["estimate"].to_numpy(float)
        hidx, _ = _sample(len(hp))
        hc = book.block("Holdout", ["Sale price (holdout)", "Estimate"], [hp[hidx], he[hidx]])
        chart.series.append(_points(book.ref(hc[1]), book.ref(hc[0]), "Holdout sales", ORANGE))
        lo, hi = min(lo, float(np.nanmin([hp.min(), he.min()]))), max(hi, float(np.nanmax(
            [hp.max(), he.max()])))
    lc = book.block("Equal line", ["x", "y"], [np.array([lo, hi]), np.array([lo, hi])])
    chart.series.append(_line(book.ref(lc[1]), book.ref(lc[0]), "Estimate = price", GREY))
    _money_axes(chart, lo, hi, lo, hi)
    return chart


def residuals_vs_estimate(book, ctx):
    price, est = _training_prices(ctx)
    resid = ctx.model.fit.resid
    idx, note = _sample(len(resid))
    unit = "log price" if ctx.log else "price"
    cols = book.block("Residuals against estimate" + note, ["Estimate", f"Residual ({unit})"],
                      [est[idx], resid[idx]])
    chart = _scatter(f"Residuals against estimate{note}", "Estimate",
                     "Residual (log price)" if ctx.log else "Residual")
    chart.series.append(_points(book.ref(cols[1]), book.ref(cols[0]), "Sales used", BLUE))
    lo, hi = float(est.min()), float(est.max())
    zc = book.block("Zero line", ["x", "y"], [np.array([lo, hi]), np.zeros(2)])
    chart.series.append(_line(book.ref(zc[1]), book.ref(zc[0]), "No error", GREY))
    chart.x_axis.number_format = "#,##0"
    _axis_range(chart.x_axis, lo, hi)
    chart.y_axis.number_format = "0.00" if ctx.log else "#,##0"
    chart.x_axis.crosses = "min"
    chart.legend = None
    return chart


def normal_quantiles(book, ctx):
    """Theoretical normal quantiles (Blom positions (i − 3/8)/(n + 1/4)) against the
    ordered standardized residuals."""
    from plumbrule.diagnostics.tables import normal_scores
    scores = normal_scores(ctx.tables.residuals["standardized_residual"].to_numpy(float))
    n = len(scores)
    if n < 3:
        return None
    theo = scores["normal_quantile"].to_numpy()
    z = scores["ordered"].to_numpy()
    idx, note = _sample(n)
    cols = book.block("Normal quantile plot" + note,
                      ["Normal quantile", "Standardized residual"], [theo[idx], z[idx]])
    chart = _scatter(f"Normal quantile plot of residuals{note}", "Normal quantile (Blom)",
                     "Standardized residual (ordered)")
    chart.series.append(_points(book.ref(cols[1]), book.ref(cols[0]), "Residuals", BLUE))
    lo, hi = float(theo[0]), float(theo[-1])
    lc = book.block("Normal line", ["x", "y"], [np.array([lo, hi]), np.array([lo, hi])])
    chart.series.append(_line(book.ref(lc[1]), book.ref(lc[0]), "Normal", GREY))
    chart.x_axis.number_format = chart.y_axis.number_format = "0.0"
    _axis_range(chart.x_axis, lo, hi)
    chart.x_axis.crosses = "min"
    chart.y_axis.crosses = "min"
    chart.legend = None
    return chart


def standardized_coefficients(book, ctx):
    from openpyxl.chart import BarChart, Reference
    coef = ctx.tables.coefficients
    coef = coef[coef["std_beta"].notna()]
    if not len(coef):
        return None
    beta = coef["std_beta"].to_numpy(float)
    order = np.argsort(np.abs(beta), kind="stable")      # largest drawn at the top
    terms = coef["term"].to_numpy(object)[order]
    beta = beta[order]
    cols = book.block("Standardized coefficients", ["Term", "Standardized coefficient"],
                      [terms, beta])
    chart = BarChart()
    chart.type = "bar"
    chart.gapWidth = 40
    chart.title = _title("Standardized coefficients (blue raises the price, red lowers it)")
    cats = book.ref(cols[0])
    chart.add_data(Reference(book.ws, min_col=cols[1], min_row=book.header_row(cols[1]),
                             max_row=book.last_row(cols[1])), titles_from_data=True)
    s = chart.series[0]
    s.graphicalProperties.solidFill = BLUE
    s.graphicalProperties.line.solidFill = BLUE
    s.invertIfNegative = False
    from openpyxl.chart.marker import DataPoint
    for i in np.flatnonzero(beta < 0):       # one colour per point: works in both programs
        s.dPt.append(DataPoint(idx=int(i), invertIfNegative=False, spPr=_fill(RED)))
    chart.set_categories(cats)
    chart.x_axis.delete = False
    chart.y_axis.delete = False
    chart.y_axis.number_format = "0.00"
    chart.y_axis.majorGridlines = _gridlines()
    chart.x_axis.tickLblPos = "low"
    chart.x_axis.tickLblSkip = 1
    chart.x_axis.txPr = _font(700)
    chart.x_axis.title = None
    chart.y_axis.title = "change in price (sd) per sd of the feature"
    chart.legend = None
    return chart


def box_plots(book, ctx) -> list:
    summary = ctx.table("screen_summary")
    if summary is None or "kind" not in summary.columns:
        return []
    rows = summary[summary["kind"] == "column"]
    if "distinct_before" in rows.columns:     # a box of a handful of values says nothing
        rows = rows[rows["distinct_before"].fillna(0) > MIN_BOX_VALUES]
    out = []
    for _, rec in rows.head(12).iterrows():
        chart = _box_chart(book, rec, ctx)
        if chart is not None:
            out.append(chart)
    return out


def _box_chart(book, rec, ctx):
    stats = ("min", "q1", "median", "q3", "max")
    try:
        before = [float(rec[f"{s}_before"]) for s in stats]
        after = [float(rec[f"{s}_after"]) for s in stats]
    except (KeyError, TypeError, ValueError):
        return None
    if not all(map(math.isfinite, before)):
        return None
    chart = _scatter(f"{rec['item']}: before and after screening", str(rec["item"]), None)
    nb, na = int(rec.get("rows_before", 0) or 0), int(rec.get("rows_after", 0) or 0)
    xs = []
    for label, five, y, colour in ((f"Before screening ({nb:,} sales)", before, 2.0, GREY),
                                   (f"After screening ({na:,} sales)", after, 1.0, BLUE)):
        if not all(map(math.isfinite, five)):
            continue
        px, py = _box_path(five, y, 0.28)
        cols = book.block(f"{rec['item']}: {label}", ["x", "y"], [px, py])
        chart.series.append(_line(book.ref(cols[1]), book.ref(cols[0]), label, colour, width=1.5))
        xs += list(px)
    k, on_log = rec.get("fence_k"), rec.get("fence_scale") == "log"
    fence_name = f"{float(k):g}×IQR fences{' (on the logarithm)' if on_log else ''}"
    for name, fx, fy in _limits_drawn(rec, ctx, fence_name):
        if fx:
            cols = book.block(f"{rec['item']}: {name}", ["x", "y"], [np.array(fx), np.array(fy)])
            s = _points(book.ref(cols[1]), book.ref(cols[0]), name, DARK, size=7)
            s.marker.symbol = "diamond"
            chart.series.append(s)
            xs += fx
    if not xs:
        return None
    chart.y_axis.delete = True
    chart.y_axis.majorGridlines = None
    _axis_range(chart.y_axis, 0.4, 2.6, nice=False)
    _axis_range(chart.x_axis, min(xs), max(xs))
    chart.x_axis.number_format = "#,##0" if max(abs(v) for v in xs) >= 100 else "0.0"
    chart.legend.position = "b"
    return chart


def _limits_drawn(rec, ctx, fence_name):
    """[(name, xs, ys)]: the limits screening used on this column, as markers: the IQR fence
    when that rule ran; else the percentile trim's limits, read from the screen log (the
    limit beside each sale it set aside on this column). Nothing when no rule ran on it."""
    fence_set = rec.get("fence_set")
    if fence_set is None or bool(fence_set):      # older tables: the fence, as before
        fx, fy = [], []
        for stage, y in (("before", 2.0), ("after", 1.0)):
            for side in ("low", "high"):
                v = rec.get(f"fence_{side}_used_{stage}")
                if v is not None and math.isfinite(float(v)):
                    fx.append(float(v))
                    fy.append(y)
        return [(fence_name, fx, fy)]
    log = ctx.table("screen_log")
    if log is None or not {"rule", "column", "limit", "value"} <= set(log.columns):
        return []
    hit = log[(log["rule"] == "percentile trim") & (log["column"] == rec["item"])]
    lows = hit.loc[hit["value"] < hit["limit"], "limit"].dropna().unique()
    highs = hit.loc[hit["value"] > hit["limit"], "limit"].dropna().unique()
    xs = [float(v) for v in (*lows, *highs)]
    return [("percentile trim limits", xs, [2.0] * len(xs))] if xs else []


def _box_path(five, y, h):
    """One polyline drawing the box (Q1–Q3), the median and min–max whiskers."""
    lo, q1, med, q3, hi = five
    pts = [(q1, y - h), (q1, y + h), (med, y + h), (med, y - h), (q3, y - h), (q3, y + h),
           (med, y + h), (med, y - h), (q1, y - h), (q1, y), (lo, y), (q1, y), (q1, y + h),
           (q3, y + h), (q3, y), (hi, y)]
    return np.array([p[0] for p in pts]), np.array([p[1] for p in pts])


# --- data the charts read -------------------------------------------------------------

def _training_prices(ctx):
    """Sale price and the model's estimate (price scale) for each sale used."""
    model = ctx.model
    return model.data[ctx.response].to_numpy(float), model.fitted_prices(ctx.retransform)


def date_serials(dates) -> np.ndarray:
    """Dates as the sheet's own day numbers (days since 1899-12-30), so a scatter chart's
    axis with a date number format reads as dates."""
    import pandas as pd
    d = pd.to_datetime(pd.Series(dates)).to_numpy("datetime64[D]")
    return (d - np.datetime64("1899-12-30")).astype(float)


def _sample(n: int):
    if n <= MAX_POINTS:
        return np.arange(n), ""
    idx = np.unique(np.linspace(0, n - 1, MAX_POINTS).round().astype(np.int64))
    return idx, f" ({len(idx):,} of {n:,} sales, evenly spaced)"


class _Blocks:
    """Data blocks side by side on the chart-data sheet: title, header, values."""

    def __init__(self, ws):
        self.ws = ws
        self.next_col = 1
        self.rows: dict[int, int] = {}

    def block(self, title: str, headers, columns) -> list[int]:
        c0 = self.next_col
        put(self.ws, 1, c0, title, style="plumb_label")
        out = []
        for j, (h, values) in enumerate(zip(headers, columns, strict=False)):
            col = c0 + j
            put(self.ws, 2, col, h, style="plumb_header")
            if isinstance(values, np.ndarray) and values.dtype.kind in "fiu":
                number_column(self.ws, values, 3, col)    # no cell object per point
            else:
                write_values(self.ws, list(values), 3, col)     # as put writes each
            self.rows[col] = 2 + len(values)
            out.append(col)
        self.next_col = c0 + len(headers) + 1
        return out

    def header_row(self, col: int) -> int:
        return 2

    def last_row(self, col: int) -> int:
        return self.rows[col]

    def ref(self, col: int):
        from openpyxl.chart import Reference
        return Reference(self.ws, min_col=col, min_row=3, max_row=max(3, self.rows[col]))


# --- chart styling ---------------------------------------------------------------------

def _title(text: str, size: int = 1000):
    from openpyxl.chart.text import RichText, Text
    from openpyxl.chart.title import Title
    from openpyxl.drawing.text import (CharacterProperties, Paragraph, ParagraphProperties,
                                       RegularTextRun)
    cp = CharacterProperties(sz=size, b=True, solidFill=DARK)
    para = Paragraph(pPr=ParagraphProperties(defRPr=cp), r=[RegularTextRun(rPr=cp, t=text)])
    return Title(tx=Text(rich=RichText(p=[para])), overlay=False)


def _font(size: int):
    """Axis tick labels at ``size`` hundredths of a point (small, so every label shows)."""
    from openpyxl.chart.text import RichText
    from openpyxl.drawing.text import CharacterProperties, Paragraph, ParagraphProperties
    cp = CharacterProperties(sz=size)
    return RichText(p=[Paragraph(pPr=ParagraphProperties(defRPr=cp), endParaRPr=cp)])


def _gridlines():
    from openpyxl.chart.axis import ChartLines
    from openpyxl.chart.shapes import GraphicalProperties
    from openpyxl.drawing.line import LineProperties
    return ChartLines(spPr=GraphicalProperties(ln=LineProperties(solidFill="E1E6EA")))


def _scatter(title, x_title, y_title):
    from openpyxl.chart import ScatterChart
    chart = ScatterChart()
    chart.scatterStyle = "lineMarker"     # without it LibreOffice draws smoothed curves
    chart.title = _title(title)
    chart.style = 2
    chart.x_axis.title = x_title
    if y_title:
        chart.y_axis.title = y_title
    chart.x_axis.delete = False
    chart.y_axis.delete = False
    chart.y_axis.majorGridlines = _gridlines()
    chart.legend.position = "b"
    return chart


def _points(y_ref, x_ref, name, colour, size=3):
    from openpyxl.chart import Series
    s = Series(y_ref, x_ref, title=name)
    s.marker.symbol = "circle"
    s.marker.size = size
    s.marker.graphicalProperties = _fill(colour)
    s.graphicalProperties.line.noFill = True
    s.smooth = False        # LibreOffice smooths every line of a chart if one series omits it
    return s


def _line(y_ref, x_ref, name, colour, width=1.25):
    from openpyxl.chart import Series
    s = Series(y_ref, x_ref, title=name)
    s.marker.symbol = "none"
    s.graphicalProperties.line.solidFill = colour
    s.graphicalProperties.line.width = int(width * 12700)
    s.smooth = False
    return s


def _fill(colour):
    from openpyxl.chart.shapes import GraphicalProperties
    g = GraphicalProperties(solidFill=colour)
    g.line.solidFill = colour
    return g


def _money_axes(chart, xlo, xhi, ylo, yhi):
    chart.x_axis.number_format = chart.y_axis.number_format = "#,##0"
    _axis_range(chart.x_axis, xlo, xhi)
    _axis_range(chart.y_axis, ylo, yhi)


def _axis_range(axis, lo, hi, nice=True):
    """Axis limits around [lo, hi] on round numbers (so a price axis does not start at 0)."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return
    if hi <= lo:
        lo, hi = lo - 1, hi + 1
    if nice:
        step = 10 ** math.floor(math.log10(hi - lo)) / 2
        lo, hi = math.floor(lo / step) * step, math.ceil(hi / step) * step
    axis.scaling.min, axis.scaling.max = lo, hi

"""The Model sheet's curves: each curved predictor's effect table (the engine's ``curves``
table, diagnostics/curves.py) and a line chart of it. Nothing is computed here."""

from __future__ import annotations

from plumbrule.workbook.cells import MONEY, note, title, write_frame

CHART_ROWS = 16          # rows a chart covers at its height (7.5 cm), so tables never hide
_LINE, _BAND = "1F3A4D", "8FA9B8"


def write_curves(ws, r: int, analysis) -> int:
    """Write one table and chart per curve from row ``r``; return the next free row (``r``
    unchanged without curves)."""
    table = analysis.tables.curves
    if table is None or not len(table):
        return r
    enc = analysis.final_model.encoding
    log = analysis.spec.log_response
    unit = "effect on price (%)" if log else "effect on price"
    fmt = "0.0" if log else MONEY
    r = title(ws, r, "Curves: effects that bend")
    r = note(ws, r, "Each curve's effect on the price relative to the median sale's value, with "
                    f"its {analysis.final_model.confidence:.0%} confidence interval"
             + (" (percent of the price)." if log else " (price units)."))
    for pred, part in table.groupby("predictor", sort=False):
        basis = enc.curve(str(pred))
        ref = float(part["reference"].iloc[0])
        bands = part["kind"].iloc[0] == "bands"
        what = "" if bands else f"; reference: {ref:,.10g} (the median sale)"
        r = note(ws, r, f"{pred}: {basis.describe() if basis else ''}{what}.")
        first_col = "band" if bands else "value"
        shown = part[[first_col, "effect", "ci_low", "ci_high"]]
        top = r
        formats: dict = {"effect": fmt, "ci_low": fmt, "ci_high": fmt}
        if not bands:
            formats[first_col] = "#,##0.###"
        end = write_frame(ws, shown, r, 1, formats,
                          {first_col: str(pred), "effect": unit, "ci_low": "CI low",
                           "ci_high": "CI high"})
        _chart(ws, top, end - 1, str(pred), unit)
        r = max(end, top + CHART_ROWS) + 1
    return r


def _chart(ws, header: int, last: int, pred: str, unit: str) -> None:
    from openpyxl.chart import LineChart, Reference
    chart = LineChart()
    chart.title = f"{pred}: {unit}"
    chart.style = 2
    chart.height, chart.width = 7.5, 13.0
    chart.y_axis.title = unit
    chart.x_axis.title = pred
    chart.x_axis.delete = False
    chart.y_axis.delete = False
    data = Reference(ws, min_col=2, max_col=4, min_row=header, max_row=last)
    chart.add_data(data, titles_from_data=True)
    chart.set_categories(Reference(ws, min_col=1, min_row=header + 1, max_row=last))
    for i, s in enumerate(chart.series):
        s.marker.symbol = "circle" if i == 0 else "none"
        s.smooth = False
        s.graphicalProperties.line.solidFill = _LINE if i == 0 else _BAND
        s.graphicalProperties.line.width = int((2.0 if i == 0 else 1.0) * 12700)
        if i:
            s.graphicalProperties.line.dashStyle = "dash"
    chart.legend.position = "b"
    ws.add_chart(chart, f"F{header}")

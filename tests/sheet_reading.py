"""Reading back what plumbrule wrote, for the workbook tests: a defined name's value under a
formula evaluator, the input cell beside a label, a chart's title and the numbers a chart
series refers to."""

from __future__ import annotations

import numpy as np


def named_value(wb, name, ev):
    """The value of the one-cell defined name ``name`` as the evaluator ``ev`` computes it."""
    (_sheet, ref), = wb.defined_names[name].destinations
    return ev.value(ref)


def input_cell(ws, label):
    """The cell right of the first cell in column A holding ``label``."""
    for row in ws.iter_rows(min_col=1, max_col=2):
        if row[0].value == label:
            return row[1]
    raise KeyError(label)


def chart_title(chart) -> str:
    """A chart's title text (the runs of its rich text)."""
    return "".join(r.t for p in chart.title.tx.rich.p for r in (p.r or []))


def chart_values(wb, ref) -> np.ndarray:
    """The numbers of a series reference such as 'Chart data'!$A$3:$A$40."""
    sheet, cells = ref.rsplit("!", 1)
    ws = wb[sheet.strip("'")]
    from plumbrule.workbook.save import materialize
    materialize(ws)         # a book not yet saved keeps its chart numbers as number columns
    return np.array([c.value for row in ws[cells.replace("$", "")] for c in row], dtype=float)

"""Reading a sheet's print layout back from its XML (openpyxl), for the print tests.

``clipped(ws)`` lists the text cells inside the print area that a printout would cut:
text longer than its cell (or merged cells) that is not wrapped, or wrapped text whose
row is too low for its lines. The character estimate is the usual one for the default
11-point font (about 1.1 characters per unit of column width, as Excel's column width
counts the widest digit; common practice, no source); it is deliberately more lenient
than the writer's own (0.9), so it checks the writer without repeating it.
"""

from __future__ import annotations

import math

DEFAULT_WIDTH = 8.43
CHARS_PER_UNIT = 1.1


def width(ws, col: int) -> float:
    from openpyxl.utils import get_column_letter
    d = ws.column_dimensions.get(get_column_letter(col))
    if d is not None and d.width and d.customWidth:
        return float(d.width)
    for d in ws.column_dimensions.values():
        if d.min and d.max and d.min <= col <= d.max and d.width and d.customWidth:
            return float(d.width)
    return DEFAULT_WIDTH


def print_bounds(ws) -> tuple[int, int]:
    """(last row, last column) of the sheet's print area (the used range without one)."""
    from openpyxl.utils.cell import range_boundaries
    area = ws.print_area
    if not area:
        return ws.max_row, ws.max_column
    ref = area.split("!")[-1].replace("$", "")
    _, _, max_col, max_row = range_boundaries(ref)
    return max_row, max_col


def clipped(ws) -> list[str]:
    """'B7: 143 characters in 12 widths, not wrapped' for every cut text cell."""
    last_row, last_col = print_bounds(ws)
    spans = {}
    inside = set()
    for rng in ws.merged_cells.ranges:
        spans[(rng.min_row, rng.min_col)] = sum(width(ws, k)
                                                for k in range(rng.min_col, rng.max_col + 1))
        inside |= {(r, c) for r in range(rng.min_row, rng.max_row + 1)
                   for c in range(rng.min_col, rng.max_col + 1)}
    out = []
    for row in ws.iter_rows(max_row=last_row, max_col=last_col):
        for c in row:
            if not isinstance(c.value, str) or not c.value:
                continue
            key = (c.row, c.column)
            if key in inside and key not in spans:
                continue
            w = spans.get(key, width(ws, c.column))
            size = float(c.font.sz or 11) if c.font is not None else 11.0
            per_line = w * CHARS_PER_UNIT * 11.0 / size
            text = c.value
            if not c.alignment.wrap_text:
                if len(text) > per_line:
                    out.append(f"{c.coordinate}: {len(text)} characters in {w:g} widths, "
                               "not wrapped")
                continue
            lines = sum(max(1, math.ceil(len(p) / per_line)) for p in text.split("\n"))
            height = ws.row_dimensions[c.row].height or 15.0
            if height + 0.01 < lines * 15.0 * size / 11.0 * 0.95:
                out.append(f"{c.coordinate}: {lines} lines in a row {height:g} points high")
    return out

"""Fill a copy of the template with sales, subjects, comparables and settings
(used by ``plumbrule demo``, the tests and the benchmark)."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping, Sequence

import pandas as pd


def fill_template(dest: str | Path, sales: pd.DataFrame, subjects: pd.DataFrame | None = None,
                  comps: Sequence[int] = (), settings: Mapping[str, Any] | None = None,
                  models: pd.DataFrame | None = None,
                  roll: pd.DataFrame | None = None) -> Path:
    """Write the template filled with these inputs to ``dest`` (overwrites); returns it.
    ``models``: candidate models for the Models table (a Model column, then settings);
    ``roll``: parcels for the Roll sheet (an assessor's roll)."""
    from openpyxl import load_workbook
    from plumbrule.workbook.template import packaged_template
    book = load_workbook(packaged_template())
    _fill_table(book["Sales"], "Sales", sales)
    if subjects is not None and len(subjects):
        subjects = subjects.loc[:, ~subjects.isna().all()]
        _fill_table(book["Subjects"], "Subjects", subjects)
    if comps:
        _fill_table(book["Comps"], "Comps", pd.DataFrame({"Sales row": list(comps),
                                                          "Note": [""] * len(comps)}))
    if settings:
        set_settings(book, settings)
    if models is not None and len(models):
        ws = book["Models"]         # the template's columns kept, the candidates' values under them
        heads = [c.value for c in ws[1] if c.value]
        extra = [c for c in models.columns if c not in heads]
        _fill_table(ws, "Models", models.reindex(columns=heads + extra))
    if roll is not None and len(roll):
        _fill_table(book["Roll"], "Roll", roll)
    dest = Path(dest)
    book.save(dest)
    return dest


def _fill_table(ws, name: str, frame: pd.DataFrame) -> None:
    """Header + rows from row 1, and the Excel table resized to hold them."""
    from openpyxl.utils import get_column_letter
    from plumbrule.workbook.cells import put
    formats = {j: ws.cell(row=2, column=j).number_format for j in range(1, ws.max_column + 1)}
    old_width = ws.max_column
    for j, col in enumerate(frame.columns, start=1):
        put(ws, 1, j, str(col))
    for j in range(len(frame.columns) + 1, old_width + 1):
        ws.cell(row=1, column=j).value = None
    for j, col in enumerate(frame.columns, start=1):
        fmt = formats.get(j) if str(ws.cell(row=1, column=j).value) == str(col) else None
        fmt = fmt if fmt and fmt != "General" else None
        for i, v in enumerate(frame[col].tolist(), start=2):
            if v is None or (isinstance(v, float) and v != v) or v == "" or v is pd.NaT:
                continue
            put(ws, i, j, v, fmt)
    last = max(2, len(frame) + 1)
    ref = f"A1:{get_column_letter(len(frame.columns))}{last}"
    table = ws.tables[name]
    table.ref = ref
    table.tableColumns = []          # rebuilt from the header row on save
    if table.autoFilter is not None:
        table.autoFilter.ref = ref


def set_settings(book, settings: Mapping[str, Any]) -> None:
    """Put values into column B of the Settings sheet, by setting name (column A)."""
    from plumbrule.settings import normalise_name
    from plumbrule.workbook.cells import put
    ws = book["Settings"]
    where = {normalise_name(ws.cell(row=r, column=1).value): r
             for r in range(2, ws.max_row + 1) if ws.cell(row=r, column=1).value}
    for key, value in settings.items():
        name = normalise_name(key)
        if name not in where:
            raise KeyError(f"no setting {name!r} on the Settings sheet")
        put(ws, where[name], 2, value)

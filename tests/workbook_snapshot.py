"""Helpers for the workbook tests: a comparable picture of a workbook's contents,
and a filled demo workbook to run on."""

from __future__ import annotations

import shutil
import zipfile
from pathlib import Path


def _colour(c):
    return None if c is None else (c.rgb if c.type == "rgb" else (c.type, c.theme, c.indexed))


def cell_record(c):
    """What a user sees and relies on in one cell."""
    return (repr(c.value), c.data_type, c.number_format, c.font.b, c.font.i, _colour(c.font.color),
            c.fill.fill_type, _colour(c.fill.fgColor), getattr(c.border.bottom, "style", None),
            c.alignment.horizontal,
            c.alignment.wrap_text, c.protection.locked, c.comment.text if c.comment else None)


def sheet_record(ws):
    cells = {c.coordinate: cell_record(c) for row in ws.iter_rows() for c in row
             if c.value is not None or c.has_style or c.comment}
    return {
        "cells": cells,
        "tables": {t.displayName: t.ref for t in ws.tables.values()},
        "validations": sorted((str(d.sqref), d.type, d.formula1, d.allow_blank)
                              for d in ws.data_validations.dataValidation),
        "merged": sorted(str(m) for m in ws.merged_cells.ranges),
        "widths": {k: v.width for k, v in ws.column_dimensions.items() if v.customWidth},
        "conditional": sorted(str(r.sqref) for r in ws.conditional_formatting),
        "freeze": ws.freeze_panes,
        "local_names": {n: d.attr_text for n, d in ws.defined_names.items()},
        "state": ws.sheet_state,
    }


def snapshot(path, skip=(), only=None):
    """Defined names and every sheet's cells/styles/tables/validations/comments."""
    from openpyxl import load_workbook
    path = Path(path)
    book = load_workbook(path, rich_text=True, keep_vba=path.suffix == ".xlsm")
    out = {"sheetnames": [n for n in book.sheetnames if n not in skip],
           "names": {n: d.attr_text for n, d in book.defined_names.items()}}
    for ws in book.worksheets:
        if ws.title in skip or (only is not None and ws.title not in only):
            continue
        out[ws.title] = sheet_record(ws)
    return out


def zip_names(path):
    with zipfile.ZipFile(path) as z:
        return sorted(z.namelist())


def copy(src, dest):
    shutil.copyfile(src, dest)
    return Path(dest)


def rezip(src, dest, replace=None, add=None):
    """Copy a zip package, replacing some parts (name → bytes or bytes→bytes function)."""
    replace, add = dict(replace or {}), dict(add or {})
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dest, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            data = zin.read(info.filename)
            if info.filename in replace:
                new = replace.pop(info.filename)
                data = new(data) if callable(new) else new
            zout.writestr(info.filename, data)
        for name, data in {**replace, **add}.items():
            zout.writestr(name, data)
    return Path(dest)


def sheet_part(path, sheet):
    """The zip part of worksheet ``sheet`` (through workbook.xml and its rels)."""
    import re
    with zipfile.ZipFile(path) as z:
        wb = z.read("xl/workbook.xml").decode()
        rels = z.read("xl/_rels/workbook.xml.rels").decode()
    rid = re.search(r'<sheet [^>]*name="%s"[^>]*r:id="(rId\d+)"' % re.escape(sheet), wb).group(1)
    target = re.search(
        r'Id="%s"[^>]*Target="([^"]+)"|Target="([^"]+)"[^>]*Id="%s"' % (rid, rid), rels
    )
    t = target.group(1) or target.group(2)
    return t.lstrip("/") if t.startswith("/") else "xl/" + t


def folder_state(folder):
    """{file name: bytes} of a folder, to show nothing was written."""
    return {p.name: p.read_bytes() for p in Path(folder).iterdir() if p.is_file()}


def refused_run(book, capsys, *words):
    """Run ``plumbrule run`` on ``book``; expect exit 2, a one-line message holding every one
    of ``words``, and the book's folder unchanged. Returns the message."""
    from plumbrule.cli.main import main
    before = folder_state(book.parent)
    assert main(["run", str(book)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("plumbrule: ") and "\n" not in err
    for w in words:
        assert w.lower() in err.lower(), err
    assert folder_state(book.parent) == before
    return err


def plain_book(path, sales, settings):
    """A small plain .xlsx written by openpyxl: a Sales sheet holding ``sales`` (a DataFrame,
    header first) and a Settings sheet of (name, value) rows. Returns ``path``."""
    from openpyxl import Workbook
    wb = Workbook()
    ws = wb.active
    ws.title = "Sales"
    ws.append(list(sales.columns))
    for row in sales.itertuples(index=False):
        ws.append(list(row))
    st = wb.create_sheet("Settings")
    for name, value in settings.items():
        st.append([name, value])
    wb.save(path)
    return path

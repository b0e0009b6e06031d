"""``plumbrule run BOOK.xlsx``: read the inputs, run the analysis, write the results.

The book is updated in place only when that loses nothing: plumbrule's own result
sheets (recorded in the hidden defined name ``plumb_sheets``) are replaced and every
other part is carried through by openpyxl. When the book holds parts openpyxl cannot
carry (see :mod:`.safety`), it is left untouched and the results go to
``BOOK.results.xlsx`` (a copy of the input values plus the result sheets).

Writes go to a temporary file in the same folder, then ``os.replace``; the previous
version is kept as ``BOOK.xlsx.bak`` unless the ``backup`` setting is FALSE.
"""

from __future__ import annotations

import datetime as _dt
import os
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from plumbrule.errors import WorkbookError
from plumbrule.headline import headline
from plumbrule.render.json import jsonable
from plumbrule.render.text import headline_text
from plumbrule.workbook import INPUT_SHEETS, RESULT_SHEETS


@dataclass(frozen=True)
class RunResult:
    """Where the results went and the headline numbers (plain floats, price scale)."""

    written: Path
    in_place: bool
    unsupported: tuple[str, ...]
    backup: Path | None
    headline: dict[str, Any] = field(default_factory=dict)
    analysis: Any = None
    valuation: Any = None


def run_book(path: str | Path, backup: bool | None = None,
             now: _dt.datetime | None = None) -> RunResult:
    """Run the analysis described by the workbook at ``path`` into it (see module doc).

    ``backup`` overrides the workbook's ``backup`` setting; ``now`` fixes the stamp time.
    Raises :class:`WorkbookError` (or another PlumbError) with nothing written.
    """
    from plumbrule.workbook.read import read_inputs
    from plumbrule.workbook.safety import check_is_file, check_not_open, inspect_book
    path = Path(path)
    check_not_open(path)
    check_is_file(path)
    seen = _signature(path)
    parts = inspect_book(path)
    _check_names(parts)
    inputs = read_inputs(path)
    analysis, valuation, settings = _analyse(inputs)
    from plumbrule.workbook.stamp import make_stamp
    stamp = make_stamp(analysis, inputs.sales_hash, source=path.name, now=now)
    keep_bak = settings.backup if backup is None else backup
    in_place = not parts.unsupported
    book = _result_book(inputs, with_sales=not in_place)
    write_results(book, analysis, valuation, stamp)
    if in_place:
        target = path
        for ws in book.worksheets:          # the user's choice of tab stays
            ws.sheet_view.tabSelected = False
        from plumbrule.workbook.graft import graft
        names = [n for n in RESULT_SHEETS if n in book.sheetnames]
        data = _to_bytes(book)

        def write(tmp):
            graft(path, data, tmp, parts.result_sheets, names)
            _still_the_same(path, seen)     # opened and saved meanwhile? keep theirs
        bak = write_atomic(target, write, keep_bak)
    else:
        target = path.with_name(path.stem + ".results.xlsx")
        check_not_open(target)
        bak = write_atomic(target, book.save, keep_bak)
    return RunResult(written=target, in_place=in_place, unsupported=parts.unsupported,
                     backup=bak, headline=jsonable(headline(analysis, valuation)),
                     analysis=analysis, valuation=valuation)


def _signature(path: Path) -> tuple[int, int]:
    st = path.stat()
    return st.st_mtime_ns, st.st_size


def _still_the_same(path: Path, seen: tuple[int, int]) -> None:
    from plumbrule.workbook.safety import check_not_open
    check_not_open(path)
    if _signature(path) != seen:
        raise WorkbookError(f"'{path.name}' changed while plumbrule was running (saved from "
                            "a spreadsheet?). Nothing was written; run again.")


def _to_bytes(book) -> bytes:
    import io
    buf = io.BytesIO()
    book.save(buf)
    return buf.getvalue()


def _check_names(parts) -> None:
    """A sheet of the user's with one of our result sheets' names is never replaced."""
    ours = {s.lower() for s in parts.result_sheets}
    for name in parts.sheets:
        if name.lower() in {s.lower() for s in RESULT_SHEETS} and name.lower() not in ours:
            raise WorkbookError(
                f"The workbook already has a sheet '{name}' that plumbrule did not write. "
                f"Rename it: plumbrule writes its results to the sheets "
                f"{', '.join(RESULT_SHEETS)}. Nothing was written.", sheet=name)


def _analyse(inputs):
    from plumbrule.analysis import analyze
    from plumbrule.settings import parse_settings
    settings = parse_settings(inputs.settings)
    if inputs.comp_ids:      # the Comps sheet lists sale IDs
        settings = settings.replace(comp_ids=tuple((i, "") for i in inputs.comp_ids))
    analysis = analyze(inputs.sales, settings)
    valuation = None
    if inputs.subjects is not None:
        from plumbrule.valuation.estimates import comparable_rows, valuate
        comps = comparable_rows(analysis, inputs.comps, settings)
        subjects = inputs.subjects
        if comps and len(subjects.frame) > 1:
            # comparables belong to the first subject; every subject gets its estimate
            from dataclasses import replace
            from plumbrule.intake import SheetTable
            first = SheetTable(subjects.frame.iloc[:1], subjects.sheet, subjects.header_row)
            with_grid = valuate(analysis, first, comps, settings)
            every = valuate(analysis, subjects, (), settings.replace(comps=(), comp_ids=()))
            valuation = replace(with_grid, estimates=every.estimates, subjects=every.subjects)
        else:
            valuation = valuate(analysis, subjects, comps, settings)
    return analysis, valuation, settings


def _result_book(inputs, with_sales: bool):
    """A fresh workbook holding the input values (text-safe, at their sheet rows), for the
    result sheets to be written beside. Only the result sheets are grafted into the
    user's book; with ``with_sales`` it is the BOOK.results.xlsx copy itself."""
    from openpyxl import Workbook
    from plumbrule.workbook.cells import put
    book = Workbook()
    book.remove(book.active)
    blocks = dict(inputs.other_values)
    rows = dict(inputs.other_rows)
    if with_sales:
        blocks["Sales"] = inputs.sales_values
        rows["Sales"] = inputs.sales.header_row
    for name in INPUT_SHEETS:
        block = blocks.get(name)
        if not block:
            continue
        ws = book.create_sheet(name)
        top = rows.get(name, 1)
        for i, row in enumerate(block, start=top):
            for j, v in enumerate(row, start=1):
                if v is not None and v != "":
                    put(ws, i, j, v)
    return book


def write_results(book, analysis, valuation, stamp) -> None:
    """Create and fill the result sheets (Report first) and the headline names."""
    from plumbrule.workbook import live, report
    from plumbrule.workbook.cells import ensure_styles
    from plumbrule.workbook.sheets import (
        write_model,
        write_screening,
        write_validation,
        write_valuation,
    )

    ensure_styles(book)
    sheets = {name: book.create_sheet(name) for name in RESULT_SHEETS if name != "Chart data"}
    write_model(sheets["Model"], analysis, stamp)
    write_screening(sheets["Screening"], analysis)
    write_validation(sheets["Validation"], analysis)
    write_valuation(sheets["Valuation"], analysis, valuation, live.write_live_block)
    report.write_report(book, analysis, valuation, stamp)
    written = [n for n in RESULT_SHEETS if n in book.sheetnames]
    _record_sheets(book, written)
    for ws in book.worksheets:
        ws.sheet_view.tabSelected = False
    book.active = book.sheetnames.index("Report")
    book["Report"].sheet_view.tabSelected = True


def _record_sheets(book, names: list[str]) -> None:
    """Hidden defined name listing our sheets, so a rerun knows what it may replace."""
    from openpyxl.workbook.defined_name import DefinedName
    if "plumb_sheets" in book.defined_names:
        del book.defined_names["plumb_sheets"]
    text = "|".join(names).replace('"', '""')
    book.defined_names["plumb_sheets"] = DefinedName("plumb_sheets", attr_text=f'"{text}"',
                                                     hidden=True)


def write_atomic(target: Path, write, backup: bool) -> Path | None:
    """``write(tmp)`` a temp file beside ``target``, keep ``target.bak`` if asked, then
    ``os.replace``. Returns the backup path (or None). On failure ``target`` is unchanged
    and the temp file is removed."""
    tmp = target.with_name(f".~plumbrule-{os.getpid()}-{target.name}")
    bak = target.with_name(target.name + ".bak") if backup and target.exists() else None
    try:
        write(tmp)
        if bak is not None:
            bak_tmp = bak.with_name(bak.name + ".tmp")
            shutil.copy2(target, bak_tmp)
            os.replace(bak_tmp, bak)
        os.replace(tmp, target)
    except OSError as exc:
        raise WorkbookError(f"Cannot write '{target}' ({exc.strerror or exc}). Check the folder "
                            "is writable and the file is not open elsewhere; the workbook was "
                            "not changed.") from None
    finally:
        if tmp.exists():
            tmp.unlink()
    return bak


def print_run(result: RunResult, as_json: bool = False) -> None:
    """What ``plumbrule run`` prints: where the results went, why, and the headline."""
    import json
    if as_json:
        print(json.dumps({"workbook": str(result.written), "in_place": result.in_place,
                          "unsupported_parts": list(result.unsupported),
                          "backup": str(result.backup) if result.backup else None,
                          "headline": result.headline}, allow_nan=False, ensure_ascii=False))
        return
    if result.in_place:
        print(f"Results written to {result.written} (sheets {', '.join(RESULT_SHEETS[:-1])}).")
    else:
        print("The workbook holds parts plumbrule cannot carry through a save unchanged: "
              + "; ".join(result.unsupported) + ".")
        print(f"It was left untouched; the results are in {result.written}.")
    if result.backup:
        print(f"Previous version kept as {result.backup}.")
    print(headline_text(result.headline))

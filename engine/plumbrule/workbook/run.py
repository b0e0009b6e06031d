"""``plumbrule run BOOK.xlsx``: read the inputs, run the analysis, write the results.

The book is updated in place only when that loses nothing: plumbrule's own result
sheets (proven by the mark each carries, see :mod:`.package`) are replaced and every
other part is carried byte for byte (:mod:`.graft`). When the book holds parts openpyxl
cannot carry or its structure is protected (see :mod:`.safety`), it is left untouched
and the results go to ``BOOK.results.xlsx`` (a copy of the input values plus the
result sheets). A sheet named like a result sheet without the mark is refused.

Writes go to a uniquely named temporary file beside the book (beside the file a
symbolic link points to), then ``os.replace``; the new file keeps the book's mode and
owner; the previous version is kept as ``BOOK.xlsx.bak`` unless the ``backup`` setting
is FALSE. A read-only book is refused.
"""

from __future__ import annotations

import datetime as _dt
import os
import re
import secrets
import shutil
from stat import S_IMODE, S_IWGRP, S_IWOTH, S_IWUSR
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from plumbrule.collection import cycle_collection_paused
from plumbrule.errors import WorkbookError
from plumbrule.headline import headline
from plumbrule.render.json import jsonable
from plumbrule.render.text import headline_text
from plumbrule.workbook import (
    INPUT_SHEETS,
    OPTIONAL_SHEETS,
    OPTIONAL_INPUT_SHEETS,
    OPTIONAL_RESULT_SHEETS,
    RESULT_SHEETS,
)

ALL_RESULT_SHEETS = RESULT_SHEETS + OPTIONAL_RESULT_SHEETS


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
    comparison: Any = None      # plumbrule.compare.Comparison, when Models lists candidates
    roll: Any = None          # the valued Roll sheet (valuation/roll.py), None without one


def run_book(path: str | Path, backup: bool | None = None,
             now: _dt.datetime | None = None) -> RunResult:
    """Run the analysis described by the workbook at ``path`` into it (see module doc).

    ``backup`` overrides the workbook's ``backup`` setting; ``now`` fixes the stamp time.
    Raises :class:`WorkbookError` (or another PlumbError) with nothing written.
    """
    with cycle_collection_paused():
        return _run_book(path, backup, now)


def _run_book(path, backup, now) -> RunResult:
    from plumbrule.workbook.read import read_inputs
    from plumbrule.workbook.safety import check_is_file, check_not_open, inspect_book
    path = Path(path)
    real = _real_file(path)
    for p in dict.fromkeys((path, real)):
        check_not_open(p)
    check_is_file(path)
    seen = _signature(real)
    parts = inspect_book(path)
    in_place = not parts.unsupported
    if in_place:
        _check_names(parts)
        check_writable(real)
    inputs = read_inputs(path)
    analysis, valuation, settings, comparison = _analyse(inputs)
    roll = _value_roll(inputs, analysis, settings)
    from plumbrule.workbook.stamp import make_stamp
    stamp = make_stamp(analysis, inputs.sales_hash, source=path.name, now=now)
    keep_bak = settings.backup if backup is None else backup
    book = _result_book(inputs, with_sales=not in_place)
    write_results(book, analysis, valuation, stamp, comparison, roll)
    if in_place:
        target = real
        bak = write_atomic(real, _graft_writer(real, book, parts, seen), keep_bak)
    else:
        target = path.with_name(path.stem + ".results.xlsx")
        check_not_open(target)
        from plumbrule.workbook.save import save_book
        bak = write_atomic(_real_file(target), lambda tmp: save_book(book, tmp), keep_bak)
    return RunResult(written=target, in_place=in_place, unsupported=parts.unsupported,
                     backup=bak, headline=jsonable(headline(analysis, valuation)),
                     analysis=analysis, valuation=valuation, comparison=comparison,
                     roll=roll)


def _graft_writer(path: Path, book, parts, seen):
    """``write(tmp)``: the user's book at ``path`` with plumbrule's (marked) result sheets
    replaced by those of ``book``; refuses if the book changed since ``seen``."""
    from plumbrule.workbook.graft import graft
    for ws in book.worksheets:          # the user's choice of tab stays
        ws.sheet_view.tabSelected = False
    names = [n for n in ALL_RESULT_SHEETS if n in book.sheetnames]
    data = _to_bytes(book)
    results = {n.casefold() for n in ALL_RESULT_SHEETS}
    replace = [n for n in parts.result_sheets if n.casefold() in results]

    def write(tmp):
        graft(path, data, tmp, replace, names)
        _still_the_same(path, seen)     # opened and saved meanwhile? keep theirs
    return write


def _real_file(path: Path) -> Path:
    """The file a (chain of) symbolic link(s) points to: written through, so the link
    stays a link and every name for the book sees the update."""
    return Path(os.path.realpath(path)) if path.is_symlink() else path


def check_writable(path: Path) -> None:
    """Refuse a book its user cannot (or chose not to) write: read-only mode bits, no
    write access, or a folder where no temporary file can be made."""
    st = path.stat()
    if not os.access(path, os.W_OK) or not st.st_mode & _write_bit(st):
        raise WorkbookError(
            f"'{path.name}' is read-only. Make it writable (chmod u+w, or clear Read-only "
            "in its properties) or run on a copy; nothing was written.")
    if not os.access(path.parent, os.W_OK | os.X_OK):
        raise WorkbookError(
            f"The folder of '{path.name}' is not writable, so plumbrule cannot replace the "
            "book safely. Move it to a writable folder and run again; nothing was written.")


def _write_bit(st: os.stat_result) -> int:
    """The write permission bit that applies to this process (owner, group or others)."""
    if not hasattr(os, "geteuid") or os.geteuid() == 0:
        # Windows (the read-only flag) and root (writes anything): read-only means no
        # write bit for anyone
        return S_IWUSR | S_IWGRP | S_IWOTH
    if st.st_uid == os.geteuid():
        return S_IWUSR
    if st.st_gid == os.getegid() or st.st_gid in os.getgroups():
        return S_IWGRP
    return S_IWOTH


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
    """The result book as a package in memory, its parts stored (the graft reads them back
    and deflates what it keeps once, into the user's file)."""
    from plumbrule.workbook.save import to_bytes
    return to_bytes(book, compress=False)


def _check_names(parts) -> None:
    """A sheet named like a result sheet that does not carry plumbrule's mark is the
    user's: never replaced, the run refuses (``plumb_sheets`` only shapes the message)."""
    ours = {s.casefold() for s in parts.result_sheets}
    results = {s.casefold() for s in ALL_RESULT_SHEETS}
    listed = {s.casefold() for s in parts.listed}
    for name in parts.sheets:
        key = name.casefold()
        if key in results and key not in ours:
            why = (" It is listed as plumbrule's but carries no plumbrule mark (made or "
                   "replaced by you, or written by an older plumbrule: then delete it)."
                   if key in listed else "")
            raise WorkbookError(
                f"The workbook already has a sheet '{name}' that plumbrule did not write."
                f"{why} Rename it: plumbrule writes its results to the sheets "
                f"{', '.join(ALL_RESULT_SHEETS)}. Nothing was written.", sheet=name)


def _analyse(inputs):
    from plumbrule.analysis import analyze
    from plumbrule.settings import parse_settings
    settings = parse_settings(inputs.settings)
    if inputs.comp_ids:      # the Comps sheet lists sale IDs
        settings = settings.replace(comp_ids=tuple((i, "") for i in inputs.comp_ids))
    comparison = None
    if inputs.models:        # candidates compared; the results follow use_model's candidate
        from plumbrule.compare import compare
        comparison = compare(inputs.sales, settings, inputs.models)
        settings = comparison.settings[comparison.used]
    elif settings.use_model is not None:
        from plumbrule.errors import SettingError
        raise SettingError(f"Setting 'use_model': '{settings.use_model}' names a candidate, "
                           "but the Models sheet lists none. List it there, or leave "
                           "use_model blank.", setting="use_model")
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
    return analysis, valuation, settings, comparison


def _value_roll(inputs, analysis, settings):
    """The Roll sheet's parcels valued (bounded by one sheet), or None without a roll."""
    roll = inputs.roll
    if roll is None:
        return None
    from plumbrule.valuation.roll import SHEET_ROWS, value_roll
    frame = roll.frame
    return value_roll(analysis, frame.reset_index(drop=True), settings,
                      first_row=int(frame.index[0]), first_column=roll.first_column,
                      limit=SHEET_ROWS - 1)


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
    for name in INPUT_SHEETS + OPTIONAL_INPUT_SHEETS:
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


def write_results(book, analysis, valuation, stamp, comparison=None, roll=None) -> None:
    """Create and fill the result sheets (Report first) and the headline names; the
    Comparison sheet (and its Report section) only with a ``comparison``; with a valued
    ``roll``, the Roll results sheet too."""
    from plumbrule.workbook import live, report
    from plumbrule.workbook.cells import ensure_styles
    from plumbrule.workbook.sheets import (
        write_model,
        write_screening,
        write_validation,
        write_valuation,
    )

    ensure_styles(book)
    sheets = {name: book.create_sheet(name) for name in RESULT_SHEETS if name != "Chart data"
              and (comparison is not None or name not in OPTIONAL_SHEETS)}
    write_model(sheets["Model"], analysis, stamp)
    write_screening(sheets["Screening"], analysis)
    write_validation(sheets["Validation"], analysis)
    write_valuation(sheets["Valuation"], analysis, valuation, live.write_live_block)
    report.write_report(book, analysis, valuation, stamp)
    if comparison is not None:
        from plumbrule.workbook.comparison import add_to_report, write_comparison
        write_comparison(sheets["Comparison"], comparison)
        add_to_report(book["Report"], comparison)
    if roll is not None:
        from plumbrule.workbook.roll_sheet import write_roll
        write_roll(book.create_sheet("Roll results"), roll)
    written = [n for n in ALL_RESULT_SHEETS if n in book.sheetnames]
    _record_sheets(book, written)
    for ws in book.worksheets:
        ws.sheet_view.tabSelected = False
    book.active = book.sheetnames.index("Report")
    book["Report"].sheet_view.tabSelected = True


def _record_sheets(book, names: list[str]) -> None:
    """Mark each result sheet as plumbrule's (a hidden sheet-local name, see
    :mod:`.package`: the proof a rerun checks) and list them in the hidden workbook name
    ``plumb_sheets`` (a hint for messages, never the proof)."""
    from openpyxl.workbook.defined_name import DefinedName
    from plumbrule.workbook.package import MARK_NAME, mark_text
    for name in names:
        ws = book[name]
        ws.defined_names[MARK_NAME] = DefinedName(MARK_NAME, attr_text=mark_text(name),
                                                  hidden=True)
    if "plumb_sheets" in book.defined_names:
        del book.defined_names["plumb_sheets"]
    text = "|".join(names).replace('"', '""')
    book.defined_names["plumb_sheets"] = DefinedName("plumb_sheets", attr_text=f'"{text}"',
                                                     hidden=True)


_TMP_PREFIX = ".~plumbrule-"


def _host_tag() -> str:
    """8 hex digits naming this machine, so a run never removes another machine's
    temporary file in a shared folder."""
    import hashlib
    import socket
    return hashlib.sha256(socket.gethostname().encode("utf-8")).hexdigest()[:8]


def _tmp_name(target: Path, suffix: str = "") -> Path:
    """A temporary name beside ``target`` no other run uses: host, process, random."""
    return target.with_name(f"{_TMP_PREFIX}{_host_tag()}-{os.getpid()}-{secrets.token_hex(4)}-"
                            f"{target.name}{suffix}")


def remove_stale_temporaries(folder: Path) -> list[Path]:
    """Remove plumbrule's own temporary files (by name) left in ``folder`` by a run on this
    machine whose process no longer exists (killed, or a full disk). Returns them."""
    pattern = re.compile(re.escape(_TMP_PREFIX) + r"([0-9a-f]{8})-(\d+)-[0-9a-f]{8}-")
    host, gone = _host_tag(), []
    for p in folder.iterdir():
        m = pattern.match(p.name)
        if m and m.group(1) == host and not _alive(int(m.group(2))) and p.is_file():
            try:
                p.unlink()
                gone.append(p)
            except OSError:
                pass
    return gone


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True              # exists (another user's), or cannot tell: keep the file
    return True


def _new_private(path: Path) -> None:
    """Create ``path`` empty, readable by its owner only (the mode is set when done)."""
    os.close(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600))


def _take_mode(dest: Path, like: os.stat_result | None) -> None:
    """Give ``dest`` the mode (and, where permitted, the owner) of the file it replaces;
    a new file gets the usual mode for new files (0666 less the umask)."""
    if like is None:
        mask = os.umask(0)
        os.umask(mask)
        os.chmod(dest, 0o666 & ~mask)
        return
    os.chmod(dest, S_IMODE(like.st_mode))
    if hasattr(os, "chown"):
        try:
            os.chown(dest, like.st_uid, like.st_gid)
        except OSError:
            pass                 # not permitted (not root): the runner owns the new file


def write_atomic(target: Path, write, backup: bool) -> Path | None:
    """``write(tmp)`` a temp file beside ``target``, keep ``target.bak`` if asked, then
    ``os.replace``. The new file (and the backup) keep the mode and owner of ``target``.
    Returns the backup path (or None). On failure ``target`` is unchanged and the
    temporary files are removed; those of killed runs go on the next run."""
    remove_stale_temporaries(target.parent)
    like = target.stat() if target.exists() else None
    tmp = _tmp_name(target)
    bak = target.with_name(target.name + ".bak") if backup and like is not None else None
    bak_tmp = _tmp_name(target, ".bak") if bak is not None else None
    try:
        _new_private(tmp)
        write(tmp)
        _take_mode(tmp, like)
        if bak is not None and bak_tmp is not None:
            _new_private(bak_tmp)
            shutil.copyfile(target, bak_tmp)
            shutil.copystat(target, bak_tmp)
            _take_mode(bak_tmp, like)
            os.replace(bak_tmp, bak)
        os.replace(tmp, target)
    except OSError as exc:
        raise WorkbookError(f"Cannot write '{target}' ({exc.strerror or exc}). Check the folder "
                            "is writable and the file is not open elsewhere; the workbook was "
                            "not changed.") from None
    finally:
        for t in (tmp, bak_tmp):
            if t is not None and t.exists():
                t.unlink()
    return bak


def print_run(result: RunResult, as_json: bool = False) -> None:
    """What ``plumbrule run`` prints: where the results went, why, and the headline."""
    import json
    if as_json:
        out = {"workbook": str(result.written), "in_place": result.in_place,
               "unsupported_parts": list(result.unsupported),
               "backup": str(result.backup) if result.backup else None,
               "headline": result.headline}
        if result.comparison is not None:
            from plumbrule.render.compare import comparison_object
            out.update(jsonable(comparison_object(result.comparison)))
        if result.roll is not None:     # the Roll sheet had parcels
            from plumbrule.render.json import frame_records
            out["roll"] = frame_records(result.roll.summary)[0]
            out["roll_flags"] = frame_records(result.roll.flags)
        print(json.dumps(out, allow_nan=False, ensure_ascii=False))
        return
    from plumbrule.render.terminal import visible    # part and file names: ESC shown
    if result.in_place:
        shown = [n for n in RESULT_SHEETS[:-1]
                 if result.comparison is not None or n not in OPTIONAL_SHEETS]
        print(visible(f"Results written to {result.written} (sheets {', '.join(shown)})."))
    else:
        print(visible("plumbrule cannot update this workbook in place without losing "
                      "something: " + "; ".join(result.unsupported) + "."))
        print(visible(f"It was left untouched; the results are in {result.written}."))
    if result.backup:
        print(visible(f"Previous version kept as {result.backup}."))
    if result.comparison is not None:
        print(visible(result.comparison.reason))
    if result.roll is not None:
        s = result.roll.summary.iloc[0]
        print(f"Roll: {int(s.parcels):,} parcels valued on the Roll results sheet "
              f"({int(s.flagged):,} flagged).")
    print(headline_text(result.headline))

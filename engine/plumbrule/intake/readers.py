"""Reading CSV and xlsx files into a :class:`SheetTable`, error cells kept as their text.

For .xlsx/.xlsm the sheet's XML is read once more (calamine does not hand these over): the
text of error cells, the rows hidden or filtered out, and the formula cells the file holds
no saved result for (a workbook written by a program that does not compute formulas).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Iterable

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError, WorkbookError, quote_list
from plumbrule.intake.cells import _blank_mask, is_blank
from plumbrule.intake.table import SheetTable, _header_text, padded, table_from_values


def read_table(path: str | Path, sheet: str | None = None,
               header_row: int | None = None, text_columns: Iterable[str] = ()) -> SheetTable:
    """Read a .csv or .xlsx/.xlsm file (first sheet unless ``sheet``). ``header_row`` is the
    sheet row of the column headers (the setting); None finds it below any title rows.
    ``text_columns``: the columns the caller reads as labels (a hint for CSV, see
    :func:`read_csv`)."""
    path = Path(path)
    if not path.exists():
        raise IntakeError(f"File '{path}' does not exist. Check the path.")
    if path.is_dir():
        raise IntakeError(f"'{path}' is a folder, not a file. Give the path of the sales file.")
    suffix = path.suffix.lower()
    if suffix in (".csv", ".txt"):
        if sheet is not None:
            raise IntakeError(f"File '{path.name}' is a CSV file, which has no sheets; leave "
                              "out the sheet name.", sheet=sheet)
        return read_csv(path, header_row=header_row, text_columns=text_columns)
    if suffix in (".xlsx", ".xlsm", ".xls", ".ods"):
        return read_sheet(path, sheet, header_row=header_row)
    if suffix in (".parquet", ".pq"):
        if sheet is not None:
            raise IntakeError(f"File '{path.name}' is a Parquet file, which has no sheets; "
                              "leave out the sheet name.", sheet=sheet)
        return read_parquet(path)
    raise IntakeError(f"File '{path.name}' is not .csv or .xlsx. Save the sales as one of those.")


def read_parquet(path: str | Path) -> SheetTable:
    """A Parquet file (past a sheet's million rows) through pyarrow, the optional extra
    ``parquet``: its columns are the headers, row i of the file is row i + 1 below a header
    on row 1, and the cells are typed by the same rules as a DataFrame's."""
    path = Path(path)
    try:
        import pyarrow.parquet as pq
    except ImportError:
        raise IntakeError(f"Reading '{path.name}' (Parquet) needs pyarrow: install it with "
                          "pip install 'plumbrule[parquet]', or save the sales as CSV.") from None
    from plumbrule.intake.table import table_from_frame
    try:
        frame = pq.read_table(path).to_pandas()
    except Exception as exc:     # pyarrow's own error types for a damaged or foreign file
        detail = " ".join(str(exc).split())[:200]
        raise IntakeError(f"File '{path.name}' cannot be read as Parquet ({detail}). Write it "
                          "again, or save the sales as CSV.") from None
    if not len(frame.columns):
        raise IntakeError(f"File '{path.name}' has no columns. Write the sales with a header.")
    return table_from_frame(frame)


def read_csv(path: str | Path, header_row: int | None = None, typed: bool = True,
             text_columns: Iterable[str] = ()) -> SheetTable:
    """CSV cells come in as text so they are parsed exactly as a sheet's would be.
    Line i of the file is sheet row i; blank lines count as rows. ``header_row``: the line
    of the column headers, None to find it below any title lines. ``typed``: columns of
    plain numbers are typed by pandas' C parser (:mod:`plumbrule.intake.typed_csv`, the same
    results); False reads every cell as text (the reference the fast path is tested on).
    ``text_columns``: headers the caller reads as labels, IDs or dates (a hint: such a
    column is kept as text at once rather than read again when asked for)."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise IntakeError(f"File '{path.name}' cannot be opened ({exc.strerror}). "
                          "Check that it exists and is readable.") from None
    from plumbrule.intake.typed_csv import read_typed
    utf8 = raw[3:] if raw[:3] == b"\xef\xbb\xbf" else raw
    # UTF-8 (the usual case) is parsed from the bytes, which pandas decodes in C: the text
    # is decoded here only when the careful reader reads the file (a stray NUL, which it
    # keeps, or a doubled byte-order mark; UTF-16 has NULs)
    ascii = utf8.isascii()
    tried = typed and b"\x00" not in raw and not utf8.startswith(b"\xef\xbb\xbf") \
        and utf8[:4096].decode("utf-8", errors="ignore").strip() != "" \
        and (ascii or _is_utf8(utf8))
    if tried:
        end = utf8.find(b"\n")
        fast = read_typed(utf8, _separator((utf8 if end < 0 else utf8[:end]).decode("utf-8")),
                          header_row, text_columns, ascii)
        if fast is not None:
            return fast
    text = _decoded(raw, path.name)
    if not text.strip():
        raise IntakeError(f"File '{path.name}' is empty. Save the sales with a header row.")
    end = text.find("\n")
    sep = _separator(text if end < 0 else text[:end])
    if typed and not tried and "\x00" not in text:      # a stray NUL: the careful reader
        fast = read_typed(text, sep, header_row, text_columns)
        if fast is not None:
            return fast
    import io
    try:
        frame = pd.read_csv(io.StringIO(text), header=None, dtype=object, sep=sep,
                            keep_default_na=False, na_values=[], skip_blank_lines=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
        if "EOF inside string" in str(exc):
            raise _unclosed_quote(text, path.name) from None
        # Title lines above the header are shorter than the lines below: read the lines
        # as they are and hold only the lines below the header to its width.
        return _ragged_csv(text, sep, path.name, header_row)
    return table_from_values(frame.to_numpy(dtype=object), header_row=1, sheet=None,
                             header_at=header_row)


def _separator(first: str) -> str:
    """The separator of a CSV file from its first line: ';' when it has more of those."""
    return ";" if first.count(";") > first.count(",") else ","


def _is_utf8(raw: bytes) -> bool:
    try:
        raw.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return True


def _unclosed_quote(text: str, name: str) -> IntakeError:
    """The line (sheet row) of the quote that opens a cell never closed: quotes pair up
    (a doubled one inside a cell counts twice), so the last one of an odd count opens it.
    pandas counts records from 0, which is neither."""
    at = text.rfind('"') if text.count('"') % 2 else -1
    line = text.count("\n", 0, at) + 1 if at >= 0 else None
    where = f"row {line}" if line else "a line"
    return IntakeError(f"File '{name}' cannot be read as CSV: the quote (\") that opens a cell "
                       f"on {where} is never closed, so every line after it would be one cell. "
                       "Close the quote or remove it, and save again.", row=line)


def _decoded(raw: bytes, name: str) -> str:
    """The text of a CSV file: UTF-16 (Excel's "Unicode text", with its byte-order mark, or
    without one when every other byte is NUL), UTF-8, else cp1252 (Excel on Windows often
    saves "CSV" so). A stray NUL stays in its cell (the terminal shows it as \\x00)."""
    fix = "Save the sales as UTF-8 CSV with a header row."
    encodings = ["utf-8-sig", "cp1252"]
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):
        encodings = ["utf-16"]
    elif b"\x00" in raw:
        head = raw[:4096]
        odd, even = head[1::2].count(0), head[0::2].count(0)
        if odd > 0.9 * (len(head) // 2):
            encodings = ["utf-16-le"]
        elif even > 0.9 * (len(head) // 2):
            encodings = ["utf-16-be"]
    for encoding in encodings:
        try:
            return raw.decode(encoding).lstrip("\ufeff")
        except UnicodeDecodeError:
            continue
    kind = "UTF-16 text that cannot be decoded" if encodings[0].startswith("utf-16") else \
        "not text"
    raise IntakeError(f"File '{name}' is {kind}. {fix}")


def _ragged_csv(text: str, sep: str, name: str, header_row: int | None) -> SheetTable:
    """A CSV whose lines have different numbers of cells: fine above the header (titles,
    notes), refused below it when a line has more cells than the header line."""
    import csv
    import io
    fix = ("Save it as CSV with one header row and the same number of cells on every "
           "line.")
    try:
        rows = list(csv.reader(io.StringIO(text), delimiter=sep))
    except csv.Error as exc:
        raise IntakeError(f"File '{name}' cannot be read as CSV ({exc}). {fix}") from None
    cells = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))

    def too_wide(head: int) -> None:
        wide = np.flatnonzero(cells[head:] > cells[head - 1])
        if len(wide):
            line = head + 1 + int(wide[0])
            raise IntakeError(f"File '{name}' cannot be read as CSV (line {line} "
                              f"has {cells[line - 1]} cells, the header line {cells[head - 1]})."
                              f" {fix}", row=line) from None
    try:
        table = table_from_values(rows, header_row=1, sheet=None, header_at=header_row)
    except IntakeError as err:       # a line wider than the header is the first problem
        if err.setting is None and err.row is not None:
            # The row tried may be a title: hold the lines below to the first line of two or
            # more filled cells (a header), as a reader of the file would.
            block = padded(rows)
            filled = ~_blank_mask(pd.Series(block.ravel(), dtype=object)).to_numpy()
            wide = np.flatnonzero(filled.reshape(block.shape).sum(axis=1) >= 2)
            too_wide(int(wide[0]) + 1 if len(wide) else err.row)
        raise
    too_wide(table.header_row)
    return table


def read_sheet(path: str | Path, sheet: str | None = None,
               header_row: int | None = None) -> SheetTable:
    """One worksheet through python-calamine (fast). The header is sheet row ``header_row``,
    or found below any title rows (:func:`plumbrule.intake.table.find_header`).
    Calamine hands over error cells as blanks; for .xlsx/.xlsm their error text is put
    back from the sheet's XML (for .xls/.ods they are logged as 'blank'), and the table
    carries the hidden rows and the columns of formulas with no saved result."""
    from python_calamine import CalamineWorkbook
    from plumbrule.intake.zipcheck import check_package
    check_package(path)          # a zip bomb is refused before calamine inflates anything
    try:
        book = CalamineWorkbook.from_path(str(path))
        names = list(book.sheet_names)
    except Exception as exc:  # calamine raises its own types for damaged files
        detail = " ".join(str(exc).split())[:200]
        raise IntakeError(f"File '{Path(path).name}' cannot be read as a workbook ({detail}). "
                          "Open it in the spreadsheet and save it again as .xlsx.") from None
    if not names:
        raise IntakeError(f"Workbook '{Path(path).name}' has no worksheets.")
    loaded = None
    if sheet is None:
        sheet, loaded = _first_table_sheet(book, names)
    elif sheet not in names:
        folded = [n for n in names if n.casefold() == str(sheet).strip().casefold()]
        if len(folded) != 1:
            raise IntakeError(f"Workbook '{Path(path).name}' has no sheet '{sheet}'. Sheets: "
                              f"{quote_list(names)}.", sheet=sheet)
        sheet = folded[0]
    try:
        # the sheet read once: the search for the first table sheet hands it over
        ws, values = loaded or _loaded(book, sheet)
        start = ws.start or (0, 0)
    except Exception as exc:
        detail = " ".join(str(exc).split())[:200]
        raise IntakeError(f"Sheet '{sheet}' of '{Path(path).name}' cannot be read ({detail}). "
                          "The file is damaged: open it in your spreadsheet and save it again.",
                          sheet=sheet) from None
    if not values:
        raise IntakeError(f"Sheet '{sheet}' of '{Path(path).name}' is empty. Put the sales "
                          "there with a header row, or name another sheet.", sheet=sheet)
    facts = _SheetFacts()
    if Path(path).suffix.lower() in (".xlsx", ".xlsm"):
        # calamine hands an error cell over as a blank; the XML says where (a sheet with
        # no error cell has no t="e" in it, and is not scanned for them)
        facts = _xlsx_facts(path, sheet)
        _restore_error_cells(values, facts.errors, start)
    table = table_from_values(values, header_row=start[0] + 1, sheet=sheet,
                              first_column=start[1] + 1, header_at=header_row)
    return _with_facts(table, values, start, facts)


def _loaded(book, name: str):
    """(sheet, its values) of one sheet of a calamine workbook."""
    ws = book.get_sheet_by_name(name)
    return ws, ws.to_python(skip_empty_area=True)


def _first_table_sheet(book, names: list[str]):
    """The first sheet whose header row is words (a cover or notes sheet before the sales is
    passed over), the first sheet when none is; with (sheet, values) of it when it was
    read (None when it must be read again)."""
    from plumbrule.intake.table import find_header, padded
    for name in names:
        try:
            loaded = _loaded(book, name)
        except Exception:      # an unreadable sheet is not the sales; the first one says why
            continue
        values = loaded[1]
        if not values or len(values) < 2:
            continue
        block = padded(values[:60])
        row = [v for v in block[find_header(block)] if v is not None and v != ""]
        if len(row) >= 2 and all(isinstance(v, str) for v in row):
            return name, loaded
    return names[0], None


def hidden_rows_log(table: SheetTable) -> pd.DataFrame:
    """One record per sheet row of the table hidden or filtered out in the sheet (the
    screening log's columns; rule 'hidden row'), for a caller that sets them aside."""
    from plumbrule.screening import LOG_COLUMNS   # here: screening imports the settings
    rows = np.intersect1d(np.asarray(table.hidden_rows, dtype=np.int64),
                          table.frame.index.to_numpy(dtype=np.int64))
    return pd.DataFrame({"row": rows, "column": pd.Series([""] * len(rows), dtype=object),
                         "value": np.full(len(rows), np.nan), "rule": "hidden row",
                         "limit": np.full(len(rows), np.nan),
                         "reason": "hidden or filtered out in the sheet"})[LOG_COLUMNS]


@dataclass(frozen=True)
class _SheetFacts:
    """What the sheet XML says beyond calamine's values: error cells (sheet row, column
    number, error text), hidden sheet rows, and formula cells with no saved result
    (sheet row, column number)."""

    errors: tuple = ()
    hidden: tuple = ()
    unsaved: tuple = ()


def _with_facts(table: SheetTable, values: list, start, facts: _SheetFacts) -> SheetTable:
    """The table with its hidden body rows and the headers of unsaved-formula columns."""
    if not facts.hidden and not facts.unsaved:
        return table
    body = table.frame.index.to_numpy(dtype=np.int64)
    hidden = np.intersect1d(np.asarray(facts.hidden, dtype=np.int64), body)
    cells = np.asarray(facts.unsaved, dtype=np.int64).reshape(-1, 2)
    cols = np.unique(cells[np.isin(cells[:, 0], body), 1])
    head = values[table.header_row - 1 - start[0]]
    names = []
    for c in cols:                          # distinct columns, not cells
        j = int(c) - 1 - start[1]
        name = _header_text(head[j]) if 0 <= j < len(head) else ""
        if name in table.frame.columns:
            names.append(name)
    return replace(table, hidden_rows=tuple(int(r) for r in hidden),
                   unsaved_formula_columns=tuple(names))


def _restore_error_cells(values: list, errors, start) -> None:
    """Put error values back where calamine handed over blanks, so the dropped-row log
    says '#N/A' rather than 'blank'."""
    for row, col, text in errors:
        i, j = row - 1 - start[0], col - 1 - start[1]
        if 0 <= i < len(values) and 0 <= j < len(values[i]) and is_blank(values[i][j]):
            values[i][j] = text


def _xlsx_error_cells(path, sheet: str) -> list[tuple[int, int, str]]:
    """(sheet row, column number, error text) of each error cell of ``sheet``, read from
    the workbook's XML; [] when there are none or the parts cannot be found."""
    return list(_xlsx_facts(path, sheet).errors)


# One scan of the sheet XML finds what calamine does not hand over: a hidden row, an error
# cell (t="e") with its text, a formula cell whose saved value is missing or empty. Only the
# parts the XML can hold are searched for (a sheet saved by a spreadsheet program has no
# formula without a value), so a plain sheet is not scanned at all.
_CELL_REF = r'<c\b(?=[^>]*\br="([A-Z]{1,3})(\d+)")'
_FACT_PARTS = {
    "hidden": (r'<row\b(?=[^>]*\bhidden="(?:1|true)")[^>]*?\br="(\d+)"[^>]*>', 1),
    "error": (_CELL_REF + r'(?=[^>]*\bt="e")[^>]*>(?:(?!</c>).)*?<v>([^<]*)</v>', 3),
    "unsaved": (_CELL_REF + r'[^>]*>\s*<f\b[^>]*(?:/>|>[^<]*</f>)\s*(?:<v\s*/>|<v>\s*</v>)?'
                r'\s*</c>', 2),
}
_FACT_MARKS = {"hidden": ('hidden="',), "error": ('t="e"',),
               "unsaved": ("<v />", "<v/>", "<v></v>", "</f></c>", "/></c>")}


def _column_numbers(letters: np.ndarray) -> np.ndarray:
    """Sheet column letters → numbers (A = 1), worked out once per distinct column."""
    codes, uniq = pd.factorize(letters)
    nums = np.array([sum((ord(ch) - 64) * 26 ** k for k, ch in enumerate(reversed(u)))
                     for u in uniq], dtype=np.int64)      # distinct columns: a handful
    return nums[codes] if len(uniq) else np.zeros(0, dtype=np.int64)


def _xlsx_facts(path, sheet: str, with_errors: bool = True) -> _SheetFacts:
    """Error cells (unless ``with_errors`` is False), hidden rows and unsaved formula cells of
    ``sheet`` from the workbook's XML; empty when there are none or the parts cannot be
    found."""
    import zipfile
    from defusedxml import ElementTree
    from plumbrule.intake.zipcheck import check_members
    try:
        with zipfile.ZipFile(path) as z:
            check_members(z.infolist(), Path(path).name)
            ns = {"m": "http://schemas.openxmlformats.org/spreadsheetml/2006/main",
                  "r": "http://schemas.openxmlformats.org/officeDocument/2006/relationships"}
            book = ElementTree.fromstring(z.read("xl/workbook.xml"))
            rid = next((el.get(f"{{{ns['r']}}}id") for el in book.iterfind("m:sheets/m:sheet", ns)
                        if el.get("name") == sheet), None)
            rels = ElementTree.fromstring(z.read("xl/_rels/workbook.xml.rels"))
            target = next((el.get("Target") for el in rels if el.get("Id") == rid), None)
            if target is None:
                return _SheetFacts()
            part = target.lstrip("/") if target.startswith("/") else "xl/" + target
            part_bytes = z.read(part)
    except WorkbookError:
        raise
    except Exception:   # the values are still read; only the reason text is less precise
        return _SheetFacts()
    # the marks are searched for in the bytes: the text is decoded only to be scanned
    kinds = [k for k, marks in _FACT_MARKS.items()
             if (with_errors or k != "error")
             and any(m.encode() in part_bytes for m in marks)]
    if not kinds:
        return _SheetFacts()
    xml = part_bytes.decode("utf-8", errors="replace")
    pattern = "|".join(_FACT_PARTS[k][0] for k in kinds)
    hits = re.findall(pattern, xml, flags=re.S)         # one scan; a group left out is ''
    if not hits:
        return _SheetFacts()
    g = np.array(hits, dtype=object).reshape(len(hits), -1)
    found, at = {}, 0
    for k in kinds:                                     # the three kinds, not the hits
        width = _FACT_PARTS[k][1]
        part = g[:, at:at + width]
        found[k] = part[part[:, 0] != ""]
        at += width
    hidden = found["hidden"][:, 0].astype(np.int64).tolist() if "hidden" in found else []
    errors, unsaved = [], []
    if "error" in found and len(found["error"]):
        e = found["error"]
        errors = list(zip(e[:, 1].astype(np.int64).tolist(),
                          _column_numbers(e[:, 0]).tolist(), e[:, 2].tolist(), strict=True))
    if "unsaved" in found and len(found["unsaved"]):
        f = found["unsaved"]
        unsaved = list(zip(f[:, 1].astype(np.int64).tolist(),
                           _column_numbers(f[:, 0]).tolist(), strict=True))
    return _SheetFacts(tuple(errors), tuple(hidden), tuple(unsaved))

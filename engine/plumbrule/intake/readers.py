"""Reading CSV and xlsx files into a :class:`SheetTable`, error cells kept as their text.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from plumbrule.errors import IntakeError, quote_list
from plumbrule.intake.cells import is_blank
from plumbrule.intake.table import SheetTable, table_from_values


def read_table(path: str | Path, sheet: str | None = None) -> SheetTable:
    """Read a .csv or .xlsx/.xlsm file (first sheet unless ``sheet``)."""
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
        return read_csv(path)
    if suffix in (".xlsx", ".xlsm", ".xls", ".ods"):
        return read_sheet(path, sheet)
    raise IntakeError(f"File '{path.name}' is not .csv or .xlsx. Save the sales as one of those.")


def read_csv(path: str | Path) -> SheetTable:
    """CSV cells come in as text so they are parsed exactly as a sheet's would be.
    Record i (header = 1) is sheet row i; blank lines count as rows."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise IntakeError(f"File '{path.name}' cannot be opened ({exc.strerror}). "
                          "Check that it exists and is readable.") from None
    for encoding in ("utf-8-sig", "cp1252"):   # Excel on Windows often saves "CSV" as cp1252
        try:
            text = raw.decode(encoding)
            break
        except UnicodeDecodeError:
            continue
    else:
        raise IntakeError(f"File '{path.name}' is not text. Save the sales as UTF-8 CSV "
                          "with a header row.")
    if not text.strip():
        raise IntakeError(f"File '{path.name}' is empty. Save the sales with a header row.")
    first = text.split("\n", 1)[0]
    sep = ";" if first.count(";") > first.count(",") else ","
    import io
    try:
        frame = pd.read_csv(io.StringIO(text), header=None, dtype=object, sep=sep,
                            keep_default_na=False, na_values=[], skip_blank_lines=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
        detail = " ".join(str(exc).split())
        raise IntakeError(f"File '{path.name}' cannot be read as CSV ({detail}). "
                          "Save it as CSV with one header row and the same number of "
                          "cells on every line.") from None
    return table_from_values(frame.to_numpy(dtype=object), header_row=1, sheet=None)


def read_sheet(path: str | Path, sheet: str | None = None) -> SheetTable:
    """One worksheet through python-calamine (fast); the first non-empty row is the header.
    Calamine hands over error cells as blanks; for .xlsx/.xlsm their error text is put
    back from the sheet's XML (for .xls/.ods they are logged as 'blank')."""
    from python_calamine import CalamineWorkbook
    try:
        book = CalamineWorkbook.from_path(str(path))
        names = list(book.sheet_names)
    except Exception as exc:  # calamine raises its own types for damaged files
        detail = " ".join(str(exc).split())[:200]
        raise IntakeError(f"File '{Path(path).name}' cannot be read as a workbook ({detail}). "
                          "Open it in the spreadsheet and save it again as .xlsx.") from None
    if not names:
        raise IntakeError(f"Workbook '{Path(path).name}' has no worksheets.")
    if sheet is None:
        sheet = names[0]
    elif sheet not in names:
        folded = [n for n in names if n.casefold() == str(sheet).strip().casefold()]
        if len(folded) != 1:
            raise IntakeError(f"Workbook '{Path(path).name}' has no sheet '{sheet}'. Sheets: "
                              f"{quote_list(names)}.", sheet=sheet)
        sheet = folded[0]
    try:
        ws = book.get_sheet_by_name(sheet)
        values = ws.to_python(skip_empty_area=True)
        start = ws.start or (0, 0)
    except Exception as exc:
        detail = " ".join(str(exc).split())[:200]
        raise IntakeError(f"Sheet '{sheet}' of '{Path(path).name}' cannot be read ({detail}).",
                          sheet=sheet) from None
    if not values:
        raise IntakeError(f"Sheet '{sheet}' of '{Path(path).name}' is empty. Put the sales "
                          "there with a header row, or name another sheet.", sheet=sheet)
    if Path(path).suffix.lower() in (".xlsx", ".xlsm"):
        _restore_error_cells(values, _xlsx_error_cells(path, sheet), start)
    return table_from_values(values, header_row=start[0] + 1, sheet=sheet,
                             first_column=start[1] + 1)


def _restore_error_cells(values: list, errors: list, start) -> None:
    """Put error values back where calamine handed over blanks, so the dropped-row log
    says '#N/A' rather than 'blank'."""
    for row, col, text in errors:
        i, j = row - 1 - start[0], col - 1 - start[1]
        if 0 <= i < len(values) and 0 <= j < len(values[i]) and is_blank(values[i][j]):
            values[i][j] = text


def _xlsx_error_cells(path, sheet: str) -> list[tuple[int, int, str]]:
    """(sheet row, column number, error text) of each error cell of ``sheet``, read from
    the workbook's XML; [] when there are none or the parts cannot be found."""
    import re
    import zipfile
    from defusedxml import ElementTree
    try:
        with zipfile.ZipFile(path) as z:
            ns = {"m": "http://schemas.openxmlformats.org/spreadsheetml/2006/main",
                  "r": "http://schemas.openxmlformats.org/officeDocument/2006/relationships"}
            book = ElementTree.fromstring(z.read("xl/workbook.xml"))
            rid = next((el.get(f"{{{ns['r']}}}id") for el in book.iterfind("m:sheets/m:sheet", ns)
                        if el.get("name") == sheet), None)
            rels = ElementTree.fromstring(z.read("xl/_rels/workbook.xml.rels"))
            target = next((el.get("Target") for el in rels if el.get("Id") == rid), None)
            if target is None:
                return []
            part = target.lstrip("/") if target.startswith("/") else "xl/" + target
            xml = z.read(part).decode("utf-8", errors="replace")
    except Exception:   # the values are still read; only the reason text is less precise
        return []
    if 't="e"' not in xml:
        return []
    out = []
    for attrs, body in re.findall(r'<c\b([^>]*\bt="e"[^>]*)>(.*?)</c>', xml, flags=re.S):
        ref = re.search(r'\br="([A-Z]+)(\d+)"', attrs)
        val = re.search(r"<v>([^<]*)</v>", body)
        if ref and val:
            letters, row = ref.groups()
            col = 0
            for ch in letters:
                col = col * 26 + ord(ch) - 64
            out.append((int(row), col, val.group(1)))
    return out

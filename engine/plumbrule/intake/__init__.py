"""Sheet values → a clean typed table, plus a log of the rows dropped.

Input is what a spreadsheet or a CSV hands over: a 2-D block whose first row is
the header. Cells may be numbers, numbers stored as text ("$350,000", "12.5%",
"(1,200)"), text, blanks, booleans, dates or spreadsheet error values. Rows keep
the sheet's row numbers as the index everywhere downstream.

Validation happens here, once: the numeric code after this trusts its input.

Decisions a user relies on:

- Headers are trimmed (inner runs of spaces and line breaks become one space).
- Trailing fully blank rows are an over-wide selection and are not kept; a fully
  blank row *inside* the block is kept, and :func:`clean` drops and logs it as
  "empty row", so nothing disappears silently.
- In a numeric column TRUE/FALSE (cells or text) read as 1/0, so a yes/no
  feature can enter the model directly.
- A date column takes date cells, spreadsheet serial numbers (1900 date system,
  also as text) and ISO text (YYYY-MM-DD).
"""

from __future__ import annotations

import datetime as _dt
import numbers
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError, quote_list

ERROR_TEXTS = frozenset({
    "#N/A", "#VALUE!", "#DIV/0!", "#REF!", "#NAME?", "#NUM!", "#NULL!", "#SPILL!",
    "#CALC!", "#GETTING_DATA", "#FIELD!", "#BLOCKED!", "#CONNECT!", "#BUSY!", "#UNKNOWN!",
})
# What a COM bridge passes for an error cell (xlwings on Windows): 0x800A07xx codes.
COM_ERROR_CODES = {
    -2146826281: "#DIV/0!", -2146826246: "#N/A", -2146826259: "#NAME?",
    -2146826288: "#NULL!", -2146826252: "#NUM!", -2146826265: "#REF!",
    -2146826273: "#VALUE!",
}
_EXCEL_EPOCH = pd.Timestamp("1899-12-30")   # serial 61 = 1900-03-01 in the 1900 date system
_MAX_SERIAL = 2958466                       # 9999-12-31 is serial 2958465
# The span datetime64[ns] can hold; a sale date outside it is a typing error.
_EARLIEST, _LATEST = pd.Timestamp("1677-09-22"), pd.Timestamp("2262-04-11")
# A number as typed: optional sign, currency, grouped or plain digits, decimals,
# exponent, percent. Parentheses (accounting negatives) are peeled off first.
_NUMBER_RE = (r"^(?P<s1>[-+])?\s*(?P<cur>[$€£¥])?\s*(?P<s2>[-+])?\s*"
              r"(?P<num>(?:\d{1,3}(?:,\d{3})+|\d+)(?:\.\d*)?(?:[eE][-+]?\d+)?"
              r"|\.\d+(?:[eE][-+]?\d+)?)\s*(?P<pct>%)?$")
_SHOWN_TEXT = 60     # longest cell text quoted back in a message

# Cell kinds, decided once per Python type (a column holds few distinct types).
BLANK, TEXT, NUMBER, BOOL, DATE, OTHER = "blank", "text", "number", "bool", "date", "other"


@dataclass(frozen=True)
class SheetTable:
    """A block of cells with a header: ``frame`` holds the raw cell values
    (object dtype), columns are the trimmed headers, the index is sheet rows.
    ``first_column`` is the sheet column number (A = 1) of the block's first
    column, so messages can give column letters."""

    frame: pd.DataFrame
    sheet: str | None = None
    header_row: int = 1
    first_column: int = 1

    @property
    def columns(self) -> list[str]:
        return list(self.frame.columns)


@dataclass(frozen=True)
class CleanData:
    """The used columns, typed (float / text / datetime64), only complete rows;
    ``dropped`` lists each dropped sheet row with the column and the reason."""

    data: pd.DataFrame
    dropped: pd.DataFrame


# --- building a table -----------------------------------------------------

def table_from_values(values: Sequence[Sequence[Any]], header_row: int = 1,
                      sheet: str | None = None, first_column: int = 1) -> SheetTable:
    """A 2-D block (rows of cells, header first) → :class:`SheetTable`.
    Row i of the block (0 = header) is sheet row ``header_row + i``."""
    if isinstance(values, np.ndarray):
        values = values.tolist()
    rows = [list(r) if isinstance(r, (list, tuple)) else [r] for r in (values or [])]
    if not rows or not max(len(r) for r in rows):
        raise IntakeError("The sales block is empty. Select the table including its header row.")
    width = max(len(r) for r in rows)
    block = np.empty((len(rows), width), dtype=object)
    block[:] = None
    for i, r in enumerate(rows):       # rows of the block, not cells: one slice each
        block[i, :len(r)] = r
    body = pd.DataFrame(block[1:], columns=range(width), dtype=object)
    return _with_header(list(block[0]), body, header_row, sheet, first_column)


def table_from_frame(frame: pd.DataFrame, header_row: int = 1,
                     sheet: str | None = None, first_column: int = 1) -> SheetTable:
    """A DataFrame whose columns are the headers → :class:`SheetTable`.
    Row i of the frame is sheet row header_row + 1 + i (the frame's index is ignored)."""
    headers = list(frame.columns)
    cols = {}
    for j in range(frame.shape[1]):
        c = frame.iloc[:, j]
        # Plain numpy numbers, booleans and dates keep their fast dtype; anything
        # else (nullable, categorical, string dtypes) becomes plain cells.
        keep = isinstance(c.dtype, np.dtype) and c.dtype.kind in "fiubM"
        cols[j] = c.to_numpy() if keep else c.astype(object).to_numpy()
    body = pd.DataFrame(cols, index=pd.RangeIndex(len(frame)), copy=False)  # views, no copy
    return _with_header(headers, body, header_row, sheet, first_column)


def column_letter(number: int) -> str:
    """1 → 'A', 27 → 'AA' (sheet column letters)."""
    out = ""
    while number > 0:
        number, rem = divmod(number - 1, 26)
        out = chr(65 + rem) + out
    return out


def _header_text(h: Any) -> str:
    if _blank_scalar(h):
        return ""
    if isinstance(h, float) and h.is_integer():
        h = int(h)
    elif isinstance(h, _dt.datetime) and h == pd.Timestamp(h).normalize():
        h = h.date()
    if isinstance(h, _dt.date):
        h = h.isoformat()
    return " ".join(str(h).split())


def _with_header(headers: list[Any], body: pd.DataFrame, header_row: int,
                 sheet: str | None, first_column: int = 1) -> SheetTable:
    body.index = pd.RangeIndex(header_row + 1, header_row + 1 + len(body), name="row")
    names = [_header_text(h) for h in headers]
    blank_cells = _blank_frame(body) if len(body) else None
    # Columns with no header and no values are just an over-wide selection.
    keep = [j for j, nm in enumerate(names)
            if nm or (blank_cells is not None and not blank_cells[j].all())]
    names = [names[j] for j in keep]
    body = body[keep]
    letter = [column_letter(first_column + j) for j in keep]
    blank = [letter[pos] for pos, nm in enumerate(names) if not nm]
    if blank:
        which = "column " + blank[0] if len(blank) == 1 else "columns " + ", ".join(blank)
        raise IntakeError(f"Header row (sheet row {header_row}): {which} "
                          f"{'has' if len(blank) == 1 else 'have'} no name but "
                          f"{'holds' if len(blank) == 1 else 'hold'} values. Give every column "
                          "a header.", row=header_row)
    seen: dict[str, list[str]] = {}
    for pos, nm in enumerate(names):
        seen.setdefault(nm, []).append(letter[pos])
    dups = {nm: cols for nm, cols in seen.items() if len(cols) > 1}
    if dups:
        where = "; ".join(f"'{nm}' in columns {', '.join(cols[:-1])} and {cols[-1]}"
                          for nm, cols in dups.items())
        raise IntakeError(f"Header row (sheet row {header_row}): the same name appears more than "
                          f"once ({where}). Give each column its own name.",
                          column=next(iter(dups)), row=header_row)
    body.columns = names
    if len(body):
        filled = ~blank_cells[keep].all(axis=1).to_numpy()
        # Rows after the last filled one are an over-wide selection, not sales.
        last = int(np.flatnonzero(filled)[-1]) + 1 if filled.any() else 0
        body = body.iloc[:last]
    return SheetTable(frame=body, sheet=sheet, header_row=header_row, first_column=first_column)


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
        if 0 <= i < len(values) and 0 <= j < len(values[i]) and _blank_scalar(values[i][j]):
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


# --- cleaning the used columns -----------------------------------------------

def clean(table: SheetTable, numeric: Iterable[str] = (), categorical: Iterable[str] = (),
          date: str | None = None, hint_categorical: Iterable[str] = ()) -> CleanData:
    """Type the used columns; drop (and log) rows with a missing value in any.

    ``hint_categorical`` names numeric predictor columns whose "not a number"
    message should suggest the ``categorical`` setting. Raises
    :class:`IntakeError` for a cell that cannot be what its column needs.
    """
    numeric, categorical = list(dict.fromkeys(numeric)), list(dict.fromkeys(categorical))
    frame = table.frame
    wanted = numeric + categorical + ([date] if date is not None else [])
    missing = [c for c in dict.fromkeys(wanted) if c not in frame.columns]
    if missing:
        raise IntakeError(f"The sales table has no column {quote_list(missing)}. Columns are: "
                          f"{quote_list(list(frame.columns)[:12])}.", column=missing[0])
    hints = set(hint_categorical)
    typed: dict[str, pd.Series] = {}
    reasons: dict[str, pd.Series] = {}
    for col in numeric:
        typed[col], reasons[col] = to_numbers(frame[col], col, hint_categorical=col in hints)
    for col in categorical:
        typed[col], reasons[col] = to_labels(frame[col], col)
    if date is not None:
        typed[date], reasons[date] = to_dates(frame[date], date)
    order = list(typed)
    if not order:
        return CleanData(pd.DataFrame(index=frame.index), _empty_log())
    data = pd.DataFrame(typed, index=frame.index, copy=False)[order]
    masks = {c: r.notna().to_numpy() for c, r in reasons.items()}
    if not any(m.any() for m in masks.values()):      # the usual case: nothing to log
        return CleanData(data, _empty_log())
    why = pd.DataFrame(reasons, index=frame.index, copy=False)[order]
    bad = np.column_stack([masks[c] for c in order])
    any_bad = bad.any(axis=1)
    sub, sub_bad = why[any_bad], bad[any_bad]
    first = sub_bad.argmax(axis=1)
    cols = np.array(order, dtype=object)[first]
    text = sub.to_numpy(dtype=object)[np.arange(len(sub)), first].astype(str)
    also = sub_bad.sum(axis=1) - 1
    text = np.where(also > 0, np.char.add(np.char.add(text, " (and "),
                                          np.char.add(also.astype(str), " more missing)")), text)
    empty = _blank_frame(frame[any_bad]).all(axis=1).to_numpy()
    text = np.where(empty, "empty row", text)
    cols = np.where(empty, "", cols)
    dropped = pd.DataFrame({"row": sub.index.to_numpy(dtype=np.int64),
                            "column": pd.Series(cols, dtype=object).to_numpy(),
                            "reason": pd.Series(text, dtype=object).to_numpy()})
    return CleanData(data[~any_bad], dropped)


def _empty_log() -> pd.DataFrame:
    return pd.DataFrame({"row": pd.Series(dtype=np.int64), "column": pd.Series(dtype=object),
                         "reason": pd.Series(dtype=object)})


def _blank_scalar(v: Any) -> bool:
    if v is None or v is pd.NaT or v is pd.NA:
        return True
    if isinstance(v, (float, np.floating)):
        return bool(v != v)
    return isinstance(v, str) and not v.strip()


def _kind_of_type(t: type) -> str:
    if t is type(None) or t is type(pd.NaT) or t is type(pd.NA):
        return BLANK
    if issubclass(t, str):
        return TEXT
    if issubclass(t, (bool, np.bool_)):
        return BOOL
    if issubclass(t, (_dt.date, np.datetime64)):
        return DATE
    if issubclass(t, numbers.Real):
        return NUMBER
    return OTHER


_KINDS = [BLANK, TEXT, NUMBER, BOOL, DATE, OTHER]


def _kind_series(codes, index) -> pd.Series:
    # Categorical: comparing a million kinds to one is a cheap integer comparison.
    return pd.Series(pd.Categorical.from_codes(np.asarray(codes, dtype=np.int8), _KINDS),
                     index=index)


def cell_kinds(col: pd.Series) -> pd.Series:
    """The kind of each cell (blank, text, number, bool, date, other) by its type."""
    kind = col.dtype.kind if isinstance(col.dtype, np.dtype) else "O"
    fixed = {"f": NUMBER, "i": NUMBER, "u": NUMBER, "b": BOOL, "M": DATE}.get(kind)
    if fixed is not None:
        return _kind_series(np.full(len(col), _KINDS.index(fixed)), col.index)
    # One C-level pass usually settles it; mixed columns are classified per type.
    inferred = pd.api.types.infer_dtype(col, skipna=False)
    fixed = {"string": TEXT, "floating": NUMBER, "integer": NUMBER,
             "mixed-integer-float": NUMBER, "boolean": BOOL}.get(inferred)
    if fixed is not None and (fixed == NUMBER or not col.isna().any()):
        return _kind_series(np.full(len(col), _KINDS.index(fixed)), col.index)
    types = col.map(type)
    lookup = {t: _KINDS.index(_kind_of_type(t)) for t in pd.unique(types.to_numpy())}
    return _kind_series(types.map(lookup).to_numpy(), col.index)


def on_uniques(text: pd.Series, fn, skip_numbers: bool = False) -> pd.Series:
    """``fn`` (Series of distinct strings → Series) applied once per distinct value and
    spread back over ``text``. Sales columns repeat values (neighbourhoods, dates), and
    pandas string methods cost per element. With ``skip_numbers`` plain numbers (which
    are neither blank nor an error) get NaN without being looked at."""
    codes, uniq = pd.factorize(text.to_numpy(dtype=object))
    u = pd.Series(uniq, dtype=object)
    if skip_numbers:
        plain = np.isfinite(pd.to_numeric(u, errors="coerce").to_numpy(dtype=float))
        res = pd.Series(np.nan, index=u.index, dtype=object)
        if (~plain).any():
            res[~plain] = fn(u[~plain]).to_numpy(dtype=object)
    else:
        res = fn(u)
    return pd.Series(res.to_numpy(dtype=object)[codes], index=text.index)


def _blank_mask(col: pd.Series, kinds: pd.Series | None = None) -> pd.Series:
    if isinstance(col.dtype, np.dtype) and col.dtype.kind in "fiubM":
        return col.isna()
    kinds = cell_kinds(col) if kinds is None else kinds
    out = col.isna() | kinds.eq(BLANK)
    text = kinds.eq(TEXT)
    if text.any():
        blank = on_uniques(col[text], lambda u: u.astype(str).str.strip().eq(""),
                           skip_numbers=True)
        out[text] = out[text].to_numpy() | blank.eq(True).to_numpy()
    return out


def _blank_frame(frame: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame({c: _blank_mask(frame[c]).to_numpy() for c in frame.columns},
                        index=frame.index)


def _numbers_of(cells: pd.Series) -> pd.Series:
    """Number cells (int, float, numpy, Decimal) → floats; huge ints become ±inf."""
    try:
        return pd.to_numeric(cells, errors="coerce").astype(float)
    except (OverflowError, TypeError, ValueError):
        def _one(v):   # rare path only: integers beyond float range
            try:
                return float(v)
            except OverflowError:
                return float("inf") if v > 0 else float("-inf")
        return cells.map(_one).astype(float)


def _error_names(col: pd.Series, kinds: pd.Series) -> pd.Series:
    """The error value's name where a cell holds one ('#N/A', '#DIV/0! (code …)'), else NaN."""
    out = pd.Series(np.nan, index=col.index, dtype=object)
    text = kinds.eq(TEXT)
    if text.any():
        def names(u: pd.Series) -> pd.Series:
            t = u.astype(str).str.strip().str.upper()
            hit = t.isin(ERROR_TEXTS) | t.str.fullmatch(r"ERR:\d+")
            return t.str.replace("ERR:", "Err:", regex=False).where(hit)
        found = on_uniques(col[text], names, skip_numbers=True)
        hit = found.notna().to_numpy()
        out[found.index[hit]] = found[hit].to_numpy()
    num = kinds.eq(NUMBER)
    if num.any():
        vals = _numbers_of(col[num])
        hit = vals.isin(list(COM_ERROR_CODES)).to_numpy()
        if hit.any():
            codes = vals[hit].astype(np.int64)
            out[codes.index] = (codes.map(COM_ERROR_CODES) + " (code " + codes.astype(str)
                                + ")").to_numpy()
    return out


def _missing_reasons(col: pd.Series, kinds: pd.Series) -> tuple[pd.Series, pd.Series]:
    """(reason per cell or NaN, mask of cells that hold a value)."""
    blank = _blank_mask(col, kinds)
    err = _error_names(col, kinds)
    reason = pd.Series(np.nan, index=col.index, dtype=object)
    reason[blank] = "blank"
    has_err = err.notna() & ~blank
    reason[has_err] = "error value " + err[has_err]
    return reason, ~(blank | has_err)


def _shown(cell: Any) -> str:
    """A cell as a message quotes it."""
    if isinstance(cell, (_dt.date, np.datetime64)):
        return f"a date ({pd.Timestamp(cell).date()})"
    if isinstance(cell, (str, numbers.Real)):
        text = " ".join(str(cell).split())
        if not text.isprintable() or not text:   # show invisible characters as escapes
            text = str(cell).encode("unicode_escape").decode("ascii")
        return "'" + (text if len(text) <= _SHOWN_TEXT else text[:_SHOWN_TEXT] + "...") + "'"
    return f"a {type(cell).__name__} value"


def _raise_first(bad: pd.Series, col: pd.Series, message: str, name: str) -> None:
    row = bad.idxmax()
    raise IntakeError(f"Column '{name}', row {row}: {_shown(col[row])} {message}",
                      column=name, row=int(row))


def to_numbers(col: pd.Series, name: str, hint_categorical: bool = False
               ) -> tuple[pd.Series, pd.Series]:
    """Cells → floats; returns (values, missing reason per cell or NaN)."""
    if isinstance(col.dtype, np.dtype) and col.dtype.kind in "fiu":
        return _plain_numbers(col, name)
    kinds = cell_kinds(col)
    reason, present = _missing_reasons(col, kinds)
    values = pd.Series(np.nan, index=col.index, dtype=float)
    num = present & kinds.eq(NUMBER)
    if num.any():
        values[num] = _numbers_of(col[num]).to_numpy()
    boo = present & kinds.eq(BOOL)
    if boo.any():
        values[boo] = col[boo].astype(bool).astype(float).to_numpy()
    text = present & kinds.eq(TEXT)
    if text.any():
        values[text] = parse_number_text(col[text]).to_numpy()
    ok = np.isfinite(values.to_numpy())
    infinite = present & num & ~ok
    if infinite.any():
        _raise_first(infinite, col, "is not a finite number. Enter a number or leave the cell "
                     "blank.", name)
    bad = present & ~ok
    if bad.any():
        fix = "Enter a number or leave the cell blank."
        row = bad.idxmax()
        cell = col[row]
        # A word ('Hilltop') or a column that is mostly words looks like categories;
        # 'approx 1200' in a column of numbers is a mistyped number.
        looks_like_labels = isinstance(cell, str) and any(ch.isalpha() for ch in cell) and (
            not any(ch.isdigit() for ch in cell) or bad.sum() >= 0.5 * present.sum())
        if hint_categorical and looks_like_labels:
            fix = (f"Enter a number or leave the cell blank; if '{name}' holds categories "
                   "(names or codes), list it under the 'categorical' setting.")
        _raise_first(bad, col, "is not a number. " + fix, name)
    return values, reason


def _plain_numbers(col: pd.Series, name: str) -> tuple[pd.Series, pd.Series]:
    """Fast path of :func:`to_numbers` for a column already typed as numbers
    (a DataFrame handed over by a script): the same rules, whole-array operations.
    NaN is a blank; a COM error code is an error value; ±inf is an error."""
    v = col.to_numpy(dtype=float)
    finite = np.isfinite(v)
    if finite.all() and not v.min(initial=0.0) < -2e9:
        # Nothing missing, no COM error codes (all below -2e9): the usual scripted
        # frame. A read-only all-NaN view says "no reason" without filling n cells.
        reason = pd.Series(np.broadcast_to(np.float64(np.nan), v.shape), index=col.index,
                           copy=False)
        return pd.Series(v, index=col.index, copy=False), reason
    blank = np.isnan(v)
    codes = np.isin(v, list(COM_ERROR_CODES)) if (v < -2e9).any() else None
    has_codes = codes is not None and bool(codes.any())
    reason = pd.Series(np.nan, index=col.index,
                       dtype=object if blank.any() or has_codes else float)
    if blank.any():
        reason[blank] = "blank"
    if has_codes:
        c = v[codes].astype(np.int64)
        reason[codes] = [f"error value {COM_ERROR_CODES[k]} (code {k})" for k in c]
        v = np.where(codes, np.nan, v)
    infinite = np.isinf(v)
    if infinite.any():
        _raise_first(pd.Series(infinite, index=col.index), col, "is not a finite number. "
                     "Enter a number or leave the cell blank.", name)
    return pd.Series(v, index=col.index, copy=False), reason


def parse_number_text(text: pd.Series) -> pd.Series:
    """Numbers as a user types them: '1,250', '$350,000', ' 12.5 ', '12.5%', '(1,200)',
    '-$5', '+5', 'TRUE'/'FALSE' (1/0). Returns floats, NaN where the text is not a
    number in one of these forms."""
    # Fast path, on the raw cells: plain numbers ('1250', ' 12.5 ', '1e3'); anything odd
    # goes through the rules, once per distinct text.
    fast = pd.to_numeric(text.to_numpy(dtype=object), errors="coerce")
    fast = pd.Series(np.asarray(fast, dtype=float), index=text.index)
    done = np.isfinite(fast.to_numpy())
    if done.all():
        return fast
    out = fast.where(done)
    out[~done] = on_uniques(text[~done], _parse_formatted).to_numpy(dtype=float)
    return out.astype(float)


def _parse_formatted(text: pd.Series) -> pd.Series:
    """The rules of :func:`parse_number_text` for text that is not a plain number."""
    rest = (text.astype(str).str.strip().str.replace("\u2212", "-", regex=False)
            .str.replace("\u00a0", " ", regex=False))
    paren = rest.str.fullmatch(r"\(.*\)").fillna(False).astype(bool)
    inner = rest.where(~paren, rest.str.slice(1, -1).str.strip())
    parts = inner.str.extract(_NUMBER_RE)
    s1, s2 = parts["s1"].fillna(""), parts["s2"].fillna("")
    signs = s1.str.len() + s2.str.len()
    num = pd.to_numeric(parts["num"].str.replace(",", "", regex=False), errors="coerce")
    num = num.astype(float).where(parts["pct"].isna(), num / 100.0)
    negative = paren | s1.eq("-") | s2.eq("-")
    num = num.where(~negative, -num)
    # '(-5)', '+-5' and '-$-5' are not something a user means.
    num = num.where(~((paren & (signs > 0)) | (signs > 1)))
    booleans = rest.str.upper().map({"TRUE": 1.0, "FALSE": 0.0}).astype(float)
    return num.fillna(booleans).astype(float)


def to_labels(col: pd.Series, name: str) -> tuple[pd.Series, pd.Series]:
    """Cells → category labels (text); 3.0 becomes '3', TRUE becomes 'TRUE',
    a date becomes YYYY-MM-DD. Text is trimmed; case is kept."""
    kinds = cell_kinds(col)
    reason, present = _missing_reasons(col, kinds)
    labels = pd.Series(np.nan, index=col.index, dtype=object)
    text = present & kinds.eq(TEXT)
    if text.any():
        labels[text] = on_uniques(col[text], lambda u: u.astype(str).str.split().str.join(" ")
                                  ).to_numpy()
    boo = present & kinds.eq(BOOL)
    if boo.any():
        labels[boo] = col[boo].astype(bool).map({True: "TRUE", False: "FALSE"}).to_numpy()
    num = present & kinds.eq(NUMBER)
    if num.any():
        nums = _numbers_of(col[num])
        whole = (np.isfinite(nums) & (nums == np.round(nums)) & (nums.abs() < 2 ** 53)).to_numpy()
        as_text = nums.astype(str).to_numpy(dtype=object)
        as_text[whole] = nums[whole].astype(np.int64).astype(str).to_numpy(dtype=object)
        labels[num] = as_text
    dates = present & kinds.eq(DATE)
    if dates.any():
        stamps = pd.to_datetime(col[dates], errors="coerce", utc=True)
        labels[dates] = stamps.dt.strftime("%Y-%m-%d").to_numpy(dtype=object)
    rest = present & labels.isna()
    if rest.any():
        labels[rest] = col[rest].astype(str).to_numpy()
    return labels, reason


def _serial_dates(serial: pd.Series) -> pd.Series:
    """Spreadsheet serial numbers → timestamps (NaT outside 1..9999-12-31).
    Serials below 60 are shifted a day: the 1900 system counts a 29 Feb 1900."""
    s = serial.astype(float)
    good = (s >= 1) & (s < _MAX_SERIAL) & ~((s >= 60) & (s < 61))
    s = s.where(good)
    s = s.where(s >= 61, s + 1)
    days = s.to_numpy()
    stamps = np.full(len(s), np.datetime64("NaT"), dtype="datetime64[ns]")
    ok = np.isfinite(days)
    # Serials span 1900..9999; datetime64[ns] ends in 2262, so compute in seconds first.
    secs = np.round(days[ok] * 86400.0).astype(np.int64)
    limit = (_LATEST - _EXCEL_EPOCH).total_seconds()
    fits = secs < limit
    idx = np.flatnonzero(ok)[fits]
    stamps[idx] = (np.datetime64(_EXCEL_EPOCH.to_datetime64(), "s")
                   + secs[fits].astype("timedelta64[s]")).astype("datetime64[ns]")
    return pd.Series(stamps, index=serial.index)


def to_dates(col: pd.Series, name: str) -> tuple[pd.Series, pd.Series]:
    """Cells → datetime64[ns]: date cells, spreadsheet serial numbers, or ISO text."""
    if isinstance(col.dtype, pd.DatetimeTZDtype):
        col = col.dt.tz_localize(None)
    if isinstance(col.dtype, np.dtype) and col.dtype.kind == "M":   # already dates
        values = col.astype("datetime64[ns]")
        return values, pd.Series("blank", index=col.index, dtype=object).where(values.isna())
    kinds = cell_kinds(col)
    reason, present = _missing_reasons(col, kinds)
    out = pd.Series(pd.NaT, index=col.index, dtype="datetime64[ns]")
    num = present & kinds.eq(NUMBER)
    if num.any():
        out[num] = _serial_dates(_numbers_of(col[num])).to_numpy()
    text = present & kinds.eq(TEXT)
    if text.any():
        def text_dates(u: pd.Series) -> pd.Series:
            t = u.astype(str).str.strip()
            serial = pd.to_numeric(t, errors="coerce")
            is_serial = serial.notna().to_numpy()
            got = pd.Series(pd.NaT, index=t.index, dtype="datetime64[ns]")
            if is_serial.any():
                got[is_serial] = _serial_dates(serial[is_serial]).to_numpy()
            if (~is_serial).any():
                got[~is_serial] = _iso_dates(t[~is_serial]).to_numpy()
            return got
        out[text] = pd.to_datetime(on_uniques(col[text], text_dates)).to_numpy(
            dtype="datetime64[ns]")
    dates = present & kinds.eq(DATE)
    if dates.any():
        out[dates] = _iso_dates(col[dates]).to_numpy()
    bad = present & out.isna()
    far = bad & kinds.eq(DATE)
    if far.any() and far.idxmax() == bad.idxmax():
        _raise_first(far, col, f"is outside the dates plumbrule can use ({_EARLIEST.date()} to "
                     f"{_LATEST.date()}). Correct the date.", name)
    if bad.any():
        _raise_first(bad, col, "is not a date. Enter a date cell or text as YYYY-MM-DD.", name)
    return out, reason


def _iso_dates(values: pd.Series) -> pd.Series:
    """Date objects or ISO text → naive datetime64[ns]; NaT where unusable."""
    try:
        if values.map(type).eq(str).all():
            parsed = pd.to_datetime(values, format="ISO8601", errors="coerce", utc=True)
        else:
            parsed = pd.to_datetime(values, errors="coerce", utc=True)
    except (ValueError, TypeError, OverflowError):
        return pd.Series(pd.NaT, index=values.index, dtype="datetime64[ns]")
    parsed = parsed.dt.tz_localize(None)
    inside = (parsed >= _EARLIEST) & (parsed <= _LATEST)
    return parsed.where(inside).astype("datetime64[ns]")

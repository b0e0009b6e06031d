"""Sheet values → a clean typed table, plus a log of the rows dropped.

Input is what a spreadsheet or a CSV hands over: a 2-D block whose first row is
the header. Cells may be numbers, numbers stored as text ("$350,000", "12.5%",
"(1,200)"), text, blanks, booleans, dates or spreadsheet error values. Rows keep
the sheet's row numbers as the index everywhere downstream.

Validation happens here, once: the numeric code after this trusts its input.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Sequence

import numpy as np
import pandas as pd

from .errors import IntakeError, quote_list

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
_EXCEL_EPOCH = pd.Timestamp("1899-12-30")   # serial 1 = 1900-01-01 in the 1900 date system
_NUMBER_TEXT = r"(?:\d{1,3}(?:,\d{3})+|\d+)?(?:\.\d+)?(?:[eE][-+]?\d+)?"


@dataclass(frozen=True)
class SheetTable:
    """A block of cells with a header: ``frame`` holds the raw cell values
    (object dtype), columns are the trimmed headers, the index is sheet rows."""

    frame: pd.DataFrame
    sheet: str | None = None
    header_row: int = 1

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
                      sheet: str | None = None) -> SheetTable:
    """A 2-D block (rows of cells, header first) → :class:`SheetTable`."""
    rows = [list(r) if isinstance(r, (list, tuple)) else [r] for r in (values or [])]
    if not rows:
        raise IntakeError("The sales block is empty. Select the table including its header row.")
    width = max(len(r) for r in rows)
    block = np.empty((len(rows), width), dtype=object)
    block[:] = None
    for i, r in enumerate(rows):       # rows of the block, not data rows: one slice each
        block[i, :len(r)] = r
    body = pd.DataFrame(block[1:], columns=range(width), dtype=object)
    return _with_header(list(block[0]), body, header_row, sheet)


def table_from_frame(frame: pd.DataFrame, header_row: int = 1,
                     sheet: str | None = None) -> SheetTable:
    """A DataFrame whose columns are the headers → :class:`SheetTable`.
    Row i of the frame is sheet row header_row + 1 + i."""
    body = frame.copy()
    headers = list(body.columns)
    body.columns = range(len(headers))
    body = body.reset_index(drop=True)
    return _with_header(headers, body, header_row, sheet)


def _with_header(headers: list[Any], body: pd.DataFrame, header_row: int,
                 sheet: str | None) -> SheetTable:
    body.index = pd.RangeIndex(header_row + 1, header_row + 1 + len(body), name="row")
    names = ["" if _blank_scalar(h) else str(h).strip() for h in headers]
    # Columns with no header and no values are just an over-wide selection.
    keep = [j for j, nm in enumerate(names) if nm or not _blank_mask(body[j]).all()]
    names = [names[j] for j in keep]
    body = body[keep]
    blank = [str(j + 1) for j, nm in zip(keep, names) if not nm]
    if blank:
        raise IntakeError(
            f"Header row (sheet row {header_row}): column {', '.join(blank)} has no name. "
            "Give every column a header.", row=header_row)
    seen: dict[str, int] = {}
    for pos, nm in enumerate(names):
        if nm in seen:
            raise IntakeError(
                f"Header row (sheet row {header_row}): '{nm}' appears twice (columns "
                f"{keep[seen[nm]] + 1} and {keep[pos] + 1}). Give each column its own name.",
                column=nm, row=header_row)
        seen[nm] = pos
    body.columns = names
    if body.shape[1]:
        body = body[~_blank_frame(body).all(axis=1)]   # fully blank rows are not sales
    return SheetTable(frame=body, sheet=sheet, header_row=header_row)


def read_table(path: str | Path, sheet: str | None = None) -> SheetTable:
    """Read a .csv or .xlsx/.xlsm file (first sheet unless ``sheet``)."""
    path = Path(path)
    if not path.exists():
        raise IntakeError(f"File '{path}' does not exist. Check the path.")
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return read_csv(path)
    if suffix in (".xlsx", ".xlsm", ".xls", ".ods"):
        return read_sheet(path, sheet)
    raise IntakeError(f"File '{path.name}' is not .csv or .xlsx. Save the sales as one of those.")


def read_csv(path: str | Path) -> SheetTable:
    """CSV cells come in as text so they are parsed exactly as a sheet's would be."""
    try:
        frame = pd.read_csv(path, dtype=object, keep_default_na=False, na_values=[],
                            encoding="utf-8-sig")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise IntakeError(f"File '{Path(path).name}' cannot be read as CSV ({exc}). "
                          "Save it as UTF-8 CSV with a header row.") from None
    frame.columns = [c if not str(c).startswith("Unnamed: ") else "" for c in frame.columns]
    return table_from_frame(frame, header_row=1, sheet=None)


def read_sheet(path: str | Path, sheet: str | None = None) -> SheetTable:
    """One worksheet through python-calamine (fast); the first non-empty row is the header."""
    from python_calamine import CalamineWorkbook
    try:
        book = CalamineWorkbook.from_path(str(path))
    except Exception as exc:  # calamine raises its own types for damaged files
        raise IntakeError(f"File '{Path(path).name}' cannot be read as a workbook ({exc}).") from None
    names = book.sheet_names
    if sheet is None:
        sheet = names[0]
    elif sheet not in names:
        raise IntakeError(f"Workbook '{Path(path).name}' has no sheet '{sheet}'. Sheets: "
                          f"{quote_list(names)}.", sheet=sheet)
    ws = book.get_sheet_by_name(sheet)
    values = ws.to_python(skip_empty_area=True)
    start = ws.start[0] if ws.start else 0
    return table_from_values(values, header_row=start + 1, sheet=sheet)


# --- cleaning the used columns -----------------------------------------------

def clean(table: SheetTable, numeric: Iterable[str] = (), categorical: Iterable[str] = (),
          date: str | None = None) -> CleanData:
    """Type the used columns; drop (and log) rows with a missing value in any.

    Raises :class:`IntakeError` for a cell that cannot be what its column needs.
    """
    numeric, categorical = list(dict.fromkeys(numeric)), list(dict.fromkeys(categorical))
    frame = table.frame
    typed: dict[str, pd.Series] = {}
    reasons: dict[str, pd.Series] = {}
    for col in numeric:
        typed[col], reasons[col] = to_numbers(frame[col], col)
    for col in categorical:
        typed[col], reasons[col] = to_labels(frame[col], col)
    if date is not None:
        typed[date], reasons[date] = to_dates(frame[date], date)
    order = list(typed)
    data = pd.DataFrame(typed, index=frame.index)[order] if order else pd.DataFrame(index=frame.index)
    if not order:
        return CleanData(data, _empty_log())
    why = pd.DataFrame(reasons, index=frame.index)[order]
    bad = why.notna()
    any_bad = bad.any(axis=1).to_numpy()
    if not any_bad.any():
        return CleanData(data, _empty_log())
    sub = why[any_bad]
    first = bad[any_bad].to_numpy().argmax(axis=1)
    cols = np.array(order, dtype=object)[first]
    text = sub.to_numpy()[np.arange(len(sub)), first]
    also = bad[any_bad].sum(axis=1).to_numpy() - 1
    text = np.where(also > 0, text + " (and " + also.astype(str) + " more missing)", text)
    dropped = pd.DataFrame({"row": sub.index.to_numpy(dtype=np.int64), "column": cols,
                            "reason": text})
    return CleanData(data[~any_bad], dropped.reset_index(drop=True))


def _empty_log() -> pd.DataFrame:
    return pd.DataFrame({"row": pd.Series(dtype=np.int64), "column": pd.Series(dtype=object),
                         "reason": pd.Series(dtype=object)})


def _blank_scalar(v: Any) -> bool:
    return v is None or (isinstance(v, float) and v != v) or (isinstance(v, str) and not v.strip())


def _blank_mask(col: pd.Series) -> pd.Series:
    if col.dtype.kind in "fiub":
        return col.isna()
    if col.dtype.kind == "M":
        return col.isna()
    return col.isna() | (col.astype(str).str.strip() == "")


def _blank_frame(frame: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame({c: _blank_mask(frame[c]) for c in frame.columns}, index=frame.index)


def _error_names(col: pd.Series) -> pd.Series:
    """The error value's text where a cell holds one, else NaN."""
    if col.dtype.kind in "fiubM":
        return pd.Series(np.nan, index=col.index, dtype=object)
    text = col.astype(str).str.strip()
    is_text_err = col.map(type).eq(str) & (text.isin(ERROR_TEXTS) | text.str.fullmatch(r"Err:\d+"))
    out = text.where(is_text_err)
    is_int = col.map(type).eq(int)
    if is_int.any():
        codes = col[is_int].map(COM_ERROR_CODES)
        out = out.astype(object)
        out[codes.dropna().index] = codes.dropna()
    return out


def _missing_reasons(col: pd.Series) -> tuple[pd.Series, pd.Series]:
    """(reason per cell or NaN, mask of cells that hold a value)."""
    blank = _blank_mask(col)
    err = _error_names(col)
    reason = pd.Series(np.nan, index=col.index, dtype=object)
    reason[blank] = "blank"
    has_err = err.notna()
    reason[has_err] = "error value " + err[has_err]
    return reason, ~(blank | has_err)


def to_numbers(col: pd.Series, name: str) -> tuple[pd.Series, pd.Series]:
    """Cells → floats; returns (values, missing reason per cell)."""
    if col.dtype.kind in "fiu":
        values = col.astype(float)
        bad = ~np.isfinite(values) & values.notna()
        if bad.any():
            row = bad.idxmax()
            raise IntakeError(f"Column '{name}', row {row}: {values[row]} is not a finite "
                              "number. Enter a number or leave the cell blank.", column=name, row=row)
        return values, pd.Series(np.where(values.isna(), "blank", None), index=col.index).where(
            values.isna())
    if col.dtype.kind == "b":
        return col.astype(float), pd.Series(np.nan, index=col.index, dtype=object)
    reason, present = _missing_reasons(col)
    kinds = col.map(type)
    values = pd.Series(np.nan, index=col.index)
    direct = present & ~kinds.eq(str) & kinds.isin([int, float, bool, np.float64, np.int64, np.bool_])
    values[direct] = pd.to_numeric(col[direct], errors="coerce").astype(float)
    texts = present & kinds.eq(str)
    if texts.any():
        values[texts] = parse_number_text(col[texts])
    bad = present & ~np.isfinite(values.to_numpy(dtype=float))
    if bad.any():
        row = bad.idxmax()
        cell = col[row]
        shown = f"'{cell}'" if isinstance(cell, str) else f"a {type(cell).__name__} value"
        if hasattr(cell, "year") and not isinstance(cell, str):
            shown = f"a date ({pd.Timestamp(cell).date()})"
        raise IntakeError(f"Column '{name}', row {row}: {shown} is not a number. Enter a "
                          "number or leave the cell blank.", column=name, row=int(row))
    return values, reason


def parse_number_text(text: pd.Series) -> pd.Series:
    """Numbers as a user types them: '1,250', '$350,000', ' 12.5 ', '12.5%', '(1,200)'.
    Returns floats, NaN where the text is not a number in one of these forms."""
    t = text.astype(str).str.strip().str.replace("\u2212", "-", regex=False)
    upper = t.str.upper()
    booleans = upper.map({"TRUE": 1.0, "FALSE": 0.0})
    paren = t.str.fullmatch(r"\(.*\)")
    t = t.where(~paren, t.str.slice(1, -1).str.strip())
    minus = t.str.startswith("-")
    t = t.where(~minus, t.str.slice(1))
    t = t.str.replace(r"^[\$€£¥]\s*", "", regex=True).str.strip()
    pct = t.str.endswith("%")
    t = t.where(~pct, t.str.slice(0, -1).str.strip())
    ok = t.str.fullmatch(_NUMBER_TEXT) & t.str.contains(r"\d")
    num = pd.to_numeric(t.where(ok).str.replace(",", "", regex=False), errors="coerce")
    num = num.where(~pct, num / 100.0).where(~(paren | minus), -num)
    bad_sign = paren & minus      # "(-5)" is not something a user means
    num = num.where(~bad_sign)
    return num.fillna(booleans).astype(float)


def to_labels(col: pd.Series, name: str) -> tuple[pd.Series, pd.Series]:
    """Cells → category labels (text); 3.0 becomes '3', TRUE becomes 'TRUE'."""
    reason, present = _missing_reasons(col)
    kinds = col.map(type)
    labels = pd.Series(np.nan, index=col.index, dtype=object)
    is_text = present & kinds.eq(str)
    labels[is_text] = col[is_text].astype(str).str.strip()
    is_bool = present & kinds.isin([bool, np.bool_])
    labels[is_bool] = col[is_bool].map({True: "TRUE", False: "FALSE"})
    is_num = present & ~is_text & ~is_bool & kinds.isin([int, float, np.int64, np.float64])
    if is_num.any():
        nums = pd.to_numeric(col[is_num]).astype(float)
        whole = nums == np.round(nums)
        as_text = nums.astype(str)
        as_text[whole] = nums[whole].astype(np.int64).astype(str)
        labels[is_num] = as_text
    rest = present & labels.isna()
    if rest.any():
        labels[rest] = col[rest].astype(str)
    return labels, reason


def to_dates(col: pd.Series, name: str) -> tuple[pd.Series, pd.Series]:
    """Cells → datetime64: date cells, spreadsheet serial numbers, or ISO text."""
    if col.dtype.kind == "M":
        values = col.dt.tz_localize(None) if getattr(col.dt, "tz", None) else col
        return values.astype("datetime64[ns]"), pd.Series(
            np.where(col.isna(), "blank", None), index=col.index).where(col.isna())
    reason, present = _missing_reasons(col)
    kinds = col.map(type)
    out = pd.Series(pd.NaT, index=col.index, dtype="datetime64[ns]")
    is_num = present & kinds.isin([int, float, np.int64, np.float64])
    if is_num.any():
        serial = pd.to_numeric(col[is_num]).astype(float)
        good = (serial >= 1) & (serial < 2958466)
        out[serial[good].index] = _EXCEL_EPOCH + pd.to_timedelta(serial[good], unit="D")
    is_other = present & ~is_num & ~kinds.isin([bool, np.bool_])
    if is_other.any():
        vals = col[is_other]
        as_text = vals.map(lambda v: v.strip() if isinstance(v, str) else v)
        parsed = pd.to_datetime(as_text, format="ISO8601", errors="coerce")
        if getattr(parsed.dt, "tz", None) is not None:
            parsed = parsed.dt.tz_localize(None)
        out[is_other] = parsed.astype("datetime64[ns]")
    bad = present & out.isna()
    if bad.any():
        row = bad.idxmax()
        raise IntakeError(f"Column '{name}', row {row}: '{col[row]}' is not a date. Enter a date "
                          "cell or text as YYYY-MM-DD.", column=name, row=int(row))
    return out, reason

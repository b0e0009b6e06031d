"""A block of sheet values → a :class:`SheetTable` with trimmed headers and the sheet's row
numbers as its index (the header row found, trailing blank rows left off).
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd

from plumbrule.errors import IntakeError
from plumbrule.intake.cells import _blank_frame, _blank_mask, is_blank, parse_number_text


@dataclass(frozen=True)
class SheetTable:
    """A block of cells with a header: ``frame`` holds the raw cell values
    (object dtype), columns are the trimmed headers, the index is sheet rows.
    ``first_column`` is the sheet column number (A = 1) of the block's first
    column, so messages can give column letters. ``hidden_rows`` are the sheet rows of the
    body hidden or filtered out in the sheet (xlsx only); ``unsaved_formula_columns`` are the
    headers of columns holding formulas the file has no saved result for (xlsx only).
    ``file_text`` (CSV read by the fast path only) holds the file's text of the columns
    ``frame`` holds as floats; :func:`text_cells` reads it. ``blanks`` (when the header
    was found) is the blank-cell mask of the body, worked out once (:func:`blank_cells`);
    a table of fewer rows made with ``replace(table, frame=...)`` keeps it."""

    frame: pd.DataFrame
    sheet: str | None = None
    header_row: int = 1
    first_column: int = 1
    hidden_rows: tuple[int, ...] = ()
    unsaved_formula_columns: tuple[str, ...] = ()
    file_text: Any = field(default=None, repr=False, compare=False)
    blanks: Any = field(default=None, repr=False, compare=False)

    @property
    def columns(self) -> list[str]:
        return list(self.frame.columns)


def text_cells(table: SheetTable, column: str) -> pd.Series:
    """The cells of ``column`` as the sheet or file holds them, indexed like ``table.frame``:
    for a CSV column the fast reader typed as numbers, the file's text ('0012', '3.50'), which
    the rules reading a column as labels, IDs or dates need; else ``table.frame[column]``."""
    src = table.file_text
    if src is None or not src.has(column):
        return table.frame[column]
    cells = src.column(column)
    if not cells.index.equals(table.frame.index):
        cells = cells.reindex(table.frame.index)
    return cells.rename(column)


def text_factors(table: SheetTable, column: str) -> tuple[np.ndarray, np.ndarray] | None:
    """For a CSV text column the fast reader read as categories: (a code per row of
    ``table.frame``, -1 where a short line leaves the cell out; the distinct texts, an
    object array), so that ``text_factors[1][codes]`` is the column's cells. None for any
    other column."""
    src = table.file_text
    got = getattr(src, "factors", {}).get(column) if src is not None else None
    if got is None:
        return None
    codes, uniq = got
    rows = table.frame.index.to_numpy(dtype=np.int64) - src.skip - 1
    if len(rows) != len(codes) or (len(rows) and (rows[0] != 0 or rows[-1] != len(codes) - 1)):
        codes = codes.take(rows)      # rows left out (totals rows, trailing blanks)
    return codes, uniq


def plain_integers(table: SheetTable, column: str) -> np.ndarray | None:
    """For a CSV column the fast reader typed as integers each written as Python writes
    them, those integers (every body row of the file, a superset of the table's rows):
    equal cells are equal integers. None for any other column."""
    src = table.file_text
    if src is None or not hasattr(src, "integers"):
        return None
    return src.integers(column)


def blank_cells(table: SheetTable, columns: Sequence[str] | None = None) -> pd.DataFrame:
    """Which cells of ``table.frame`` (of ``columns``, default all) are blank (None, NaN,
    '' or spaces), with the frame's index: the mask worked out when the table was made,
    for the rows the table still has."""
    cols = list(table.frame.columns) if columns is None else list(columns)
    if table.blanks is None:
        return _blank_frame(table.frame[cols])
    if table.blanks.index.equals(table.frame.index):    # every row still there: no reindex
        return table.blanks[cols]
    return table.blanks.loc[table.frame.index, cols]


def used_rows(values: Sequence[Sequence[Any]]) -> Sequence[Sequence[Any]]:
    """``values`` without its trailing rows of empty cells (None or ""): a whole-column
    reference (A:K) or a table with spare rows hands over a million rows of which a few
    hundred are sales; the rest are not rows at all and cost nothing further. A row's
    emptiness is judged with list counts (C speed), from the end, until a filled row."""
    end = len(values)
    while end > 1:
        row = values[end - 1]
        if isinstance(row, (list, tuple)):
            if row.count(None) + row.count("") != len(row):
                break
        elif row is not None and row != "":
            break
        end -= 1
    return values if end == len(values) else values[:end]


def table_from_values(values: Sequence[Sequence[Any]], header_row: int = 1,
                      sheet: str | None = None, first_column: int = 1,
                      header_at: int | None = None) -> SheetTable:
    """A 2-D block (rows of cells) → :class:`SheetTable`.

    ``header_row`` is the sheet row of the block's first row: block row i is sheet row
    ``header_row + i``, and the table's index keeps those sheet rows. ``header_at`` is the
    sheet row of the column headers when the user gives it (the ``header_row`` setting);
    by default the header is found (:func:`find_header`): title rows, notes and blank rows
    above it are left out. ``SheetTable.header_row`` is the sheet row of the header used."""
    block = padded(values)
    width = block.shape[1]
    if header_at is None:
        h = find_header(block)
    else:
        h = int(header_at) - header_row
        last = header_row + len(block) - 1
        if not 0 <= h < len(block):
            raise IntakeError(f"header_row is {header_at}, but the sheet's cells run from row "
                              f"{header_row} to row {last}. Set header_row (--header-row) to "
                              "the sheet row of the headers.", setting="header_row",
                              row=int(header_at))
        if all(is_blank(v) for v in block[h]):
            raise IntakeError(f"header_row is {header_at}, but sheet row {header_at} is empty. "
                              "Set header_row (--header-row) to the sheet row of the headers.",
                              setting="header_row", row=int(header_at))
    body = pd.DataFrame(block[h + 1:], columns=range(width), dtype=object)
    return _with_header(list(block[h]), body, header_row + h, sheet, first_column,
                        suggest_setting=True)


def padded(values: Sequence[Sequence[Any]]) -> np.ndarray:
    """Rows of cells (of any lengths) → a 2-D object array, short rows filled with None."""
    if isinstance(values, np.ndarray):
        values = values.tolist()
    values = used_rows(values or [])
    if values and isinstance(values, list) and isinstance(values[0], list) \
            and len(values[0]) and set(map(len, values)) == {len(values[0])} \
            and set(map(type, values)) == {list}:
        # rows of one width (a sheet's block): numpy copies them in C, not row by row
        block = np.empty((len(values), len(values[0])), dtype=object)
        try:
            block[:] = values
            return block
        except (ValueError, TypeError):    # a cell that is itself a list: row by row
            pass
    rows = [list(r) if isinstance(r, (list, tuple)) else [r] for r in values]
    if not rows or not max(len(r) for r in rows):
        raise IntakeError("The sales block is empty. Select the table including its header row.")
    width = max(len(r) for r in rows)
    block = np.empty((len(rows), width), dtype=object)
    block[:] = None
    for i, r in enumerate(rows):       # rows of the block, not cells: one slice each
        block[i, :len(r)] = r
    return block


_HEADER_SCAN = 50    # block rows searched for the header (title rows, notes, blank rows)
_SPAN_ROWS = 3       # non-blank rows below a header that must fit within its columns


_NUMBER_CHARS = r"[\d\s+\-\u2212$€£¥,.eE%()]+"     # what a number typed as text is made of


def find_header(block: np.ndarray) -> int:
    """Block row (0-based) of the column headers: the first non-blank row whose filled cells
    are all words (text that is not a number or a date), at least two of them unless the
    block is one column wide, with the next few non-blank rows filling no column it leaves
    blank, and no row above it holding two or more numbers or dates (that is a sale, not a
    title). Otherwise the first non-blank row (whose problems the header checks then name)."""
    top = block[:_HEADER_SCAN]
    flat = pd.Series(top.ravel(), dtype=object)
    filled = ~_blank_mask(flat).to_numpy().reshape(top.shape)
    nonblank = np.flatnonzero(filled.any(axis=1))
    if not len(nonblank):
        return 0
    words = flat.map(type).eq(str).to_numpy() & filled.ravel()
    if words.any():   # '350000', '$1,250' and '3/14/2025' are values, not names
        txt = flat[words].astype(str).str.strip()
        valued = txt.str.match(r"\d{1,4}[-/.]\d{1,2}[-/.]\d{1,4}").to_numpy(dtype=bool,
                                                                            copy=True)
        # a text with no digit is a number only as TRUE/FALSE (the number rules need a
        # digit): the rules run on the rest alone, mostly none (names, dates)
        digit = txt.str.contains(r"\d", regex=True).to_numpy(dtype=bool)
        valued |= ~digit & txt.str.upper().isin(("TRUE", "FALSE")).to_numpy()
        # a number needs only digits, signs, currency, separators, an exponent, % and
        # parentheses ('x1', 'Lot 4' are names): the rules run on the rest alone
        rest = digit & ~valued & txt.str.fullmatch(_NUMBER_CHARS).to_numpy(dtype=bool)
        if rest.any():
            valued[rest] = np.isfinite(parse_number_text(txt[rest]).to_numpy())
        words[np.flatnonzero(words)[valued]] = False
    words = words.reshape(top.shape)
    f, w = filled[nonblank], words[nonblank]
    pad = np.vstack([f, np.zeros((_SPAN_ROWS, f.shape[1]), dtype=bool)])
    below = np.zeros_like(f)
    for k in range(1, _SPAN_ROWS + 1):     # a few shifted copies, not a loop over rows
        below |= pad[k:k + len(f)]
    one_wide = filled.any(axis=0).sum() <= 1
    values = (f & ~w).sum(axis=1)
    ok = (values == 0) & ((f.sum(axis=1) >= 2) | one_wide) & ~(below & ~f).any(axis=1)
    k = int(np.argmax(ok))
    # Rows left out above a header are titles and notes: a row with two or more numbers or
    # dates there is a sale, and a header below it is not to be trusted.
    if not ok.any() or (values[:k] >= 2).any():
        return int(nonblank[0])
    return int(nonblank[k])


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
        cols[j] = c.to_numpy() if keep else c.to_numpy(dtype=object)
    # each column its own dtype, text as object cells: pandas 3 would infer its string
    # dtype for a column of texts again, which the intake rules do not read as cells
    body = pd.DataFrame({j: pd.Series(v, dtype=v.dtype, copy=False) for j, v in cols.items()},
                        index=pd.RangeIndex(len(frame)), copy=False)  # views, no copy
    return _with_header(headers, body, header_row, sheet, first_column)


def column_letter(number: int) -> str:
    """1 → 'A', 27 → 'AA' (sheet column letters)."""
    out = ""
    while number > 0:
        number, rem = divmod(number - 1, 26)
        out = chr(65 + rem) + out
    return out


def _header_text(h: Any) -> str:
    if is_blank(h):
        return ""
    if isinstance(h, float) and h.is_integer():
        h = int(h)
    elif isinstance(h, _dt.datetime) and h == pd.Timestamp(h).normalize():
        h = h.date()
    if isinstance(h, _dt.date):
        h = h.isoformat()
    return " ".join(str(h).split())


def _with_header(headers: list[Any], body: pd.DataFrame, header_row: int,
                 sheet: str | None, first_column: int = 1,
                 suggest_setting: bool = False,
                 blanks: pd.DataFrame | None = None) -> SheetTable:
    """``blanks``: the blank-cell mask of ``body`` (its columns), when the reader knows it
    (else it is worked out here)."""
    body.index = pd.RangeIndex(header_row + 1, header_row + 1 + len(body), name="row")
    names = [_header_text(h) for h in headers]
    if blanks is not None:
        blanks.index = body.index
    blank_cells = (blanks if blanks is not None else _blank_frame(body)) if len(body) else None
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
                          "a header" + (", or set header_row (--header-row) to the sheet row of "
                                        "the headers." if suggest_setting else "."),
                          row=header_row)
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
    blanks = None
    if len(body) and blank_cells is not None:
        blanks = blank_cells[keep]
        filled = ~blanks.all(axis=1).to_numpy()
        # Rows after the last filled one are an over-wide selection, not sales.
        last = int(np.flatnonzero(filled)[-1]) + 1 if filled.any() else 0
        body = body.iloc[:last]
        blanks = blanks.iloc[:last].set_axis(names, axis=1)
    return SheetTable(frame=body, sheet=sheet, header_row=header_row, first_column=first_column,
                      blanks=blanks)

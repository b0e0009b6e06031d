"""The fast CSV path: pandas' C parser types the columns that are plain numbers; every other
column keeps the file's text and goes through the cell-by-cell rules as before.

A CSV read cell by cell makes a Python string of every cell (2.4 million for 200,000 sales
of 12 columns) and then parses each as a sheet would. Most columns of a sales file are plain
numbers, which pandas' C parser turns into a float array without making a string at all.
This reader takes that array for a column only when the cell-by-cell rules would read every
one of its cells to the same float with the same reason (a blank is a blank): all values
finite, no value the range rules or the error-code rules look at, integers exact as floats.
Any other column — text, TRUE/FALSE, dates, a blank typed as spaces, '1,250', '#N/A', 'inf' —
is read again as text, the careful reader's own cells. A typed column keeps its text too,
read on demand (:func:`plumbrule.intake.table.text_cells`), for the rules that read a column
as labels (categories, IDs, dates): '0012' is an ID, not 12. A caller that knows which
columns it reads as labels says so (``text_columns``), and those are kept as text at once.

The careful reader (readers.read_csv) stays the reference: anything this path is not sure of
(a ragged file, a header beyond the first rows, a parser error) returns None and the careful
reader reads the file. tests/intake/test_typed_csv.py checks both give the same tables,
typed results and messages on generated hostile files.
"""

from __future__ import annotations

import io
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np
import pandas as pd

_HEAD_ROWS = 60       # rows read as text to find the header (find_header looks at 50)
_EXACT_INT = 2 ** 53  # integers beyond this are not all exact as floats
_LOWEST = -2e9        # COM error codes (about -2.15e9) are read as errors in number columns


def _read(data: bytes | str, sep: str, **kw) -> pd.DataFrame:
    """pandas' C parser on the file's UTF-8 bytes or its decoded text."""
    src = io.BytesIO(data) if isinstance(data, bytes) else io.StringIO(data)
    return pd.read_csv(src, header=None, sep=sep, keep_default_na=False,
                       skip_blank_lines=False, encoding="utf-8", **kw)


def _cells(data: bytes | str, sep: str, **kw) -> pd.DataFrame:
    """The careful reader's cells: every cell its text, '' for an empty cell and NaN for a
    cell a short line leaves out."""
    return _read(data, sep, dtype=object, na_values=[], **kw)


@dataclass(frozen=True)
class CsvText:
    """The text of a CSV file's columns that the fast path typed as numbers, read on demand
    (``column``: the cells of one column as the careful reader has them, indexed by sheet
    row)."""

    data: bytes | str = field(repr=False)
    sep: str = ","
    skip: int = 0                   # records above the body (titles and the header)
    positions: tuple = ()           # (header name, column position in the file)
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    def has(self, name: str) -> bool:
        return any(n == name for n, _ in self.positions)

    def column(self, name: str) -> pd.Series:
        if name not in self._cache:
            j = next(p for n, p in self.positions if n == name)
            raw = _cells(self.data, self.sep, skiprows=self.skip, usecols=[j])
            self._cache[name] = pd.Series(
                raw.iloc[:, 0].to_numpy(dtype=object), dtype=object,
                index=pd.RangeIndex(self.skip + 1, self.skip + 1 + len(raw), name="row"))
        return self._cache[name]


def _plain_number_column(col: pd.Series) -> np.ndarray | None:
    """The column as floats when the careful rules would read each cell to the same float
    (NaN where the cell is empty); None when they might not."""
    kind = col.dtype.kind if isinstance(col.dtype, np.dtype) else "O"
    if kind == "i":
        v = col.to_numpy()
        if len(v) and (v.max() > _EXACT_INT or v.min() < max(-_EXACT_INT, _LOWEST)):
            return None
        return v.astype(float)
    if kind != "f":
        return None
    v = col.to_numpy(dtype=float)
    from plumbrule.intake.cells import MAX_MAGNITUDE, MIN_MAGNITUDE
    size = np.abs(v[~np.isnan(v)])
    if size.size and not (np.isfinite(size).all() and size.max() <= MAX_MAGNITUDE
                          and not ((size < MIN_MAGNITUDE) & (size > 0)).any()
                          and np.nanmin(v) >= _LOWEST):
        return None
    return v


def _folded(name) -> str:
    return " ".join(str(name).split()).casefold()


def read_typed(data: bytes | str, sep: str, header_at: int | None,
               text_columns: Iterable[str] = ()):
    """The SheetTable of a CSV file (its UTF-8 bytes or its text) through the fast path, or
    None when the careful reader must read it (see the module's docstring).
    ``text_columns`` (headers, any case) are read as text at once: the caller reads them
    as labels, which need the file's text."""
    from plumbrule.intake.table import _header_text, _with_header, find_header, padded
    try:
        head = _cells(data, sep, nrows=_HEAD_ROWS)
        block = padded(head.to_numpy(dtype=object))
        width = head.shape[1]
        if header_at is None:
            h = find_header(block)
        else:
            h = int(header_at) - 1
            if not 0 <= h < min(len(block), _HEAD_ROWS - 1):
                return None
        header = list(block[h])
        if all(v is None or (isinstance(v, str) and v == "") or v != v for v in header):
            return None
        wanted = {_folded(c) for c in text_columns}
        as_text = [j for j, x in enumerate(header) if _folded(_header_text(x)) in wanted]
        typed = _read(data, sep, skiprows=h + 1, dtype={j: object for j in as_text},
                      na_values={j: ([] if j in as_text else [""]) for j in range(width)})
    except Exception:      # the careful reader reads it, and says what is wrong
        return None
    if typed.shape[1] != width or len(head) <= h:
        return None
    cols: dict[int, np.ndarray] = {}
    again = []
    for j in range(width):
        c = typed.iloc[:, j]
        v = None if j in as_text else _plain_number_column(c)
        if v is not None:
            cols[j] = v
            continue
        kind = c.dtype.kind if isinstance(c.dtype, np.dtype) else "O"
        if kind != "b":
            obj = c.to_numpy(dtype=object)
            # text with no empty cell is the careful reader's cells as they are; an empty
            # cell ('' there, NaN here) or a TRUE/FALSE the parser typed is read again
            if j in as_text or pd.api.types.infer_dtype(obj, skipna=False) == "string":
                cols[j] = obj
                continue
        again.append(j)
    if again:
        raw = _cells(data, sep, skiprows=h + 1, usecols=again)
        if len(raw) != len(typed):
            return None
        for pos, j in enumerate(again):
            cols[j] = raw.iloc[:, pos].to_numpy(dtype=object)
    # object columns stay object (pandas would make text columns its string dtype)
    body = pd.DataFrame({j: pd.Series(cols[j], dtype=cols[j].dtype, copy=False)
                         for j in range(width)}, copy=False)
    table = _with_header(header, body, h + 1, None, 1, suggest_setting=True)
    names = [_header_text(x) for x in header]
    numbers = tuple((names[j], j) for j in range(width)
                    if j not in again and cols[j].dtype.kind == "f"
                    and names[j] in table.frame.columns)
    if not numbers:
        return table
    from dataclasses import replace
    return replace(table, file_text=CsvText(data, sep, h + 1, numbers))

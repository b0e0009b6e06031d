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
columns it reads as labels says so (``text_columns``), and those are kept as text at once —
except a column of integers each written as Python writes them (no leading zero, sign '+'
or white space; :func:`_plain_fields` checks the bytes): its text is the file's bytes of
those fields, taken when asked for (an ID column of 200,000 numbers costs the C parser
more as strings than all the other columns together).

The file is parsed once (the head of 60 rows as text, to find the header, aside). The blank
cells of the text columns are '' and the cells a short line leaves out, unless some field
of the file may begin with white space (:func:`_no_space_cells`; then the careful blank
rule reads them).

The careful reader (readers.read_csv) stays the reference: anything this path is not sure of
(a ragged file, a header beyond the first rows, a parser error) returns None and the careful
reader reads the file. tests/intake/test_typed_csv.py checks both give the same tables,
typed results and messages on generated hostile files.
"""

from __future__ import annotations

import io
import re
import warnings
from dataclasses import dataclass, field
from typing import Iterable

import numpy as np
import pandas as pd

_HEAD_ROWS = 60       # rows read as text to find the header (find_header looks at 50)
_EXACT_INT = 2 ** 53  # integers beyond this are not all exact as floats
_LOWEST = -2e9        # COM error codes (about -2.15e9) are read as errors in number columns
_INT_TEXT = re.compile(r"-?[1-9][0-9]{0,14}|0")   # an integer as Python writes it


def _read(data: bytes | str, sep: str, header: int | None = None, width: int = 0,
          **kw) -> pd.DataFrame:
    """pandas' C parser on the file's UTF-8 bytes or its decoded text. ``header``: the record
    of the header (the body is the records below it; the columns are numbered 0 .. width-1)
    — a header, not ``skiprows``, which makes the C parser check every record."""
    src = io.BytesIO(data) if isinstance(data, bytes) else io.StringIO(data)
    if header is not None:
        kw.update(header=header, names=range(width), index_col=False)
    else:
        kw.update(header=None)
    with warnings.catch_warnings():
        # a first body line longer than the header: the careful reader says so
        warnings.simplefilter("error", pd.errors.ParserWarning)
        return pd.read_csv(src, sep=sep, keep_default_na=False, skip_blank_lines=False,
                           encoding="utf-8", **kw)


def _cells(data: bytes | str, sep: str, header: int | None = None, width: int = 0,
           **kw) -> pd.DataFrame:
    """The careful reader's cells: every cell its text, '' for an empty cell and NaN for a
    cell a short line leaves out."""
    return _read(data, sep, header, width, dtype=object, na_values=[], **kw)


# the UTF-8 of the white space str.strip removes beyond ASCII's (a prefix of each): U+0085,
# U+00A0, U+1680, U+2000-U+200A, U+2028, U+2029, U+202F, U+205F and U+3000
_WIDE_SPACE = (b"\xc2\x85", b"\xc2\xa0", b"\xe1\x9a\x80", b"\xe2\x80", b"\xe2\x81\x9f",
               b"\xe3\x80\x80")


def _edges(a: np.ndarray, sep: str) -> np.ndarray:
    """Which bytes end or open a field: the separator, line ends and quotes."""
    return (a == ord(sep)) | (a == 10) | (a == 13) | (a == 34)


_BLOCK = 1 << 20      # bytes per block of _low_bytes: its mask stays in cache


def _low_bytes(data: bytes) -> np.ndarray:
    """Where the bytes of white space and control characters are: the line ends and
    spaces, in a sales file. Found a block at a time, so no mask as long as the file is
    made (a 90 MB file: 90 MB of fresh pages, which cost more than the comparison)."""
    a = np.frombuffer(data, dtype=np.uint8)
    if len(a) <= _BLOCK:
        return np.flatnonzero(a <= 32)
    mask = np.empty(_BLOCK, dtype=bool)
    parts = []
    for at in range(0, len(a), _BLOCK):
        block = a[at:at + _BLOCK]
        m = np.less_equal(block, 32, out=mask[:len(block)])
        parts.append(np.flatnonzero(m) + at)
    return np.concatenate(parts)


def _no_space_cells(data: bytes | str, sep: str, low: np.ndarray | None = None,
                    ascii: bool = False) -> bool:
    """True when no field of a UTF-8 file (its bytes) begins with white space, so no
    cell is white space only: no control character but line ends, no space after a
    separator, line end or quote, none of the rarer white space; False when one may (or
    for decoded text). ``low``: :func:`_low_bytes` of ``data``, when known; ``ascii``: the
    bytes are known to be ASCII."""
    if not isinstance(data, bytes):
        return False
    a = np.frombuffer(data, dtype=np.uint8)
    low = _low_bytes(data) if low is None else low
    kind = a[low]
    space = low[kind == 32]
    if ((kind != 10) & (kind != 13) & (kind != 32)).any():
        return False           # a tab, a form feed, ...: the careful rule reads them
    if len(space) and (space[0] == 0 or _edges(a[space - 1], sep).any()):
        return False
    if not (ascii or data.isascii()) and any(s in data for s in _WIDE_SPACE):
        return False
    if b'"' in data:     # a quoted field of line ends only: '"\n"'
        at = np.flatnonzero(a == 34)
        nxt = a.take(at + 1, mode="clip")
        opens = (at == 0) | _edges(a[at - 1], sep)
        if (opens & ((nxt == 10) | (nxt == 13))).any():
            return False
    return True


_POWERS = 10 ** np.arange(19, dtype=np.uint64)


def _plain_fields(data: bytes | str, sep: str, skip: int, j: int, width: int,
                  v: np.ndarray, low: np.ndarray | None = None
                  ) -> tuple[np.ndarray, np.ndarray] | None:
    """(where each field starts in ``data``, its length) when the cells of column ``j``
    below the first ``skip`` records of a UTF-8 file, which the C parser read as the
    integers ``v``, are those integers as Python writes them: each field exactly as long
    as its integer written so ('0012', '+5', '-0' and ' 12' are longer). Found from the
    bytes (the line starts, the separators) without making a string; None when they are
    not or when unsure (quotes, lone carriage returns, decoded text). ``low``:
    :func:`_low_bytes` of ``data``, when known."""
    if not isinstance(data, bytes) or b'"' in data or not len(v):
        return None
    a = np.frombuffer(data, dtype=np.uint8)
    low = _low_bytes(data) if low is None else low
    kind = a[low]
    cr = low[kind == 13]
    if len(cr) and ((a.take(cr + 1, mode="clip") != 10).any() or cr[-1] == len(a) - 1):
        return None             # lone carriage returns end lines too
    starts = low[kind == 10] + 1
    if len(starts) and starts[-1] == len(a):
        starts = starts[:-1]
    starts = np.concatenate(([0], starts))
    if len(starts) != skip + len(v):      # a line per record
        return None
    starts = starts[skip:]
    if j:
        at = np.flatnonzero(a[starts[0]:] == ord(sep)) + starts[0]
        if len(at) != (width - 1) * len(v):   # a line wider than the rest is refused
            return None
        starts = at.reshape(len(v), width - 1)[:, j - 1] + 1
    size = np.abs(v)
    if v.min() < -(10 ** 18) or size.max() >= 10 ** 18:
        return None
    length = np.maximum(np.searchsorted(_POWERS, size.astype(np.uint64), side="right"), 1)
    length = length + (v < 0)
    end = starts + length
    past = end >= len(a)
    if not (past | _edges(a.take(end, mode="clip"), sep)).all():
        return None
    return starts, length


def _field_text(data: bytes, fields: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
    """The text of ASCII fields of ``data`` (their starts and lengths) as an object array:
    the fields' bytes gathered with a NUL after each, split once (str.split makes the
    strings in C: no str() per integer)."""
    starts, length = fields
    a = np.frombuffer(data, dtype=np.uint8)
    total = int(length.sum()) + len(length)
    # byte k gathered comes from starts[field] + (k - offset[field])
    offset = np.concatenate(([0], np.cumsum(length + 1)[:-1]))
    src = np.repeat(starts - offset, length + 1) + np.arange(total)
    out = a.take(src, mode="clip")
    out[offset + length] = 0
    text = out[:-1].tobytes().decode("ascii").split("\x00")
    return np.fromiter(text, dtype=object, count=len(text))


@dataclass(frozen=True)
class CsvText:
    """The text of a CSV file's columns that the fast path typed as numbers, read on demand
    (``column``: the cells of one column as the careful reader has them, indexed by sheet
    row). ``ints``: the columns the C parser read as integers (name → (values, where
    their fields lie when they are written as Python writes them — False when not, None
    until asked)): their text is then the file's bytes of those fields."""

    data: bytes | str = field(repr=False)
    sep: str = ","
    skip: int = 0                   # records above the body (titles and the header)
    positions: tuple = ()           # (header name, column position in the file)
    width: int = 0                  # columns of the file
    ints: dict = field(default_factory=dict, repr=False, compare=False)
    # text columns the C parser read as categories: name → (code per body row, -1 for a
    # cell a short line leaves out; the distinct texts, an object array)
    factors: dict = field(default_factory=dict, repr=False, compare=False)
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    def has(self, name: str) -> bool:
        return any(n == name for n, _ in self.positions)

    def integers(self, name: str) -> np.ndarray | None:
        """The integers of column ``name`` when its cells are exactly those integers as
        Python writes them (so two cells are the same text just when they are the same
        integer), else None."""
        if not self.has(name) or not isinstance(self.data, bytes):
            return None
        v, fields = self.ints.get(name, (None, False))
        if fields is None:
            j = next(p for n, p in self.positions if n == name)
            fields = _plain_fields(self.data, self.sep, self.skip, j, self.width, v)
            self.ints[name] = (v, False if fields is None else fields)
        return None if fields is None or fields is False else v

    def column(self, name: str) -> pd.Series:
        if name not in self._cache:
            j = next(p for n, p in self.positions if n == name)
            v, fields = self.ints.get(name, (None, False))
            if fields is None:
                fields = _plain_fields(self.data, self.sep, self.skip, j, self.width, v)
            if fields is not None and fields is not False and isinstance(self.data, bytes):
                cells = _field_text(self.data, fields)
            else:
                raw = _cells(self.data, self.sep, self.skip - 1, self.width, usecols=[j])
                cells = raw.iloc[:, 0].to_numpy(dtype=object)
            self._cache[name] = pd.Series(
                cells, dtype=object, copy=False,
                index=pd.RangeIndex(self.skip + 1, self.skip + 1 + len(cells), name="row"))
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
    if not len(v) or np.isnan(v).all():
        return v
    # finite, within the sheet's range, no nonzero nearer zero than the range allows
    if not (np.nanmin(v) >= _LOWEST and np.nanmax(v) <= MAX_MAGNITUDE) or \
            ((v > -MIN_MAGNITUDE) & (v < MIN_MAGNITUDE) & (v != 0)).any():
        return None
    return v


def _folded(name) -> str:
    return " ".join(str(name).split()).casefold()


def read_typed(data: bytes | str, sep: str, header_at: int | None,
               text_columns: Iterable[str] = (), ascii: bool = False):
    """The SheetTable of a CSV file (its UTF-8 bytes or its text) through the fast path, or
    None when the careful reader must read it (see the module's docstring).
    ``text_columns`` (headers, any case) are read as text at once: the caller reads them
    as labels, which need the file's text. ``ascii``: the bytes are known to be ASCII."""
    from plumbrule.intake.cells import _blank_mask
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
        as_text = {j for j, x in enumerate(header) if _folded(_header_text(x)) in wanted}
        # a text column whose first cells are integers as Python writes them is parsed as
        # numbers, its text theirs when the whole column is written so (_plain_fields)
        shown = block[h + 1:]
        unquoted = isinstance(data, bytes) and b'"' not in data     # one scan of the file
        maybe_ints = {j for j in as_text if unquoted
                      and len(shown) and all(isinstance(v, str) and _INT_TEXT.fullmatch(v)
                                             for v in shown[:, j])}
        as_text -= maybe_ints
        # the text columns as categories: the same cells (tests/intake/test_typed_csv.py),
        # and their distinct texts with a code per row at no extra cost, so the rules
        # reading them as labels or dates read each distinct text once
        typed = _read(data, sep, h, width, dtype={j: "category" for j in as_text},
                      na_values={j: ([] if j in as_text or j in maybe_ints else [""])
                                 for j in range(width)})
    except Exception:      # the careful reader reads it, and says what is wrong
        return None
    if typed.shape[1] != width or len(head) <= h:
        return None
    cols: dict[int, np.ndarray] = {}
    ints: dict[int, tuple] = {}      # integer columns: (values, written plainly or None)
    factors: dict[int, tuple] = {}   # text columns: (codes, distinct texts)
    low = None                       # _low_bytes(data), when needed
    again = []
    for j in range(width):
        c = typed.iloc[:, j]
        kind = c.dtype.kind if isinstance(c.dtype, np.dtype) else "O"
        if j in as_text:
            cats = c.cat.categories if isinstance(c.dtype, pd.CategoricalDtype) else None
            if cats is not None and not (cats.dtype == object or
                                         isinstance(cats.dtype, pd.StringDtype)):
                again.append(j)      # categories the parser typed (12 for '0012'): the text
                continue
            cols[j] = c.to_numpy(dtype=object)
            if cats is not None:
                factors[j] = (c.cat.codes.to_numpy(), cats.to_numpy(dtype=object))
            continue
        if j in maybe_ints:
            if low is None and isinstance(data, bytes):
                low = _low_bytes(data)
            fields = (_plain_fields(data, sep, h + 1, j, width, c.to_numpy(), low)
                      if kind == "i" else None)
            if fields is not None:
                v = _plain_number_column(c)
                # integers the sheet rules read otherwise (error codes): their text
                cols[j] = _field_text(data, fields) if v is None else v  # type: ignore[arg-type]
                ints[j] = (c.to_numpy(), fields)
            elif kind == "O":      # text further down: the cells as the file has them
                cols[j] = c.to_numpy(dtype=object)
            else:
                again.append(j)
            continue
        v = _plain_number_column(c)
        if v is not None:
            cols[j] = v
            if kind == "i":
                ints[j] = (c.to_numpy(), None)
            continue
        if kind == "O":
            obj = c.to_numpy(dtype=object)
            # text with no empty cell is the careful reader's cells as they are; an empty
            # cell ('' there, NaN here) or a TRUE/FALSE the parser typed is read again
            if pd.api.types.infer_dtype(obj, skipna=False) == "string":
                cols[j] = obj
                continue
        again.append(j)
    if again:
        raw = _cells(data, sep, h, width, usecols=again)
        if len(raw) != len(typed):
            return None
        for pos, j in enumerate(again):
            cols[j] = raw.iloc[:, pos].to_numpy(dtype=object)
    body = pd.DataFrame({j: pd.Series(cols[j], dtype=cols[j].dtype, copy=False)
                         for j in range(width)}, copy=False)
    blanks = None
    if len(body):
        text = [j for j in range(width) if cols[j].dtype == object]
        quick = bool(text) and _no_space_cells(data, sep, low, ascii)
        # a cell NaN in a text column is one a short line leaves out: the last column is
        # then NaN too (so only its NaN rows are looked at in the others)
        last = cols[width - 1]
        short = np.flatnonzero(factors[width - 1][0] < 0 if width - 1 in factors else
                               np.isnan(last) if last.dtype.kind == "f" else last != last)
        blanks = pd.DataFrame({j: _blank_cells(cols[j], quick, _blank_mask, short,
                                               factors.get(j))
                               for j in range(width)}, copy=False)
    table = _with_header(header, body, h + 1, None, 1, suggest_setting=True,
                         blanks=blanks)
    names = [_header_text(x) for x in header]
    numbers = tuple((names[j], j) for j in range(width)
                    if j not in again and cols[j].dtype.kind == "f"
                    and names[j] in table.frame.columns)
    kept = {names[j]: f for j, f in factors.items() if names[j] in table.frame.columns}
    if not numbers and not kept:
        return table
    from dataclasses import replace
    file_text = CsvText(data, sep, h + 1, numbers, width,
                        {names[j]: v for j, v in ints.items()
                         if names[j] in table.frame.columns and cols[j].dtype.kind == "f"},
                        kept)
    return replace(table, file_text=file_text)


def _blank_cells(cells: np.ndarray, no_space_cells: bool, careful,
                 short: np.ndarray, factor: tuple | None = None) -> np.ndarray:
    """Which cells of a column are blank: NaN for a number column; for text, NaN (a short
    line; ``short``: the rows where one may be) or '' — or white space only, which
    ``careful`` (cells._blank_mask) finds when a field of the file may be. ``factor``:
    the column's (codes, distinct texts) when the parser read it as categories: a cell a
    short line leaves out is code -1 (the only NaN of a text column), '' its own text."""
    if cells.dtype.kind == "f":
        return np.isnan(cells)
    if not no_space_cells:
        return careful(pd.Series(cells, dtype=object, copy=False)).to_numpy()
    if factor is not None:
        codes, uniq = factor
        empty = np.flatnonzero(uniq == "")
        return (codes < 0) | (codes == empty[0]) if len(empty) else codes < 0
    blank = cells == ""
    if len(short):
        blank[short] |= pd.isna(cells[short])
    return blank

"""Typing spreadsheet cells: numbers typed as text, error values, blanks, booleans, dates.

Each function takes one column (a Series of what the sheet handed over) and returns typed
values beside the reason a cell could not be read; nothing here drops a row.
"""

from __future__ import annotations

import datetime as _dt
import numbers
from typing import Any

import numpy as np
import pandas as pd

from plumbrule.cell_values import COM_ERROR_CODES, ERROR_TEXTS, error_text, is_blank  # noqa: F401
from plumbrule.errors import CellErrors, CellProblem, IntakeError


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


class Uniques:
    """The distinct values of a column of text cells, found once (an ID column has as many
    as it has rows: hashing them once, not once per rule, is most of its cost)."""

    def __init__(self, text: pd.Series):
        self.index = text.index
        self.codes, uniq = pd.factorize(text.to_numpy(dtype=object))
        self.u = pd.Series(uniq, dtype=object)
        self._plain: np.ndarray | None = None

    def plain(self) -> np.ndarray:
        """Which distinct values are plain numbers ('1250', ' 12.5 ', '1e3')."""
        if self._plain is None:
            self._plain = np.isfinite(pd.to_numeric(self.u, errors="coerce")
                                      .to_numpy(dtype=float))
        return self._plain

    def apply(self, fn, skip_numbers: bool = False) -> pd.Series:
        """See :func:`on_uniques`."""
        u = self.u
        if skip_numbers:
            plain = self.plain()
            res = pd.Series(np.nan, index=u.index, dtype=object)
            if (~plain).any():
                res[~plain] = fn(u[~plain]).to_numpy(dtype=object)
        else:
            res = fn(u)
        return pd.Series(res.to_numpy(dtype=object)[self.codes], index=self.index)


# Python's str.split() splits ASCII text at these (str.isspace of the ASCII characters)
_ASCII_SPACE = " \t\n\r\x0b\x0c\x1c\x1d\x1e\x1f"


def ascii_without(u: pd.Series, chars: str) -> bool:
    """True when every value of ``u`` is a str, ASCII, and holds no character of ``chars``:
    one C-level scan of the texts joined, instead of a Python call per text."""
    if not len(u):
        return True
    if u.map(type).ne(str).any():
        return False
    joined = "".join(u.tolist())
    return joined.isascii() and not any(ch in joined for ch in chars)


def _single_spaced(u: pd.Series) -> pd.Series:
    """Each text with its runs of white space made one space and its ends trimmed; texts
    with no white space at all (an ID column) are already so."""
    if ascii_without(u, _ASCII_SPACE):
        return u.astype(object)
    return u.astype(str).str.split().str.join(" ")


def on_uniques(text: pd.Series, fn, skip_numbers: bool = False,
               uniques: Uniques | None = None) -> pd.Series:
    """``fn`` (Series of distinct strings → Series) applied once per distinct value and
    spread back over ``text``. Sales columns repeat values (neighbourhoods, dates), and
    pandas string methods cost per element. With ``skip_numbers`` plain numbers (which
    are neither blank nor an error) get NaN without being looked at. ``uniques``: the
    distinct values of ``text`` already found (the same cells, the same index)."""
    return (uniques or Uniques(text)).apply(fn, skip_numbers)


# What a plain text cell may not hold for the fast path of plain_text: white space other
# than single inner spaces (trimmed and single-spaced already), an empty text, or the
# marks of an error value ('#N/A', 'Err:502'). NUL separates the texts joined.
_NOT_PLAIN = ("\t", "\n", "\r", "\x0b", "\x0c", "\x1c", "\x1d", "\x1e", "\x1f", "  ",
              "\x00 ", " \x00", "\x00\x00", "#")


def plain_text(col: pd.Series) -> bool:
    """True when every cell of ``col`` is a non-empty ASCII text, trimmed, single-spaced and
    no error value: the careful rules would read each as itself with no reason (no blank,
    no error, nothing to respace). One numpy scan of the texts' bytes joined decides it, so
    an ID or neighbourhood column of a large file skips the per-value rules altogether."""
    return plain_bytes(col) is not None


def plain_bytes(col: pd.Series) -> bytes | None:
    """The ASCII bytes of the cells of ``col`` joined by NUL when :func:`plain_text` holds
    for it, else None."""
    n = len(col)
    if not n or col.dtype != object:
        return None
    v = col.to_numpy(dtype=object)
    if pd.api.types.infer_dtype(v, skipna=False) != "string":
        return None
    joined = "\x00".join(v.tolist())
    if not joined.isascii():      # O(1): CPython knows whether a str is ASCII
        return None
    raw = joined.encode("ascii")
    return raw if _plain_bytes(raw, n) else None


_SPACE, _NUL, _HASH, _COLON = 32, 0, 35, 58
# the ASCII white space str.split() splits at, but for the space: tab ... \x1f
_SPLITS = np.zeros(256, dtype=bool)
_SPLITS[[9, 10, 11, 12, 13, 28, 29, 30, 31]] = True


def _plain_bytes(raw: bytes, n: int) -> bool:
    """:func:`plain_text` on the ASCII bytes ``raw`` of ``n`` texts joined by NUL: n - 1 NULs
    (no NUL inside a text), no empty text, no space at a text's ends or beside another
    space, none of :data:`_NOT_PLAIN`'s marks ('#', 'ERR:' in any case, white space but
    the space). The bytes up to the space are few: they are looked at by position."""
    a = np.frombuffer(raw, dtype=np.uint8)
    if not len(a) or a[0] <= _SPACE and a[0] in (_SPACE, _NUL) or \
            a[-1] <= _SPACE and a[-1] in (_SPACE, _NUL):
        return False
    at = np.flatnonzero(a <= _SPACE)
    kind = a[at]
    gap = (kind == _NUL) | (kind == _SPACE)
    if int(np.count_nonzero(kind == _NUL)) != n - 1:
        return False
    if not gap.all() and _SPLITS[kind].any():
        return False
    # a space or a NUL right beside a space or a NUL: '  ', an empty text, a text's end
    if (gap[1:] & gap[:-1] & (np.diff(at) == 1)).any():
        return False
    if b"#" in raw:
        return False
    if b":" in raw:
        colon = np.flatnonzero(a[3:] == _COLON) + 3
        low = a[np.concatenate((colon - 3, colon - 2, colon - 1))] | np.uint8(0x20)
        low = low.reshape(3, len(colon))     # ASCII letters in lower case ('E' → 'e')
        if ((low[0] == ord("e")) & (low[1] == ord("r")) & (low[2] == ord("r"))).any():
            return False
    return True


def _no_reasons(col: pd.Series) -> tuple[pd.Series, pd.Series]:
    """(reason per cell, all NaN; mask of cells that hold a value, all True). The reasons
    are a read-only view of one NaN (no n-long object array, which notna() walks)."""
    return (_no_reason(col.index), pd.Series(True, index=col.index))


def _no_reason(index: pd.Index) -> pd.Series:
    """A reason per row of ``index``, all NaN: a read-only view of one float NaN."""
    return pd.Series(np.broadcast_to(np.float64(np.nan), (len(index),)), index=index,
                     copy=False)


def _blank_mask(col: pd.Series, kinds: pd.Series | None = None,
                uniques: Uniques | None = None) -> pd.Series:
    if isinstance(col.dtype, np.dtype) and col.dtype.kind in "fiubM":
        return col.isna()
    if kinds is None and plain_text(col):
        return pd.Series(False, index=col.index)
    kinds = cell_kinds(col) if kinds is None else kinds
    out = col.isna() | kinds.eq(BLANK)
    text = kinds.eq(TEXT)
    if text.any():
        blank = on_uniques(col[text], lambda u: u.astype(str).str.strip().eq(""),
                           skip_numbers=True, uniques=uniques)
        out[text] = out[text].to_numpy() | blank.eq(True).to_numpy()
    return out


def _blank_frame(frame: pd.DataFrame) -> pd.DataFrame:
    return pd.DataFrame({c: _blank_mask(frame[c]).to_numpy() for c in frame.columns},
                        index=frame.index)


def _numbers_of(cells: pd.Series) -> pd.Series:
    """Number cells (int, float, numpy, Decimal) → floats; huge ints become ±inf."""
    if cells.dtype == object and pd.api.types.infer_dtype(cells, skipna=False) == "floating":
        # floats only (what calamine hands over for a sheet's numbers): a C-level copy is
        # what to_numeric gives them (with ints mixed in, to_numeric may type the column as
        # integers and turn -0.0 into 0: those take its path)
        return pd.Series(cells.to_numpy().astype(float), index=cells.index, name=cells.name)
    try:
        return pd.to_numeric(cells, errors="coerce").astype(float)
    except (OverflowError, TypeError, ValueError):
        def _one(v):   # rare path only: integers beyond float range
            try:
                return float(v)
            except OverflowError:
                return float("inf") if v > 0 else float("-inf")
        return cells.map(_one).astype(float)


def _error_names(col: pd.Series, kinds: pd.Series,
                 uniques: Uniques | None = None) -> pd.Series:
    """The error value's name where a cell holds one ('#N/A', '#DIV/0! (code …)'), else NaN.
    ``uniques``: the distinct values of the column's text cells, when already found."""
    out = pd.Series(np.nan, index=col.index, dtype=object)
    text = kinds.eq(TEXT)
    if text.any():
        def names(u: pd.Series) -> pd.Series:
            t = u.astype(str).str.strip().str.upper()
            hit = t.isin(ERROR_TEXTS) | t.str.fullmatch(r"ERR:\d+")
            return t.str.replace("ERR:", "Err:", regex=False).where(hit)
        found = on_uniques(col[text], names, skip_numbers=True, uniques=uniques)
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


def _missing_reasons(col: pd.Series, kinds: pd.Series, uniques: Uniques | None = None
                     ) -> tuple[pd.Series, pd.Series]:
    """(reason per cell or NaN, mask of cells that hold a value); ``uniques``: the distinct
    values of the column's text cells (``col[kinds == TEXT]``), when already found."""
    if uniques is None and plain_text(col):
        return _no_reasons(col)
    blank = _blank_mask(col, kinds, uniques)
    err = _error_names(col, kinds, uniques)
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


def _refuse(bad: pd.Series, col: pd.Series, message: str, name: str) -> None:
    """Raise :class:`CellErrors` listing every cell of ``col`` marked in ``bad``."""
    rows = bad.index[bad.to_numpy(dtype=bool)]
    raise CellErrors([CellProblem(r, name, _shown(col[r]), message) for r in rows])


# The fit and its checks square values and residuals and take fourth powers (kurtosis):
# (1e60)^4 times any number of sales stays below the largest float (1.8e308), and (1e-60)^4
# above the smallest normal one (2.2e-308). No price, area or age lies outside: such a
# value is a typing error or a column scaled by accident.
MAX_MAGNITUDE = 1e60
MIN_MAGNITUDE = 1e-60


def _refuse_out_of_range(v: np.ndarray, col: pd.Series, name: str) -> None:
    """Raise :class:`CellErrors` for the values of ``v`` (floats of ``col``) beyond
    ±:data:`MAX_MAGNITUDE` or nonzero and nearer zero than :data:`MIN_MAGNITUDE`."""
    size = np.abs(v)
    big, tiny = size > MAX_MAGNITUDE, (size < MIN_MAGNITUDE) & (size > 0)
    if not (big.any() or tiny.any()):
        return
    problems = [CellProblem(r, name, _shown(col[r]), "is too large for the fit (beyond "
                            f"±{MAX_MAGNITUDE:g}, which no price, area or count reaches). "
                            "Correct the cell.")
                for r in col.index[big]]
    problems += [CellProblem(r, name, _shown(col[r]), "is too close to zero for the fit "
                             f"(nonzero values need a size of at least {MIN_MAGNITUDE:g}). "
                             "Correct the cell or enter 0.")
                 for r in col.index[tiny]]
    raise CellErrors(problems)


def _is_bool_text(text: pd.Series) -> pd.Series:
    return text.astype(str).str.strip().str.upper().isin(("TRUE", "FALSE"))


def to_numbers(col: pd.Series, name: str, hint_categorical: bool = False,
               booleans: bool = True) -> tuple[pd.Series, pd.Series]:
    """Cells → floats; returns (values, missing reason per cell or NaN). TRUE/FALSE read
    as 1/0 unless ``booleans`` is False (an amount such as a price, which a yes/no cell
    cannot be: refused). Values beyond ±1e60, or nonzero and nearer zero than 1e-60,
    are refused (see :data:`MAX_MAGNITUDE`)."""
    if isinstance(col.dtype, np.dtype) and col.dtype.kind in "fiu":
        return _plain_numbers(col, name)
    if col.dtype == object and len(col) and \
            pd.api.types.infer_dtype(col, skipna=False) == "floating":
        # float cells only (a sheet's numbers as calamine hands them over, NaN for a blank):
        # the same rules on the array, without typing each cell (a subject row's columns)
        return _plain_numbers(pd.Series(col.to_numpy(dtype=float), index=col.index,
                                        name=col.name, copy=False), name)
    kinds = cell_kinds(col)
    reason, present = _missing_reasons(col, kinds)
    values = pd.Series(np.nan, index=col.index, dtype=float)
    num = present & kinds.eq(NUMBER)
    if num.any():
        values[num] = _numbers_of(col[num]).to_numpy()
    boo = present & kinds.eq(BOOL)
    text = present & kinds.eq(TEXT)
    if not booleans:
        yes_no = boo | (text & _is_bool_text(col.where(text, "")))
        if yes_no.any():
            _refuse(yes_no, col, "is a TRUE/FALSE value, not an amount. Enter the amount "
                    "(a sale price is a number) or leave the cell blank.", name)
    if boo.any():
        values[boo] = col[boo].astype(bool).astype(float).to_numpy()
    if text.any():
        values[text] = parse_number_text(col[text]).to_numpy()
    ok = np.isfinite(values.to_numpy())
    infinite = present & num & ~ok
    if infinite.any():
        _refuse(infinite, col, "is not a finite number. Enter a number or leave the cell "
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
            if bad.sum() >= 0.5 * present.sum():   # a column of words: one message, not n
                raise IntakeError(f"Column '{name}', row {row}: {_shown(cell)} is not a number. "
                                  f"Neither are {int(bad.sum()) - 1} more of its cells. " + fix,
                                  column=name, row=int(row))
        _refuse(bad, col, "is not a number. " + fix, name)
    _refuse_out_of_range(values.to_numpy(), col, name)
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
        _refuse_out_of_range(v, col, name)
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
        v = np.where(np.asarray(codes), np.nan, v)
    infinite = np.isinf(v)
    if infinite.any():
        _refuse(pd.Series(infinite, index=col.index), col, "is not a finite number. "
                     "Enter a number or leave the cell blank.", name)
    _refuse_out_of_range(v, col, name)
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


def _plain_int_array(col: pd.Series) -> np.ndarray | None:
    """The integers of an integer-typed column when the rules read each as the label
    ``str(n)``: all exact as floats (|n| < 2**53) and none of them a COM error code (all
    below -2e9); else None."""
    if not (isinstance(col.dtype, np.dtype) and col.dtype.kind in "iu" and len(col)):
        return None
    v = col.to_numpy()
    return v if v.max() < 2 ** 53 and v.min() >= -2e9 else None


def to_labels(col: pd.Series, name: str) -> tuple[pd.Series, pd.Series]:
    """Cells → category labels (text); 3.0 becomes '3', TRUE becomes 'TRUE',
    a date becomes YYYY-MM-DD. Text is trimmed; case is kept."""
    if plain_text(col):            # each cell its own label (an ID or category column)
        return pd.Series(col.to_numpy(dtype=object), index=col.index, dtype=object), \
            _no_reasons(col)[0]
    ints = _plain_int_array(col)
    if ints is not None:           # integer IDs of a DataFrame or Parquet file: 104 → '104'
        return pd.Series(np.array(list(map(str, ints.tolist())), dtype=object),
                         index=col.index, dtype=object), _no_reasons(col)[0]
    kinds = cell_kinds(col)
    is_text = kinds.eq(TEXT)
    uniques = Uniques(col[is_text]) if is_text.any() else None   # hashed once, used thrice
    reason, present = _missing_reasons(col, kinds, uniques)
    labels = pd.Series(np.nan, index=col.index, dtype=object)
    text = present & is_text
    if uniques is not None and text.any():
        spaced = uniques.apply(_single_spaced)
        labels[text] = spaced[text[is_text].to_numpy()].to_numpy()
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


# Dates live in their own module; these names stay importable from here for existing callers.
from plumbrule.intake.dates import _iso_dates, _serial_dates, to_dates  # noqa: E402,F401

"""Totals rows: rows of a sales sheet that summarise the sales above them, not sales.

A row is a totals row when

- its first filled cell is text saying Total, Totals, Subtotal, Grand total, Sum, Average,
  Mean or Count (any case, alone or starting the cell: 'Total 2025', 'Average:'). Only the
  row's first filled cell counts: a Condition column holding 'Average' or a remark
  'Sum paid in cash' sits to the right of the sale's ID or address; or
- its numbers in the numeric columns equal the sums or the means of the rows above it: at
  least two filled numeric columns, not all zero, every one of them within 1e-9 (relative)
  of the sum or the mean of the same rows, at least two rows. "The rows above" are all
  sales rows above it, or those since the previous totals row (a subtotal). A row equal to
  the one row above is a duplicate, not a total, and is left to the duplicates rule.

Found with cumulative sums over the whole table; passes repeat only while a pass finds
a new totals row (a grand total below subtotals equals the sum of the sales rows once the
subtotals are known).
"""

from __future__ import annotations

from dataclasses import replace
from typing import Iterable

import numpy as np
import pandas as pd

from plumbrule.intake.cells import (
    NUMBER,
    TEXT,
    _numbers_of,
    cell_kinds,
    on_uniques,
    parse_number_text,
)
from plumbrule.intake.table import SheetTable, blank_cells

TOTALS = "totals row"
_RTOL = 1e-9
_PASSES = 6          # each pass can only add rows; real sheets settle in two
_LABEL_RE = r"(?i)^(?:grand\s*total|sub-?\s*totals?|totals?|sum|average|mean|count)\b"
_LABEL_WORDS = ("total", "sum", "average", "mean", "count")   # each label holds one


def totals_rows(table: SheetTable, numeric_columns: Iterable[str]) -> pd.DataFrame:
    """One record per totals row of ``table`` (the screening log's columns: row, column,
    value, rule 'totals row', limit, reason), in sheet-row order. For a row found by its
    label, ``column`` is the label's column and value/limit are NaN; for a row found by its
    numbers, ``column`` is the first matching numeric column, ``value`` its number and
    ``limit`` the sum or mean of the rows above it that it equals."""
    from plumbrule.screening import LOG_COLUMNS   # here: screening imports the settings
    frame = table.frame
    numeric = [c for c in dict.fromkeys(numeric_columns) if c in frame.columns]
    labelled, label_col, label_text = _labelled(frame, blank_cells(table))
    found = labelled.copy()
    col_of = np.full(len(frame), -1)
    val = np.full(len(frame), np.nan)
    lim = np.full(len(frame), np.nan)
    how = np.zeros(len(frame), dtype=object)     # 'sum' / 'mean' where found by numbers
    since = np.zeros(len(frame), dtype=np.int64)
    cols = [_floats(frame[c]) for c in numeric] if len(numeric) >= 2 and len(frame) >= 3 \
        else []
    if cols and not (QUICK and not found.any() and _no_candidate(cols)):
        x = np.column_stack(cols)
        for _ in range(_PASSES):
            with np.errstate(over="ignore", invalid="ignore"):   # huge values: no total
                hit, first, limit, kind, begin = _summing(x, found)
            new = hit & ~found
            if not new.any():
                break
            found |= new
            col_of[new] = first[new]
            val[new] = x[new, first[new]]
            lim[new] = limit[new]
            how[new] = kind[new]
            since[new] = begin[new]
    rows = np.flatnonzero(found)
    by_label = labelled[rows]
    names = np.array(numeric + [""], dtype=object)
    column = np.where(by_label, label_col[rows], names[col_of[rows]])
    listed = "', '".join(numeric)      # the column names, once
    sheet_rows = frame.index.to_numpy(dtype=np.int64)
    how_found = how[rows]
    how_found[by_label] = ""
    text_found = label_text[rows]
    text_found[~by_label] = ""
    above = (pd.Series(how_found, dtype=object) + " of the sales in rows "
             + pd.Series(sheet_rows[since[rows]]).astype(str) + "-"
             + pd.Series(sheet_rows[np.maximum(rows - 1, 0)]).astype(str))
    reason = np.where(
        by_label,
        pd.Series(text_found, dtype=object).radd("'").add(
            "' marks a totals row, not a sale").to_numpy(dtype=object),
        above.radd(f"its '{listed}' equal the ").add(
            ": a totals row, not a sale").to_numpy(dtype=object))
    out = pd.DataFrame({"row": frame.index.to_numpy(dtype=np.int64)[rows],
                        "column": pd.Series(column, dtype=object).to_numpy(),
                        "value": np.where(by_label, np.nan, val[rows]), "rule": TOTALS,
                        "limit": np.where(by_label, np.nan, lim[rows]),
                        "reason": pd.Series(reason, dtype=object).to_numpy()})
    return out[LOG_COLUMNS]


def table_without(table: SheetTable, rows: Iterable[int]) -> SheetTable:
    """``table`` without the given sheet rows (rows not in it are ignored)."""
    drop = table.frame.index.isin(np.asarray(list(rows), dtype=np.int64))
    kept = table.frame[~drop]
    left = set(kept.index.tolist())
    hidden = tuple(r for r in table.hidden_rows if r in left)
    return replace(table, frame=kept, hidden_rows=hidden)


def _labelled(frame: pd.DataFrame, blanks: pd.DataFrame
              ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(row is labelled a totals row, the label's column, the label's text: both set in
    the rows labelled only); ``blanks``: the frame's blank cells (:func:`blank_cells`)."""
    n = len(frame)
    hit = np.zeros(n, dtype=bool)
    # set where ``hit`` only (zeros: an object array of n strings costs a fill of n)
    col = np.zeros(n, dtype=object)
    text = np.zeros(n, dtype=object)
    if not n or not frame.shape[1]:
        return hit, col, text
    if len(blanks.columns) and not blanks.iloc[:, 0].to_numpy().any():
        first = np.zeros(n, dtype=np.int64)     # the usual sheet: no blank in its first column
    else:
        blank = blanks.to_numpy(dtype=bool)
        first = np.where(blank.all(axis=1), -1, (~blank).argmax(axis=1))  # first filled cell
    for j, name in enumerate(frame.columns):   # columns, not rows
        at = first == j
        if not at.any():
            continue
        cells = frame.iloc[:, j][at]
        words = cell_kinds(cells).eq(TEXT).to_numpy()
        if not words.any():
            continue
        if _no_label_word(cells[words]):        # one scan, before hashing the texts
            continue
        said = on_uniques(cells[words], _says_total).to_numpy(dtype=bool)
        idx = np.flatnonzero(at)[np.flatnonzero(words)[said]]
        hit[idx] = True
        col[idx] = name
        text[idx] = cells[words][said].astype(str).str.split().str.join(" ").to_numpy()
    return hit, col, text


def _no_label_word(u: pd.Series) -> bool:
    """True when ``u`` (text cells) are ASCII and none holds a label's word in any case,
    so none can start with a totals label (a column of IDs): one scan of them joined."""
    joined = "".join(u.astype(str).tolist())
    return joined.isascii() and not any(w in joined.lower() for w in _LABEL_WORDS)


def _says_total(u: pd.Series) -> pd.Series:
    """Whether each text starts with a totals label."""
    if _no_label_word(u):
        return pd.Series(False, index=u.index)
    return u.astype(str).str.strip().str.contains(_LABEL_RE, regex=True)


def _floats(col: pd.Series) -> np.ndarray:
    """A column's numbers (number cells and numbers typed as text); NaN for anything else.
    Never raises: a cell that is not a number is clean()'s to report."""
    if isinstance(col.dtype, np.dtype) and col.dtype.kind in "fiu":
        return col.to_numpy(dtype=float)
    kinds = cell_kinds(col)
    out = np.full(len(col), np.nan)
    num = kinds.eq(NUMBER).to_numpy()
    if num.any():
        out[num] = _numbers_of(col[num]).to_numpy()
    text = kinds.eq(TEXT).to_numpy()
    if text.any():
        out[text] = parse_number_text(col[text]).to_numpy()
    out[~np.isfinite(out)] = np.nan
    return out


QUICK = True       # tests turn the shortcut below off to compare it with the full passes


def _no_candidate(cols: list[np.ndarray]) -> bool:
    """True when the first pass of :func:`_summing` over the columns ``cols`` (no row known
    yet) can find no totals row: every cell filled, so each row's first filled column is
    the first, and no row's first number equals the sum or the mean of those above it.
    Decided on that one column, without the n × k table."""
    if not all(np.isfinite(c).all() for c in cols):
        return False
    xf = cols[0]
    n = len(xf)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        tot = np.concatenate([[0.0], np.cumsum(xf)])[:n]
        cnt = np.arange(n, dtype=float)
        mean = tot / cnt
        cand = np.abs(xf - tot) <= _RTOL * np.maximum(np.abs(xf), np.abs(tot))
        cand |= np.abs(xf - mean) <= _RTOL * np.maximum(np.abs(xf), np.abs(mean))
    return not cand.any()


def _summing(x: np.ndarray, known: np.ndarray):
    """Rows whose filled numbers all equal the sum or the mean of the sales rows above them
    (all of them, or those since the last known totals row). Returns (hit, first filled
    column, its sum or mean, 'sum' or 'mean', position of the first row summed) per row."""
    n, k = x.shape
    filled = np.isfinite(x)
    sale = ~known
    # Sums of the rows above row i: all (cs[i]) or since the last known totals row.
    pos = np.arange(n)
    last = np.maximum.accumulate(np.where(known, pos, -1))
    prev = np.concatenate([[-1], last[:-1]])          # last totals row strictly above i
    start = prev + 1
    n_filled = filled.sum(axis=1)
    # A total must match in its first filled column: the running sums of the columns that
    # come first in some row (vectors, not n × k arrays) pick the few candidate rows, and
    # the whole test runs on those alone.
    f = filled.argmax(axis=1)
    xf = x[pos, f]
    tot_f, cnt_f = np.empty(n), np.empty(n)
    tot_s, cnt_s = np.empty(n), np.empty(n)
    for j in np.unique(f):
        at = f == j
        ok = filled[:, j] & sale
        cs_j = np.concatenate([[0.0], np.cumsum(np.where(ok, x[:, j], 0.0))])
        cc_j = np.concatenate([[0.0], np.cumsum(ok)])
        tot_f[at], cnt_f[at] = cs_j[pos[at]], cc_j[pos[at]]
        tot_s[at], cnt_s[at] = cs_j[start[at]], cc_j[start[at]]
    cand = np.zeros(n, dtype=bool)
    with np.errstate(invalid="ignore", divide="ignore"):
        for tot, cnt in ((tot_f, cnt_f), (tot_f - tot_s, cnt_f - cnt_s)):
            mean = tot / cnt
            cand |= np.abs(xf - tot) <= _RTOL * np.maximum(np.abs(xf), np.abs(tot))
            cand |= np.abs(xf - mean) <= _RTOL * np.maximum(np.abs(xf), np.abs(mean))
    rows = np.flatnonzero(cand & (n_filled >= 2))
    full = (np.zeros(n, dtype=bool), np.zeros(n, dtype=np.int64), np.full(n, np.nan),
            np.zeros(n, dtype=object), np.zeros(n, dtype=np.int64))
    if not len(rows):          # the usual sheet: no row matches in its first column
        return full
    v = np.where(filled & sale[:, None], x, 0.0)
    c = np.where(filled & sale[:, None], 1.0, 0.0)
    zero = np.zeros((1, k))
    cs, cc = np.vstack([zero, np.cumsum(v, axis=0)]), np.vstack([zero, np.cumsum(c, axis=0)])
    # Whether the rows above all hold the row's own values: from cumulative sums of squares.
    c2 = np.vstack([zero, np.cumsum(v * v, axis=0)])
    out = _summing_rows(x[rows], filled[rows], n_filled[rows], cs[rows], cc[rows], c2[rows],
                        cs[start[rows]], cc[start[rows]], c2[start[rows]], start[rows])
    for whole, part in zip(full, out, strict=True):
        whole[rows] = part
    return full


def _summing_rows(x, filled, n_filled, cs, cc, c2, cs0, cc0, c20, start):
    """:func:`_summing` on some rows: their values and the cumulative sums, counts and
    squares of the sales above them (to the row, and to the start of its window)."""
    n = len(x)
    windows = ((cs, cc, c2, np.zeros(n, dtype=np.int64)),
               (cs - cs0, cc - cc0, c2 - c20, start))
    some = (np.abs(np.where(filled, x, 0.0)) > 0).any(axis=1)
    hit = np.zeros(n, dtype=bool)
    first = np.zeros(n, dtype=np.int64)
    limit = np.full(n, np.nan)
    kind = np.full(n, "", dtype=object)
    since = np.zeros(n, dtype=np.int64)
    for total, count, squares, begin in windows:    # two windows, not a loop over rows
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = total / count
        # Sum over the rows above of (value - x)^2: zero when they all equal the row, which
        # makes it their mean without being a total (a run of identical sales).
        spread = squares - 2 * np.where(filled, x, 0.0) * total + count * np.where(
            filled, x, 0.0) ** 2
        varied = (filled & (spread > (_RTOL * np.maximum(np.abs(x), 1.0)) ** 2 * count)
                  ).any(axis=1)
        enough = (count >= 2) | ~filled
        tol = _RTOL * np.maximum(np.abs(x), np.abs(total))
        is_sum = ~filled | (np.abs(x - total) <= tol)
        tol_m = _RTOL * np.maximum(np.abs(x), np.abs(mean))
        is_mean = ~filled | (np.abs(x - mean) <= tol_m)
        for match, word, ref, also in ((is_sum, "sum", total, True),
                                       (is_mean, "mean", mean, varied)):
            ok = (match.all(axis=1) & enough.all(axis=1) & (n_filled >= 2) & some & ~hit
                  & also)
            if ok.any():
                f = filled.argmax(axis=1)
                hit |= ok
                first[ok] = f[ok]
                limit[ok] = ref[ok, f[ok]]
                kind[ok] = word
                since[ok] = begin[ok]
    return hit, first, limit, kind, since

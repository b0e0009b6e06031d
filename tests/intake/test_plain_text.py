"""The fast path for plain text columns (cells.plain_text) gives exactly what the careful
cell-by-cell rules give: the same labels, dates, blanks and reasons, and the same errors.

Reference: the careful rules themselves (plain_text forced off), on generated columns whose
texts mix what the fast path must refuse (spaces at the ends or doubled, tabs, NUL, empty
texts, error values in any case, non-ASCII) with what it may take."""

from __future__ import annotations

import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from plumbrule.errors import PlumbError
from plumbrule.intake import cells, dates

PIECES = ["Fenby Park", "Old Quay", "Q-1001", "104", "12.5", " lead", "trail ", "two  spaces",
          "tab\there", "line\nbreak", "", " ", "#N/A", "#n/a", "err:502", "ERR:7", "Err:x",
          "Müller", "nul\x00x", "a#b", "TRUE", "2025-03-14", "14/03/2025", "3/14/2025",
          "2025-02-30", "45000", "x\x1fy", "\u00a0nbsp"]


def _both(fn, col, *args, monkeypatch):
    """(fast result or error text, careful result or error text)."""
    def run():
        try:
            return fn(col, *args)
        except PlumbError as err:
            return f"error: {err}"
    fast = run()
    with monkeypatch.context() as m:
        m.setattr(cells, "plain_text", lambda c: False)
        m.setattr(dates, "plain_bytes", lambda c: None)
        slow = run()
    return fast, slow


def _same(a, b):
    if isinstance(a, str) or isinstance(b, str):
        assert a == b
        return
    for x, y in zip(a, b, strict=True):
        pd.testing.assert_series_equal(x, y, check_dtype=False, check_names=False)


texts = st.lists(st.sampled_from(PIECES), min_size=1, max_size=12)


@settings(max_examples=300, deadline=None)
@given(texts)
def test_labels_and_reasons_match_the_careful_rules(values):
    mp = pytest.MonkeyPatch()
    col = pd.Series(values, index=range(2, 2 + len(values)), dtype=object)
    _same(*_both(cells.to_labels, col, "Neighbourhood", monkeypatch=mp))
    _same(*_both(lambda c: cells._missing_reasons(c, cells.cell_kinds(c)), col,
                 monkeypatch=mp))
    fast, slow = _both(cells._blank_mask, col, monkeypatch=mp)
    assert fast.tolist() == slow.tolist()


DATE_PIECES = ["2025-03-14", "2024-12-01", "14/03/2025", "3/4/2025", "2025/03/14",
               "2025-02-30", "45000", "soon", " 2025-03-14", "", "#N/A", "2025-03-14 10:30",
               # the byte-level ISO reading (dates._plain_iso_dates) must refuse these as the
               # careful rules do: no such day or month, beyond datetime64[ns], year 0,
               # one-digit parts, other separators, a letter among the digits
               "2024-02-29", "2023-02-29", "2100-02-29", "2000-02-29", "2025-04-31",
               "2025-13-01", "2025-00-10", "2025-01-00", "1677-09-22", "1677-09-21",
               "2262-04-11", "2262-04-12", "0000-01-01", "9999-12-31", "2025-3-14",
               "2025.03.14", "2025-03-1a", "2025/03-14", "1899-12-31"]


@settings(max_examples=600, deadline=None)
@given(st.lists(st.sampled_from(DATE_PIECES), min_size=1, max_size=10),
       st.sampled_from(["auto", "DMY", "MDY", "YMD"]))
def test_dates_match_the_careful_rules(values, order):
    mp = pytest.MonkeyPatch()
    col = pd.Series(values, index=range(5, 5 + len(values)), dtype=object)
    _same(*_both(dates.to_dates, col, "Sale date", order, monkeypatch=mp))


def test_the_fast_path_takes_plain_columns_and_refuses_the_rest():
    # the behaviour the speed depends on: plain IDs, names and ISO dates go the fast way
    assert cells.plain_text(pd.Series(["Q-1001", "Fenby Park", "2025-03-14"], dtype=object))
    for odd in ["", " x", "x ", "a  b", "a\tb", "#N/A", "err:1", "é", "a\x00b"]:
        assert not cells.plain_text(pd.Series(["ok", odd], dtype=object)), repr(odd)
    assert not cells.plain_text(pd.Series(["ok", None], dtype=object))
    assert not cells.plain_text(pd.Series([1.0, 2.0]))


def _plain_text_as_written(col: pd.Series) -> bool:
    """plain_text's rules as one scan of the texts joined (what cells.plain_text decided
    before it read the bytes with numpy): the reference for the byte-level reading."""
    v = col.tolist()
    if not v or col.dtype != object or not all(type(x) is str for x in v):
        return False
    joined = "\x00".join(v)
    if not joined.isascii() or joined.count("\x00") != len(v) - 1:
        return False
    if not joined or joined[0] in " \x00" or joined[-1] in " \x00":
        return False
    marks = ("\t", "\n", "\r", "\x0b", "\x0c", "\x1c", "\x1d", "\x1e", "\x1f", "  ",
             "\x00 ", " \x00", "\x00\x00", "#")
    return not any(m in joined for m in marks) and "ERR:" not in joined.upper()


CHARS = st.sampled_from(list("aZ09 -:#\t\n\r\x0b\x0c\x1c\x1f\x01\x1b\x00eErR") + ["é"])


@settings(max_examples=1500, deadline=None)
@given(st.lists(st.text(CHARS, max_size=6), min_size=1, max_size=8))
def test_plain_text_reads_the_bytes_as_the_rules_say(values):
    # hostile texts: NUL, control characters that are and are not white space, spaces at
    # the ends and doubled, 'err:' split over characters, '#', empty texts, non-ASCII
    col = pd.Series(values, dtype=object)
    assert cells.plain_text(col) == _plain_text_as_written(col), values


def test_plain_iso_dates_are_the_careful_dates_over_the_whole_range():
    # every day datetime64[ns] holds, written YYYY-MM-DD (pandas' calendar as the reference)
    days = pd.date_range("1677-09-22", "2262-04-11", freq="D")
    col = pd.Series(days.strftime("%Y-%m-%d"), dtype=object)
    raw = cells.plain_bytes(col)
    assert raw is not None
    got = dates._plain_iso_dates(raw, len(col))
    assert got is not None and (got == days.to_numpy()).all()
    # the same through to_dates, which refuses columns spanning more than 146 years
    for part in (col[:40000], col[-40000:]):
        fast, slow = _both(dates.to_dates, part, "Sale date", "auto",
                           monkeypatch=pytest.MonkeyPatch())
        _same(fast, slow)

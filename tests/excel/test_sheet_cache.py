"""The content cache behind the worksheet functions (plumbrule.excel.cache).

Reference: the behaviour a user relies on: after any edit of the sales range, every
plumbrule cell shows the analysis of the cells as they are now, never a result kept from
other cells (docs/excel.md, "How ranges are read"); and a result served from the cache
is the one a fresh analysis gives (the engine itself, ``analysis.analyze``).

Blocks are made as xlwings hands a range over: floats, text, None, bools and datetimes,
each call with fresh objects (a pickle round trip: a new read of the range gives new
objects, equal in value and type).
"""

from __future__ import annotations

import datetime as dt
import math
import pickle

import numpy as np
import pytest

from plumbrule.analysis import analyze
from plumbrule.demo.town import DEMO_SETTINGS, demo_sales
from plumbrule.excel import cache as cache_mod
from plumbrule.excel import functions as sf
from plumbrule.excel.cache import SheetCache, block_signature
from sheet_cells import expected_cells


def plain_block(n: int = 300) -> list[list]:
    """Cells marshal writes itself: text, floats, bools, None and ''."""
    rows = [["Sale ID", "Sale price", "Rooms", "Garage", "Notes"]]
    for i in range(n):
        rows.append([f"S-{i}", 150000.0 + 10 * i, float(1 + i % 3), i % 3 == 0,
                     "" if i % 7 == 0 else (None if i % 2 else "corner lot")])
    return rows


def dated_block(n: int = 300) -> list[list]:
    """The same with a column of sale dates (datetimes, as xlwings reads date cells)."""
    rows = plain_block(n)
    rows[0].append("Sale date")
    for i, r in enumerate(rows[1:]):
        r.append(dt.datetime(2024, 1, 1) + dt.timedelta(days=i))
    return rows


def fresh(rows: list[list]) -> list[list]:
    return pickle.loads(pickle.dumps(rows))


class Counting:
    """A compute function that counts its calls and returns a new object each time."""

    def __init__(self) -> None:
        self.calls = 0

    def __call__(self, rows):
        self.calls += 1
        return ("result", self.calls)


def _set(i: int, j: int, value):
    def change(rows):
        rows[i][j] = value
    return change


def _insert_row(rows):
    rows.insert(150, list(rows[150]))


def _insert_row_same_length(rows):      # one row inserted, the last one dropped
    rows.insert(150, list(rows[151]))
    rows.pop()


# Block rows (header = 0): 1 Garage TRUE, 2 Garage FALSE and Notes None, 4 Rooms 1.0,
# 8 Notes ''.
CHANGES = {
    "one price mid-block": lambda r: r[157].__setitem__(1, r[157][1] + 1.0),
    "the last cell": lambda r: r[-1].__setitem__(len(r[-1]) - 1, "changed"),
    "a row inserted": _insert_row,
    "a row inserted, the last dropped": _insert_row_same_length,
    "a header renamed": _set(0, 1, "Price"),
    "a number as text of the same number": lambda r: r[83].__setitem__(1, f"{r[83][1]:.0f}"),
    "1.0 becomes 1": _set(4, 2, 1),
    "1.0 becomes TRUE": _set(4, 2, True),
    "FALSE becomes 0.0": _set(2, 3, 0.0),
    "TRUE becomes 1": _set(1, 3, 1),
    "None becomes ''": _set(2, 4, ""),
    "'' becomes None": _set(8, 4, None),
    "a row made shorter": lambda r: r[200].pop(),
}


def test_the_blocks_hold_what_the_changes_assume():
    rows = plain_block()
    assert rows[4][2] == 1.0 and type(rows[4][2]) is float
    assert rows[1][3] is True and rows[2][3] is False
    assert rows[2][4] is None and rows[8][4] == ""
    assert block_signature(plain_block()) is not None       # marshal writes every cell
    assert block_signature(dated_block()) is None           # datetimes: compared as cells


@pytest.mark.parametrize("make", [plain_block, dated_block], ids=["plain", "dated"])
def test_an_unchanged_block_is_served_the_stored_result(make):
    cache, compute = SheetCache(), Counting()
    first = cache.get_or_compute(fresh(make()), "k", compute)
    again = [cache.get_or_compute(fresh(make()), "k", compute) for _ in range(3)]
    assert compute.calls == 1 and all(a is first for a in again)
    assert cache.stats().hits == 3


@pytest.mark.parametrize("make", [plain_block, dated_block], ids=["plain", "dated"])
@pytest.mark.parametrize("name", list(CHANGES))
def test_a_changed_block_is_never_served_the_stored_result(make, name):
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(make()), "k", compute)
    changed = fresh(make())
    CHANGES[name](changed)
    assert changed != make() or name.startswith(("1.0", "FALSE", "TRUE"))   # == is loose
    got = cache.get_or_compute(changed, "k", compute)
    assert got == ("result", 2) and compute.calls == 2, name
    # and the changed block is served its own result afterwards
    assert cache.get_or_compute(fresh(changed), "k", compute) == ("result", 2)


def test_a_date_moved_by_one_second_is_a_new_block():
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(dated_block()), "k", compute)
    changed = fresh(dated_block())
    changed[120][-1] += dt.timedelta(seconds=1)
    assert cache.get_or_compute(changed, "k", compute) == ("result", 2)


@pytest.mark.parametrize("make", [plain_block, dated_block], ids=["plain", "dated"])
def test_the_caller_changing_its_own_list_after_the_call(make):
    cache, compute = SheetCache(), Counting()
    rows = fresh(make())
    cache.get_or_compute(rows, "k", compute)
    rows[40][1] = -1.0                       # the same list object, edited in place
    assert cache.get_or_compute(rows, "k", compute) == ("result", 2)


def test_a_plain_block_is_confirmed_by_its_signature_alone(monkeypatch):
    """The one-pass confirmation is what serves a fresh read of a plain block: the
    cell-by-cell comparison is not run. A dated block is compared cell by cell."""
    cache = SheetCache()
    compared = []
    real = cache_mod.same_cells
    monkeypatch.setattr(cache_mod, "same_cells", lambda *a: compared.append(1) or real(*a))
    for make in (plain_block, dated_block):
        compute = Counting()
        cache.get_or_compute(fresh(make()), make.__name__, compute)
        cache.get_or_compute(fresh(make()), make.__name__, compute)
        assert compute.calls == 1
    assert len(compared) == 1                # the dated block's hit only


def test_the_same_cells_held_elsewhere_still_hit():
    """marshal marks a cell object held twice; a caller passing the very same cells again
    (held by the stored copy too) gets the cell-by-cell confirmation, and a hit."""
    cache, compute = SheetCache(), Counting()
    rows = fresh(plain_block())
    cache.get_or_compute(rows, "k", compute)
    assert cache.get_or_compute([list(r) for r in rows], "k", compute) == ("result", 1)
    assert compute.calls == 1


def test_a_numpy_number_is_not_the_float_it_equals():
    # marshal writes a numpy scalar as its raw bytes: such a block gets no signature and
    # is confirmed cell by cell, where the type guard tells float64 from float.
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(plain_block()), "k", compute)
    changed = fresh(plain_block())
    changed[4][2] = np.float64(1.0)
    assert cache.get_or_compute(changed, "k", compute) == ("result", 2)


# --- the worksheet functions on a block without dates (the signature path) -----------

RESPONSE = DEMO_SETTINGS["response"]
PREDICTORS = DEMO_SETTINGS["predictors"]
UNDATED = [[k, v] for k, v in DEMO_SETTINGS.items()
           if k not in ("response", "predictors", "date_column")]


def undated_cells() -> list[list]:
    """The demo sales without their date column, as sheet cells."""
    frame = demo_sales().drop(columns=["Sale date"])
    rows = [list(frame.columns)]
    for rec in frame.itertuples(index=False):
        rows.append([None if (isinstance(v, float) and math.isnan(v)) or v == "" else
                     float(v) if isinstance(v, (int, float, np.integer, np.floating))
                     and not isinstance(v, bool) else v for v in rec])
    return rows


@pytest.fixture
def own_cache(monkeypatch):
    monkeypatch.setattr(sf, "CACHE", SheetCache())


def test_served_by_signature_the_tables_are_a_fresh_analysis(own_cache, monkeypatch):
    cells = undated_cells()
    assert block_signature(cells) is not None
    blob = pickle.dumps(cells)
    sf.PLUMB_FIT(pickle.loads(blob), RESPONSE, PREDICTORS, UNDATED)      # the fit
    compared = []
    real = cache_mod.same_cells
    monkeypatch.setattr(cache_mod, "same_cells", lambda *a: compared.append(1) or real(*a))
    coefs = sf.PLUMB_COEFS(pickle.loads(blob), RESPONSE, PREDICTORS, UNDATED)
    screen = sf.PLUMB_SCREEN(pickle.loads(blob), RESPONSE, PREDICTORS, UNDATED)
    st = sf.CACHE.stats()
    assert (st.misses, st.hits, compared) == (1, 2, [])
    ref = analyze(pickle.loads(blob), dict(DEMO_SETTINGS, date_column=None))
    assert coefs == expected_cells(ref.tables.coefficients)
    assert screen == expected_cells(ref.tables.set_aside)


def test_one_changed_price_in_an_undated_block_is_a_new_fit(own_cache):
    cells = undated_cells()
    sf.PLUMB_COEFS(fresh(cells), RESPONSE, PREDICTORS, UNDATED)
    changed = fresh(cells)
    changed[300][1] = changed[300][1] * 1.5
    out = sf.PLUMB_COEFS(changed, RESPONSE, PREDICTORS, UNDATED)
    assert sf.CACHE.stats().misses == 2
    ref = analyze(fresh(changed), dict(DEMO_SETTINGS, date_column=None))
    assert out == expected_cells(ref.tables.coefficients)


def test_a_valuation_is_rendered_once_and_handed_out_as_copies(own_cache):
    """PLUMB_VALUE's cells are the engine's estimates (valuate on the same fit), each
    call its own rows: a caller changing them changes no later call."""
    from plumbrule.demo.town import demo_subjects
    from plumbrule.valuation.estimates import valuate
    frame = demo_subjects().drop(columns=["Sale date"])
    subject = [list(frame.columns)] + [[float(v) if isinstance(v, (int, np.integer)) else v
                                        for v in rec] for rec in frame.itertuples(index=False)]
    cells = undated_cells()
    first = sf.PLUMB_VALUE(fresh(cells), RESPONSE, PREDICTORS, fresh(subject), UNDATED)
    first[1][1] = "scribbled"
    second = sf.PLUMB_VALUE(fresh(cells), RESPONSE, PREDICTORS, fresh(subject), UNDATED)
    assert second[1][1] != "scribbled"
    ref = analyze(fresh(cells), dict(DEMO_SETTINGS, date_column=None))
    expected = expected_cells(valuate(ref, fresh(subject)).estimates)
    assert second == expected
    assert sf.CACHE.stats().misses == 1


# --- which confirmation a stored block gets ---------------------------------------

def _only_entry(cache: SheetCache):
    (entry,) = cache._entries.values()
    return entry


def test_a_dated_miss_does_not_write_a_signature_it_cannot_keep(monkeypatch):
    """A date in the sampled rows means no signature: marshal is not run on the miss (it
    would read the whole block and refuse it). A plain block still gets its signature."""
    calls = []
    real = cache_mod.block_signature
    monkeypatch.setattr(cache_mod, "block_signature", lambda rows: calls.append(1) or real(rows))
    cache = SheetCache()
    cache.get_or_compute(fresh(dated_block()), "dated", Counting())
    assert calls == [] and _only_entry(cache).sig is None
    cache = SheetCache()
    cache.get_or_compute(fresh(plain_block()), "plain", Counting())
    assert calls == [1] and _only_entry(cache).sig is not None


def test_a_cell_outside_the_sampled_rows_still_decides_the_signature():
    """Only the sampled rows are sniffed; the whole block's types still decide whether its
    signature is kept. A numpy number in an unsampled row (marshal writes it as raw bytes)
    leaves the block without one, so a bytes cell with those very bytes is no hit."""
    rows = plain_block()
    assert 151 not in cache_mod._picks(len(rows))             # not a sampled row
    rows[151][1] = np.float64(rows[151][1])
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(rows), "k", compute)
    assert _only_entry(cache).sig is None
    changed = fresh(rows)
    changed[151][1] = rows[151][1].tobytes()
    assert block_signature(changed) == block_signature(fresh(rows))   # marshal alike
    assert cache.get_or_compute(changed, "k", compute) == ("result", 2)


def test_a_block_confirmed_by_its_signature_never_builds_a_type_guard():
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(plain_block()), "k", compute)
    cache.get_or_compute(fresh(plain_block()), "k", compute)
    assert compute.calls == 1 and _only_entry(cache)._guard is None


def test_a_signed_block_builds_its_type_guard_at_its_first_comparison():
    """A plain block whose hit is not confirmed by its signature (the same cell objects
    passed again) builds the guard then, and a TRUE turned into 1 is still a new block."""
    cache, compute = SheetCache(), Counting()
    rows = fresh(plain_block())
    cache.get_or_compute(rows, "k", compute)
    assert _only_entry(cache)._guard is None
    assert cache.get_or_compute([list(r) for r in rows], "k", compute) == ("result", 1)
    assert _only_entry(cache)._guard is not None
    changed = [list(r) for r in rows]
    changed[1][3] = 1                                          # Garage TRUE -> 1
    assert cache.get_or_compute(changed, "k", compute) == ("result", 2)


def test_a_dated_block_has_its_type_guard_from_the_start():
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(dated_block()), "k", compute)
    assert _only_entry(cache)._guard is not None
    changed = fresh(dated_block())
    changed[1][3] = 1                                          # Garage TRUE -> 1
    assert cache.get_or_compute(changed, "k", compute) == ("result", 2)


def test_keys_equal_by_eq_but_not_in_text_stay_apart():
    """The key's text is part of the fingerprint: ("a", True) == ("a", 1), yet they are
    two keys (a setting TRUE is not the number 1), given ready made or not."""
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(plain_block()), ("a", 1), compute)
    assert cache.get_or_compute(fresh(plain_block()), ("a", True), compute) == ("result", 2)
    assert cache.get_or_compute(fresh(plain_block()), ("a", 1.0), compute,
                                key_text=repr(("a", 1.0))) == ("result", 3)
    assert cache.get_or_compute(fresh(plain_block()), ("a", 1), compute,
                                key_text=repr(("a", 1))) == ("result", 1)


def test_the_worksheet_functions_key_text_is_the_keys_repr():
    s, m, text = sf._parsed(RESPONSE, PREDICTORS, UNDATED)
    assert text == repr(("analysis", m))


def test_a_sampled_row_with_nan_still_fingerprints_alike():
    """NaN is not equal to itself (and its hash is its identity); the fingerprint of a
    fresh copy must not move with it, or an unchanged block would never be found."""
    rows = plain_block()
    i = cache_mod._picks(len(rows))[1]                        # a sampled row
    rows[i][1] = math.nan
    assert cache_mod.fingerprint(fresh(rows), "k") == cache_mod.fingerprint(fresh(rows), "k")
    cache, compute = SheetCache(), Counting()
    cache.get_or_compute(fresh(rows), "k", compute)
    assert cache.get_or_compute(fresh(rows), "k", compute) == ("result", 1)


def test_a_change_in_any_chunk_of_the_signature_is_a_new_block():
    """The signature is written 1024 rows a chunk: a change in the last chunk, in a chunk
    boundary row, or a block one row longer than a whole number of chunks, is new."""
    size = cache_mod._CHUNK_ROWS
    rows = plain_block(2 * size + 5)
    sig = block_signature(fresh(rows))
    assert sig is not None and len(sig) == 3
    assert cache_mod.same_signature(fresh(rows), sig)
    for i in (size - 1, size, 2 * size + 5):
        changed = fresh(rows)
        changed[i][1] += 1.0
        assert not cache_mod.same_signature(changed, sig), i
    assert not cache_mod.same_signature(fresh(rows)[:2 * size], sig)   # two chunks, not three
    assert not cache_mod.same_signature(fresh(rows)[:2 * size + 1] + fresh(rows)[2 * size + 1:-1],
                                        sig)
    dated = fresh(rows)
    dated[size + 3][4] = dt.datetime(2024, 1, 1)               # marshal refuses a date
    assert not cache_mod.same_signature(dated, sig)

"""A bounded cache of analyses keyed by the content of the cells they came from.

A recalculation calls every plumbrule cell with its own copy of the sales
block, so one model shared by thirty cells must cost one fit and a recalc with
unchanged data must cost only the look-up. The look-up key is a short
fingerprint (blake2b over the block's shape, header row, a sample of rows and
the settings); a hit is then confirmed exactly, so two different blocks can
never share a result (no hash collision can return a wrong fit).

Two exact confirmations:

* A block of plain cells (text, numbers, bools, blanks) has a signature,
  :func:`block_signature`: the block written by :mod:`marshal` at C speed, 1024 rows
  a chunk, a type code and the exact value of every cell (TRUE, 1, 1.0, '1' and ''
  all differ). ``marshal.loads`` rebuilds the rows from those bytes, so equal bytes
  mean equal cells, value and type. It reads the incoming cells once; comparing the
  lists reads them and the stored copy.
* Otherwise (dates, which marshal cannot write, or a signature that differs) every
  cell is compared with the stored copy: ``==`` in C, stopping at the first
  difference, plus a type guard where ``==`` calls TRUE and 1 equal. marshal marks a
  cell object held more than once, so the same cells passed again by a Python caller
  (held by the stored copy too) write other bytes and come here; so does a TRUE/1 swap
  in a column the analysis reads as numbers, which is the same analysis.

Measured (benchmarks/recalc.py, 20,000 rows x 12 columns, every cell its own object as
xlwings makes them): either confirmation costs about as much as reading a freshly made
block once (its "floor" line: 5-10 ms on a busy two-core machine, about 0.3 x one
analysis for 30 cells); that read, not the comparison, is the floor of a hit, and no
exact confirmation can skip a cell of a new copy, so 30 cells sharing one range cannot
cost less than 30 reads: a PLUMB_MODEL cell and its handle can. Hashing the bytes
(blake2b) or building numpy arrays per call only adds to it; setting the dates aside
in place for marshal (take the column, blank it, put it back) or marshalling the block
without them costs more than the comparison it saves; a single buffer for the whole
block's bytes costs page faults that 1024-row chunks do not.

Entries are evicted least-recently-used, bounded by count and by an
approximate memory size. Errors (a PlumbError raised for a block) are cached
too, so a sheet full of cells pointing at bad data recalculates fast.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import marshal
import threading
from collections import OrderedDict
from dataclasses import dataclass
from itertools import chain
from operator import itemgetter
from typing import Any, Callable, Hashable, Iterable

DEFAULT_MAX_ENTRIES = 16
DEFAULT_MAX_BYTES = 512 * 2**20
_SAMPLE_ROWS = 8            # rows mixed into the fingerprint (first, last and spread)
_CANDIDATES = 4             # entries compared for one fingerprint before giving up


@dataclass(frozen=True)
class CacheStats:
    """Counts since the cache was created (or cleared); sizes in entries and bytes."""

    hits: int
    misses: int
    evictions: int
    entries: int
    approx_bytes: int
    max_entries: int
    max_bytes: int


def as_rows(values: Any, trust: bool = False) -> list[list[Any]]:
    """The block as a list of row lists (what xlwings hands over with ndim=2).
    A scalar becomes a 1×1 block; a flat list one row. With ``trust``, a list whose
    first row is a list is taken as it is (a look-up: ``==`` rejects anything else)."""
    if type(values) is list and values and type(values[0]) is list and (
            trust or set(map(type, values)) == {list}):
        return values
    if isinstance(values, (list, tuple)):
        if values and not any(isinstance(r, (list, tuple)) for r in values):
            return [list(values)]
        return [list(r) if isinstance(r, (list, tuple)) else [r] for r in values]
    return [[values]]


def _picks(n: int) -> list[int]:
    """The rows sampled: the header, the last row and rows spread between."""
    return sorted({0, n - 1, *range(0, n, max(1, n // _SAMPLE_ROWS))}) if n else []


def fingerprint(rows: list[list[Any]], extra: Hashable = (),
                extra_text: str | None = None) -> bytes:
    """blake2b of the block's shape, header, a sample of rows and ``extra`` (by its repr,
    which ``extra_text`` may give ready made). Cheap (independent of the block's size); not
    a proof of equality."""
    picks = _picks(n := len(rows))
    h = hashlib.blake2b(digest_size=16)
    widths = [len(rows[i]) if type(rows[i]) is list else -1 for i in picks]
    text = repr(extra) if extra_text is None else extra_text
    h.update(repr((n, widths, text)).encode("utf-8", "replace"))
    for i in picks:
        h.update(_row_bytes(rows[i] if type(rows[i]) is list else [rows[i]]))
    return h.digest()


def _row_bytes(row: list[Any]) -> bytes:
    """One sampled row as bytes: marshal (version 2 keeps no references, so the bytes do not
    depend on what else holds a cell; TRUE, 1 and 1.0 differ), a date by its type and hash,
    or the row's text when neither works. Equal rows give equal bytes, at C speed."""
    try:
        return marshal.dumps(row, 2)
    except ValueError:
        pass
    try:
        return marshal.dumps([v if type(v) in PLAIN else (type(v).__name__, hash(v))
                              for v in row], 2)
    except (TypeError, ValueError):
        return repr([(type(v).__name__, v) for v in row]).encode("utf-8", "replace")


def type_guard(rows: list[list[Any]], loose: frozenset = frozenset()) -> tuple:
    """What :func:`same_cells` must check beyond ``==`` for this block.

    ``==`` treats TRUE, 1 and 1.0 alike; intake does not (a category 'TRUE' is
    not '1'). Only cells equal to 0 or 1 can hide such a swap, so the guard
    keeps their positions and types: whole columns when they are common. Columns in
    ``loose`` (indices the result reads as numbers, where TRUE is 1) are left out.
    """
    width = set(map(len, rows))
    if len(width) != 1:                         # ragged block: keep every row's types
        return ("rows", [list(map(type, r)) for r in rows])
    columns, cells = [], []
    for j in range(width.pop()):
        if j in loose:
            continue
        col = list(map(itemgetter(j), rows))
        if set(map(type, col)) <= _NEVER_ZERO_OR_ONE:
            continue                            # text, blanks and dates only
        hits = _zero_one_positions(col)
        if len(hits) * 4 > len(col):
            columns.append((j, list(map(type, col))))
        elif hits:
            cells.append((j, hits, [type(col[i]) for i in hits]))
    return ("columns", (columns, cells))


_NEVER_ZERO_OR_ONE = frozenset({str, type(None), _dt.datetime, _dt.date})


def _zero_one_positions(col: list[Any]) -> list[int]:
    """Rows of ``col`` whose cell equals 0 or 1 (a superset is harmless). The first
    cell (the header) is looked at alone so a numeric body stays vectorised."""
    import numpy as np
    head = [0] if _zero_or_one(col[0]) else []
    try:                                        # numbers, bools and blanks: vectorised
        a = np.array(col[1:], dtype=float)
        return head + (np.flatnonzero((a == 0) | (a == 1)) + 1).tolist()
    except (TypeError, ValueError):
        return [i for i, flag in enumerate(map(_zero_or_one, col)) if flag]


def _zero_or_one(v: Any) -> bool:
    if v is None or type(v) is str:
        return False
    try:
        return bool(v == 0 or v == 1)
    except Exception:       # an exotic cell: check its type always
        return True


def same_cells(rows: list[list[Any]], stored: list[list[Any]], guard: tuple) -> bool:
    """Every cell equal in value and type (TRUE is not 1; 3 and 3.0 read alike)."""
    if len(rows) != len(stored) or rows != stored:   # runs in C, stops at the first difference
        return False
    kind, parts = guard
    if kind == "rows":
        return all(list(map(type, r)) == t for r, t in zip(rows, parts, strict=False))
    columns, cells = parts
    if list(map(type, rows[0])) != list(map(type, stored[0])):   # the header row, always
        return False
    return (all(list(map(type, map(itemgetter(j), map(rows.__getitem__, hits)))) == t
                for j, hits, t in cells)
            and all(list(map(type, map(itemgetter(j), rows))) == t for j, t in columns))


# Cell types marshal writes as a type code and the exact value (a subclass is refused).
PLAIN = frozenset({float, str, type(None), bool, int})
# Version 4 writes a short ASCII text in place; version 2 encodes every text to UTF-8 first.
_MARSHAL_VERSION = 4


# Rows per marshal chunk: a chunk's bytes (~100 kB) reuse the heap; one buffer for the whole
# block (MBs) is fresh mapped memory every call, page faults included (~5% of a pass).
_CHUNK_ROWS = 1024


def block_signature(rows: list[list[Any]]) -> tuple[bytes, ...] | None:
    """marshal bytes of the block, 1024 rows a chunk (one pass at C speed), or None when
    marshal refuses a cell (a date, a subclass). ``marshal.loads`` rebuilds each chunk of
    rows from its bytes, so two blocks of plain cells (:data:`PLAIN`) with the same chunks
    hold the same cells, value and type. A cell marshal writes as raw bytes (a numpy
    scalar) cannot match a stored block of plain cells: bytes are no plain cell."""
    try:
        return tuple(marshal.dumps(rows[i:i + _CHUNK_ROWS], _MARSHAL_VERSION)
                     for i in range(0, len(rows), _CHUNK_ROWS))
    except ValueError:
        return None


def same_signature(rows: list[list[Any]], sig: tuple[bytes, ...]) -> bool:
    """``rows`` give the chunks ``sig`` (the same number of rows first), stopping at the first
    chunk that differs."""
    if not rows or -(-len(rows) // _CHUNK_ROWS) != len(sig):
        return False
    dumps = marshal.dumps
    try:
        return all(dumps(rows[i:i + _CHUNK_ROWS], _MARSHAL_VERSION) == sig[n]
                   for n, i in enumerate(range(0, len(rows), _CHUNK_ROWS)))
    except ValueError:          # a cell marshal refuses: no plain block, so not this one
        return False


def _sample_is_plain(rows: list[list[Any]]) -> bool:
    """Every cell of the sampled rows is PLAIN (so the block may have a signature)."""
    return all(type(rows[i]) is list and set(map(type, rows[i])) <= PLAIN
               for i in _picks(len(rows)))


def small_key(values: Any) -> Hashable:
    """A strict hashable key for a small block (subjects, comps, arguments)."""
    if isinstance(values, (list, tuple)):
        return tuple(small_key(v) for v in values)
    try:
        hash(values)
        return (type(values).__name__, values)
    except TypeError:
        return (type(values).__name__, repr(values))


def approx_size(obj: Any, _depth: int = 0) -> int:
    """Rough bytes held by an analysis-like object: numpy arrays and DataFrames
    it holds (object cells at 64 bytes each), found a few attributes deep."""
    import numpy as np
    import pandas as pd
    if isinstance(obj, np.ndarray):
        return int(obj.nbytes) + (64 * obj.size if obj.dtype == object else 0)
    if isinstance(obj, pd.Series):
        return 8 * len(obj) + (64 * len(obj) if obj.dtype == object else 0)
    if isinstance(obj, pd.DataFrame):            # 8 bytes a cell, 64 more for an object
        n_obj = sum(1 for dt in obj.dtypes if dt.kind == "O")
        return 8 * len(obj) * (obj.shape[1] + 1) + 64 * len(obj) * n_obj
    if _depth >= 3 or obj is None or isinstance(obj, (str, bytes, int, float, bool)):
        return 0
    items: Iterable[Any]
    if isinstance(obj, dict):
        items = obj.values()
    elif isinstance(obj, (list, tuple)):
        if obj and isinstance(obj[0], list):            # a values block
            return 8 * len(obj) * (len(obj[0]) + 1) + 32 * len(obj) * len(obj[0])
        items = obj
    elif hasattr(obj, "__dataclass_fields__"):
        items = [getattr(obj, k, None) for k in obj.__dataclass_fields__]
    elif hasattr(obj, "__dict__") or hasattr(type(obj), "__slots__"):
        names = list(getattr(obj, "__dict__", {})) + list(getattr(type(obj), "__slots__", ()))
        items = [getattr(obj, k, None) for k in names]
    else:
        return 0
    return sum(approx_size(v, _depth + 1) for v in items)


class _Entry:
    __slots__ = ("key", "rows", "_guard", "loose", "value", "error", "nbytes", "sig")

    def __init__(self, key, rows, value, error, nbytes, loose=frozenset(), sig=None):
        self.key, self.rows, self.value, self.error = key, rows, value, error
        # Without a signature every hit compares cells: the guard is made now, with the
        # fit, rather than in the first hit (for a model cell, the next recalculation).
        self.loose, self._guard = loose, None if sig is not None else type_guard(rows, loose)
        self.sig = sig
        self.nbytes = nbytes + (sum(map(len, sig)) if sig is not None else 0)

    @property
    def guard(self) -> tuple:
        """The type guard of the stored block; for a block with a signature, made at its
        first cell-by-cell comparison (its hits seldom need one). The stored copy never
        changes, so computing it twice from two threads gives the same guard."""
        if self._guard is None:
            self._guard = type_guard(self.rows, self.loose)
        return self._guard


class SheetCache:
    """LRU of results keyed by (values block, spec/settings key).

    :meth:`get_or_compute` returns the cached result when the block's cells
    and the key match an entry exactly, else runs ``compute()`` and stores it.
    Exceptions of the types in ``cache_errors`` are stored and re-raised on a hit.
    """

    def __init__(self, max_entries: int = DEFAULT_MAX_ENTRIES,
                 max_bytes: int = DEFAULT_MAX_BYTES) -> None:
        self.max_entries = max_entries
        self.max_bytes = max_bytes
        self._lock = threading.RLock()
        self.clear()

    def clear(self) -> None:
        with self._lock:
            self._entries: OrderedDict[tuple, _Entry] = OrderedDict()
            self._hits = self._misses = self._evictions = 0
            self._bytes = 0

    def stats(self) -> CacheStats:
        with self._lock:
            return CacheStats(self._hits, self._misses, self._evictions, len(self._entries),
                              self._bytes, self.max_entries, self.max_bytes)

    def get_or_compute(self, values: Any, key: Hashable, compute: Callable[[list], Any],
                       cache_errors: tuple[type[BaseException], ...] = (),
                       loose_columns: Callable[[Any, list], frozenset] | None = None,
                       key_text: str | None = None) -> Any:
        """``compute(rows)`` once per distinct (block, key); the cached result after.

        ``loose_columns(result, rows)`` may name the column indices whose cells the result
        reads as numbers (TRUE and 1 alike), which the type check then skips. ``key_text``
        is ``repr(key)`` when the caller keeps it (a Settings repr costs half a millisecond);
        keys equal by ``==`` but of other text (TRUE and 1) stay apart."""
        rows = as_rows(values, trust=True)
        text = repr(key) if key_text is None else key_text
        fp = fingerprint(rows, extra_text=text)
        with self._lock:
            candidates = [(slot, e) for slot in range(_CANDIDATES)
                          if (e := self._entries.get((fp, slot))) is not None and e.key == key]
        for slot, entry in candidates:
            if self._confirm(rows, entry):
                with self._lock:
                    if self._entries.get((fp, slot)) is entry:
                        self._entries.move_to_end((fp, slot))
                    self._hits += 1
                if entry.error is not None:
                    raise entry.error.with_traceback(None)
                return entry.value
        with self._lock:
            self._misses += 1
        norm = as_rows(rows)
        if norm is not rows:                 # tuples or a flat list: key the normal form
            rows, fp = norm, fingerprint(norm, extra_text=text)
        # The signature is written before the copy below holds every cell a second time
        # (marshal marks a cell held twice), as the next look-up will write it. A block
        # with a cell other than PLAIN has none (marshal stops at the first date): its
        # hits compare cells.
        # A sampled cell that is not PLAIN (a date) means no signature: marshal would
        # read the whole block only to refuse it. Skipping it only leaves the comparison.
        sig = (block_signature(rows) if rows and set(map(type, rows)) == {list}
               and _sample_is_plain(rows) else None)
        if sig is not None and not set(map(type, chain.from_iterable(rows))) <= PLAIN:
            sig = None
        stored = list(map(list, rows))       # our own copy: the caller may change its list
        try:
            value, error = compute(stored), None
        except cache_errors as exc:
            value, error = None, exc
        nbytes = approx_size(stored) + (approx_size(value) if value is not None else 256)
        loose = (loose_columns(value, stored) if loose_columns and error is None
                 else frozenset())
        self._store(fp, _Entry(key, stored, value, error, nbytes, loose, sig))
        if error is not None:
            raise error.with_traceback(None)
        return value

    @staticmethod
    def _confirm(rows: list[list[Any]], entry: _Entry) -> bool:
        """``rows`` are the entry's block: equal signatures (one pass over the incoming
        cells, exact), else the cell-by-cell comparison with the stored copy (two passes;
        it also accepts a TRUE/1 swap in a column the result reads as numbers)."""
        if (entry.sig is not None and len(rows) == len(entry.rows)
                and same_signature(rows, entry.sig)):
            return True
        return same_cells(rows, entry.rows, entry.guard)

    def _store(self, fp: bytes, entry: _Entry) -> None:
        with self._lock:
            slot = next((s for s in range(_CANDIDATES) if (fp, s) not in self._entries),
                        None)
            if slot is None:                 # all slots taken: replace the oldest of them
                slot = min(range(_CANDIDATES),
                           key=lambda s: list(self._entries).index((fp, s)))
                self._drop((fp, slot))
            self._entries[(fp, slot)] = entry
            self._bytes += entry.nbytes
            while len(self._entries) > 1 and (len(self._entries) > self.max_entries
                                              or self._bytes > self.max_bytes):
                self._drop(next(iter(self._entries)))
                self._evictions += 1

    def _drop(self, k: tuple) -> None:
        entry = self._entries.pop(k)
        self._bytes -= entry.nbytes


"""Model handles: one cell compares the sales block and fits; the others name its result.

``=PLUMB_MODEL(Sales[#All], …)`` returns one text cell, the handle, for example
``plumbrule model 3f9a1c-2: 19,997 sales, 12 terms``. Other ``PLUMB_`` cells may take that
cell as their first argument instead of the sales range; they then receive one short text
instead of the whole block, and look the fit up by the handle, costing no comparison at all.

Why a stale fit cannot be served:

* The handle's id is ``<session>-<version>``. ``version`` counts the distinct (block,
  model settings) contents this Python process has fitted; the model cell gets a new one
  whenever its cache look-up (the full cell-by-cell confirmation of
  :mod:`plumbrule.excel.cache`) does not find the same block, so a changed block always
  yields a different handle text.
* Excel recalculates a cell before the cells that depend on it, so a dependent always
  sees the handle of the block as it is now.
* ``session`` is random per Python process: a handle saved in a workbook from an earlier
  session never names a fit of this one (the dependent asks for the model cell to be
  recalculated instead).

Handles are held strongly, the most recently used first, up to :data:`MAX_HANDLES`, so a
fit stays reachable while its model cell shows it even when the content cache has dropped
it.
"""

from __future__ import annotations

import re
import secrets
import threading
from collections import OrderedDict
from typing import Any

PREFIX = "plumbrule model "
MAX_HANDLES = 32
SESSION = secrets.token_hex(3)          # six hex digits, new for every Python process

_PATTERN = re.compile(r"^plumbrule model ([0-9a-f]{6}-[0-9]+)(?::|$)")
_lock = threading.Lock()
_held: OrderedDict[str, Any] = OrderedDict()
_versions = 0


def handle_id(text: Any) -> str | None:
    """The id in a handle text (``3f9a1c-2``), or None when ``text`` is not a handle."""
    if type(text) is not str or not text.startswith(PREFIX):
        return None
    m = _PATTERN.match(text)
    return m.group(1) if m else None


def one_text(value: Any) -> Any:
    """The single cell of a 1×1 block (or the value itself when it is not a block)."""
    while isinstance(value, (list, tuple)) and len(value) == 1:
        value = value[0]
    return value


def mint(holder: Any) -> str:
    """A new id for ``holder`` (a fitted result), held for look-up."""
    global _versions
    with _lock:
        _versions += 1
        hid = f"{SESSION}-{_versions}"
        _hold(hid, holder)
    return hid


def hold(hid: str, holder: Any) -> None:
    """Mark ``hid`` as recently used (the model cell showed it again)."""
    with _lock:
        _hold(hid, holder)


def _hold(hid: str, holder: Any) -> None:
    _held[hid] = holder
    _held.move_to_end(hid)
    while len(_held) > MAX_HANDLES:
        _held.popitem(last=False)


def look_up(hid: str) -> Any | None:
    """The holder of ``hid``, or None when this process does not hold it."""
    with _lock:
        holder = _held.get(hid)
        if holder is not None:
            _held.move_to_end(hid)
        return holder


def clear() -> None:
    """Forget every handle (tests; the version counter keeps counting)."""
    with _lock:
        _held.clear()


def held() -> int:
    """How many handles are held."""
    with _lock:
        return len(_held)

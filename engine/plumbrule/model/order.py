"""The order of the sales in time, independent of how the sheet is sorted."""

from __future__ import annotations

import numpy as np
import pandas as pd

DAY_NS = 86_400 * 10 ** 9


def date_order(data: pd.DataFrame, date_column: str) -> np.ndarray:
    """Positions of ``data``'s rows in sale-date order. Sales on the same date are put in the
    order of a hash of their own values (pandas ``hash_pandas_object`` of every column,
    columns taken by name; never the sheet row), so no sorting of the sheet changes the
    order: sales with equal hashes have equal values, hence equal residuals, and their order
    does not matter."""
    cols = sorted(data.columns, key=str)
    content = pd.util.hash_pandas_object(data[cols], index=False).to_numpy()
    stamps = data[date_column].to_numpy(dtype="datetime64[ns]").astype(np.int64)
    times = _time_keys(stamps)
    hashes = _digits(content)
    # the top half of the hash settles the order unless two sales at one time share it
    # (a copy of a sale, or one chance in 2³² a pair): then the whole hash is sorted on
    order = np.lexsort((*hashes[2:], *_digits(times)))
    top = (content >> np.uint64(32))[order]
    at = times[order]
    if np.any((top[1:] == top[:-1]) & (at[1:] == at[:-1])):
        order = np.lexsort((*hashes, *_digits(times)))
    return order


def _time_keys(stamps: np.ndarray) -> np.ndarray:
    """Sale times (int64 ns) as unsigned offsets from the first, in whole days when every
    time is midnight: the same order in fewer 16-bit digits."""
    if not len(stamps):
        return stamps.view(np.uint64)
    off = (stamps - stamps.min()).view(np.uint64)    # wraps into the true unsigned gap
    days, rest = np.divmod(off, np.uint64(DAY_NS))
    return off if rest.any() else days


def _digits(keys: np.ndarray) -> list[np.ndarray]:
    """Unsigned 64-bit ``keys`` as 16-bit digits, least significant first, as many as the
    largest key needs (at least one): ``np.lexsort`` sorts 16-bit keys by radix, so the
    stable sort by the whole key costs a few linear passes, not a comparison sort."""
    top = int(keys.max()) if len(keys) else 0
    count = max(1, (top.bit_length() + 15) // 16)
    return [(keys >> np.uint64(16 * d)).astype(np.uint16) for d in range(count)]

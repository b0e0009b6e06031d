"""Exact sample quantiles equal to numpy's and pandas' default (linear), found by selection.

``np.percentile`` with several quantiles runs a multi-pivot partition that is
slower than a full sort of the column. Here the order statistics needed are
found by single-pivot partitions (numpy's fast selection) and min/max passes
(see :func:`order_stats`), and the quantile is interpolated with numpy's own
formula (Hyndman and Fan 1996, definition 7), so the numbers are numpy's bit
for bit.
"""

from __future__ import annotations

import numpy as np


def quantiles(v: np.ndarray, probs) -> np.ndarray:
    """Quantiles of ``v`` (n ≥ 1, not changed) at ``probs`` (fractions in [0, 1]);
    NaN throughout when ``v`` has a NaN, as numpy answers."""
    p = np.asarray(probs, dtype=float)
    prev, nxt, gamma = _positions(len(v), p)
    ranks = np.unique(np.concatenate([prev, nxt, [len(v) - 1]]))
    vals = order_stats(v, ranks)
    if np.isnan(vals[-1]):        # NaN is ordered last, so the maximum tells
        return np.full(p.shape, np.nan)
    return _lerp(vals[np.searchsorted(ranks, prev)], vals[np.searchsorted(ranks, nxt)], gamma)


def order_stats(v: np.ndarray, ranks: np.ndarray) -> np.ndarray:
    """The values at 0-based positions ``ranks`` (ascending, distinct) of ``v`` sorted
    (NaN ordered last, as numpy does; then the maximum is NaN).

    Works on a copy. The ranks that need a partition are split in halves, the
    middle one first, so each partition runs on the stretch between two earlier
    ones. A rank right after a partitioned one is the least of the stretch that
    follows it, rank 0 the least before the first, rank n − 1 the largest after
    the last: one min or max pass over a stretch, no partition.
    """
    work = np.array(v, dtype=float)
    n = len(work)
    pivots: list[int] = []
    for r in (int(r) for r in ranks):
        if 0 < r < n - 1 and not (pivots and pivots[-1] == r - 1):
            pivots.append(r)
    _partition(work, 0, n, pivots)
    bounds = [-1] + pivots + [n]                  # stretches between the partitioned ranks
    out = np.empty(len(ranks))
    for i, r in enumerate(int(r) for r in ranks):
        j = int(np.searchsorted(bounds, r))        # bounds[j - 1] < r <= bounds[j]
        if r == bounds[j]:
            out[i] = work[r]
        elif r == n - 1 and r != bounds[j - 1] + 1:
            out[i] = work[bounds[j - 1] + 1:].max()
        else:                                      # the least of the stretch right of a pivot
            out[i] = work[r:bounds[j] + 1].min()   # (the pivot closing it is no smaller)
    return out


def _partition(work: np.ndarray, lo: int, hi: int, pivots: list[int]) -> None:
    """Partition work[lo:hi] in place at each of ``pivots`` (ascending, within [lo, hi))."""
    if not pivots:
        return
    mid = len(pivots) // 2
    k = pivots[mid]
    work[lo:hi].partition(k - lo)
    _partition(work, lo, k, pivots[:mid])
    _partition(work, k + 1, hi, pivots[mid + 1:])


def _positions(n: int, p: np.ndarray):
    """numpy's neighbours of the virtual index (n − 1)·p and the interpolation weight."""
    virtual = (n - 1) * p
    prev = np.floor(virtual)
    nxt = prev + 1
    top = virtual >= n - 1
    prev[top] = nxt[top] = -1              # numpy's rule: beyond the last index, the maximum
    prev[virtual < 0] = nxt[virtual < 0] = 0
    gamma = virtual - prev
    last = n - 1
    return (np.where(prev < 0, last, prev).astype(np.intp),
            np.where(nxt < 0, last, nxt).astype(np.intp), gamma)


def _lerp(a: np.ndarray, b: np.ndarray, gamma: np.ndarray) -> np.ndarray:
    """numpy's two-sided linear interpolation (exact at both ends of the step)."""
    diff = b - a
    return np.where(gamma >= 0.5, b - diff * (1 - gamma), a + diff * gamma)

"""Exact sample quantiles from one sort, equal to numpy's and pandas' default (linear).

``np.percentile`` with several quantiles runs a multi-pivot partition that is
slower than one full sort of the column (numpy's SIMD sort), and every caller
that needs the median and the quartiles of the same column would pay it again.
So a column is sorted once and each quantile read off it with numpy's own
interpolation (Hyndman and Fan 1996, definition 7), bit for bit.
"""

from __future__ import annotations

import numpy as np


def from_sorted(s: np.ndarray, probs) -> np.ndarray:
    """Quantiles at ``probs`` (fractions in [0, 1]) of the ascending array ``s``.

    Same numbers as ``np.quantile(s, probs)``: virtual index (n − 1)·p, its
    neighbours, and numpy's two-sided lerp (exact at the ends of the step).
    """
    p = np.asarray(probs, dtype=float)
    n = len(s)
    if n and np.isnan(s[-1]):          # NaN sorts last; numpy then answers NaN throughout
        return np.full(p.shape, np.nan)
    virtual = (n - 1) * p
    prev = np.floor(virtual)
    nxt = prev + 1
    top = virtual >= n - 1
    prev[top] = nxt[top] = -1          # numpy's rule: beyond the last index, the maximum
    prev[virtual < 0] = nxt[virtual < 0] = 0
    gamma = virtual - prev
    a, b = s[prev.astype(np.intp)], s[nxt.astype(np.intp)]
    diff = b - a
    return np.where(gamma >= 0.5, b - diff * (1 - gamma), a + diff * gamma)


def median_sorted(s: np.ndarray) -> float:
    """``np.median`` of the ascending array ``s``: the middle value, or the mean of the two."""
    n = len(s)
    if n % 2:
        return float(s[n // 2])
    return float(np.mean(s[n // 2 - 1:n // 2 + 1]))

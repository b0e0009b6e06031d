"""The product of two long vectors, on the calling thread.

``np.dot`` of two 1-D arrays goes to the BLAS, which splits a million-row sum
over its threads; on a busy shared machine waking those threads costs more than
the sum (measured at 10⁶ rows on two shared cores: about 7 ms a call against
2.5 ms). numpy's einsum loop runs on the calling thread with the same kind of
unrolled accumulation, so it is as accurate. Matrix products stay on the BLAS.
"""

from __future__ import annotations

import numpy as np


def dot(a: np.ndarray, b: np.ndarray) -> float:
    """Σ aᵢ·bᵢ of two float vectors of equal length."""
    return float(np.einsum("i,i->", a, b))


def gram(cols) -> np.ndarray:
    """[aᵢ·aⱼ] of a few long vectors, each product formed once (the matrix is symmetric)."""
    m = len(cols)
    g = np.empty((m, m))
    for i in range(m):
        for j in range(i, m):
            g[i, j] = g[j, i] = dot(cols[i], cols[j])
    return g


def q_times(q: np.ndarray, cols) -> np.ndarray:
    """Qᵀ·c for each long vector c (k × len(cols)), one matrix-vector product each:
    the BLAS multiplies an n × k Q by a thin n × 2 or n × 3 block several times
    slower than by its columns one at a time (measured at 10⁶ rows)."""
    return np.column_stack([q.T @ c for c in cols])

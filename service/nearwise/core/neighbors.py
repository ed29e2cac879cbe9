"""Distances to the nearest training rows: a k-d tree in few dimensions, exact brute force in many.

A k-d tree is fast up to about a dozen dimensions and slower than brute force beyond. Brute
force ranks candidates by the BLAS expansion |q|^2 - 2 q.z + |z|^2 and then recomputes the
distances of the best few directly, so a row identical to the query is at distance exactly 0.

References
----------
Bentley, J. L. (1975). Multidimensional binary search trees used for associative searching.
*Communications of the ACM* 18(9), 509-517.
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import cKDTree

#: Above this many features, brute force replaces the k-d tree.
KD_MAX_DIM = 12
#: Spare candidates re-ranked exactly in brute force.
SPARE = 8
#: Distances held at once in brute force.
BLOCK_CELLS = 4_000_000


class Nearest:
    """Nearest-row distances over the rows of ``Z`` (n, p)."""

    def __init__(self, Z: np.ndarray) -> None:
        self.Z = Z
        self.tree = cKDTree(Z) if Z.shape[1] <= KD_MAX_DIM else None
        self.sq = None if self.tree is not None else (Z**2).sum(axis=1)

    def distances(self, Q: np.ndarray, k: int) -> np.ndarray:
        """Sorted distances from each row of ``Q`` to its ``k`` nearest rows, shape (m, k);
        ``inf`` where there are fewer than k rows."""
        m, n = Q.shape[0], self.Z.shape[0]
        if m == 0:
            return np.zeros((0, k))
        if self.tree is not None:
            return self.tree.query(Q, k=k)[0].reshape(m, k)
        out = np.full((m, k), np.inf)
        block, kk = max(1, BLOCK_CELLS // n), min(k, n)
        for start in range(0, m, block):
            out[start : start + block, :kk] = self._brute(Q[start : start + block], kk)
        return out

    def _brute(self, Q: np.ndarray, k: int) -> np.ndarray:
        n = self.Z.shape[0]
        keep = min(n, k + SPARE)
        d2 = (Q**2).sum(axis=1)[:, None] - 2.0 * (Q @ self.Z.T) + self.sq
        cand = np.argpartition(d2, keep - 1, axis=1)[:, :keep] if keep < n else None
        if cand is None:
            cand = np.broadcast_to(np.arange(n), (Q.shape[0], n))
        exact = np.sqrt(((Q[:, None, :] - self.Z[cand]) ** 2).sum(axis=2))
        return np.sort(exact, axis=1)[:, :k]

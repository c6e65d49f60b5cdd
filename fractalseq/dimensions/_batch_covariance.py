"""The batch-means covariance of the levels, accumulated block by block in batch order.

The covariance ``B * Cov_batches(S_i / N_i, S_j / N_j)`` of the levels' batch sums ``S`` (see
:mod:`fractalseq.dimensions._level_variance`) needs, per order q, the centred co-moments of ``L`` rows
of ``B`` batch shares.  :class:`BatchCovariance` takes the sums in batch order, in pieces of any length,
and holds only one block of :data:`COV_BLOCK` batches: each complete block gives its mean and centred
co-moment matrix (one BLAS product of an ``(L, COV_BLOCK)`` block with its transpose), and blocks are
combined by the pairwise update of means and co-moments (Chan, Golub & LeVeque 1983, "Algorithms for
computing the sample variance: analysis and recommendations", The American Statistician 37(3):242,
eq. 2.1, in its multivariate form): for two parts of ``n_a`` and ``n_b`` batches,

    n = n_a + n_b,  d = m_b - m_a,  m = m_a + d * n_b / n,
    M = M_a + M_b + (n_a * n_b / n) * d d^T.

Parts are merged as a binary counter (two parts of the same number of blocks at once, then the rest
from the last to the first), the pairwise scheme of that paper, so rounding grows with the logarithm of
the number of blocks.  The blocks are cut by the batch index only (never by the pieces' lengths), so the
same sums give the same result to the last bit however they are fed: the in-process pass over the
stream and the depth tasks' whole-length sums agree exactly.
"""

from __future__ import annotations

import numpy as np

__all__ = ["COV_BLOCK", "BatchCovariance"]

#: Batches per block of the accumulator: the partition depends on the batch index only.
COV_BLOCK = 4096

#: Fewer batches than this give no covariance.
MIN_BATCHES = 10


class BatchCovariance:
    """Accumulates the levels' batch sums in batch order; gives ``B * Cov(S / N)`` per order q.

    Parameters
    ----------
    totals:
        The levels' occurrence totals ``N`` (a level with total 0 gets NaN rows and columns).
    q_count:
        Number of orders q (the last axis of the sums).

    Notes
    -----
    Memory: one block of ``Q x L x COV_BLOCK`` float64 sums and ``O(log(blocks))`` partial results of
    ``Q x L x L``; never a table as long as the number of batches.
    """

    def __init__(self, totals: np.ndarray, q_count: int) -> None:
        total = np.asarray(totals, dtype=np.float64).reshape(-1)
        self.N = np.where(total > 0, total, np.nan)
        self.L, self.Q = int(total.size), int(q_count)
        self.block = int(COV_BLOCK)
        self._buf = np.empty((self.Q, self.L, self.block))
        self._fill = 0
        self.batches = 0
        # binary counter of merged parts: (blocks, batches, mean (Q, L), co-moments (Q, L, L))
        self._parts: list[tuple[int, int, np.ndarray, np.ndarray]] = []

    def add(self, piece: np.ndarray) -> None:
        """Add the next batches' sums, shape ``(L, k, Q)`` (any ``k >= 0``), in batch order."""
        piece = np.asarray(piece, dtype=np.float64)
        if piece.ndim != 3 or piece.shape[0] != self.L or piece.shape[2] != self.Q:
            raise ValueError(f"batch sums of shape {piece.shape} do not match ({self.L}, k, {self.Q})")
        k = piece.shape[1]
        off = 0
        while off < k:
            m = min(k - off, self.block - self._fill)
            self._buf[:, :, self._fill : self._fill + m] = piece[:, off : off + m, :].transpose(2, 0, 1)
            self._fill += m
            self.batches += m
            off += m
            if self._fill == self.block:
                self._push(self._moments(self._fill))
                self._fill = 0

    def add_levels(self, sums: list[np.ndarray]) -> None:
        """Add every level's whole ``(B, Q)`` sums (in level order), a block at a time."""
        B = int(sums[0].shape[0]) if sums else 0
        for b0 in range(0, B, self.block):
            b1 = min(B, b0 + self.block)
            self.add(np.stack([np.asarray(s[b0:b1], dtype=np.float64) for s in sums]))

    def covariance(self) -> np.ndarray | None:
        """``(Q, L, L)`` batch-means covariance ``B * M / (B - 1)``; ``None`` with fewer than 10 batches.

        Does not change the accumulator (the partial last block is folded into a copy of the parts)."""
        B = self.batches
        if B < MIN_BATCHES:
            return None
        parts = list(self._parts)
        if self._fill:
            parts.append((1, self._fill, *self._moments(self._fill)[2:]))
        done = parts[-1]
        for part in reversed(parts[:-1]):
            done = _merge(part, done)
        return B * (done[3] / (B - 1))

    def _moments(self, r: int) -> tuple[int, int, np.ndarray, np.ndarray]:
        """Batch count, mean and centred co-moments of the first ``r`` buffered batches, per q."""
        mean = np.empty((self.Q, self.L))
        M = np.empty((self.Q, self.L, self.L))
        for j in range(self.Q):
            X = self._buf[j, :, :r] / self.N[:, None]  # (L, r): each batch's share (a new array)
            m = X.mean(axis=1)
            X -= m[:, None]
            mean[j] = m
            M[j] = X @ X.T
        return 1, r, mean, M

    def _push(self, part: tuple[int, int, np.ndarray, np.ndarray]) -> None:
        self._parts.append(part)
        while len(self._parts) >= 2 and self._parts[-2][0] == self._parts[-1][0]:
            b = self._parts.pop()
            a = self._parts.pop()
            self._parts.append(_merge(a, b))


def _merge(a: tuple[int, int, np.ndarray, np.ndarray], b: tuple[int, int, np.ndarray, np.ndarray]) -> tuple[int, int, np.ndarray, np.ndarray]:
    """Chan, Golub & LeVeque's pairwise update of two parts' means and co-moments (every q at once)."""
    ka, na, ma, Ma = a
    kb, nb, mb, Mb = b
    n = na + nb
    d = mb - ma
    mean = ma + d * (nb / n)
    M = Ma + Mb + (na * nb / n) * (d[:, :, None] * d[:, None, :])
    return ka + kb, n, mean, M

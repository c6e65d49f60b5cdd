"""Word-count tables of resampled streams as sums over blocks: per replicate, or once per block then weighted."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit


@njit(cache=True)
def _add_run(labels, span, a, b, out):
    """``out[labels[t]] += 1`` for every valid item in ``[a, b)`` whose span fits before ``b``."""
    last = b - span
    for t in range(a, last + 1):
        lab = labels[t]
        if lab >= 0:
            out[lab] += 1


@njit(cache=True)
def replicate_table(labels, span, starts, lens, out):
    """Fill ``out`` with the counts of one replicate.

    Parameters
    ----------
    labels : int32/int64 array, per position the index of its item (-1: none)
    span : int, number of positions an item covers (word length; 1 for points)
    starts, lens : int64 arrays, the blocks of the replicate (wrapped circularly past the end)
    out : int64 array of the table size, overwritten
    """
    out[:] = 0
    T = labels.shape[0]
    for j in range(starts.shape[0]):
        s = starts[j]
        e = s + lens[j]
        if e <= T:
            _add_run(labels, span, s, e, out)
        else:
            _add_run(labels, span, s, T, out)
            _add_run(labels, span, 0, e - T, out)


@njit(cache=True)
def weighted_table(ptr, pair_label, pair_count, weights, out):
    """``out = sum_b weights[b] * table_b`` from per-block tables stored as pairs (block-sorted)."""
    out[:] = 0
    for b in range(weights.shape[0]):
        w = weights[b]
        if w == 0:
            continue
        for i in range(ptr[b], ptr[b + 1]):
            out[pair_label[i]] += w * pair_count[i]


@dataclass(frozen=True)
class BlockTables:
    """Word (or box) counts of each disjoint block, stored once as (label, count) pairs sorted by block.

    Block ``b``'s table is ``label[ptr[b]:ptr[b+1]]`` with counts ``count[ptr[b]:ptr[b+1]]``.
    """

    ptr: np.ndarray
    label: np.ndarray
    count: np.ndarray
    size: int


@njit(cache=True)
def _block_pairs(labels, span, ell, m, ptr, out_label, out_count):
    """Tally each disjoint block's items once (no sorting): pairs in first-seen order per block."""
    T = labels.shape[0]
    B = ptr.shape[0] - 1
    cnt = np.zeros(m, dtype=np.int64)
    touched = np.empty(min(ell, T) + 1, dtype=np.int64)
    k = 0
    for b in range(B):
        a = b * ell
        e = min(a + ell, T)
        nt = 0
        ptr[b] = k
        for t in range(a, e - span + 1):
            lab = labels[t]
            if lab >= 0:
                if cnt[lab] == 0:
                    touched[nt] = lab
                    nt += 1
                cnt[lab] += 1
        for i in range(nt):
            lab = touched[i]
            out_label[k] = lab
            out_count[k] = cnt[lab]
            cnt[lab] = 0
            k += 1
    ptr[B] = k
    return k


def block_tables(labels: np.ndarray, span: int, block_length: int) -> BlockTables:
    """Count the items of every disjoint block of ``block_length`` positions once.

    An item at ``t`` covering ``span`` positions belongs to block ``t // block_length``
    if it ends inside it (items straddling two blocks are left out, as in every replicate).
    """
    T = int(labels.shape[0])
    ell = int(block_length)
    B = -(-T // ell) if T else 0
    m = int(labels.max()) + 1 if T and labels.max() >= 0 else 0
    ptr = np.zeros(B + 1, dtype=np.int64)
    lab = np.empty(T, dtype=np.int64)
    cnt = np.empty(T, dtype=np.int64)
    k = _block_pairs(labels, int(span), ell, max(m, 1), ptr, lab, cnt) if T else 0
    return BlockTables(ptr, lab[:k].copy(), cnt[:k].copy(), m)

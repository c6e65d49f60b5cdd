"""The replicates' count spectra from a stream labelled chunk by chunk: no length-sized array.

:func:`fractalseq.resampling._replicates.replicate_spectra` of
:func:`~fractalseq.resampling._replicates.item_tables` needs every position's label and every
``(block, item)`` pair at once (4 + 8 bytes per position at deep levels).  Here the labels come
from a :class:`~fractalseq.resampling._word_labels.WordIndex` one chunk at a time (chunks a whole
number of blocks long, so no block straddles two chunks), and the item-major tables are built for
one range of items at a time, each range holding at most :data:`ITEM_BUDGET` pairs:

* one pass counts each item's blocks (the row sizes) and its occurrences;
* per range, one pass fills that range's rows, and the range's items are tallied into the
  replicates' spectra by the same kernel as the whole table.

The tallies are integer additions (order free) and the rows of large items are appended in item
order, so the spectra equal those of the whole table exactly, whatever the chunk size and the
budget (``tests/test_streamed_profile.py`` checks this with random chunk sizes and budgets).
A range's items are independent of the other ranges': the same split can later send ranges, or
chunks whose row sizes are summed, to workers.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError
from fractalseq.resampling._replicates import DEFAULT_CAP, ReplicateSpectra, _count_big, _max_weights, _spectra
from fractalseq.resampling._word_labels import WordIndex

#: ``(block, item)`` pairs held at once (8 bytes each, plus 8 per single-block item while tallying).
ITEM_BUDGET = 1 << 24


@njit(cache=True)
def _row_sizes_chunk(labels, t0, span, ell, last, sizes, counts):
    """Blocks per item and occurrences per item over one chunk starting at block boundary ``t0``."""
    n = labels.shape[0]
    nb = (n + ell - 1) // ell
    b0 = t0 // ell
    for bb in range(nb):
        a = bb * ell
        e = min(a + ell, n)
        b = b0 + bb
        for t in range(a, e - span + 1):
            lab = labels[t]
            if lab >= 0 and last[lab] != b:
                last[lab] = b
                sizes[lab] += 1
    for t in range(n):
        lab = labels[t]
        if lab >= 0:
            counts[lab] += 1


@njit(cache=True)
def _fill_chunk(labels, t0, span, ell, lo, hi, last, cursor, blocks, counts):
    """Fill the rows of items ``lo..hi-1`` over one chunk (``cursor``: each row's next slot)."""
    n = labels.shape[0]
    nb = (n + ell - 1) // ell
    b0 = t0 // ell
    for bb in range(nb):
        a = bb * ell
        e = min(a + ell, n)
        b = b0 + bb
        for t in range(a, e - span + 1):
            lab = labels[t]
            if lab >= lo and lab < hi:
                i = lab - lo
                if last[i] != b:
                    last[i] = b
                    blocks[cursor[i]] = b
                    counts[cursor[i]] = 1
                    cursor[i] += 1
                else:
                    counts[cursor[i] - 1] += 1


def _ranges(row_ptr: np.ndarray, budget: int) -> list[tuple[int, int]]:
    """Consecutive item ranges, each holding at most ``budget`` pairs (at least one item)."""
    m = row_ptr.size - 1
    out = []
    lo = 0
    while lo < m:
        hi = int(np.searchsorted(row_ptr, row_ptr[lo] + max(int(budget), 1), side="right")) - 1
        hi = min(max(hi, lo + 1), m)
        out.append((lo, hi))
        lo = hi
    return out


def streamed_replicate_spectra(
    index: WordIndex, span: int, block_length: int, wt: np.ndarray | None,
    cap: int = DEFAULT_CAP, budget: int = ITEM_BUDGET,
) -> tuple[np.ndarray, ReplicateSpectra | None]:
    """Occurrences of each word and the replicates' count spectra, streamed.

    Parameters
    ----------
    index:
        The labels of the words (one depth).
    span:
        Positions an item covers (the word length): items ending past their block are left out.
    block_length:
        Length of the disjoint blocks.
    wt:
        ``(n_blocks, R)`` block-major weights, uint8, uint16 or int32
        (:func:`fractalseq.resampling._plan.block_major_weights`;
        ``None``: the occurrences only).
    cap, budget:
        Counts below ``cap`` are tallied densely; at most ``budget`` pairs are held at once.

    Returns
    -------
    (counts, spectra):
        ``counts`` equals ``bincount`` of the whole label array; ``spectra`` equals
        ``replicate_spectra(item_tables(labels, span, block_length, index.size), wt.T)``.
    """
    T = index.length
    if T >= 2**31:
        raise ParameterError(f"The bootstrap handles streams below 2**31 positions, not {T}; resample a part of it.", parameter="labels")
    ell = max(int(block_length), 1)
    m = index.size
    n_blocks = -(-T // ell) if T else 0
    if wt is None:
        return index.counts(), None
    sizes = np.zeros(m, dtype=np.int64)
    occ = np.zeros(m, dtype=np.int64)
    last = np.full(m, -1, dtype=np.int32)
    for t0, lab in index.chunks(ell):
        _row_sizes_chunk(lab, t0, int(span), ell, last, sizes, occ)
    if wt.ndim != 2 or wt.shape[0] != n_blocks or wt.dtype not in (np.uint8, np.uint16, np.int32):
        raise ParameterError(
            f"The block weights must be uint8, uint16 or int32 of shape ({n_blocks}, replicates), not {wt.dtype} {wt.shape}.",
            parameter="wt",
        )
    wt = np.ascontiguousarray(wt)
    R = wt.shape[1]
    cap = max(int(cap), 2)
    dense = np.zeros((R, cap), dtype=np.int64)
    row_ptr = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(sizes, out=row_ptr[1:])
    del sizes, last
    bigs = []
    wmax = _max_weights(wt)  # once for every range of words (a pass over the whole table)
    for lo, hi in _ranges(row_ptr, budget) if R and m else []:
        k = int(row_ptr[hi] - row_ptr[lo])
        local = row_ptr[lo : hi + 1] - row_ptr[lo]
        blocks = np.empty(k, dtype=np.int32)
        counts = np.empty(k, dtype=np.int32)
        cursor = local[:-1].copy()
        seen = np.full(hi - lo, -1, dtype=np.int32)
        for t0, lab in index.chunks(ell):
            _fill_chunk(lab, t0, int(span), ell, lo, hi, seen, cursor, blocks, counts)
        del cursor, seen
        nbig = int(_count_big(local, blocks, counts, wmax, cap))
        big = np.zeros((nbig, R), dtype=np.int64)
        _spectra(local, blocks, counts, n_blocks, wt, wmax, cap, dense, big)
        bigs.append(big)
    big = np.concatenate(bigs) if len(bigs) > 1 else bigs[0] if bigs else np.zeros((0, R), dtype=np.int64)
    return occ, ReplicateSpectra(dense, big)

"""The replicates' count spectra from a stream read in passes: no length-sized array.

:func:`fractalseq.resampling._replicates.replicate_spectra` of
:func:`~fractalseq.resampling._replicates.item_tables` needs every position's label and every
``(block, item)`` pair at once (4 + 8 bytes per position at deep levels).  Here the words are
labelled as the codes are read (:mod:`fractalseq.resampling._range_passes`: the address rolled over
the codes, looked up in the :class:`~fractalseq.resampling._word_labels.WordIndex`), and the
item-major tables are built for one range of items at a time, each range holding at most
``budget`` pairs (:func:`default_budget`: between :data:`ITEM_BUDGET` and :data:`ITEM_BUDGET_MAX`,
one pair per :data:`POSITIONS_PER_PAIR` positions; counts stored in the narrowest type the block
length allows):

* one pass counts each item's blocks (the row sizes) and its occurrences;
* per range, one pass fills that range's rows (only words whose address lies in the range are
  labelled), and the range's items are tallied into the replicates' spectra by the same kernel as
  the whole table.

The tallies are integer additions (order free) and the rows of large items are appended in item
order, so the spectra equal those of the whole table exactly, whatever the budget
(``tests/test_streamed_profile.py`` checks this with random chunk sizes and budgets).
A range's items are independent of the other ranges': the same split can later send ranges to
workers.
"""

from __future__ import annotations

import numpy as np

from fractalseq.errors import ParameterError
from fractalseq.resampling._range_passes import pass_direct, pass_fill, pass_sizes, tally_direct
from fractalseq.resampling._replicates import DEFAULT_CAP, ReplicateSpectra, _count_big, _max_weights, _spectra
from fractalseq.resampling._word_labels import WordIndex

#: ``(block, item)`` pairs held at once, at least (a 4-byte block and a 1-, 2- or 4-byte count each,
#: plus 8 per single-block item while tallying) ...
ITEM_BUDGET = 1 << 24
#: ... and at most; between the two, one pair per :data:`POSITIONS_PER_PAIR` positions of the stream,
#: so a long stream is read in a bounded number of range passes (8 at 1 Gbase instead of 60).
ITEM_BUDGET_MAX = 1 << 27
POSITIONS_PER_PAIR = 8


def default_budget(length: int) -> int:
    """Pairs held at once for a stream of ``length`` positions (:data:`ITEM_BUDGET` .. :data:`ITEM_BUDGET_MAX`)."""
    return int(min(ITEM_BUDGET_MAX, max(ITEM_BUDGET, int(length) // POSITIONS_PER_PAIR)))


def count_type(block_length: int) -> type:
    """The narrowest count type of a ``(block, item)`` pair: a count never exceeds the block length."""
    ell = int(block_length)
    return np.uint8 if ell <= 0xFF else np.uint16 if ell <= 0xFFFF else np.int32


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


#: Items x replicates at most for which every item's replicate counts are held at once (int32: 32 MiB):
#: one pass, block by block, with no item-major table (:func:`fractalseq.resampling._range_passes.pass_direct`).
DIRECT_CELLS = 1 << 23


def _check_weights(wt: np.ndarray, n_blocks: int) -> np.ndarray:
    if wt.ndim != 2 or wt.shape[0] != n_blocks or wt.dtype not in (np.uint8, np.uint16, np.int32):
        raise ParameterError(
            f"The block weights must be uint8, uint16 or int32 of shape ({n_blocks}, replicates), not {wt.dtype} {wt.shape}.",
            parameter="wt",
        )
    return np.ascontiguousarray(wt)


def _direct(codes, starts, bits: int, table, index: WordIndex, span: int, ell: int, wt: np.ndarray, cap: int):
    """The spectra of a few items: every item's replicate counts summed block by block in one pass."""
    T, m = index.length, index.size
    wt = _check_weights(wt, -(-T // ell) if T else 0)
    R = wt.shape[1]
    cap = max(int(cap), 2)
    occ = np.zeros(m, dtype=np.int64)
    acc = np.zeros((m, R), dtype=np.int32)
    bound = np.zeros(m, dtype=np.int64)
    wmax = _max_weights(wt)
    if m:
        pass_direct(codes, starts, index.depth, bits, span, ell, table, index.words, wt, wmax, occ, acc, bound)
    dense = np.zeros((R, cap), dtype=np.int64)
    big = np.zeros((int(np.count_nonzero(bound >= cap)) if R else 0, R), dtype=np.int64)
    if R:
        tally_direct(acc, bound, cap, dense, big)
    return occ, ReplicateSpectra(dense, big)


def streamed_replicate_spectra(
    index: WordIndex, span: int, block_length: int, wt: np.ndarray | None,
    cap: int = DEFAULT_CAP, budget: int | None = None,
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
        Counts below ``cap`` are tallied densely; at most ``budget`` pairs are held at once
        (default :func:`default_budget` of the length).

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
    arr = index.arr
    codes, starts, bits = arr.codes, np.asarray(arr.starts, dtype=np.int64), int(arr.alphabet.bits)
    table = index.table if index.table is not None else np.zeros(0, dtype=np.int32)
    if wt.ndim == 2 and m * wt.shape[1] <= DIRECT_CELLS:
        return _direct(codes, starts, bits, table, index, int(span), ell, wt, cap)
    sizes = np.zeros(m, dtype=np.int64)
    occ = np.zeros(m, dtype=np.int64)
    last = np.full(m, -1, dtype=np.int32)
    if m:
        pass_sizes(codes, starts, index.depth, bits, int(span), ell, table, index.words, last, sizes, occ)
    wt = _check_weights(wt, n_blocks)
    R = wt.shape[1]
    cap = max(int(cap), 2)
    dense = np.zeros((R, cap), dtype=np.int64)
    row_ptr = np.zeros(m + 1, dtype=np.int64)
    np.cumsum(sizes, out=row_ptr[1:])
    del sizes, last
    bigs = []
    wmax = _max_weights(wt)  # once for every range of words (a pass over the whole table)
    budget = default_budget(T) if budget is None else int(budget)
    pairs = count_type(ell)
    for lo, hi in _ranges(row_ptr, budget) if R and m else []:
        k = int(row_ptr[hi] - row_ptr[lo])
        local = row_ptr[lo : hi + 1] - row_ptr[lo]
        blocks = np.empty(k, dtype=np.int32)
        counts = np.empty(k, dtype=pairs)
        cursor = local[:-1].copy()
        seen = np.full(hi - lo, -1, dtype=np.int32)
        pass_fill(codes, starts, index.depth, bits, int(span), ell, table, index.words, lo, hi, seen, cursor, blocks, counts)
        del cursor, seen
        nbig = int(_count_big(local, blocks, counts, wmax, cap))
        big = np.zeros((nbig, R), dtype=np.int64)
        _spectra(local, blocks, counts, n_blocks, wt, wmax, cap, dense, big)
        bigs.append(big)
    big = np.concatenate(bigs) if len(bigs) > 1 else bigs[0] if bigs else np.zeros((0, R), dtype=np.int64)
    return occ, ReplicateSpectra(dense, big)

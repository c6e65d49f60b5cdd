"""Every position of a stream labelled with the index of the word starting there (the union table of words).

Labels are computed once per depth; a replicate's table is then a sum over
the positions of its blocks, never a recount.  A dense rank table when
``A**n <= DENSE_LABEL_CELLS``, else one sort of ``address << b | position`` keys.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError
from fractalseq.stream import SymbolArray
from fractalseq.words._kernels import AT_START, _segment_words


@njit(cache=True)
def _word_addresses(codes, starts, depth, bits, out, valid):
    """Address of the ``depth``-word starting at each position, if it fits inside its segment."""
    _segment_words(codes, starts, depth, bits, codes.shape[0], AT_START, 0, out, valid)


#: Word lengths whose address table has at most this many cells are labelled densely (no sort).
DENSE_LABEL_CELLS = 1 << 24


@njit(cache=True)
def _dense_labels(addr, valid, cells, labels):
    """Rank the addresses present in a table of ``cells`` entries; label every valid position with its rank."""
    table = np.zeros(cells, dtype=np.int32)
    n = addr.shape[0]
    for t in range(n):
        if valid[t]:
            table[addr[t]] = 1
    k = 0
    for a in range(cells):
        if table[a]:
            table[a] = k
            k += 1
        else:
            table[a] = -1
    for t in range(n):
        labels[t] = table[addr[t]] if valid[t] else -1
    words = np.empty(k, dtype=np.uint64)
    for a in range(cells):
        if table[a] >= 0:
            words[table[a]] = a
    return words


@njit(cache=True)
def rank_sorted_keys(keys, shift, labels, words):
    """``keys`` sorted, each ``item << shift | position``: label each position with the rank of its item.

    The distinct items are written to ``words`` too when it is long enough
    (pass an empty array to skip them).  Returns the number of distinct items.
    """
    pmask = (np.uint64(1) << np.uint64(shift)) - np.uint64(1)
    keep_words = words.shape[0] >= keys.shape[0]
    k = -1
    prev = np.uint64(0)
    for i in range(keys.shape[0]):
        a = keys[i] >> np.uint64(shift)
        if i == 0 or a != prev:
            k += 1
            if keep_words:
                words[k] = a
            prev = a
        labels[np.int64(keys[i] & pmask)] = k
    return k + 1


def word_labels(arr: SymbolArray, depth: int) -> tuple[np.ndarray, np.ndarray]:
    """Label every position with the index of the ``depth``-word starting there.

    Short words (``A**depth`` at most :data:`DENSE_LABEL_CELLS` addresses) are
    ranked in a dense table; longer ones by one sort of ``address << b |
    position`` keys when they fit 64 bits, else by :func:`numpy.unique`.

    Returns
    -------
    labels : int32 (int64 beyond 2**31 words) array of length ``len(arr)``; -1 where the word would cross a segment end
    words : sorted unique addresses (``uint64``), so ``words[labels[t]]`` is the word at ``t``;
        the same order as :meth:`fractalseq.words._counts.WordCounts.words`.
    """
    T = len(arr)
    bits = arr.alphabet.bits
    if depth < 1 or bits * depth > 64:
        raise ParameterError(f"Depth {depth} is outside 1..{arr.alphabet.max_depth} for this alphabet.", parameter="depth")
    addr = np.zeros(T, dtype=np.uint64)
    valid = np.zeros(T, dtype=bool)
    if T:
        _word_addresses(arr.codes, arr.starts, int(depth), int(bits), addr, valid)
    cells = 1 << (bits * depth) if bits * depth <= 62 else 0
    if 0 < cells <= DENSE_LABEL_CELLS:
        labels = np.empty(T, dtype=np.int32)
        words = _dense_labels(addr, valid, int(cells), labels)
        return labels, words
    shift = max(int(T - 1).bit_length(), 1)
    if bits * depth + shift <= 64 and T < 2**31 - 1:
        pos = np.flatnonzero(valid).astype(np.uint64)
        keys = (addr[valid] << np.uint64(shift)) | pos
        keys.sort()
        labels = np.full(T, -1, dtype=np.int32)
        words = np.empty(keys.size, dtype=np.uint64)
        k = rank_sorted_keys(keys, shift, labels, words)
        return labels, words[:k].copy()
    words, inv = np.unique(addr[valid], return_inverse=True)
    dtype = np.int32 if words.size < 2**31 - 1 else np.int64
    labels = np.full(T, -1, dtype=dtype)
    labels[valid] = inv.astype(dtype)
    return labels, words

"""The deepest words of an in-memory stream counted in a direct table, one part of the address space at a time.

Sorting each piece's words and merging the sorted runs (:class:`fractalseq.words._counts.WordCounter`)
costs a sort of every occurrence plus merges that re-read the growing table; once the distinct
words saturate (a long stream, a moderate depth) the merges dominate.  When the address space
``2**(b N)`` is not much larger than the stream, a table of one counter per address is cheaper:
one pass over the stream adds one to the counter of each word, and the occupied counters, read
in order, are the sorted distinct words with their counts.  To bound the table, the addresses
are split by their leading bits into ``2**(b N - low)`` parts of ``2**low`` counters each; the
stream is read once per part and only the words of that part are tallied.  Parts are visited in
address order, so the result is sorted, and equals the sorted-run counts exactly (the same words,
the same counts; tested against ``numpy.unique`` of the words).
"""

from __future__ import annotations

import numpy as np
from numba import njit

#: Counters of one part's table (uint32: 256 MiB).
PART_CELLS_LOG2 = 26
#: At most this many parts (passes over the stream); deeper addresses keep the sorted runs.
MAX_PARTS = 16
#: Use the table only when the stream has at least ``cells / MIN_FILL`` words (else it is mostly empty).
MIN_FILL = 16


@njit(cache=True)
def _tally_part(codes, starts, depth, bits, mask, part, low, table):
    """``table[w & (2**low - 1)] += 1`` for every full ``depth``-word ``w`` (address bits ``mask``) of each
    segment with ``w >> low == part``."""
    n = codes.shape[0]
    nseg = starts.shape[0]
    ub = np.uint64(bits)
    lowmask = (np.uint64(1) << np.uint64(low)) - np.uint64(1)
    ul = np.uint64(low)
    up = np.uint64(part)
    for s in range(nseg):
        a = starts[s]
        e = starts[s + 1] if s + 1 < nseg else n
        if e - a < depth:
            continue
        w = np.uint64(0)
        for i in range(a, a + depth - 1):
            w = (w << ub) | np.uint64(codes[i])
        for i in range(a + depth - 1, e):
            w = ((w << ub) | np.uint64(codes[i])) & mask
            if (w >> ul) == up:
                table[w & lowmask] += 1


@njit(cache=True)
def _read_part(table, part, low, words, counts):
    """Occupied counters of one part's table, in order, as addresses and counts (``words``/``counts`` sized to fit)."""
    base = np.uint64(part) << np.uint64(low)
    j = 0
    for i in range(table.shape[0]):
        c = table[i]
        if c != 0:
            words[j] = base | np.uint64(i)
            counts[j] = c
            j += 1
    return j


def parts_for(length: int, bits: int, depth: int, part_log2: int = PART_CELLS_LOG2) -> int:
    """Number of parts :func:`tally_in_parts` would use for this stream, or 0 when the sorted runs fit better."""
    total = bits * depth
    low = min(total, part_log2)
    parts = 1 << (total - low)
    if parts > MAX_PARTS or length * MIN_FILL < (1 << total):
        return 0
    return parts


def tally_in_parts(
    codes: np.ndarray, starts: np.ndarray, depth: int, bits: int, key_dtype: np.dtype, count_dtype: np.dtype,
    part_log2: int = PART_CELLS_LOG2,
) -> tuple[np.ndarray, np.ndarray]:
    """Sorted distinct full ``depth``-words of the segments and their counts, by the parted direct table.

    Parameters
    ----------
    codes:
        Symbol codes of the whole stream.
    starts:
        Sorted unique segment starts (0 first); no word spans a start.
    depth, bits:
        Word length N and bits per symbol (``bits * depth <= 64``).
    key_dtype, count_dtype:
        Types of the returned addresses and counts.
    part_log2:
        Counters per part, as a power of two (the table's memory).

    Returns
    -------
    words, counts:
        Sorted unique addresses (first symbol most significant) and their occurrences.
    """
    codes = np.ascontiguousarray(codes)
    starts = np.ascontiguousarray(starts, dtype=np.int64)
    total = bits * depth
    low = min(total, int(part_log2))
    mask = np.uint64((1 << total) - 1)
    table = np.zeros(1 << low, dtype=np.uint32 if codes.shape[0] < (1 << 32) else np.int64)
    words = np.empty(0, dtype=key_dtype)
    counts = np.empty(0, dtype=count_dtype)
    for part in range(1 << (total - low)):
        if part:
            table[:] = 0
        _tally_part(codes, starts, depth, bits, mask, part, low, table)
        m = int(np.count_nonzero(table))
        n0 = words.shape[0]
        words.resize(n0 + m, refcheck=False)  # grown in place (realloc), no second copy of the table read so far
        counts.resize(n0 + m, refcheck=False)
        _read_part(table, part, low, words[n0:], counts[n0:])
    return words, counts

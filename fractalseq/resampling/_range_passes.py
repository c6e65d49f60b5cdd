"""The passes of the streamed replicate spectra, read straight from the symbol codes.

:func:`fractalseq.resampling._streamed.streamed_replicate_spectra` reads the stream once to size
the item-major block tables and once per range of items to fill them.  Labelling a chunk through
:meth:`fractalseq.resampling._word_labels.WordIndex.labels` writes an address, a validity flag and
a label per position and reads them back, and a range pass needs only the positions whose word
lies in that range.  The kernels here roll each word's address over the codes themselves (the
loop of :func:`fractalseq.words._kernels._segment_words`: restart at every segment start, a word
once ``depth`` symbols of its segment are read) and label a word only when it is needed, so a
range pass costs about one read of the codes.

Labels are the ranks of the words in the sorted union table (a dense rank table of every address,
or a binary search of the sorted distinct words), so the items ``lo..hi-1`` are exactly the words
with addresses ``words[lo]..words[hi-1]``: a range pass compares the address first.  Positions
are visited in order, so the rows are the same arrays as the chunked passes built
(``tests/test_streamed_profile.py``).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from fractalseq.resampling._prefetch import prefetch_item


@njit(cache=True)
def _label(addr, table, words, lo, hi):
    """Rank of ``addr`` among ``words[lo:hi]`` plus ``lo`` (dense: ``table[addr]``)."""
    if table.shape[0] > 0:
        return np.int64(table[addr])
    return lo + np.int64(np.searchsorted(words[lo:hi], addr))


#: Words collected before they are labelled and applied: the rank-table lookups of a batch are
#: independent loads the processor overlaps, instead of each waiting behind the previous word's updates.
BATCH = 1 << 12


@njit(cache=True)
def _collect(codes, starts, depth, bits, a_lo, a_hi, at, roll, ps, addrs):
    """The next words (start ``p`` and address) with ``a_lo <= address <= a_hi``, in order of position.

    The one loop over the codes of every pass here (the loop of ``_segment_words``): the address is
    rolled symbol by symbol, restarts at every segment start, and a word is taken once ``depth``
    symbols of its segment are read.  It stops when ``ps`` is full and resumes from ``at`` (segment,
    next symbol, symbols read in the segment) and ``roll`` (the address so far).  Returns how many
    words it wrote (0: the stream is done).
    """
    n = codes.shape[0]
    nseg = starts.shape[0]
    ub = np.uint64(bits)
    kmask = (np.uint64(1) << np.uint64(bits * depth)) - np.uint64(1) if bits * depth < 64 else ~np.uint64(0)
    cap = ps.shape[0]
    nb = 0
    s, k, filled = at[0], at[1], at[2]
    addr = roll[0]
    while s < nseg and nb < cap:
        e = starts[s + 1] if s + 1 < nseg else n
        while k < e and nb < cap:
            addr = ((addr << ub) | np.uint64(codes[k])) & kmask
            filled += 1
            if filled >= depth and addr >= a_lo and addr <= a_hi:
                ps[nb] = k - depth + 1
                addrs[nb] = addr
                nb += 1
            k += 1
        if k >= e:  # the next segment starts afresh
            s += 1
            addr = np.uint64(0)
            filled = 0
            if s < nseg:
                k = starts[s]
    at[0], at[1], at[2] = s, k, filled
    roll[0] = addr
    return nb


@njit(cache=True)
def _cursor(starts):
    """A fresh :func:`_collect` position: the first segment's first symbol."""
    at = np.zeros(3, dtype=np.int64)
    at[1] = starts[0] if starts.shape[0] else 0
    return at, np.zeros(1, dtype=np.uint64)


@njit(cache=True)
def _labels_of(addrs, nb, table, words, lo, hi, labs):
    for j in range(nb):
        labs[j] = _label(addrs[j], table, words, lo, hi)


@njit(cache=True)
def _apply_sizes(bs, keep, labs, nb, last, sizes, occ):
    """Occurrences and block rows of a batch of words (``bs``: each word's block, :func:`_blocks_of`)."""
    for j in range(nb):
        lab = labs[j]
        occ[lab] += 1
        if keep[j] and last[lab] != bs[j]:
            last[lab] = bs[j]
            sizes[lab] += 1


@njit(cache=True)
def pass_sizes(codes, starts, depth, bits, span, ell, table, words, last, sizes, occ):
    """Blocks per item (``sizes``) and occurrences per item (``occ``) over the whole stream.

    An item at ``p`` belongs to block ``p // ell`` when it ends inside that block (and inside the
    stream); ``occ`` counts every word.  ``table`` is the dense rank table (empty: binary search of
    ``words``), ``last`` (``-1``) each item's last block.
    """
    n = codes.shape[0]
    m = words.shape[0]
    ps = np.empty(BATCH, dtype=np.int64)
    addrs = np.empty(BATCH, dtype=np.uint64)
    labs = np.empty(BATCH, dtype=np.int64)
    keep = np.empty(BATCH, dtype=np.bool_)
    state = np.array([0, min(ell, n)], dtype=np.int64)  # the block of the next word and its end
    at, roll = _cursor(starts)
    while True:
        nb = _collect(codes, starts, depth, bits, np.uint64(0), ~np.uint64(0), at, roll, ps, addrs)
        if nb == 0:
            break
        _labels_of(addrs, nb, table, words, 0, m, labs)
        _blocks_of(ps, nb, span, ell, n, state, keep)
        _apply_sizes(ps, keep, labs, nb, last, sizes, occ)


#: Words ahead whose row cursor, and then whose row slot, is fetched while a word is appended.
AHEAD = 8


@njit(cache=True)
def _apply_fill(ps, labs, nb, lo, seen, cursor, blocks, counts):
    """Append a batch of words (in position order, each in its block ``ps[j]``) to the rows of items ``lo..``."""
    for j in range(nb):
        if j + 2 * AHEAD < nb:
            f = labs[j + 2 * AHEAD] - lo
            prefetch_item(cursor, f)
            prefetch_item(seen, f)
        if j + AHEAD < nb:
            g = cursor[labs[j + AHEAD] - lo]
            if g < blocks.shape[0]:
                prefetch_item(blocks, g)
                prefetch_item(counts, g)
        b = ps[j]
        i = labs[j] - lo
        if seen[i] != b:
            seen[i] = b
            blocks[cursor[i]] = b
            counts[cursor[i]] = 1
            cursor[i] += 1
        else:
            counts[cursor[i] - 1] += 1


@njit(cache=True)
def _blocks_of(ps, nb, span, ell, n, state, keep):
    """Each word's block in place of its start (``ps``), and whether it ends inside that block (``keep``)."""
    b = state[0]
    bend = state[1]
    for j in range(nb):
        p = ps[j]
        while p >= bend:
            b += 1
            bend = min(bend + ell, n)
        keep[j] = p + span <= bend
        ps[j] = b
    state[0] = b
    state[1] = bend


@njit(cache=True)
def _kept(ps, addrs, keep, nb):
    """Move the kept words to the front; returns how many."""
    k = 0
    for j in range(nb):
        if keep[j]:
            ps[k] = ps[j]
            addrs[k] = addrs[j]
            k += 1
    return k


@njit(cache=True)
def pass_fill(codes, starts, depth, bits, span, ell, table, words, lo, hi, seen, cursor, blocks, counts):
    """Fill the rows of items ``lo..hi-1`` (``cursor``: each row's next slot, ``seen``: its last block)."""
    n = codes.shape[0]
    bs = np.empty(BATCH, dtype=np.int64)
    addrs = np.empty(BATCH, dtype=np.uint64)
    labs = np.empty(BATCH, dtype=np.int64)
    keep = np.empty(BATCH, dtype=np.bool_)
    state = np.array([0, min(ell, n)], dtype=np.int64)
    at, roll = _cursor(starts)
    while True:
        nb = _collect(codes, starts, depth, bits, words[lo], words[hi - 1], at, roll, bs, addrs)
        if nb == 0:
            break
        _blocks_of(bs, nb, span, ell, n, state, keep)
        nb = _kept(bs, addrs, keep, nb)
        _labels_of(addrs, nb, table, words, lo, hi, labs)
        _apply_fill(bs, labs, nb, lo, seen, cursor, blocks, counts)


@njit(cache=True)
def _flush_block(b, nt, touched, cnt, wt, wmax, acc, bound):
    """Add block ``b``'s counts of its ``nt`` touched items into their replicate counts and bounds."""
    R = wt.shape[1]
    row = wt[b]
    for u in range(nt):
        i = touched[u]
        c = np.int32(cnt[i])
        for r in range(R):
            acc[i, r] += c * np.int32(row[r])
        bound[i] += np.int64(cnt[i]) * np.int64(wmax[b])


@njit(cache=True)
def pass_direct(codes, starts, depth, bits, span, ell, table, words, wt, wmax, occ, acc, bound):
    """Every item's replicate counts in one pass, block by block (for a few items: ``acc`` is ``(items, R)``).

    ``acc[i, r] = sum_b wt[b, r] * c[b, i]`` and ``bound[i] = sum_b wmax[b] * c[b, i]`` (the
    quantities the item-major tally computes from its rows), ``occ`` every word's occurrences.
    """
    n = codes.shape[0]
    m = words.shape[0]
    seen = np.full(m, -1, dtype=np.int64)
    cnt = np.zeros(m, dtype=np.int64)
    touched = np.empty(min(m, max(ell, 1)), dtype=np.int64)
    ps = np.empty(BATCH, dtype=np.int64)
    addrs = np.empty(BATCH, dtype=np.uint64)
    labs = np.empty(BATCH, dtype=np.int64)
    keep = np.empty(BATCH, dtype=np.bool_)
    state = np.array([0, min(ell, n)], dtype=np.int64)
    at, roll = _cursor(starts)
    nt = 0
    b = 0  # the block whose items are being collected
    while True:
        nb = _collect(codes, starts, depth, bits, np.uint64(0), ~np.uint64(0), at, roll, ps, addrs)
        if nb == 0:
            break
        _labels_of(addrs, nb, table, words, 0, m, labs)
        _blocks_of(ps, nb, span, ell, n, state, keep)
        for j in range(nb):
            lab = labs[j]
            occ[lab] += 1
            if ps[j] != b:
                _flush_block(b, nt, touched, cnt, wt, wmax, acc, bound)
                nt = 0
                b = ps[j]
            if keep[j]:
                if seen[lab] != b:
                    seen[lab] = b
                    cnt[lab] = 1
                    touched[nt] = lab
                    nt += 1
                else:
                    cnt[lab] += 1
    if nt:
        _flush_block(b, nt, touched, cnt, wt, wmax, acc, bound)


@njit(cache=True)
def tally_direct(acc, bound, cap, dense, big_rows):
    """:func:`fractalseq.resampling._replicates._spectra`'s tally from whole replicate counts: items whose
    bound reaches ``cap`` become rows of ``big_rows`` in item order, the others are tallied into ``dense``."""
    m, R = acc.shape
    nbig = 0
    for i in range(m):
        if bound[i] >= cap:
            for r in range(R):
                big_rows[nbig, r] = acc[i, r]
            nbig += 1
        elif bound[i] > 0:
            for r in range(R):
                v = acc[i, r]
                if v > 0:
                    dense[r, v] += 1
    return nbig

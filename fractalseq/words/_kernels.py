"""Numba kernels for word counting (one job each, typed by their callers).

Conventions
-----------
A word ``w_1 .. w_n`` over an alphabet of ``A`` symbols is packed into an
unsigned integer *address* ``sum_i w_i << (b * (n - i))`` with
``b = ceil(log2 A)`` bits per symbol: the first symbol is the most
significant, so numerical order is lexicographic order and the prefix of
length ``m`` is ``address >> (b * (n - m))``.  Keys are ``uint32`` when
``b * N <= 32`` and ``uint64`` otherwise.

These kernels never validate their input: the Python layer in
:mod:`fractalseq.words._counts` does that before calling them.
"""

from __future__ import annotations

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

# ----------------------------------------------------------------- addresses

#: Layouts of :func:`_segment_words`: the ``j``-th word at ``keys[j]``, its start at ``where[j]``.
COMPACT = 0
#: Like :data:`COMPACT`, but words whose first symbol has its top bit clear first (``keys[:n_low]``),
#: the others from ``keys[n_low]`` on; both groups in order of their starts.
SPLIT = 1
#: The word starting at ``p`` at ``keys[p]``; ``where[p] = 1`` marks that a word starts there.
AT_START = 2


@njit(cache=True, nogil=True)
def _segment_words(codes, starts, depth, bits, limit, layout, n_low, keys, where):
    """Rolling addresses of every ``depth``-word that lies inside one segment and starts before ``limit``.

    The one loop that turns a stream with segment breaks into word addresses: the
    address is rolled symbol by symbol (``addr = (addr << bits | code) & mask``,
    the mask guarding 64-bit words), restarts at every segment start, and a word
    is emitted once ``depth`` symbols of its segment have been read.  Words are
    emitted in order of their start ``p``.

    Parameters
    ----------
    codes : integer array, each code below ``2**bits``
    starts : int64 array, sorted segment starts, 0 first
    depth, bits : word length and bits per symbol (``bits * depth <= 64``)
    limit : only words starting at ``p < limit`` are emitted
    layout : :data:`COMPACT`, :data:`SPLIT` or :data:`AT_START` (where each word goes)
    n_low : with :data:`SPLIT`, the number of low words (:func:`low_half_words`); else unused
    keys : output addresses (uint32 or uint64; ``len(codes)`` long for :data:`AT_START`)
    where : int64 start positions (:data:`COMPACT`, :data:`SPLIT`) or bool start marks
        (:data:`AT_START`); an empty array writes none

    Returns
    -------
    int : the number of words emitted
    """
    n = codes.shape[0]
    nseg = starts.shape[0]
    ub = np.uint64(bits)
    kmask = (np.uint64(1) << np.uint64(bits * depth)) - np.uint64(1) if bits * depth < 64 else ~np.uint64(0)
    top = np.uint64(bits * depth - 1)
    marks = where.shape[0] > 0
    stop = limit + depth - 1  # the last symbol of a word starting before limit comes before stop
    lo = 0
    hi = n_low
    k = 0
    for s in range(nseg):
        a = starts[s]
        if a >= limit:
            break
        e = starts[s + 1] if s + 1 < nseg else n
        if e > stop:
            e = stop
        addr = np.uint64(0)
        filled = 0
        for i in range(a, e):
            addr = ((addr << ub) | np.uint64(codes[i])) & kmask
            filled += 1
            if filled >= depth:
                p = i - depth + 1
                if layout == AT_START:
                    slot = p
                elif layout == SPLIT:  # branch-free: both cursors advance by 0 or 1
                    up = np.int64((addr >> top) & np.uint64(1))
                    slot = hi if up else lo
                    hi += up
                    lo += 1 - up
                else:
                    slot = k
                keys[slot] = addr
                if marks:
                    where[slot] = 1 if layout == AT_START else p
                k += 1
    return k


def segment_word_addresses(codes, starts, depth: int, bits: int, limit: int | None = None):
    """Addresses and start positions of every ``depth``-word inside one segment of a stream.

    Parameters
    ----------
    codes:
        1-D array of non-negative integer codes, each below ``2**bits``.
    starts:
        Segment starts (any order; 0 is added, starts outside the stream are dropped).
        No word spans a segment start.
    depth:
        Word length n (at least 1).
    bits:
        Bits per symbol b; words are packed first symbol most significant (``b * n <= 64``).
    limit:
        Only words starting before ``limit`` (default: all).

    Returns
    -------
    addresses : uint64 array, one per word, in order of their starts
    positions : int64 array, the start of each word
    """
    from fractalseq.errors import ParameterError
    from fractalseq.stream import normalise_starts

    codes = np.asarray(codes)
    if codes.ndim != 1 or (codes.size and not np.issubdtype(codes.dtype, np.integer)):
        raise ParameterError("codes must be a 1-D array of whole numbers.", parameter="codes")
    if not isinstance(bits, (int, np.integer)) or not 1 <= bits <= 32:
        raise ParameterError(f"bits must be a whole number from 1 to 32, not {bits!r}.", parameter="bits")
    if not isinstance(depth, (int, np.integer)) or depth < 1 or bits * depth > 64:
        raise ParameterError(
            f"depth must be a whole number from 1 to {64 // int(bits)} for {bits} bits per symbol, not {depth!r}.",
            parameter="depth",
        )
    if codes.size and (int(codes.min()) < 0 or int(codes.max()) >> int(bits)):
        raise ParameterError(f"every code must lie in 0..{(1 << int(bits)) - 1} for {bits} bits per symbol.", parameter="codes")
    n = int(codes.size)
    limit = n if limit is None else max(0, min(int(limit), n))
    # the codes of alphabets (uint8 up to 256 symbols, else uint32): one compiled kernel serves every caller
    codes = np.ascontiguousarray(codes, dtype=np.uint8 if bits <= 8 else np.uint32)
    st = normalise_starts(np.asarray(starts, dtype=np.int64), n)
    keys = np.empty(n, dtype=np.uint64)
    where = np.empty(n, dtype=np.int64)
    k = _segment_words(codes, st, int(depth), int(bits), limit, COMPACT, 0, keys, where) if n else 0
    return keys[:k].copy(), where[:k].copy()


@njit(cache=True)
def full_words(codes, starts, depth, bits, closed_last, key_template, write_keys=True):
    """Addresses of every full ``depth``-word and the tails of closed segments.

    Parameters
    ----------
    codes : uint8/uint32 array
    starts : int64 array, sorted segment starts (0 first)
    depth : int, word length N
    bits : int, bits per symbol
    closed_last : bool, whether the last segment ends at ``len(codes)``
    key_template : an (empty) array of the key dtype (uint32 or uint64) fixing the output type
    write_keys : bool, False to return no keys (only tails and carry), e.g. when
        :func:`full_words_split` writes them

    Returns
    -------
    keys : array of N-word addresses (positions whose word fits in its segment)
    tail_len : uint8 array, length m < N of each tail word of a closed segment
    tail_addr : uint64 array, address of that m-word
    carry_from : int64, first position of the unfinished tail of the open last segment
    """
    n = codes.shape[0]
    nseg = starts.shape[0]
    # count outputs
    nfull = 0
    ntail = 0
    for s in range(nseg):
        a = starts[s]
        e = starts[s + 1] if s + 1 < nseg else n
        L = e - a
        if L >= depth:
            nfull += L - depth + 1
        if s + 1 < nseg or closed_last:
            ntail += min(L, depth - 1)
    if not write_keys:
        nfull = 0
    keys = np.empty(nfull, dtype=key_template.dtype)
    tail_len = np.empty(ntail, dtype=np.uint8)
    tail_addr = np.empty(ntail, dtype=np.uint64)
    if write_keys:
        _segment_words(codes, starts, depth, bits, n, COMPACT, 0, keys, np.empty(0, np.int64))
    ub = np.uint64(bits)
    t = 0
    carry_from = n
    for s in range(nseg):
        a = starts[s]
        e = starts[s + 1] if s + 1 < nseg else n
        closed = (s + 1 < nseg) or closed_last
        if closed:
            # tails: positions i in [max(a, e-depth+1), e) give words of length e-i
            lo = max(a, e - depth + 1)
            for i in range(lo, e):
                m = e - i
                w = np.uint64(0)
                for j in range(i, e):
                    w = (w << ub) | np.uint64(codes[j])
                tail_len[t] = m
                tail_addr[t] = w
                t += 1
        else:
            carry_from = max(a, e - depth + 1)
    return keys, tail_len, tail_addr, carry_from


@njit(cache=True, nogil=True)
def low_half_words(codes, starts, depth, bits):
    """Number of full ``depth``-words whose first symbol has its top bit clear (the first half of the split)."""
    n = codes.shape[0]
    nseg = starts.shape[0]
    half = 1 << (bits - 1)
    low = 0
    for s in range(nseg):
        a = starts[s]
        e = starts[s + 1] if s + 1 < nseg else n
        for i in range(a, e - depth + 1):
            low += codes[i] < half
    return low


@njit(cache=True, nogil=True)
def full_words_split(codes, starts, depth, bits, n_low, keys):
    """Write every full ``depth``-word address into ``keys``: words whose first symbol's top bit is clear
    first (``keys[:n_low]``, see :func:`low_half_words`), the others after.

    Every word below ``n_low`` sorts before every word above it, so the two
    halves can be sorted and reduced independently (:data:`SPLIT` layout of
    :func:`_segment_words`).
    """
    _segment_words(codes, starts, depth, bits, codes.shape[0], SPLIT, n_low, keys, np.empty(0, np.int64))


@njit(cache=True, nogil=True)
def window_words(codes, starts, depth, bits, first, last, keys):
    """Write the full ``depth``-word addresses ``w`` with ``first <= w <= last`` into ``keys``, in order of their
    starts; return how many were written (``keys`` must hold every full word).

    The words of one contiguous range of the address space: a count split by
    address (:mod:`fractalseq.words._slices`) gives each worker one range.
    """
    n = codes.shape[0]
    nseg = starts.shape[0]
    ub = np.uint64(bits)
    kmask = (np.uint64(1) << np.uint64(bits * depth)) - np.uint64(1) if bits * depth < 64 else ~np.uint64(0)
    lo = np.uint64(first)
    span = np.uint64(last) - lo
    k = 0
    for s in range(nseg):
        a = starts[s]
        e = starts[s + 1] if s + 1 < nseg else n
        addr = np.uint64(0)
        for i in range(a, e):
            addr = ((addr << ub) | np.uint64(codes[i])) & kmask
            if i - a + 1 >= depth:
                keys[k] = addr
                k += (addr - lo) <= span  # one unsigned comparison (wraps below first); branch-free
    return k


@njit(cache=True, nogil=True)
def sort_keys(keys, used_bits):
    """Sort unsigned word addresses in place: least-significant-digit radix sort, 8-bit digits.

    Only the digits holding the ``used_bits`` low bits are sorted on (``bits * N`` for
    ``N``-word addresses), and a digit that every key shares is skipped (the keys of one
    address slice share their top bits).  One histogram pass, then one scatter pass per
    digit through a buffer of the keys' size.  On the 2-core test machine (AMD EPYC,
    AVX-512) this is 4-6 times faster than ``numpy.sort`` of the same 4-million keys
    (measured); the order is the same, as any sort of equal integers gives.
    """
    n = keys.shape[0]
    if n < 2:
        return
    digits = (used_bits + 7) // 8
    cnt = np.zeros((digits, 256), np.int64)
    for i in range(n):
        x = np.uint64(keys[i])
        for d in range(digits):
            cnt[d, (x >> np.uint64(8 * d)) & np.uint64(255)] += 1
    tmp = np.empty_like(keys)
    src = keys
    dst = tmp
    moved = False
    for d in range(digits):
        used = 0
        for b in range(256):
            used += cnt[d, b] != 0
        if used == 1:
            continue
        start = 0
        for b in range(256):
            c = cnt[d, b]
            cnt[d, b] = start
            start += c
        shift = np.uint64(8 * d)
        for i in range(n):
            x = src[i]
            b = (np.uint64(x) >> shift) & np.uint64(255)
            dst[cnt[d, b]] = x
            cnt[d, b] += 1
        src, dst = dst, src
        moved = not moved
    if moved:
        keys[:] = src


# -------------------------------------------------------------- runs


@intrinsic
def _clz64(typingctx, x):
    """Leading zero bits of a uint64 (LLVM ``ctlz``; 64 for zero)."""
    sig = types.int64(types.uint64)

    def codegen(context, builder, signature, args):
        return builder.ctlz(args[0], ir.Constant(ir.IntType(1), 0))

    return sig, codegen


@njit(cache=True, nogil=True)
def _lcp_symbols(x, key_bits, unused, bits, depth):
    """Shared leading symbols of two addresses whose XOR is ``x`` (``depth`` when equal)."""
    if x == 0:
        return depth
    lcp = (_clz64(np.uint64(x)) - (64 - key_bits) - unused) // bits
    return depth if lcp > depth else lcp


@njit(cache=True, nogil=True)
def count_runs(sorted_keys):
    """Number of distinct values in a sorted array."""
    n = sorted_keys.shape[0]
    m = 1 if n else 0
    for i in range(1, n):
        if sorted_keys[i] != sorted_keys[i - 1]:
            m += 1
    return m


@njit(cache=True, nogil=True)
def write_runs(sorted_keys, uniq, cnt, depth, bits):
    """Unique words of sorted keys into ``uniq``, their counts into ``cnt``; returns ``(m, lcp_hist)``.

    One pass; the shared prefix of neighbours comes from count-leading-zeros,
    and the histogram is kept in four interleaved copies so that consecutive
    increments of one bin do not wait on each other.  ``uniq`` may be
    ``sorted_keys`` itself (see :func:`compact_runs`).
    """
    n = sorted_keys.shape[0]
    hist = np.zeros((4, depth + 1), dtype=np.int64)
    if n == 0:
        return 0, hist[0]
    skip = 64 - bits * depth
    j = 0
    run_start = 0
    cur = np.uint64(sorted_keys[0])
    uniq[0] = sorted_keys[0]
    for i in range(1, n):
        a = np.uint64(sorted_keys[i])
        if a != cur:
            cnt[j] = i - run_start
            run_start = i
            hist[i & 3, (_clz64(a ^ cur) - skip) // bits] += 1
            j += 1
            uniq[j] = sorted_keys[i]
            cur = a
    cnt[j] = n - run_start
    return j + 1, hist[0] + hist[1] + hist[2] + hist[3]


@njit(cache=True, nogil=True)
def compact_runs(keys, cnt, depth, bits, key_bits):
    """Collapse a sorted key array in place into its unique words; return their number and the prefix histogram.

    After the call ``keys[:m]`` are the unique words and ``cnt[:m]`` their
    counts (``cnt`` at least as long as ``keys``).  ``lcp_hist[l]`` counts
    consecutive unique words sharing exactly ``l`` leading symbols, so the
    number of distinct n-word prefixes is ``1 + lcp_hist[:n].sum()``: every
    depth's box count from the same pass (:func:`write_runs` writing over
    its own input, which is safe: a word is written at or before where it
    was read).  ``key_bits`` is the width of the key type.
    """
    return write_runs(keys, keys, cnt, depth, bits)


def runs_with_lcp(sorted_keys, depth, bits, key_bits):
    """Unique words of a sorted key array, their counts, and a histogram of shared prefixes.

    ``sorted_keys`` is overwritten (see :func:`compact_runs`); the unique
    words returned are a view of it when most words are distinct, else a copy.
    """
    cnt = np.empty(sorted_keys.shape[0], dtype=np.int64)
    m, lcp_hist = compact_runs(sorted_keys, cnt, depth, bits, key_bits)
    if 2 * m < sorted_keys.shape[0]:
        return sorted_keys[:m].copy(), cnt[:m].copy(), lcp_hist
    return sorted_keys[:m], cnt[:m], lcp_hist


@njit(cache=True)
def lcp_histogram(sorted_unique, depth, bits, key_bits):
    """Histogram of shared leading symbols between consecutive unique words (see :func:`runs_with_lcp`)."""
    h = np.zeros(depth + 1, dtype=np.int64)
    unused = key_bits - bits * depth
    for i in range(1, sorted_unique.shape[0]):
        x = np.uint64(sorted_unique[i]) ^ np.uint64(sorted_unique[i - 1])
        h[_lcp_symbols(x, key_bits, unused, bits, depth)] += 1
    return h


@njit(cache=True, nogil=True)
def _merged_size(wa, wb):
    """Distinct words of two sorted unique word tables together."""
    na = wa.shape[0]
    nb = wb.shape[0]
    i = 0
    j = 0
    k = 0
    while i < na and j < nb:
        if wa[i] < wb[j]:
            i += 1
        elif wb[j] < wa[i]:
            j += 1
        else:
            i += 1
            j += 1
        k += 1
    return k + (na - i) + (nb - j)


@njit(cache=True, nogil=True)
def _merge_into(wa, ca, wb, cb, out_w, out_c):
    """Merge two (sorted unique words, counts) tables into ``out_w``/``out_c`` (sized by :func:`_merged_size`)."""
    na = wa.shape[0]
    nb = wb.shape[0]
    i = 0
    j = 0
    k = 0
    while i < na and j < nb:
        if wa[i] < wb[j]:
            out_w[k] = wa[i]
            out_c[k] = ca[i]
            i += 1
        elif wb[j] < wa[i]:
            out_w[k] = wb[j]
            out_c[k] = cb[j]
            j += 1
        else:
            out_w[k] = wa[i]
            out_c[k] = ca[i] + cb[j]
            i += 1
            j += 1
        k += 1
    while i < na:
        out_w[k] = wa[i]
        out_c[k] = ca[i]
        i += 1
        k += 1
    while j < nb:
        out_w[k] = wb[j]
        out_c[k] = cb[j]
        j += 1
        k += 1


def merge_sorted_counts(wa, ca, wb, cb, count_dtype=np.int64):
    """Merge two (sorted unique words, counts) tables, adding counts of equal words.

    The output is sized exactly by a first pass (no over-allocation, no copy): its
    memory is that of the distinct words.  Counts come out as ``count_dtype``
    (``int64`` unless asked; the caller of ``uint32`` vouches that no sum exceeds it).
    """
    m = _merged_size(wa, wb)
    out_w = np.empty(m, dtype=wa.dtype)
    out_c = np.empty(m, dtype=count_dtype)
    _merge_into(wa, ca, wb, cb, out_w, out_c)
    return out_w, out_c


@njit(cache=True, nogil=True)
def _merge_backward(wa, ca, na, wb, cb):
    """Merge ``(wb, cb)`` into ``(wa, ca)``, whose first ``na`` entries hold the other table and whose size is
    the merged size: from the back, so no entry of the first table is overwritten before it is read."""
    i = na - 1
    j = wb.shape[0] - 1
    k = wa.shape[0] - 1
    while j >= 0:
        if i >= 0 and wa[i] > wb[j]:
            wa[k] = wa[i]
            ca[k] = ca[i]
            i -= 1
        elif i >= 0 and wa[i] == wb[j]:
            wa[k] = wa[i]
            ca[k] = ca[i] + cb[j]
            i -= 1
            j -= 1
        else:
            wa[k] = wb[j]
            ca[k] = cb[j]
            j -= 1
        k -= 1
    # the first table's entries left (0..i) are already in place


def merge_into_first(wa, ca, wb, cb, count_dtype=np.int64):
    """:func:`merge_sorted_counts` in the memory of the first table when it owns it (the caller drops it).

    The first table's arrays are grown in place (``realloc``, which moves no pages for
    large blocks) to the merged size and merged from the back, so a merge holds the
    output plus the second table, not both inputs beside the output.  Otherwise (a view,
    another count type) it is the plain merge.
    """
    own = wa.base is None and ca.base is None and wa.flags.owndata and ca.flags.owndata
    if not (own and wa.flags.c_contiguous and ca.flags.c_contiguous and ca.dtype == count_dtype and wa.dtype == wb.dtype):
        return merge_sorted_counts(wa, ca, wb, cb, count_dtype)
    na = wa.shape[0]
    m = _merged_size(wa, wb)
    wa.resize(m, refcheck=False)  # the caller holds no other reference to the first table
    ca.resize(m, refcheck=False)
    _merge_backward(wa, ca, na, wb, cb)
    return wa, ca


@njit(cache=True)
def prefix_counts(sorted_words, counts, shift):
    """Counts of the prefixes ``word >> shift`` of a sorted word table (prefixes stay sorted)."""
    n = sorted_words.shape[0]
    if n == 0:
        return np.zeros(0, dtype=np.uint64), np.zeros(0, dtype=np.int64)
    m = 1
    prev = np.uint64(sorted_words[0]) >> np.uint64(shift)
    for i in range(1, n):
        p = np.uint64(sorted_words[i]) >> np.uint64(shift)
        if p != prev:
            m += 1
            prev = p
    out_w = np.empty(m, dtype=np.uint64)
    out_c = np.zeros(m, dtype=np.int64)
    j = 0
    out_w[0] = np.uint64(sorted_words[0]) >> np.uint64(shift)
    for i in range(n):
        p = np.uint64(sorted_words[i]) >> np.uint64(shift)
        if p != out_w[j]:
            j += 1
            out_w[j] = p
        out_c[j] += counts[i]
    return out_w, out_c


@njit(cache=True)
def dense_add(table, keys):
    """``table[key] += 1`` for every key (dense counting)."""
    for i in range(keys.shape[0]):
        table[keys[i]] += 1


@njit(cache=True, nogil=True)
def count_spectra(words, counts, tails, tail_counts, tail_levels, depth, bits, key_bits, cap, big_capacity):
    """Frequency-of-frequencies for every depth 1..N in one pass over sorted items.

    Items are the leaf table (``words``, full N-words, level N, sorted) merged with the tails of
    closed segments (``tails``: words of length m < N padded with zero symbols to N symbols,
    level ``tail_levels``, sorted by padded address), each tail after the leaves equal to it; the
    two are merged on the fly, so no merged copy of the leaf table is built.  For depth ``n`` the
    n-word of an item is its prefix; runs of equal prefixes are closed from the deepest depth
    upwards, each closed run passing its count to the next shallower depth.  A tail of level m
    only adds its count at depths <= m.

    Returns
    -------
    hist : int64 array of shape ``(depth + 1) * cap``; ``hist[n * cap + c]`` is the
        number of distinct n-words seen exactly ``c`` times (``1 <= c < cap``;
        entries with ``c = 0`` are bookkeeping and meaningless)
    big_depth, big_count : int64 arrays listing runs with count >= cap
        (at most ``big_capacity``: pass ``depth * (total // cap + 1)``)
    """
    hist = np.zeros((depth + 1) * cap, dtype=np.int64)
    big_depth = np.empty(big_capacity, dtype=np.int64)
    big_count = np.empty(big_capacity, dtype=np.int64)
    nbig = 0
    cur = np.zeros(depth + 1, dtype=np.int64)
    n = words.shape[0]
    nt = tails.shape[0]
    unused = key_bits - bits * depth
    i = 0
    j = 0
    if n and (nt == 0 or words[0] <= tails[0]):
        prev = np.uint64(words[0])
    elif nt:
        prev = np.uint64(tails[0])
    else:
        prev = np.uint64(0)
    for _ in range(n + nt + 1):
        if i < n or j < nt:
            leaf = i < n and (j >= nt or words[i] <= tails[j])
            w = np.uint64(words[i]) if leaf else np.uint64(tails[j])
            x = w ^ prev
            lcp = _lcp_symbols(x, key_bits, unused, bits, depth)
        else:
            leaf = False
            w = prev
            lcp = 0
        d = depth
        while d > lcp:
            c = cur[d]
            if c < cap:
                hist[d * cap + c] += 1
            else:
                big_depth[nbig] = d
                big_count[nbig] = c
                nbig += 1
            cur[d - 1] += c
            cur[d] = 0
            d -= 1
        if leaf:
            cur[depth] += counts[i]
            i += 1
            prev = w
        elif j < nt:
            cur[tail_levels[j]] += tail_counts[j]
            j += 1
            prev = w
    return hist, big_depth[:nbig].copy(), big_count[:nbig].copy()


# ------------------------------------------------------------- the encoding


@njit(cache=True)
def chaos_points(codes, starts, corners, ratio, origin):
    """Points ``x_t = k x_{t-1} + (1 - k) corner(s_t)``, restarting at ``origin`` at each segment start."""
    n = codes.shape[0]
    dim = corners.shape[1]
    out = np.empty((n, dim), dtype=np.float64)
    x = origin.copy()
    si = 0
    nseg = starts.shape[0]
    for t in range(n):
        if si < nseg and starts[si] == t:
            for d in range(dim):  # element by element: a slice assignment compiles numba's broadcasting checks
                x[d] = origin[d]
            si += 1
        c = codes[t]
        for d in range(dim):
            x[d] = ratio * x[d] + (1.0 - ratio) * corners[c, d]
            out[t, d] = x[d]
    return out


@njit(cache=True)
def density_grid(points, size, lo, span):
    """2-D histogram of the first two coordinates on a ``size``x``size`` grid."""
    img = np.zeros((size, size), dtype=np.int64)
    for t in range(points.shape[0]):
        i = int((points[t, 0] - lo[0]) / span[0] * size)
        j = int((points[t, 1] - lo[1]) / span[1] * size)
        if i >= size:
            i = size - 1
        if j >= size:
            j = size - 1
        if i < 0:
            i = 0
        if j < 0:
            j = 0
        img[j, i] += 1
    return img

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
:mod:`fractalseq.words` does that before calling them.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

# ----------------------------------------------------------------- addresses


@njit(cache=True)
def full_words(codes, starts, depth, bits, closed_last, key_template):
    """Addresses of every full ``depth``-word and the tails of closed segments.

    Parameters
    ----------
    codes : uint8/uint32 array
    starts : int64 array, sorted segment starts (0 first)
    depth : int, word length N
    bits : int, bits per symbol
    closed_last : bool, whether the last segment ends at ``len(codes)``
    key_template : an (empty) array of the key dtype (uint32 or uint64) fixing the output type

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
    keys = np.empty(nfull, dtype=key_template.dtype)
    tail_len = np.empty(ntail, dtype=np.uint8)
    tail_addr = np.empty(ntail, dtype=np.uint64)
    kmask = (np.uint64(1) << np.uint64(bits * depth)) - np.uint64(1) if bits * depth < 64 else ~np.uint64(0)
    ub = np.uint64(bits)
    k = 0
    t = 0
    carry_from = n
    for s in range(nseg):
        a = starts[s]
        e = starts[s + 1] if s + 1 < nseg else n
        closed = (s + 1 < nseg) or closed_last
        addr = np.uint64(0)
        filled = 0
        for i in range(a, e):
            addr = ((addr << ub) | np.uint64(codes[i])) & kmask
            filled += 1
            if filled >= depth:
                keys[k] = addr
                k += 1
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


# --------------------------------------------------------------------- sort


@njit(cache=True)
def _radix_pass(src, dst, shift, radix_bits):
    """One stable counting-sort pass on digit ``(key >> shift) & (2**radix_bits - 1)``.

    Returns False (and leaves ``dst`` untouched) when every key has the same digit.
    """
    nb = 1 << radix_bits
    mask = nb - 1
    counts = np.zeros(nb, dtype=np.int64)
    n = src.shape[0]
    for i in range(n):
        counts[(src[i] >> shift) & mask] += 1
    for d in range(nb):
        if counts[d] == n:
            return False
    total = 0
    for d in range(nb):
        c = counts[d]
        counts[d] = total
        total += c
    for i in range(n):
        d = (src[i] >> shift) & mask
        dst[counts[d]] = src[i]
        counts[d] += 1
    return True


@njit(cache=True)
def radix_sort(keys, scratch, key_bits):
    """Sort ``keys`` in place (LSD radix, 11-bit digits, over the low ``key_bits`` bits).

    ``scratch`` must have the same length and dtype.  Digits on which all keys
    agree are skipped.
    """
    radix_bits = 11
    src = keys
    dst = scratch
    in_keys = True
    shift = 0
    while shift < key_bits:
        rb = min(radix_bits, key_bits - shift)
        if _radix_pass(src, dst, shift, rb):
            src, dst = dst, src
            in_keys = not in_keys
        shift += rb
    if not in_keys:
        keys[:] = src[:]


@njit(cache=True, parallel=True)
def radix_sort_split(keys, scratch, key_bits, top_bits):
    """Sort in place after splitting by the top ``top_bits`` bits (the first symbol).

    The buckets are independent, so they are sorted in parallel threads.
    """
    nb = 1 << top_bits
    shift = key_bits - top_bits
    n = keys.shape[0]
    counts = np.zeros(nb + 1, dtype=np.int64)
    for i in range(n):
        counts[(keys[i] >> shift) + 1] += 1
    for d in range(nb):
        counts[d + 1] += counts[d]
    pos = counts[:nb].copy()
    for i in range(n):
        d = keys[i] >> shift
        scratch[pos[d]] = keys[i]
        pos[d] += 1
    for d in prange(nb):
        lo = counts[d]
        hi = counts[d + 1]
        if hi - lo > 1:
            radix_sort(scratch[lo:hi], keys[lo:hi], shift)
    keys[:] = scratch[:]


@njit(cache=True)
def run_lengths(sorted_keys):
    """Unique values of a sorted array and how often each occurs."""
    n = sorted_keys.shape[0]
    if n == 0:
        return sorted_keys[:0].copy(), np.zeros(0, dtype=np.int64)
    m = 1
    for i in range(1, n):
        if sorted_keys[i] != sorted_keys[i - 1]:
            m += 1
    uniq = np.empty(m, dtype=sorted_keys.dtype)
    cnt = np.zeros(m, dtype=np.int64)
    j = 0
    uniq[0] = sorted_keys[0]
    cnt[0] = 1
    for i in range(1, n):
        if sorted_keys[i] != sorted_keys[i - 1]:
            j += 1
            uniq[j] = sorted_keys[i]
        cnt[j] += 1
    return uniq, cnt


@njit(cache=True)
def compact_runs_inplace(sorted_keys):
    """Like :func:`run_lengths` but reuses the key array for the unique values.

    Returns the number of unique values ``m`` (stored in ``sorted_keys[:m]``)
    and their counts.
    """
    n = sorted_keys.shape[0]
    if n == 0:
        return 0, np.zeros(0, dtype=np.int64)
    m = 1
    for i in range(1, n):
        if sorted_keys[i] != sorted_keys[i - 1]:
            m += 1
    cnt = np.zeros(m, dtype=np.int64)
    j = 0
    cnt[0] = 1
    for i in range(1, n):
        if sorted_keys[i] != sorted_keys[j]:
            j += 1
            sorted_keys[j] = sorted_keys[i]
        cnt[j] += 1
    return m, cnt


@njit(cache=True)
def merge_sorted_counts(wa, ca, wb, cb):
    """Merge two (sorted unique words, counts) tables, adding counts of equal words."""
    na = wa.shape[0]
    nb = wb.shape[0]
    out_w = np.empty(na + nb, dtype=wa.dtype)
    out_c = np.empty(na + nb, dtype=np.int64)
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
    return out_w[:k].copy(), out_c[:k].copy()


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


@njit(cache=True)
def dense_add_words(table, codes, starts, depth, bits, closed_last):
    """Dense counting of full ``depth``-words straight from codes (no key array)."""
    n = codes.shape[0]
    nseg = starts.shape[0]
    kmask = (np.uint64(1) << np.uint64(bits * depth)) - np.uint64(1)
    ub = np.uint64(bits)
    for s in range(nseg):
        a = starts[s]
        e = starts[s + 1] if s + 1 < nseg else n
        addr = np.uint64(0)
        filled = 0
        for i in range(a, e):
            addr = ((addr << ub) | np.uint64(codes[i])) & kmask
            filled += 1
            if filled >= depth:
                table[addr] += 1


@njit(cache=True)
def _bit_length(x):
    """Number of significant bits of a non-zero uint64."""
    n = 0
    if x >> np.uint64(32):
        x = x >> np.uint64(32)
        n += 32
    if x >> np.uint64(16):
        x = x >> np.uint64(16)
        n += 16
    if x >> np.uint64(8):
        x = x >> np.uint64(8)
        n += 8
    if x >> np.uint64(4):
        x = x >> np.uint64(4)
        n += 4
    if x >> np.uint64(2):
        x = x >> np.uint64(2)
        n += 2
    if x >> np.uint64(1):
        x = x >> np.uint64(1)
        n += 1
    return n + 1


@njit(cache=True)
def count_spectra(leaf_words, leaf_counts, tail_padded, tail_level, tail_counts, depth, bits, key_bits, cap):
    """Frequency-of-frequencies for every depth 1..N in one pass.

    The items are the leaf table (full N-words, level N) and the tails of
    closed segments (words of length m < N, padded with zero symbols to N
    symbols, level m), both sorted by padded address and merged on the fly.
    For depth ``n`` the n-word of an item is its prefix; runs of equal
    prefixes are closed from the deepest depth upwards, each closed run
    passing its count to the next shallower depth.  A tail of level m only
    adds its count at depths <= m.

    Returns
    -------
    hist : int64 array (depth + 1, cap); ``hist[n, c]`` = number of distinct
        n-words seen exactly ``c`` times (for ``1 <= c < cap``)
    big_depth, big_count : int64 arrays listing runs with count >= cap
    """
    hist = np.zeros((depth + 1, cap), dtype=np.int64)
    big_depth = np.empty(1024, dtype=np.int64)
    big_count = np.empty(1024, dtype=np.int64)
    nbig = 0
    cur = np.zeros(depth + 1, dtype=np.int64)
    na = leaf_words.shape[0]
    nt = tail_padded.shape[0]
    unused = key_bits - bits * depth
    i = 0
    j = 0
    first = True
    prev = np.uint64(0)
    while i < na or j < nt:
        if j >= nt or (i < na and np.uint64(leaf_words[i]) <= tail_padded[j]):
            w = np.uint64(leaf_words[i])
            level = depth
            c_new = leaf_counts[i]
            i += 1
        else:
            w = tail_padded[j]
            level = tail_level[j]
            c_new = tail_counts[j]
            j += 1
        if first:
            lcp = depth
            first = False
        else:
            x = w ^ prev
            if x == 0:
                lcp = depth
            else:
                lcp = (key_bits - _bit_length(x) - unused) // bits
                if lcp > depth:
                    lcp = depth
        for d in range(depth, lcp, -1):
            c = cur[d]
            if c == 0:
                continue
            if c < cap:
                hist[d, c] += 1
            else:
                if nbig == big_depth.shape[0]:
                    nd = np.empty(2 * nbig, dtype=np.int64)
                    nc = np.empty(2 * nbig, dtype=np.int64)
                    nd[:nbig] = big_depth[:nbig]
                    nc[:nbig] = big_count[:nbig]
                    big_depth = nd
                    big_count = nc
                big_depth[nbig] = d
                big_count[nbig] = c
                nbig += 1
            cur[d - 1] += c
            cur[d] = 0
        cur[level] += c_new
        prev = w
    # close everything
    for d in range(depth, 0, -1):
        c = cur[d]
        if c == 0:
            continue
        if c < cap:
            hist[d, c] += 1
        else:
            if nbig == big_depth.shape[0]:
                nd = np.empty(2 * nbig, dtype=np.int64)
                nc = np.empty(2 * nbig, dtype=np.int64)
                nd[:nbig] = big_depth[:nbig]
                nc[:nbig] = big_count[:nbig]
                big_depth = nd
                big_count = nc
            big_depth[nbig] = d
            big_count[nbig] = c
            nbig += 1
        cur[d - 1] += c
        cur[d] = 0
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
            x[:] = origin
            si += 1
        c = codes[t]
        for d in range(dim):
            x[d] = ratio * x[d] + (1.0 - ratio) * corners[c, d]
            out[t, d] = x[d]
    return out


@njit(cache=True)
def box_indices(points, scale, boxes_per_side):
    """Integer box index (row-major) of each point on a grid of side ``scale`` anchored at 0."""
    n = points.shape[0]
    dim = points.shape[1]
    out = np.empty(n, dtype=np.int64)
    for t in range(n):
        idx = 0
        for d in range(dim):
            j = int(np.floor(points[t, d] / scale))
            if j < 0:
                j = 0
            if j >= boxes_per_side:
                j = boxes_per_side - 1
            idx = idx * boxes_per_side + j
        out[t] = idx
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

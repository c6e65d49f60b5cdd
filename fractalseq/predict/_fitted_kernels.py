"""Numba kernels of the fitted predictor: the cell index, the coarse-to-fine blend over sparse cells, scoring.

Every kernel is private (``_name``) and called through the public wrapper of
the same name below, which checks types and shapes first.  The blend is
described in :func:`_prob`; a cell stores only the symbols seen after it (a
:class:`~fractalseq.predict._cells.CellTable`), so scoring a symbol costs the
cells of its history, not the alphabet.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError
from fractalseq.predict._kernel_tools import (
    CALIB_BINS,
    _borrow,
    _score_symbol,
    ST_BRIER,
    ST_COUNT,
    ST_NATS,
    ST_SIZE,
    ST_TOP1,
    ST_TOP3,
    _cell_hash,
)

#: Alphabets up to this size are scored from the full distribution (A work per cell, fastest for small A).
FULL_SCORE_SYMBOLS = 64


# ------------------------------------------------------------ fitted model
@njit(cache=True)
def _build_index(addr, dstart, depths, index):
    """Open-addressing index (row + 1, 0 = empty) of the fitted cells by (depth, address)."""
    mask = index.shape[0] - 1
    for di in range(depths.shape[0]):
        dn = depths[di]
        for r in range(dstart[di], dstart[di + 1]):
            h = np.int64(_cell_hash(addr[r], dn) >> np.uint64(1)) & mask
            while index[h] != 0:
                h = (h + 1) & mask
            index[h] = r + 1


@njit(cache=True)
def _find_row(index, addr, lo, hi, dn, a):
    mask = index.shape[0] - 1
    h = np.int64(_cell_hash(a, dn) >> np.uint64(1)) & mask
    while True:
        r = index[h] - 1
        if r < 0:
            return -1
        if lo <= r < hi and addr[r] == a:
            return r
        h = (h + 1) & mask


@njit(cache=True, inline="always")
def _cells_of(H, L, depths, masks, dstart, addr, index, rows, dix):
    """Rows of the stored cells of one history, coarse to fine; returns how many were found."""
    nf = 0
    for di in range(depths.shape[0]):
        dn = depths[di]
        if L < dn:
            break
        r = _find_row(index, addr, dstart[di], dstart[di + 1], dn, H & masks[di])
        if r < 0:
            continue
        rows[nf] = r
        dix[nf] = di
        nf += 1
    return nf


@njit(cache=True, inline="always")
def _count_of(ptr, syms, counts, r, s):
    """Count of symbol ``s`` in cell row ``r`` (binary search among its increasing symbols), 0 if absent."""
    lo = ptr[r]
    hi = ptr[r + 1]
    while lo < hi:
        mid = (lo + hi) >> 1
        v = np.int64(syms[mid])
        if v < s:
            lo = mid + 1
        elif v > s:
            hi = mid
        else:
            return counts[mid]
    return 0.0


@njit(cache=True, inline="always")
def _prob(s, A, rows, dix, lo, nf, ptr, syms, counts, tot, used, beta, discount, p):
    """Blend of symbol ``s`` from ``p`` through found rows ``lo..nf-1`` (coarse to fine):
    ``p_n(s) = (max(c_s - d_n, 0) + (beta_n + d_n u) p_{n-1}(s)) / (N + beta_n)``."""
    for q in range(lo, nf):
        r = rows[q]
        di = dix[q]
        c = _count_of(ptr, syms, counts, r, s) - discount[di]
        if c < 0.0:
            c = 0.0
        p = (c + (beta[di] + discount[di] * used[r]) * p) / (tot[r] + beta[di])
    return p


@njit(cache=True)
def _fitted_score(codes, starts, A, b, depths, masks, dstart, addr, ptr, syms, counts, tot, used, index, beta, discount,
                  top0, sq0, mark, hist, seg, stats, calib, sur):
    """Code length (nats) of a chunk under the fitted, static model; same bookkeeping as the online kernels.

    Up to :data:`FULL_SCORE_SYMBOLS` symbols the whole distribution is blended.  Beyond, only the symbol
    that occurred is blended; the ranks, the top symbol and the Brier score come from the
    candidates (symbols stored in the history's cells deeper than 0, and ``top0``, the most frequent symbols
    of the depth-0 cell), as in :mod:`fractalseq.predict._online_sparse`: any other symbol ``s`` gets
    ``E p_0(s)``, below every ``top0`` symbol, and ``sq0`` is the sum of ``p_0(s)**2`` over all symbols.
    """
    n = codes.shape[0]
    M = depths.shape[0]
    ub = np.uint64(b)
    keep = sur.shape[0] == n
    rows = np.zeros(M, np.int64)
    dix = np.zeros(M, np.int64)
    ntop = top0.shape[0]
    cand = np.zeros(64, np.int64)
    H = hist[0]
    L = seg[0]
    sp = 0
    nats = 0.0
    top1 = 0.0
    top3 = 0.0
    brier = 0.0
    g0 = np.int64(stats[ST_COUNT])
    full = A <= FULL_SCORE_SYMBOLS
    p = np.zeros(A if full else 0, np.float64)
    cnt = np.zeros(A if full else 0, np.float64)
    for t in range(n):
        if sp < starts.shape[0] and starts[sp] == t:
            H = np.uint64(0)
            L = 0
            sp += 1
        x = np.int64(codes[t])
        nf = _cells_of(H, L, depths, masks, dstart, addr, index, rows, dix)
        if full:  # small alphabet: the whole distribution, cell by cell
            for s in range(A):
                p[s] = 1.0 / A
            for q in range(nf):
                r = rows[q]
                di = dix[q]
                lo = ptr[r]
                hi = ptr[r + 1]
                tr = 0.0
                for e in range(lo, hi):
                    cnt[np.int64(syms[e])] = counts[e]
                    tr += counts[e]
                esc = beta[di] + discount[di] * (hi - lo)
                den = tr + beta[di]
                for s in range(A):
                    c = cnt[s] - discount[di]
                    if c < 0.0:
                        c = 0.0
                    p[s] = (c + esc * p[s]) / den
                for e in range(ptr[r], ptr[r + 1]):
                    cnt[np.int64(syms[e])] = 0.0
            nats, brier, top1, top3 = _score_symbol(
                _borrow(p), A, x, t, keep, _borrow(sur), _borrow(calib), nats, brier, top1, top3
            )
            H = (H << ub) | np.uint64(x)
            L += 1
            continue
        b0 = 1 if (nf > 0 and depths[dix[0]] == 0) else 0  # the depth-0 cell is the base of the candidates
        px = _prob(x, A, rows, dix, 0, nf, ptr, syms, counts, tot, used, beta, discount, 1.0 / A)
        nats -= math.log(px)
        if keep:
            sur[t] = -math.log2(px)
        E = 1.0
        nc = ntop
        for q in range(b0, nf):
            r = rows[q]
            E *= (beta[dix[q]] + discount[dix[q]] * used[r]) / (tot[r] + beta[dix[q]])
            nc += ptr[r + 1] - ptr[r]
        if cand.shape[0] < nc:
            cand = np.zeros(2 * nc, np.int64)
        stamp = g0 + t + 1
        nc = 0
        for k in range(ntop):
            s = top0[k]
            mark[s] = stamp
            cand[nc] = s
            nc += 1
        for q in range(b0, nf):
            r = rows[q]
            for e in range(ptr[r], ptr[r + 1]):
                s = np.int64(syms[e])
                if mark[s] != stamp:
                    mark[s] = stamp
                    cand[nc] = s
                    nc += 1
        best = -1
        pbest = -1.0
        rank = 0
        sq = 0.0
        sqb = 0.0
        for m in range(nc):
            s = cand[m]
            p0s = _prob(s, A, rows, dix, 0, b0, ptr, syms, counts, tot, used, beta, discount, 1.0 / A)
            ps = _prob(s, A, rows, dix, b0, nf, ptr, syms, counts, tot, used, beta, discount, p0s)
            if ps > pbest or (ps == pbest and s < best):
                pbest = ps
                best = s
            if s != x and (ps > px or (ps == px and s < x)):
                rank += 1
            sq += ps * ps
            sqb += p0s * p0s
        rest = sq0 - sqb
        if rest < 0.0:
            rest = 0.0
        brier += sq + E * E * rest - 2.0 * px + 1.0
        if rank == 0:
            top1 += 1.0
        if rank < 3:
            top3 += 1.0
        cb = int(pbest * CALIB_BINS)
        if cb >= CALIB_BINS:
            cb = CALIB_BINS - 1
        calib[cb, 0] += 1.0
        calib[cb, 1] += pbest
        if best == x:
            calib[cb, 2] += 1.0
        H = (H << ub) | np.uint64(x)
        L += 1
    hist[0] = H
    seg[0] = L
    stats[ST_NATS] += nats
    stats[ST_COUNT] += n
    stats[ST_TOP1] += top1
    stats[ST_TOP3] += top3
    stats[ST_BRIER] += brier
    return nats


@njit(cache=True)
def _fitted_proba(ctx_codes, ctx_offsets, A, b, depths, masks, dstart, addr, ptr, syms, counts, tot, used, index, beta,
                  discount, out, deepest):
    """Blended next-symbol probabilities of every symbol after each context (``ctx_codes[ctx_offsets[i]:ctx_offsets[i+1]]``)."""
    ub = np.uint64(b)
    M = depths.shape[0]
    rows = np.zeros(M, np.int64)
    dix = np.zeros(M, np.int64)
    for i in range(out.shape[0]):
        lo = ctx_offsets[i]
        hi = ctx_offsets[i + 1]
        H = np.uint64(0)
        for t in range(lo, hi):
            H = (H << ub) | np.uint64(ctx_codes[t])
        nf = _cells_of(H, hi - lo, depths, masks, dstart, addr, index, rows, dix)
        for s in range(A):
            out[i, s] = 1.0 / A
        for q in range(nf):
            r = rows[q]
            di = dix[q]
            esc = beta[di] + discount[di] * used[r]
            den = tot[r] + beta[di]
            for s in range(A):
                out[i, s] = esc * out[i, s] / den
            for e in range(ptr[r], ptr[r + 1]):
                c = counts[e] - discount[di]
                if c > 0.0:
                    out[i, np.int64(syms[e])] += c / den
        deepest[i] = dix[nf - 1] if nf > 0 else -1


@njit(cache=True)
def _revcomp_word(w, n, ub, symmask):
    """Address of the reverse complement of one n-word (complement = code XOR ``symmask``)."""
    r = np.uint64(0)
    for _ in range(n):
        r = (r << ub) | ((w & symmask) ^ symmask)
        w >>= ub
    return r


@njit(cache=True)
def _revcomp_addresses(words, n, b):
    """Addresses of the reverse complements of n-words (complement = code XOR (2**b - 1))."""
    out = np.empty_like(words)
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    for i in range(words.shape[0]):
        out[i] = _revcomp_word(words[i], n, ub, symmask)
    return out


@njit(cache=True)
def _strand_table(wa, ca, wb, cb, b, cells, ptr, syms, counts):
    """Merge two sorted unique (word, count) tables into a cell table (equal words add; zero counts skipped).

    With empty ``cells`` it only counts: returns ``(entries, cells)``; otherwise it fills
    ``cells``, ``ptr``, ``syms`` and ``counts`` (uint32) and returns ``(entries, overflow)``,
    ``overflow`` = 1 when a merged count exceeds ``2**32 - 1``.
    """
    fill = cells.shape[0] > 0
    na = wa.shape[0]
    nb = wb.shape[0]
    ub = np.uint64(b)
    smask = np.uint64((1 << b) - 1)
    big = np.uint64(4294967295)
    i = 0
    j = 0
    e = 0
    c = -1
    over = 0
    prev = np.uint64(0)
    while i < na or j < nb:
        if j >= nb or (i < na and wa[i] < wb[j]):
            w = np.uint64(wa[i])
            n = np.uint64(ca[i])
            i += 1
        elif i >= na or wb[j] < wa[i]:
            w = np.uint64(wb[j])
            n = np.uint64(cb[j])
            j += 1
        else:
            w = np.uint64(wa[i])
            n = np.uint64(ca[i]) + np.uint64(cb[j])
            i += 1
            j += 1
        if n == 0:
            continue
        ctx = w >> ub
        if c < 0 or ctx != prev:
            c += 1
            prev = ctx
            if fill:
                cells[c] = ctx
                ptr[c] = e
        if fill:
            syms[e] = np.uint32(w & smask)
            if n > big:
                over = 1
                n = big
            counts[e] = np.uint32(n)
        e += 1
    if fill:
        ptr[c + 1] = e
        return e, over
    return e, c + 1


@njit(cache=True)
def _revcomp_in_range(words, counts, n, b, lo, hi, to_end, out_w, out_c):
    """Reverse complements of n-words that fall in ``[lo, hi)`` (``[lo, end]`` with ``to_end``), with their counts.

    With empty ``out_w`` it only counts them; returns how many there are.
    """
    fill = out_w.shape[0] > 0
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    k = 0
    for i in range(words.shape[0]):
        r = _revcomp_word(words[i], n, ub, symmask)
        if r >= lo and (to_end or r < hi):
            if fill:
                out_w[k] = r
                out_c[k] = counts[i]
            k += 1
    return k


@njit(cache=True, inline="always")
def _revcomp_top(p, n, b, head, top_shift):
    """The top bits (``>> top_shift``) of the reverse complement of the n-word ``p``, from its last ``head`` symbols only."""
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    t = np.uint64(0)
    for _ in range(head):
        t = (t << ub) | ((p & symmask) ^ symmask)
        p >>= ub
    return t >> np.uint64(top_shift)


@njit(cache=True)
def _revcomp_prefix_ids(leaf, shift, b, head, top_shift, ids, sizes):
    """The part of the reverse complement of every leaf's prefix ``leaf >> shift`` (into ``ids``), and the
    distinct prefixes of every part (into ``sizes``); equal prefixes are neighbours."""
    us = np.uint64(shift)
    m = leaf.shape[0]
    i = 0
    while i < m:
        p = np.uint64(leaf[i]) >> us
        top = _revcomp_top(p, 0, b, head, top_shift)
        sizes[top] += 1
        ids[i] = top
        i += 1
        while i < m and (np.uint64(leaf[i]) >> us) == p:
            ids[i] = top
            i += 1


@njit(cache=True)
def _count_ids(ids, out):
    """``out[d]`` += how many of ``ids`` equal ``d``."""
    for i in range(ids.shape[0]):
        out[ids[i]] += 1


@njit(cache=True)
def _bucket_positions(ids, p0, p1, cursor, out):
    """Positions ``i`` (increasing) of the ids in ``[p0, p1)``, bucketed by id: bucket ``d - p0`` fills ``out`` from ``cursor[d - p0]``."""
    for i in range(ids.shape[0]):
        d = np.int64(ids[i])
        if d >= p0 and d < p1:
            k = cursor[d - p0]
            out[k] = i
            cursor[d - p0] = k + 1


@njit(cache=True)
def _revcomp_prefix_gather(leaf, counts, sel, shift, n, b, out_w, out_c):
    """Reverse complements of the prefixes of the leaves ``sel`` (increasing; equal prefixes neighbours), counts summed."""
    us = np.uint64(shift)
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    k = 0
    i = 0
    m = sel.shape[0]
    while i < m:
        p = np.uint64(leaf[sel[i]]) >> us
        c = counts[sel[i]]
        i += 1
        while i < m and (np.uint64(leaf[sel[i]]) >> us) == p:
            c += counts[sel[i]]
            i += 1
        w = p
        r = np.uint64(0)
        for _ in range(n):
            r = (r << ub) | ((w & symmask) ^ symmask)
            w >>= ub
        out_w[k] = r
        out_c[k] = c
        k += 1
    return k


@njit(cache=True)
def _cell_lookup(cells, ptr, syms, counts, keys, want, found, c, tot, used):
    """For each (cell key, symbol): is the cell there, the symbol's count, the cell's total and distinct symbols."""
    nc = cells.shape[0]
    for q in range(keys.shape[0]):
        k = keys[q]
        lo = 0
        hi = nc
        while lo < hi:
            mid = (lo + hi) >> 1
            if np.uint64(cells[mid]) < k:
                lo = mid + 1
            else:
                hi = mid
        if lo < nc and np.uint64(cells[lo]) == k:
            found[q] = True
            t = np.int64(0)
            for e in range(ptr[lo], ptr[lo + 1]):
                t += np.int64(counts[e])
                if syms[e] == want[q]:
                    c[q] = np.float64(counts[e])
            tot[q] = np.float64(t)
            used[q] = np.float64(ptr[lo + 1] - ptr[lo])


@njit(cache=True)
def _hash_cells(addr, depth):
    """:func:`cell_hash` of every address at one depth (a deterministic, unbiased order for pruning ties)."""
    out = np.empty(addr.shape[0], np.uint64)
    for i in range(addr.shape[0]):
        out[i] = _cell_hash(addr[i], depth)
    return out


@njit(cache=True)
def _cell_totals(ptr, counts, out):
    """The total count of every cell of a table (int64), from its entry pointers and counts."""
    for i in range(out.shape[0]):
        t = np.int64(0)
        for e in range(ptr[i], ptr[i + 1]):
            t += np.int64(counts[e])
        out[i] = t


@njit(cache=True)
def _cell_words(cells, ptr, syms, b, out):
    """The (n+1)-word address ``cell << b | symbol`` of every entry of a cell table, written into ``out``."""
    ub = np.uint64(b)
    for i in range(cells.shape[0]):
        head = np.uint64(cells[i]) << ub
        for e in range(ptr[i], ptr[i + 1]):
            out[e] = head | np.uint64(syms[e])


# ------------------------------------------------------------------ wrappers
def _need(ok: bool, what: str, parameter: str) -> None:
    if not ok:
        raise ParameterError(f"The fitted kernels need {what}.", parameter=parameter)


def _check_model(A, depths, masks, dstart, addr, ptr, syms, counts, tot, used, index, beta, discount) -> None:
    M = depths.shape[0]
    C = addr.size
    _need(depths.dtype == np.int64 and masks.dtype == np.uint64 and masks.shape == (M,), "depths int64 and masks uint64, one per depth", "depths")
    _need(dstart.dtype == np.int64 and dstart.shape == (M + 1,), "dstart as int64 of length depths + 1", "dstart")
    _need(addr.dtype == np.uint64 and addr.ndim == 1 and (M == 0 or int(dstart[-1]) == C), "addr as uint64 rows ending at dstart[-1]", "addr")
    _need(ptr.dtype == np.int64 and ptr.shape == (C + 1,) and int(ptr[0]) == 0 and bool(np.all(np.diff(ptr) >= 0)),
          "ptr as int64 entry starts, one per cell plus one", "ptr")
    E = int(ptr[-1])
    _need(syms.dtype == np.uint32 and syms.shape == (E,) and (E == 0 or int(syms.max()) < A), f"syms as uint32 symbols in 0..{A - 1}, one per entry", "syms")
    _need(counts.dtype == np.float64 and counts.shape == (E,), "counts as float64, one per entry", "counts")
    _need(tot.dtype == used.dtype == np.float64 and tot.shape == used.shape == (C,), "tot and used as float64, one per cell", "tot")
    _need(index.dtype == np.int64 and index.size >= 2 * max(C, 1) and (index.size & (index.size - 1)) == 0,
          "an int64 index of a power-of-two size at least twice the rows", "index")
    _need(beta.shape == discount.shape == (M,) and beta.dtype == discount.dtype == np.float64, "beta and discount as float64, one per depth", "beta")


def build_index(addr, dstart, depths, index) -> None:
    """Fill ``index`` (zeros, power-of-two size >= 2 rows) with the open-addressing index of the cells (row + 1)."""
    _need(index.dtype == np.int64 and not index.any() and index.size >= 2 * max(addr.size, 1), "an empty int64 index of at least twice the rows", "index")
    _need((index.size & (index.size - 1)) == 0, "an index of a power-of-two size", "index")
    _build_index(addr, dstart, depths, index)


def fitted_score(codes, starts, A, b, model, top0, sq0, mark, hist, seg, stats, calib, sur) -> float:
    """Code length (nats) of a chunk under the fitted model; accumulates ``stats``/``calib`` and fills ``sur`` (bits) if sized.

    ``model`` is ``(depths, masks, dstart, addr, ptr, syms, counts, tot, used, index, beta, discount)``; ``top0``
    int64, the ``min(3, A)`` or more most frequent symbols of the depth-0 cell (count descending, code ascending; codes 0, 1, 2...
    without one); ``sq0`` the sum over all symbols of the squared depth-0 estimate; ``mark`` int64[A] scratch.
    """
    _check_model(A, *model)
    _need(codes.ndim == 1 and (codes.size == 0 or int(codes.max()) < A), f"codes in 0..{A - 1}", "codes")
    _need(starts.dtype == np.int64, "starts as int64", "starts")
    _need(top0.dtype == np.int64 and min(3, A) <= top0.size <= A and int(top0.max()) < A and int(top0.min()) >= 0, "top0 as at least 3 int64 codes", "top0")
    _need(mark.dtype == np.int64 and mark.shape == (A,), "mark as int64[A]", "mark")
    _need(stats.shape == (ST_SIZE,) and calib.shape == (CALIB_BINS, 3), "stats and calib of the kernel's layout", "stats")
    _need(sur.dtype == np.float32 and sur.shape in ((0,), (codes.size,)), "sur as float32 of length 0 or the chunk's", "sur")
    return _fitted_score(codes, starts, A, b, *model, top0, float(sq0), mark, hist, seg, stats, calib, sur)


def fitted_proba(ctx_codes, ctx_offsets, A, b, model, out, deepest) -> None:
    """Blended next-symbol probabilities after each context into ``out`` and the deepest cell found into ``deepest``."""
    _check_model(A, *model)
    m = ctx_offsets.size - 1
    _need(ctx_codes.dtype == np.int64 and ctx_offsets.dtype == np.int64 and m >= 0, "int64 context codes and offsets", "contexts")
    _need(ctx_codes.size == 0 or (int(ctx_codes.min()) >= 0 and int(ctx_codes.max()) < A), f"context codes in 0..{A - 1}", "contexts")
    _need(out.shape == (m, A) and deepest.shape == (m,), "out (contexts, A) and deepest (contexts,)", "out")
    _fitted_proba(ctx_codes, ctx_offsets, A, b, *model, out, deepest)


def revcomp_addresses(words, n, b):
    """Addresses of the reverse complements of n-words (complement = code XOR (2**b - 1))."""
    _need(words.dtype == np.uint64 and 0 <= n * b <= 64, "uint64 words of at most 64 bits", "words")
    return _revcomp_addresses(words, n, b)


def strand_table(wa, ca, wb, cb, b):
    """Cells, entry pointers, symbols and uint32 counts of two sorted unique (n+1)-word tables added together.

    Returns ``(cells, ptr, syms, counts, overflow)``; ``overflow`` is true when a count exceeds ``2**32 - 1``.
    """
    _need(wa.dtype == np.uint64 and wb.dtype == np.uint64 and ca.dtype == cb.dtype, "uint64 words and counts of one type", "words")
    none = np.zeros(0, np.uint64)
    e, c = _strand_table(wa, ca, wb, cb, b, none, np.zeros(0, np.int64), np.zeros(0, np.uint32), np.zeros(0, np.uint32))
    cells, ptr = np.empty(c, np.uint64), np.empty(c + 1, np.int64)
    syms, counts = np.empty(e, np.uint32), np.empty(e, np.uint32)
    if c == 0:
        ptr[0] = 0
        return cells, ptr, syms, counts, False
    _, over = _strand_table(wa, ca, wb, cb, b, cells, ptr, syms, counts)
    return cells, ptr, syms, counts, bool(over)


def revcomp_in_range(words, counts, n, b, lo: int, hi: int | None):
    """Reverse complements (sorted) of the n-words that fall in ``[lo, hi)`` (``hi=None``: to the end), with their counts."""
    _need(words.dtype == np.uint64 and 0 <= n * b <= 64, "uint64 words of at most 64 bits", "words")
    lo_, hi_ = np.uint64(lo), np.uint64(0 if hi is None else hi)
    m = _revcomp_in_range(words, counts, n, b, lo_, hi_, hi is None, np.zeros(0, np.uint64), counts[:0])
    rw, rc = np.empty(m, np.uint64), np.empty(m, counts.dtype)
    if m:
        _revcomp_in_range(words, counts, n, b, lo_, hi_, hi is None, rw, rc)
        order = np.argsort(rw)
        rw, rc = rw[order], rc[order]
    return rw, rc


#: Leaves whose positions one scan of a :class:`RevcompParts`' part numbers collects (8 bytes each; several parts at once).
GROUP_LEAVES = 1 << 19


class RevcompParts:
    """Reverse complements of the n-prefixes of a sorted leaf table, one address part at a time.

    Part ``p`` holds the addresses whose top ``part_bits`` bits (of ``n * b``, at most 8) equal
    ``p``; that of a reverse complement comes from the prefix's last symbols.  A first scan notes
    each leaf's part (one byte a leaf) and sizes the parts; each :meth:`part` call gathers that
    part's leaves and sorts only their complements, so nothing else as large as the leaf table is held.
    Parts asked for in increasing order share the scans of the part numbers (:meth:`_positions`).
    """

    def __init__(self, leaf, counts, shift: int, n: int, b: int, part_bits: int) -> None:
        _need(leaf.dtype == np.uint64 and 0 < n * b <= 64 and 0 <= part_bits <= min(8, n * b), "uint64 leaves, words of at most 64 bits", "leaf")
        self.leaf, self.counts, self.shift, self.n, self.b = leaf, counts, int(shift), int(n), int(b)
        head = -(-part_bits // b)
        self.sizes = np.zeros(1 << part_bits, np.int64)
        self.ids = np.empty(leaf.shape[0], np.uint8)
        _revcomp_prefix_ids(leaf, self.shift, self.b, head, head * b - part_bits, self.ids, self.sizes)
        self.leaves = np.zeros(1 << part_bits, np.int64)  # leaves of each part (numpy's bincount would widen the ids to 8 bytes)
        _count_ids(self.ids, self.leaves)
        self._lo = self._hi = 0
        self._pos = self._starts = np.zeros(1, np.int64)

    def _positions(self, p: int) -> np.ndarray:
        """The leaves of part ``p`` (increasing positions); one scan of the ids collects those of the next few parts
        too (up to ``GROUP_LEAVES`` leaves), so parts asked for in order cost a scan per group, not per part."""
        if not self._lo <= p < self._hi:
            self._pos = None
            q, tot = p + 1, int(self.leaves[p])
            while q < self.leaves.size and tot + int(self.leaves[q]) <= GROUP_LEAVES:
                tot += int(self.leaves[q])
                q += 1
            starts = np.zeros(q - p + 1, np.int64)
            np.cumsum(self.leaves[p:q], out=starts[1:])
            pos = np.empty(tot, np.int64)
            _bucket_positions(self.ids, p, q, starts[:-1].copy(), pos)
            self._lo, self._hi, self._pos, self._starts = p, q, pos, starts
        return self._pos[self._starts[p - self._lo] : self._starts[p - self._lo + 1]]

    def part(self, p: int) -> tuple[np.ndarray, np.ndarray]:
        """Sorted reverse-complement addresses of part ``p`` and their counts (the leaves' count type)."""
        m = int(self.sizes[p])
        rw, rc = np.empty(m, np.uint64), np.empty(m, self.counts.dtype)
        if m:
            sel = self._positions(p)
            _revcomp_prefix_gather(self.leaf, self.counts, sel, self.shift, self.n, self.b, rw, rc)
            del sel
            order = np.argsort(rw)  # addresses are unique: any sort gives the same order
            rw, rc = rw[order], rc[order]
        return rw, rc


def cell_lookup(cells, ptr, syms, counts, keys, want):
    """``(found, count of the symbol, cell total, distinct symbols)`` of each (cell key, symbol) pair in one cell table.

    Absent cells and symbols give zeros.
    """
    _need(cells.dtype.kind == "u" and keys.dtype == np.uint64 and ptr.dtype.kind in "iu", "unsigned cells, uint64 keys, integer ptr", "cells")
    m = keys.shape[0]
    found = np.zeros(m, np.bool_)
    c, tot, used = np.zeros(m), np.zeros(m), np.zeros(m)
    _cell_lookup(cells, ptr, syms, counts, keys, np.ascontiguousarray(want, dtype=syms.dtype), found, c, tot, used)
    return found, c, tot, used


def hash_cells(addr, depth):
    """The cell hash of every address at one depth (a deterministic, unbiased order for pruning ties)."""
    _need(addr.dtype == np.uint64, "uint64 addresses", "addr")
    return _hash_cells(np.ascontiguousarray(addr), depth)


def cell_words(cells, ptr, syms, b):
    """The sorted (n+1)-word addresses of a cell table's entries, built in one array (no temporaries as long).

    ``cells`` may be of any unsigned type, ``ptr`` and ``syms`` of any integer type (the tables keep them narrow);
    ``ptr`` may start above 0 (a slice of a table's cells, :meth:`CellTable.word_pieces`), as long as
    its last value minus its first is the number of ``syms`` given.
    """
    cells, ptr, syms = np.ascontiguousarray(cells), np.ascontiguousarray(ptr), np.ascontiguousarray(syms)
    _need(cells.dtype.kind == "u" and ptr.dtype.kind in "iu" and syms.dtype.kind in "iu", "unsigned cells, integer pointers and symbols", "ptr")
    if ptr.shape[0] and int(ptr[0]):
        ptr = ptr - ptr[0]
    _need(ptr.shape[0] == cells.shape[0] + 1 and int(ptr[-1]) == syms.shape[0],
          "one more pointer than cells, the last one the number of entries", "ptr")
    out = np.empty(syms.shape[0], np.uint64)
    _cell_words(cells, ptr, syms, b, out)
    return out


def cell_totals(ptr, counts):
    """The total count of every cell (int64) of a table with entry pointers ``ptr`` and ``counts`` (no array as long as the entries)."""
    ptr, counts = np.ascontiguousarray(ptr), np.ascontiguousarray(counts)
    _need(ptr.dtype.kind in "iu" and counts.dtype.kind in "iu" and ptr.shape[0] >= 1 and int(ptr[-1]) == counts.shape[0],
          "integer pointers ending at the number of integer counts", "ptr")
    out = np.empty(ptr.shape[0] - 1, np.int64)
    _cell_totals(ptr, counts, out)
    return out

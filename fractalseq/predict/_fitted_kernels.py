"""Numba kernels of the fitted predictor: the cell index, the coarse-to-fine blend, scoring, and cell tables.

Every kernel is private (``_name``) and called through the public wrapper of
the same name below, which checks types and shapes first.  The blend is
described in :func:`_blend`; scoring shares its bookkeeping with the online
kernel (:func:`fractalseq.predict._kernel_tools._score_symbol`).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError
from fractalseq.predict._kernel_tools import (
    CALIB_BINS,
    ST_BRIER,
    ST_COUNT,
    ST_NATS,
    ST_SIZE,
    ST_TOP1,
    ST_TOP3,
    _borrow,
    _cell_hash,
    _score_symbol,
)


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


@njit(cache=True)
def _blend(H, L, A, depths, masks, dstart, addr, counts, index, beta, discount, p):
    """Blend the cells of one history from coarse to fine into ``p``; returns the deepest cell found.

    ``p_n(s) = (max(c_s - d_n, 0) + (beta_n + d_n u) p_{n-1}(s)) / (N + beta_n)``
    with ``N`` the cell's total, ``u`` its number of distinct symbols and
    ``beta_n``, ``d_n`` the concentration and discount of the depth; an
    absent cell leaves ``p`` unchanged.
    """
    for s in range(A):
        p[s] = 1.0 / A
    deepest = -1
    for di in range(depths.shape[0]):
        dn = depths[di]
        if L < dn:
            break
        a = H & masks[di]
        r = _find_row(index, addr, dstart[di], dstart[di + 1], dn, a)
        if r < 0:
            continue
        deepest = di
        tot = 0.0
        u = 0
        for s in range(A):
            c = counts[r, s]
            tot += c
            if c > 0:
                u += 1
        esc = beta[di] + discount[di] * u
        den = tot + beta[di]
        for s in range(A):
            c = counts[r, s] - discount[di]
            if c < 0.0:
                c = 0.0
            p[s] = (c + esc * p[s]) / den
    return deepest


@njit(cache=True)
def _fitted_score(codes, starts, A, b, depths, masks, dstart, addr, counts, index, beta, discount,
                 hist, seg, stats, calib, sur):
    """Code length (nats) of a chunk under the fitted, static model; same bookkeeping as the online kernels."""
    n = codes.shape[0]
    ub = np.uint64(b)
    p = np.zeros(A, np.float64)
    keep = sur.shape[0] == n
    H = hist[0]
    L = seg[0]
    sp = 0
    nats = 0.0
    top1 = 0.0
    top3 = 0.0
    brier = 0.0
    for t in range(n):
        if sp < starts.shape[0] and starts[sp] == t:
            H = np.uint64(0)
            L = 0
            sp += 1
        x = np.int64(codes[t])
        _blend(H, L, A, depths, masks, dstart, addr, counts, index, beta, discount, p)
        nats, brier, top1, top3 = _score_symbol(
            _borrow(p), A, x, t, keep, _borrow(sur), _borrow(calib), nats, brier, top1, top3
        )
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
def _fitted_proba(ctx_codes, ctx_offsets, A, b, depths, masks, dstart, addr, counts, index, beta, discount, out, deepest):
    """Blended next-symbol probabilities after each context (``ctx_codes[ctx_offsets[i]:ctx_offsets[i+1]]``)."""
    ub = np.uint64(b)
    p = np.zeros(A, np.float64)
    for i in range(out.shape[0]):
        lo = ctx_offsets[i]
        hi = ctx_offsets[i + 1]
        H = np.uint64(0)
        for t in range(lo, hi):
            H = (H << ub) | np.uint64(ctx_codes[t])
        deepest[i] = _blend(H, hi - lo, A, depths, masks, dstart, addr, counts, index, beta, discount, p)
        for s in range(A):
            out[i, s] = p[s]


@njit(cache=True)
def _group_cells(words, wcounts, b, A):
    """Turn sorted (n+1)-word addresses and counts into n-cells: unique contexts and a (cells, A) count matrix."""
    m = words.shape[0]
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    ncell = 0
    prev = np.uint64(0)
    for i in range(m):
        c = words[i] >> ub
        if i == 0 or c != prev:
            ncell += 1
            prev = c
    cells = np.empty(ncell, np.uint64)
    counts = np.zeros((ncell, A), np.uint32)
    k = -1
    for i in range(m):
        c = words[i] >> ub
        if k < 0 or c != cells[k]:
            k += 1
            cells[k] = c
        counts[k, np.int64(words[i] & symmask)] += wcounts[i]
    return cells, counts


@njit(cache=True)
def _merge_cells(a_addr, a_counts, b_addr, b_counts):
    """Union of two sorted cell tables, counts added (raises nothing; the caller checks overflow)."""
    na = a_addr.shape[0]
    nb = b_addr.shape[0]
    A = a_counts.shape[1]
    out_addr = np.empty(na + nb, np.uint64)
    out_counts = np.zeros((na + nb, A), np.uint64)
    i = 0
    j = 0
    k = 0
    while i < na or j < nb:
        if j >= nb or (i < na and a_addr[i] < b_addr[j]):
            out_addr[k] = a_addr[i]
            for s in range(A):
                out_counts[k, s] = a_counts[i, s]
            i += 1
        elif i >= na or b_addr[j] < a_addr[i]:
            out_addr[k] = b_addr[j]
            for s in range(A):
                out_counts[k, s] = b_counts[j, s]
            j += 1
        else:
            out_addr[k] = a_addr[i]
            for s in range(A):
                out_counts[k, s] = np.uint64(a_counts[i, s]) + np.uint64(b_counts[j, s])
            i += 1
            j += 1
        k += 1
    return out_addr[:k], out_counts[:k]


@njit(cache=True)
def _revcomp_addresses(words, n, b):
    """Addresses of the reverse complements of n-words (complement = code XOR (2**b - 1))."""
    out = np.empty_like(words)
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    for i in range(words.shape[0]):
        w = words[i]
        r = np.uint64(0)
        for _ in range(n):
            r = (r << ub) | ((w & symmask) ^ symmask)
            w >>= ub
        out[i] = r
    return out


@njit(cache=True)
def _hash_cells(addr, depth):
    """:func:`cell_hash` of every address at one depth (a deterministic, unbiased order for pruning ties)."""
    out = np.empty(addr.shape[0], np.uint64)
    for i in range(addr.shape[0]):
        out[i] = _cell_hash(addr[i], depth)
    return out


# ------------------------------------------------------------------ wrappers
def _need(ok: bool, what: str, parameter: str) -> None:
    if not ok:
        raise ParameterError(f"The fitted kernels need {what}.", parameter=parameter)


def _check_model(A, depths, masks, dstart, addr, counts, index, beta, discount) -> None:
    M = depths.shape[0]
    _need(depths.dtype == np.int64 and masks.dtype == np.uint64 and masks.shape == (M,), "depths int64 and masks uint64, one per depth", "depths")
    _need(dstart.dtype == np.int64 and dstart.shape == (M + 1,), "dstart as int64 of length depths + 1", "dstart")
    _need(addr.dtype == np.uint64 and addr.ndim == 1 and (M == 0 or int(dstart[-1]) == addr.size), "addr as uint64 rows ending at dstart[-1]", "addr")
    _need(counts.dtype == np.float64 and counts.shape == (addr.size, A), "counts as float64 (rows, A)", "counts")
    _need(index.dtype == np.int64 and index.size >= 2 * max(addr.size, 1) and (index.size & (index.size - 1)) == 0,
          "an int64 index of a power-of-two size at least twice the rows", "index")
    _need(beta.shape == discount.shape == (M,) and beta.dtype == discount.dtype == np.float64, "beta and discount as float64, one per depth", "beta")


def build_index(addr, dstart, depths, index) -> None:
    """Fill ``index`` (zeros, power-of-two size >= 2 rows) with the open-addressing index of the cells (row + 1)."""
    _need(index.dtype == np.int64 and not index.any() and index.size >= 2 * max(addr.size, 1), "an empty int64 index of at least twice the rows", "index")
    _need((index.size & (index.size - 1)) == 0, "an index of a power-of-two size", "index")
    _build_index(addr, dstart, depths, index)


def fitted_score(codes, starts, A, b, depths, masks, dstart, addr, counts, index, beta, discount, hist, seg, stats, calib, sur) -> float:
    """Code length (nats) of a chunk under the fitted model; accumulates ``stats``/``calib`` and fills ``sur`` (bits) if sized."""
    _check_model(A, depths, masks, dstart, addr, counts, index, beta, discount)
    _need(codes.ndim == 1 and (codes.size == 0 or int(codes.max()) < A), f"codes in 0..{A - 1}", "codes")
    _need(starts.dtype == np.int64, "starts as int64", "starts")
    _need(stats.shape == (ST_SIZE,) and calib.shape == (CALIB_BINS, 3), "stats and calib of the kernel's layout", "stats")
    _need(sur.dtype == np.float32 and sur.shape in ((0,), (codes.size,)), "sur as float32 of length 0 or the chunk's", "sur")
    return _fitted_score(codes, starts, A, b, depths, masks, dstart, addr, counts, index, beta, discount, hist, seg, stats, calib, sur)


def fitted_proba(ctx_codes, ctx_offsets, A, b, depths, masks, dstart, addr, counts, index, beta, discount, out, deepest) -> None:
    """Blended next-symbol probabilities after each context into ``out`` and the deepest cell found into ``deepest``."""
    _check_model(A, depths, masks, dstart, addr, counts, index, beta, discount)
    m = ctx_offsets.size - 1
    _need(ctx_codes.dtype == np.int64 and ctx_offsets.dtype == np.int64 and m >= 0, "int64 context codes and offsets", "contexts")
    _need(ctx_codes.size == 0 or (int(ctx_codes.min()) >= 0 and int(ctx_codes.max()) < A), f"context codes in 0..{A - 1}", "contexts")
    _need(out.shape == (m, A) and deepest.shape == (m,), "out (contexts, A) and deepest (contexts,)", "out")
    _fitted_proba(ctx_codes, ctx_offsets, A, b, depths, masks, dstart, addr, counts, index, beta, discount, out, deepest)


def group_cells(words, wcounts, b, A):
    """Sorted (n+1)-word addresses and counts -> (unique n-cells, (cells, A) uint32 counts)."""
    _need(words.dtype == np.uint64 and wcounts.shape == words.shape, "uint64 words and one count per word", "words")
    _need(words.size < 2 or bool(np.all(words[1:] >= words[:-1])), "sorted words", "words")
    return _group_cells(words, wcounts, b, A)


def merge_cells(a_addr, a_counts, b_addr, b_counts):
    """Union of two sorted cell tables with counts added (uint64 counts; the caller checks overflow)."""
    _need(a_counts.shape[1:] == b_counts.shape[1:] and a_counts.shape[0] == a_addr.size and b_counts.shape[0] == b_addr.size,
          "two cell tables over the same alphabet", "a_counts")
    return _merge_cells(a_addr, a_counts, b_addr, b_counts)


def revcomp_addresses(words, n, b):
    """Addresses of the reverse complements of n-words (complement = code XOR (2**b - 1))."""
    _need(words.dtype == np.uint64 and 0 <= n * b <= 64, "uint64 words of at most 64 bits", "words")
    return _revcomp_addresses(words, n, b)


def hash_cells(addr, depth):
    """The cell hash of every address at one depth (a deterministic, unbiased order for pruning ties)."""
    _need(addr.dtype == np.uint64, "uint64 addresses", "addr")
    return _hash_cells(np.ascontiguousarray(addr), depth)

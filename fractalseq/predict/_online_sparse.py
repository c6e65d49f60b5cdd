"""The online kernel for large alphabets (event-log templates): top-k cells blended from coarse to fine.

With thousands of symbols a row of ``A`` counts per cell (the dense layout of
:mod:`fractalseq.predict._online_kernel`) costs ``A`` work per symbol and ``A``
memory per cell.  Here a cell keeps at most :data:`TOPK` (symbol, count)
*slots*, and only the symbol that occurred is coded, so the work per symbol
and the memory per cell do not depend on ``A``.

Estimate
--------
The base is the adaptive order-0 estimate ``p_0(s) = (c_s + alpha) / (N + A alpha)``
(one full count vector of length ``A``, the only ``A``-sized state).  Each
non-empty cell of the history, from coarse to fine, blends its slots into it by
interpolated absolute discounting (as the fitted model does),

``p_n(s) = (max(c_s - d_n, 0) + (beta_n + d_n u) p_{n-1}(s)) / (T + beta_n)``,

with ``c_s`` the slot count of ``s`` (0 without a slot), ``T`` the sum of the
cell's slot counts and ``u`` its filled slots: a distribution over all ``A``
symbols at every step, so the probabilities sum to one exactly.  A symbol in
no slot of the history's cells gets ``E p_0(s)`` with ``E`` the product of
the escape factors ``(beta_n + d_n u) / (T + beta_n)``.

A cell whose slots are full gives a new symbol the slot with the smallest
count (the first such), dropping that symbol's count (``T`` follows).  Before
an increment that would take a count past the depth's limit, every slot count
is halved (rounding up).

Tables
------
Each depth owns a hashed region of ``2**rbits`` rows in buckets of
:data:`~fractalseq.predict._kernel_tools.BUCKET` rows chosen by the cell hash;
a row keeps the cell's full address (so regions can be resized), its slots
and its total (0: empty row).  A new cell takes the first empty row of its
bucket, else the row with the smallest total (an eviction).  Regions start
small and are doubled by :class:`~fractalseq.predict._online.OnlineCoder`
whenever one is more than half full (up to its cap): the kernel stops at the
symbol that fills a region past :data:`GROW_LOAD` and says where, so the
result does not depend on how the stream was cut into chunks.

Evaluation
----------
Top-1/top-3 hits, the calibration of the top symbol and the Brier score are
exact without visiting all ``A`` symbols: the *candidates* are the symbols in
the slots of the history's cells plus the :data:`TOP0` most frequent symbols
of the order-0 counts (ties: the smaller code).  Any other symbol ``s`` has
``p(s) = E p_0(s) <= E p_0(q) <= p(q)`` for each of those ``q`` (with ``q``
before ``s`` on ties), so the most probable symbol is a candidate and a symbol
beaten by a non-candidate is beaten by at least :data:`TOP0` >= 3 candidates.
``sum_s p(s)**2`` adds ``E**2`` times the order-0 sum of squares of the
non-candidates to the candidates' squares.

References: Ney, Essen & Kneser (1994), Computer Speech and Language 8:1-38
(absolute discounting; from memory); Cleary & Witten (1984), IEEE Trans.
Commun. 32:396-402 (escaping to shorter contexts, PPM; from memory); Misra &
Gries (1982) and Metwally et al. (2005) for keeping the frequent items of a
stream in a few counters (common practice).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError
from fractalseq.predict._kernel_tools import (
    BUCKET,
    CALIB_BINS,
    ST_BRIER,
    ST_COUNT,
    ST_EVICT,
    ST_INSERT,
    ST_NATS,
    ST_SIZE,
    ST_TOP1,
    ST_TOP3,
    _bucket_and_tag,
)

#: Slots (symbol, count) a cell keeps.
TOPK = 8
#: Most frequent order-0 symbols always among the candidates (at least 3, for top-3 hits).
TOP0 = 4
#: A region is doubled once more than this share of its rows hold cells.
GROW_LOAD = 0.5
#: Largest count of a slot (uint16).
SPARSE_LIMIT = 65535
#: Blend parameters of every depth: concentration ``beta`` and discount ``d``, chosen among (0.1..2, 0.5..0.9) on
#: the invented log of benchmarks/synthetic_log.py and the real logs of reference/logs (all within 0.1 bit/symbol).
SPARSE_BETA = 0.5
SPARSE_DISCOUNT = 0.8

#: Bytes of one row: address, TOPK uint16 symbols and counts, uint32 total.
ROW_BYTES = 8 + 4 * TOPK + 4

# layout of the float64 ``base`` state: order-0 total N and sum of squares sum_s (c_s + alpha)**2
B_TOTAL = 0
B_SQUARES = 1


@njit(cache=True, inline="always")
def _slot_count(syms, cnts, r, s):
    for k in range(syms.shape[1]):
        if cnts[r, k] > 0 and syms[r, k] == s:
            return np.int64(cnts[r, k])
    return np.int64(0)


@njit(cache=True, inline="always")
def _chain(s, p0, rows, nfound, syms, cnts, tots, used, beta, disc, dix):
    """Probability of symbol ``s`` blended from the base ``p0`` through the found rows (coarse to fine)."""
    p = p0
    for q in range(nfound):
        r = rows[q]
        i = dix[q]
        c = _slot_count(syms, cnts, r, s) - disc[i]
        if c < 0.0:
            c = 0.0
        p = (c + (beta[i] + disc[i] * used[q]) * p) / (np.float64(tots[r]) + beta[i])
    return p


@njit(cache=True)
def _sparse_chunk(codes, starts, A, b, depth, rbits, offset, limit, masks, beta, disc, alpha0,
                  keys, syms, cnts, tots, fill, grow_at, c0, top0, base, mark, hist, seg, stats, calib, sur):
    """Predict-then-update over ``codes`` until its end or until a region's fill reaches ``grow_at``; returns the symbols done."""
    n = codes.shape[0]
    M = depth.shape[0]
    K = syms.shape[1]
    ub = np.uint64(b)
    ntop = top0.shape[0]
    keep = sur.shape[0] == n
    rows = np.zeros(M, np.int64)
    used = np.zeros(M, np.float64)
    dix = np.zeros(M, np.int64)
    bases = np.zeros(M, np.int64)
    addr = np.zeros(M, np.uint64)
    cand = np.zeros(M * K + ntop, np.int64)
    H = hist[0]
    Ls = seg[0]
    sp = 0
    nst = starts.shape[0]
    nats = 0.0
    top1 = 0.0
    top3 = 0.0
    brier = 0.0
    evict = 0.0
    insert = 0.0
    g0 = np.int64(stats[ST_COUNT])
    Aa = A * alpha0
    done = 0
    for t in range(n):
        if sp < nst and starts[sp] == t:
            H = np.uint64(0)
            Ls = 0
            sp += 1
        x = np.int64(codes[t])
        # ---- the cells of the history: found rows, coarse to fine
        nfound = 0
        for i in range(M):
            if Ls < depth[i]:
                bases[i] = -1
                continue
            a = H & masks[i]
            bs, _ = _bucket_and_tag(a, depth[i], rbits[i], offset[i])
            bases[i] = bs
            addr[i] = a
            for k in range(BUCKET):
                r = bs + k
                if tots[r] > 0 and keys[r] == a:
                    u = 0
                    for j in range(K):
                        if cnts[r, j] > 0:
                            u += 1
                    rows[nfound] = r
                    used[nfound] = u
                    dix[nfound] = i
                    nfound += 1
                    break
        # ---- code x
        den0 = base[B_TOTAL] + Aa
        px = _chain(x, (c0[x] + alpha0) / den0, rows, nfound, syms, cnts, tots, used, beta, disc, dix)
        E = 1.0
        for q in range(nfound):
            i = dix[q]
            E *= (beta[i] + disc[i] * used[q]) / (np.float64(tots[rows[q]]) + beta[i])
        nats -= math.log(px)
        if keep:
            sur[t] = -math.log2(px)
        # ---- evaluation over the candidates
        stamp = g0 + t + 1
        nc = 0
        for k in range(ntop):
            s = top0[k]
            if mark[s] != stamp:
                mark[s] = stamp
                cand[nc] = s
                nc += 1
        for q in range(nfound):
            r = rows[q]
            for j in range(K):
                if cnts[r, j] > 0:
                    s = np.int64(syms[r, j])
                    if mark[s] != stamp:
                        mark[s] = stamp
                        cand[nc] = s
                        nc += 1
        best = -1
        pbest = -1.0
        rank = 0
        sq = 0.0
        sq0 = 0.0
        for m in range(nc):
            s = cand[m]
            p0s = (c0[s] + alpha0) / den0
            ps = _chain(s, p0s, rows, nfound, syms, cnts, tots, used, beta, disc, dix)
            if ps > pbest or (ps == pbest and s < best):
                pbest = ps
                best = s
            if s != x and (ps > px or (ps == px and s < x)):
                rank += 1
            sq += ps * ps
            sq0 += p0s * p0s
        rest = base[B_SQUARES] / (den0 * den0) - sq0
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
        # ---- update the cells (a missing cell takes the first empty row of its bucket, else the rarest)
        q = 0
        grow = False
        for i in range(M):
            bs = bases[i]
            if bs < 0:
                continue
            if q < nfound and dix[q] == i:
                r = rows[q]
                q += 1
            else:
                r = bs
                bt = np.int64(1) << 62
                for k in range(BUCKET):
                    tv = np.int64(tots[bs + k])
                    if tv == 0:
                        r = bs + k
                        bt = -1
                        break
                    if tv < bt:
                        bt = tv
                        r = bs + k
                if bt > 0:
                    evict += 1.0
                else:
                    fill[i] += 1
                    if fill[i] >= grow_at[i]:
                        grow = True
                insert += 1.0
                keys[r] = addr[i]
                tots[r] = 0
                for j in range(K):
                    cnts[r, j] = 0
                    syms[r, j] = 0
            # bump x in row r
            slot = -1
            for j in range(K):
                if cnts[r, j] > 0 and np.int64(syms[r, j]) == x:
                    slot = j
                    break
            if slot >= 0:
                if np.int64(cnts[r, slot]) >= limit[i]:
                    tv = 0
                    for j in range(K):
                        h = (np.int64(cnts[r, j]) + 1) >> 1
                        cnts[r, j] = h
                        tv += h
                    tots[r] = tv
                cnts[r, slot] += 1
                tots[r] += 1
            else:
                slot = 0
                low = np.int64(1) << 62
                for j in range(K):
                    cv = np.int64(cnts[r, j])
                    if cv < low:
                        low = cv
                        slot = j
                        if cv == 0:
                            break
                tots[r] = tots[r] - cnts[r, slot] + 1
                syms[r, slot] = x
                cnts[r, slot] = 1
        # ---- order-0 counts and their most frequent symbols (count descending, code ascending)
        base[B_SQUARES] += 2.0 * (c0[x] + alpha0) + 1.0
        c0[x] += 1.0
        base[B_TOTAL] += 1.0
        pos = -1
        for k in range(ntop):
            if top0[k] == x:
                pos = k
                break
        if pos < 0:
            last = top0[ntop - 1]
            if c0[x] > c0[last] or (c0[x] == c0[last] and x < last):
                top0[ntop - 1] = x
                pos = ntop - 1
        while pos > 0:
            prv = top0[pos - 1]
            if c0[x] > c0[prv] or (c0[x] == c0[prv] and x < prv):
                top0[pos] = prv
                top0[pos - 1] = x
                pos -= 1
            else:
                break
        H = (H << ub) | np.uint64(x)
        Ls += 1
        done = t + 1
        if grow:
            break
    hist[0] = H
    seg[0] = Ls
    stats[ST_NATS] += nats
    stats[ST_COUNT] += done
    stats[ST_TOP1] += top1
    stats[ST_TOP3] += top3
    stats[ST_EVICT] += evict
    stats[ST_INSERT] += insert
    stats[ST_BRIER] += brier
    return done


@njit(cache=True)
def _rehash(depth, old_rbits, old_offset, keys, syms, cnts, tots, new_rbits, new_offset, nkeys, nsyms, ncnts, ntots):
    """Move every stored cell into the regions of a new layout (bucket order kept; a full bucket keeps the larger totals)."""
    K = syms.shape[1]
    for i in range(depth.shape[0]):
        lo = old_offset[i]
        hi = lo + (np.int64(1) << old_rbits[i])
        for r in range(lo, hi):
            if tots[r] == 0:
                continue
            bs, _ = _bucket_and_tag(keys[r], depth[i], new_rbits[i], new_offset[i])
            dst = -1
            for k in range(BUCKET):
                if ntots[bs + k] == 0:
                    dst = bs + k
                    break
            if dst < 0:  # only when a region shrinks, never when it grows
                dst = bs
                for k in range(BUCKET):
                    if ntots[bs + k] < ntots[dst]:
                        dst = bs + k
                if ntots[dst] >= tots[r]:
                    continue
            nkeys[dst] = keys[r]
            ntots[dst] = tots[r]
            for j in range(K):
                nsyms[dst, j] = syms[r, j]
                ncnts[dst, j] = cnts[r, j]


# ------------------------------------------------------------------ wrappers
def _need(ok: bool, what: str, parameter: str) -> None:
    if not ok:
        raise ParameterError(f"sparse_chunk needs {what}.", parameter=parameter)


def sparse_chunk(codes, starts, A, b, depth, rbits, offset, limit, masks, beta, disc, alpha0, keys, syms, cnts, tots,
                 fill, grow_at, c0, top0, base, mark, hist, seg, stats, calib, sur) -> int:
    """Predict-then-update over ``codes`` with top-k cells, after checking every argument; returns the symbols coded.

    Parameters
    ----------
    codes : uint8/uint16/uint32 array, codes in ``0..A-1``
    starts : int64 array, sorted positions in ``codes`` where a segment begins
    A, b : alphabet size (at least :data:`TOP0`) and bits per symbol (at most 16)
    depth, rbits, offset, limit, masks, beta, disc :
        per cell depth (M of them): depth in symbols; log2 of the region's rows; its first row; the
        slot-count limit; the address mask ``2**(b n) - 1``; the blend's concentration and discount
    alpha0 : additive constant of the order-0 base
    keys, syms, cnts, tots : the rows: uint64 address, uint16 ``(rows, TOPK)`` slot symbols and counts,
        uint32 total (0: empty row); updated in place
    fill, grow_at : int64 per depth: rows holding a cell, and the fill at which the kernel stops
    c0 : float64[A] order-0 counts; top0 : int64[TOP0] its most frequent symbols; base : float64[2]
        order-0 total and sum of squares (state)
    mark : int64[A] scratch of the candidate set
    hist : uint64[2] history (state); seg : int64[1] symbols of the open segment (state)
    stats : float64[ST_SIZE] running totals; calib : float64 (CALIB_BINS, 3)
    sur : float32 array receiving each position's surprisal in bits, or empty

    Returns
    -------
    int
        Symbols coded: ``codes.size``, or fewer when a region reached ``grow_at`` (the caller grows it and
        passes the rest).
    """
    M = int(np.asarray(depth).shape[0])
    _need(codes.ndim == 1 and codes.dtype in (np.uint8, np.uint16, np.uint32), "codes as a 1-d unsigned array", "codes")
    _need(codes.size == 0 or int(codes.max()) < A, f"codes below the alphabet size {A}", "codes")
    _need(starts.dtype == np.int64 and starts.ndim == 1, "starts as a 1-d int64 array", "starts")
    _need(TOP0 <= A <= (1 << b) and 1 <= b <= 16, "an alphabet size A with TOP0 <= A <= 2**b <= 2**16", "A")
    per = dict(depth=(depth, np.int64), rbits=(rbits, np.int64), offset=(offset, np.int64), limit=(limit, np.int64),
               masks=(masks, np.uint64), beta=(beta, np.float64), disc=(disc, np.float64), fill=(fill, np.int64),
               grow_at=(grow_at, np.int64))
    for name, (arr, dt) in per.items():
        _need(arr.dtype == dt and arr.shape == (M,), f"{name} as {np.dtype(dt).name}[{M}], one value per depth", name)
    n_rows = keys.shape[0]
    _need(keys.dtype == np.uint64 and tots.dtype == np.uint32 and keys.shape == tots.shape == (n_rows,), "keys uint64 and totals uint32, one per row", "keys")
    _need(syms.dtype == cnts.dtype == np.uint16 and syms.shape == cnts.shape == (n_rows, TOPK), f"slot symbols and counts as uint16 (rows, {TOPK})", "syms")
    _need(bool(np.all(offset + (1 << rbits) <= n_rows)) and bool(np.all(rbits >= 3)), "regions (offset, 2**rbits rows, rbits >= 3) inside the table", "offset")
    _need(bool(np.all((limit >= 1) & (limit <= SPARSE_LIMIT))), f"slot-count limits in 1..{SPARSE_LIMIT}", "limit")
    _need(bool(np.all(beta > 0)) and bool(np.all((disc >= 0) & (disc < 1))), "beta > 0 and discounts in [0, 1)", "beta")
    _need(c0.dtype == np.float64 and c0.shape == (A,) and mark.dtype == np.int64 and mark.shape == (A,), "c0 float64[A] and mark int64[A]", "c0")
    _need(top0.dtype == np.int64 and top0.shape == (TOP0,) and base.dtype == np.float64 and base.shape == (2,), f"top0 int64[{TOP0}] and base float64[2]", "top0")
    _need(hist.dtype == np.uint64 and hist.shape == (2,) and seg.dtype == np.int64 and seg.shape == (1,), "hist uint64[2] and seg int64[1]", "hist")
    _need(stats.dtype == np.float64 and stats.shape == (ST_SIZE,), f"stats as float64[{ST_SIZE}]", "stats")
    _need(calib.dtype == np.float64 and calib.shape == (CALIB_BINS, 3), f"calib as float64 ({CALIB_BINS}, 3)", "calib")
    _need(sur.dtype == np.float32 and sur.shape in ((0,), (codes.size,)), "sur as float32 of length 0 or the codes'", "sur")
    _need(alpha0 > 0 and math.isfinite(alpha0), "a positive alpha0", "alpha0")
    return int(_sparse_chunk(codes, starts, A, b, depth, rbits, offset, limit, masks, beta, disc, float(alpha0), keys, syms,
                             cnts, tots, fill, grow_at, c0, top0, base, mark, hist, seg, stats, calib, sur))


def empty_rows(n_rows: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Empty rows ``(keys, slot symbols, slot counts, totals)``."""
    return (np.zeros(n_rows, np.uint64), np.zeros((n_rows, TOPK), np.uint16), np.zeros((n_rows, TOPK), np.uint16),
            np.zeros(n_rows, np.uint32))


def rehash(depth, old_rbits, old_offset, keys, syms, cnts, tots, new_rbits, new_offset, n_rows):
    """The rows of a new layout (``new_rbits``, ``new_offset``, ``n_rows``) holding every stored cell of the old one."""
    nkeys = np.zeros(n_rows, np.uint64)
    nsyms = np.zeros((n_rows, TOPK), np.uint16)
    ncnts = np.zeros((n_rows, TOPK), np.uint16)
    ntots = np.zeros(n_rows, np.uint32)
    _need(bool(np.all(new_offset + (1 << new_rbits) <= n_rows)), "new regions inside the new table", "new_offset")
    _rehash(depth, old_rbits, old_offset, keys, syms, cnts, tots, new_rbits, new_offset, nkeys, nsyms, ncnts, ntots)
    return nkeys, nsyms, ncnts, ntots

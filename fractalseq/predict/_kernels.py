"""Numba kernels of the count-based predictor (:mod:`fractalseq.predict._predictor`).

Conventions
-----------
A context cell of depth ``n`` is the set of histories sharing their last
``n`` symbols; its *address* packs those symbols ``w_1 .. w_n`` as
``sum_i w_i << (b * (n - i))`` with ``b = alphabet.bits`` (first symbol most
significant, the project's word-address convention).  In the contractive
encoding with ratio ``k <= 1/2`` this is the box of side ``k**n`` that the
point of the history falls in.

Online tables
-------------
Each depth owns a region of one table.  A region is *direct* (one row per
possible address, ``2**(b n)`` rows) when that fits the depth's row budget,
otherwise *hashed*: rows are grouped in buckets of :data:`BUCKET` rows chosen
by a hash of (address, depth); a row carries a 16-bit check tag, and a new
cell takes the row of its bucket with the smallest total count (rare deep
cells are pruned first).  Every replacement of a non-empty row is counted as
an eviction.

Two row layouts exist and behave identically:

* packed (alphabets of at most 4 symbols): one ``uint64`` per row, four
  12-bit counts at bits 0, 12, 24, 36 and the tag at bits 48..63;
* dense (any alphabet): ``uint16`` counts ``(rows, A)``, a ``uint16`` tag and
  a ``uint32`` total per row.

Before an increment that would take a count past the depth's limit, every
count of the cell is halved (rounding up).

Mixing
------
Cell ``i`` with counts ``c`` predicts ``(c_s + alpha_i) / (N + A alpha_i)``;
the predictions of the non-empty cells are combined geometrically,
``p(s) ~ exp(sum_i w_i log(c_s + alpha_i))`` (the normaliser of each cell
cancels), with a weight vector chosen by the deepest non-empty cell and
updated online along the gradient of the code length,
``w_i += lr * (log(c_x + alpha_i) - sum_s p(s) log(c_s + alpha_i))``.
For two symbols this is logistic mixing in the stretch domain.  The
learning rate is boosted over the first symbols (:data:`LR_BOOST`).

Reverse-complement ("inverted repeat") updates: after each word, the same
word read on the other strand is counted too, so a repeat in reverse
orientation finds its cells filled (common practice in DNA modelling).

References
----------
Krichevsky & Trofimov (1981), IEEE Trans. Inf. Theory 27:199-207 (the
``alpha = 1/2`` estimator); Mattern (2013), "Linear and geometric mixtures -
analysis", Proc. Data Compression Conference (geometric mixing; from memory);
Ney, Essen & Kneser (1994), Computer Speech and Language 8:1-38 (absolute
discounting, used by the fitted blend; from memory).

Nothing here validates its input; :mod:`fractalseq.predict._predictor` does.
"""

from __future__ import annotations

import math

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.core import cgutils
from numba.extending import intrinsic

#: Rows per bucket of a hashed region.
BUCKET = 4
#: Positions looked ahead for memory prefetching (ring of RING positions).
LOOKAHEAD = 16
RING = 32
#: Largest count a packed row holds.
PACKED_LIMIT = 4095
#: Largest count a dense row holds.
DENSE_LIMIT = 65535
#: Logits more than this many nats below the best are raised to it, so no
#: symbol ever gets less than about exp(-MAX_LOGIT_GAP) / A.
MAX_LOGIT_GAP = 30.0
#: Learning-rate schedule: ``lr_t = lr * max(1, LR_BOOST / sqrt(1 + t / LR_SCALE))`` after ``t``
#: coded symbols (``t`` rounded down to a multiple of 1024), so short streams learn their weights quickly.
LR_BOOST = 8.0
LR_SCALE = 8192.0
#: Calibration bins of the top-1 confidence.
CALIB_BINS = 10
#: Entries of the log table per depth (larger counts call log()).
LOG_TABLE = 4096

# layout of the float64 ``stats`` array
ST_NATS = 0
ST_COUNT = 1
ST_TOP1 = 2
ST_TOP3 = 3
ST_EVICT = 4
ST_INSERT = 5
ST_BRIER = 6
ST_SIZE = 8

_K1 = np.uint64(0x9E3779B97F4A7C15)
_K2 = np.uint64(0xC2B2AE3D27D4EB4F)
_K3 = np.uint64(0x94D049BB133111EB)
_M12 = np.uint64(0xFFF)
_TAGMASK = np.uint64(0xFFFF) << np.uint64(48)


@intrinsic
def _prefetch(typingctx, arr, idx):
    """Hint the processor to fetch ``arr[idx]`` into cache (no effect on results)."""
    sig = types.void(arr, idx)

    def codegen(context, builder, signature, args):
        aryty, _ = signature.args
        ary = context.make_array(aryty)(context, builder, args[0])
        ptr = cgutils.get_item_pointer(context, builder, aryty, ary, [args[1]], wraparound=False)
        i8p = ir.IntType(8).as_pointer()
        i32 = ir.IntType(32)
        fnty = ir.FunctionType(ir.VoidType(), [i8p, i32, i32, i32])
        fn = cgutils.get_or_insert_function(builder.module, fnty, "llvm.prefetch.p0")
        builder.call(fn, [builder.bitcast(ptr, i8p), ir.Constant(i32, 1), ir.Constant(i32, 3), ir.Constant(i32, 1)])
        return context.get_dummy_value()

    return sig, codegen


@intrinsic
def _borrow(typingctx, arr):
    """A view of ``arr`` that skips reference counting, for the inlined helpers below.

    Numba copies every array argument of an ``inline="always"`` function and
    counts a reference for the copy: two atomic operations per array per
    call, which cost the online kernels about 6% of their time.  The view
    shares the data but has no owner, so it is valid only while ``arr`` is
    alive; it is made at the call site and dies with the call.
    """
    if not isinstance(arr, types.Array):
        return None
    sig = arr(arr)

    def codegen(context, builder, signature, args):
        ary = context.make_array(signature.args[0])(context, builder, args[0])
        view = context.make_array(signature.return_type)(context, builder, ary._getvalue())
        view.meminfo = cgutils.get_null_value(view.meminfo.type)
        view.parent = cgutils.get_null_value(view.parent.type)
        return view._getvalue()

    return sig, codegen


@njit(cache=True, inline="always")
def cell_hash(address, depth):
    """64-bit mix of (address, depth)."""
    z = (address ^ (np.uint64(depth) * _K2)) * _K1
    z ^= z >> np.uint64(29)
    z *= _K3
    z ^= z >> np.uint64(32)
    return z


@njit(cache=True, inline="always")
def _bucket_and_tag(address, depth, rbits, offset):
    """First row of the bucket (top hash bits) and the non-zero 16-bit tag (bits 20..35)."""
    z = cell_hash(address, depth)
    base = offset + (np.int64(z >> np.uint64(64 - rbits + 2)) << 2)
    t = np.int64((z >> np.uint64(20)) & np.uint64(0xFFFF))
    return base, (t if t != 0 else 1)


# ------------------------------------------------------- shared per-symbol steps
@njit(cache=True, inline="always")
def _score_symbol(ps, A, x, t, keep, sur, calib, nats, brier, top1, top3):
    """Bookkeeping of one coded symbol ``x`` at position ``t`` under the normalised prediction ``ps``.

    Adds its code length to ``nats`` (and ``sur[t]`` in bits when ``keep``),
    its squared error to ``brier``, its top-1/top-3 hits, and the confidence
    of the most probable symbol to the calibration bins ``calib``.  Returns
    the updated ``(nats, brier, top1, top3)``.
    """
    best = 0
    for k in range(A):
        if ps[k] > ps[best]:
            best = k
    px = ps[x]
    nats -= math.log(px)
    if keep:
        sur[t] = -math.log2(px)
    rank = 0
    for k in range(A):
        if ps[k] > px or (ps[k] == px and k < x):
            rank += 1
        d = ps[k] - (1.0 if k == x else 0.0)
        brier += d * d
    if rank == 0:
        top1 += 1.0
    if rank < 3:
        top3 += 1.0
    cb = int(ps[best] * CALIB_BINS)
    if cb >= CALIB_BINS:
        cb = CALIB_BINS - 1
    calib[cb, 0] += 1.0
    calib[cb, 1] += ps[best]
    if best == x:
        calib[cb, 2] += 1.0
    return nats, brier, top1, top3


@njit(cache=True, inline="always")
def _mix_score_learn(lin, inp, nin, weights, sel, ps, A, x, t, lr_t, keep, sur, calib, nats, brier, top1, top3):
    """Geometric mixing of the ``nin`` non-empty cells, scoring of ``x`` and the weight update (online kernels).

    ``lin[q, k]`` is ``log(c_k + alpha)`` of the ``q``-th non-empty cell, whose
    depth index is ``inp[q]``; row ``sel`` of ``weights`` (chosen by the
    deepest non-empty cell) mixes them and is updated in place when
    ``lr_t > 0``; ``ps`` receives the prediction.  Returns the updated
    ``(nats, brier, top1, top3)`` of :func:`_score_symbol`.  Callers pass
    the arrays through :func:`_borrow`.
    """
    mx = -1e300
    for k in range(A):
        z = 0.0
        for q in range(nin):
            z += weights[sel, inp[q]] * lin[q, k]
        ps[k] = z
        if z > mx:
            mx = z
    zs = 0.0
    for k in range(A):
        e = ps[k] - mx
        if e < -MAX_LOGIT_GAP:
            e = -MAX_LOGIT_GAP
        ps[k] = math.exp(e)
        zs += ps[k]
    for k in range(A):
        ps[k] /= zs
    nats, brier, top1, top3 = _score_symbol(ps, A, x, t, keep, sur, calib, nats, brier, top1, top3)
    if lr_t > 0.0:
        for q in range(nin):
            e = 0.0
            for k in range(A):
                e += ps[k] * lin[q, k]
            weights[sel, inp[q]] += lr_t * (lin[q, x] - e)
    return nats, brier, top1, top3


# ------------------------------------------------------------ packed rows
@njit(cache=True, inline="always")
def _ptotal(v):
    return np.int64((v & _M12) + ((v >> np.uint64(12)) & _M12) + ((v >> np.uint64(24)) & _M12) + ((v >> np.uint64(36)) & _M12))


@njit(cache=True, inline="always")
def _pbump(v, x, limit):
    """Add one to symbol ``x`` of a packed row, halving every count first if ``x`` is at the limit."""
    sh = np.uint64(12 * x)
    if np.int64((v >> sh) & _M12) >= limit:
        h = v & _TAGMASK
        for k in range(4):
            f = (v >> np.uint64(12 * k)) & _M12
            h |= ((f + np.uint64(1)) >> np.uint64(1)) << np.uint64(12 * k)
        v = h
    return v + (np.uint64(1) << sh)


@njit(cache=True)
def online_packed(codes, starts, A, b, depth, direct, rbits, offset, limit, ir_on, masks, comp, logt,
                  lr, table, weights, hist, seg, stats, calib, sur):
    """Predict-then-update over one chunk with packed rows (``A <= 4``).

    Parameters
    ----------
    codes : uint8/uint32 array, the chunk
    starts : int64 array, sorted positions in the chunk where a segment begins
    A, b : alphabet size and bits per symbol
    depth, direct, rbits, offset, limit, ir_on, masks :
        per cell depth: depth in symbols; direct region or hashed; log2 of the
        region's rows; first row; count limit; reverse-complement updates;
        address mask ``2**(b n) - 1``
    comp : int64 array mapping a code to its complement (empty: no reverse-complement updates)
    logt : float64 (M, LOG_TABLE) table of ``log(c + alpha_i)``
    lr : learning rate of the mixing weights (boosted early on, see LR_BOOST)
    table : uint64 rows (state, updated in place)
    weights : float64 (M + 1, M) mixing weights, one row per deepest non-empty depth (state)
    hist : uint64[2] forward and reverse-complement histories (state)
    seg : int64[1] symbols of the open segment so far (state)
    stats : float64[ST_SIZE] running totals (nats, count, top-1, top-3, evictions, insertions, Brier)
    calib : float64 (CALIB_BINS, 3) count, summed confidence and hits per confidence bin
    sur : float32 array receiving the surprisal of each position in bits, or empty to skip

    Returns
    -------
    float
        Code length of the chunk in nats.
    """
    n = codes.shape[0]
    M = depth.shape[0]
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    use_ir = comp.shape[0] > 0
    ring_len = np.zeros(RING, np.int64)
    ring_f = np.zeros((RING, M), np.int64)
    ring_ft = np.zeros((RING, M), np.int64)
    ring_r = np.zeros((RING, M), np.int64)
    ring_rt = np.zeros((RING, M), np.int64)
    ring_y = np.zeros((RING, M), np.int64)
    row = np.zeros(M, np.int64)
    inp = np.zeros(M, np.int64)
    lin = np.zeros((M, 4), np.float64)
    ps = np.zeros(4, np.float64)
    keep = sur.shape[0] == n
    H = hist[0]
    R = hist[1]
    Ls = seg[0]
    sp = 0
    nst = starts.shape[0]
    nats = 0.0
    top1 = 0.0
    top3 = 0.0
    brier = 0.0
    evict = 0.0
    insert = 0.0
    lr_t = lr
    for tt in range(n + LOOKAHEAD):
        # ---- stage position j: row addresses (and prefetch) from the known history
        j = tt
        if j < n:
            if sp < nst and starts[sp] == j:
                H = np.uint64(0)
                R = np.uint64(0)
                Ls = 0
                sp += 1
            rj = j & (RING - 1)
            ring_len[rj] = Ls
            for i in range(M):
                dn = depth[i]
                if Ls < dn:
                    continue
                a = H & masks[i]
                if direct[i]:
                    f = offset[i] + np.int64(a)
                else:
                    f, tg = _bucket_and_tag(a, dn, rbits[i], offset[i])
                    ring_ft[rj, i] = tg
                ring_f[rj, i] = f
                _prefetch(table, f)
            xj = codes[j]
            H = (H << ub) | np.uint64(xj)
            if use_ir:
                R = (R >> ub) | (np.uint64(comp[xj]) << np.uint64(64 - b))
                for i in range(M):
                    dn = depth[i]
                    if not ir_on[i] or Ls < dn:
                        continue
                    a = R >> np.uint64(64 - b * dn)
                    ring_y[rj, i] = comp[np.int64((H >> np.uint64(b * dn)) & symmask)]
                    if direct[i]:
                        f = offset[i] + np.int64(a)
                    else:
                        f, tg = _bucket_and_tag(a, dn, rbits[i], offset[i])
                        ring_rt[rj, i] = tg
                    ring_r[rj, i] = f
                    _prefetch(table, f)
            Ls += 1
        t = tt - LOOKAHEAD
        if t < 0:
            continue
        g = np.int64(stats[ST_COUNT]) + t
        if t == 0 or (g & 1023) == 0:
            lr_t = lr * max(1.0, LR_BOOST / math.sqrt(1.0 + (g - (g & 1023)) / LR_SCALE))
        # ---- predict position t
        r = t & (RING - 1)
        L = ring_len[r]
        x = np.int64(codes[t])
        nin = 0
        deep = 0
        for i in range(M):
            if L < depth[i]:
                row[i] = -2
                continue
            base = ring_f[r, i]
            s = base
            if not direct[i]:
                s = -1
                tg = ring_ft[r, i]
                for k in range(BUCKET):
                    if np.int64(table[base + k] >> np.uint64(48)) == tg:
                        s = base + k
                        break
            row[i] = s
            if s < 0:
                continue
            v = table[s]
            tot = _ptotal(v)
            if tot == 0:
                continue
            for k in range(A):
                lin[nin, k] = logt[i, np.int64((v >> np.uint64(12 * k)) & _M12)]
            inp[nin] = i
            nin += 1
            deep = i + 1
        # geometric mixing, scoring, weight update (weights chosen by the deepest non-empty cell)
        nats, brier, top1, top3 = _mix_score_learn(
            _borrow(lin), _borrow(inp), nin, _borrow(weights), deep, _borrow(ps), A, x, t, lr_t, keep,
            _borrow(sur), _borrow(calib), nats, brier, top1, top3,
        )
        # ---- update the cells of the history with x
        for i in range(M):
            s = row[i]
            if s == -2:
                continue
            if s < 0:
                base = ring_f[r, i]
                s = base
                bt = 1 << 62
                for k in range(BUCKET):
                    v = table[base + k]
                    if v == 0:
                        s = base + k
                        bt = -1
                        break
                    tv = _ptotal(v)
                    if tv < bt:
                        bt = tv
                        s = base + k
                if bt > 0:
                    evict += 1.0
                insert += 1.0
                table[s] = np.uint64(ring_ft[r, i]) << np.uint64(48)
            table[s] = _pbump(table[s], x, limit[i])
        # ---- reverse-complement update: the word just completed, read on the other strand
        if use_ir:
            for i in range(M):
                if not ir_on[i] or L < depth[i]:
                    continue
                base = ring_r[r, i]
                s = base
                if not direct[i]:
                    tg = ring_rt[r, i]
                    s = -1
                    for k in range(BUCKET):
                        if np.int64(table[base + k] >> np.uint64(48)) == tg:
                            s = base + k
                            break
                    if s < 0:
                        s = base
                        bt = 1 << 62
                        for k in range(BUCKET):
                            v = table[base + k]
                            if v == 0:
                                s = base + k
                                bt = -1
                                break
                            tv = _ptotal(v)
                            if tv < bt:
                                bt = tv
                                s = base + k
                        if bt > 0:
                            evict += 1.0
                        insert += 1.0
                        table[s] = np.uint64(tg) << np.uint64(48)
                table[s] = _pbump(table[s], ring_y[r, i], limit[i])
    hist[0] = H
    hist[1] = R
    seg[0] = Ls
    stats[ST_NATS] += nats
    stats[ST_COUNT] += n
    stats[ST_TOP1] += top1
    stats[ST_TOP3] += top3
    stats[ST_EVICT] += evict
    stats[ST_INSERT] += insert
    stats[ST_BRIER] += brier
    return nats


# ------------------------------------------------------------- dense rows
@njit(cache=True)
def online_dense(codes, starts, A, b, depth, direct, rbits, offset, limit, alpha, ir_on, masks, comp, logt,
                 lr, counts, cflat, tags, totals, weights, hist, seg, stats, calib, sur):
    """Predict-then-update over one chunk with dense rows (any alphabet).

    Same as :func:`online_packed` (and the same results for ``A <= 4``), with
    the rows split into ``counts`` (uint16 ``(rows, A)``; ``cflat`` is the
    same memory flattened, passed in because a reshape here would compile
    numba's broadcasting error paths, seconds of first-run time), ``tags``
    (uint16) and ``totals`` (uint32); ``alpha`` gives ``log(c + alpha_i)``
    for counts beyond the log table.
    """
    n = codes.shape[0]
    M = depth.shape[0]
    ub = np.uint64(b)
    symmask = np.uint64((1 << b) - 1)
    use_ir = comp.shape[0] > 0
    ring_len = np.zeros(RING, np.int64)
    ring_f = np.zeros((RING, M), np.int64)
    ring_ft = np.zeros((RING, M), np.int64)
    ring_r = np.zeros((RING, M), np.int64)
    ring_rt = np.zeros((RING, M), np.int64)
    ring_y = np.zeros((RING, M), np.int64)
    row = np.zeros(M, np.int64)
    inp = np.zeros(M, np.int64)
    lin = np.zeros((M, A), np.float64)
    ps = np.zeros(A, np.float64)
    keep = sur.shape[0] == n
    H = hist[0]
    R = hist[1]
    Ls = seg[0]
    sp = 0
    nst = starts.shape[0]
    nats = 0.0
    top1 = 0.0
    top3 = 0.0
    brier = 0.0
    evict = 0.0
    insert = 0.0
    lr_t = lr
    for tt in range(n + LOOKAHEAD):
        # ---- stage position j: row addresses (and prefetch) from the known history
        j = tt
        if j < n:
            if sp < nst and starts[sp] == j:
                H = np.uint64(0)
                R = np.uint64(0)
                Ls = 0
                sp += 1
            rj = j & (RING - 1)
            ring_len[rj] = Ls
            for i in range(M):
                dn = depth[i]
                if Ls < dn:
                    continue
                a = H & masks[i]
                if direct[i]:
                    f = offset[i] + np.int64(a)
                else:
                    f, tg = _bucket_and_tag(a, dn, rbits[i], offset[i])
                    ring_ft[rj, i] = tg
                ring_f[rj, i] = f
                _prefetch(totals, f)
                _prefetch(cflat, f * A)
            xj = codes[j]
            H = (H << ub) | np.uint64(xj)
            if use_ir:
                R = (R >> ub) | (np.uint64(comp[xj]) << np.uint64(64 - b))
                for i in range(M):
                    dn = depth[i]
                    if not ir_on[i] or Ls < dn:
                        continue
                    a = R >> np.uint64(64 - b * dn)
                    ring_y[rj, i] = comp[np.int64((H >> np.uint64(b * dn)) & symmask)]
                    if direct[i]:
                        f = offset[i] + np.int64(a)
                    else:
                        f, tg = _bucket_and_tag(a, dn, rbits[i], offset[i])
                        ring_rt[rj, i] = tg
                    ring_r[rj, i] = f
                    _prefetch(totals, f)
                    _prefetch(cflat, f * A)
            Ls += 1
        t = tt - LOOKAHEAD
        if t < 0:
            continue
        g = np.int64(stats[ST_COUNT]) + t
        if t == 0 or (g & 1023) == 0:
            lr_t = lr * max(1.0, LR_BOOST / math.sqrt(1.0 + (g - (g & 1023)) / LR_SCALE))
        # ---- predict position t
        r = t & (RING - 1)
        L = ring_len[r]
        x = np.int64(codes[t])
        nin = 0
        deep = 0
        for i in range(M):
            if L < depth[i]:
                row[i] = -2
                continue
            base = ring_f[r, i]
            s = base
            if not direct[i]:
                s = -1
                tg = ring_ft[r, i]
                for k in range(BUCKET):
                    if np.int64(tags[base + k]) == tg:
                        s = base + k
                        break
            row[i] = s
            if s < 0:
                continue
            if totals[s] == 0:
                continue
            for k in range(A):
                c = np.int64(counts[s, k])
                lin[nin, k] = logt[i, c] if c < LOG_TABLE else math.log(c + alpha[i])
            inp[nin] = i
            nin += 1
            deep = i + 1
        # geometric mixing, scoring, weight update (weights chosen by the deepest non-empty cell)
        nats, brier, top1, top3 = _mix_score_learn(
            _borrow(lin), _borrow(inp), nin, _borrow(weights), deep, _borrow(ps), A, x, t, lr_t, keep,
            _borrow(sur), _borrow(calib), nats, brier, top1, top3,
        )
        # ---- update the cells of the history with x
        for i in range(M):
            s = row[i]
            if s == -2:
                continue
            if s < 0:
                base = ring_f[r, i]
                s = base
                bt = 1 << 62
                for k in range(BUCKET):
                    tv = np.int64(totals[base + k])
                    if tv == 0 and tags[base + k] == 0:
                        s = base + k
                        bt = -1
                        break
                    if tv < bt:
                        bt = tv
                        s = base + k
                if bt > 0:
                    evict += 1.0
                insert += 1.0
                tags[s] = ring_ft[r, i]
                totals[s] = 0
                for k in range(A):
                    counts[s, k] = 0
            y = x
            if np.int64(counts[s, y]) >= limit[i]:
                tv = 0
                for k in range(A):
                    h = (np.int64(counts[s, k]) + 1) >> 1
                    counts[s, k] = h
                    tv += h
                totals[s] = tv
            counts[s, y] += 1
            totals[s] += 1
        # ---- reverse-complement update: the word just completed, read on the other strand
        if use_ir:
            for i in range(M):
                if not ir_on[i] or L < depth[i]:
                    continue
                base = ring_r[r, i]
                s = base
                if not direct[i]:
                    tg = ring_rt[r, i]
                    s = -1
                    for k in range(BUCKET):
                        if np.int64(tags[base + k]) == tg:
                            s = base + k
                            break
                    if s < 0:
                        s = base
                        bt = 1 << 62
                        for k in range(BUCKET):
                            tv = np.int64(totals[base + k])
                            if tv == 0 and tags[base + k] == 0:
                                s = base + k
                                bt = -1
                                break
                            if tv < bt:
                                bt = tv
                                s = base + k
                        if bt > 0:
                            evict += 1.0
                        insert += 1.0
                        tags[s] = tg
                        totals[s] = 0
                        for k in range(A):
                            counts[s, k] = 0
                y = ring_y[r, i]
                if np.int64(counts[s, y]) >= limit[i]:
                    tv = 0
                    for k in range(A):
                        h = (np.int64(counts[s, k]) + 1) >> 1
                        counts[s, k] = h
                        tv += h
                    totals[s] = tv
                counts[s, y] += 1
                totals[s] += 1
    hist[0] = H
    hist[1] = R
    seg[0] = Ls
    stats[ST_NATS] += nats
    stats[ST_COUNT] += n
    stats[ST_TOP1] += top1
    stats[ST_TOP3] += top3
    stats[ST_EVICT] += evict
    stats[ST_INSERT] += insert
    stats[ST_BRIER] += brier
    return nats


# ------------------------------------------------------------ fitted model
@njit(cache=True)
def build_index(addr, dstart, depths, index):
    """Open-addressing index (row + 1, 0 = empty) of the fitted cells by (depth, address)."""
    mask = index.shape[0] - 1
    for di in range(depths.shape[0]):
        dn = depths[di]
        for r in range(dstart[di], dstart[di + 1]):
            h = np.int64(cell_hash(addr[r], dn) >> np.uint64(1)) & mask
            while index[h] != 0:
                h = (h + 1) & mask
            index[h] = r + 1


@njit(cache=True)
def _find_row(index, addr, lo, hi, dn, a):
    mask = index.shape[0] - 1
    h = np.int64(cell_hash(a, dn) >> np.uint64(1)) & mask
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
def fitted_score(codes, starts, A, b, depths, masks, dstart, addr, counts, index, beta, discount,
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
def fitted_proba(ctx_codes, ctx_offsets, A, b, depths, masks, dstart, addr, counts, index, beta, discount, out, deepest):
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
def group_cells(words, wcounts, b, A):
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
def merge_cells(a_addr, a_counts, b_addr, b_counts):
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
def revcomp_addresses(words, n, b):
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
def hash_cells(addr, depth):
    """:func:`cell_hash` of every address at one depth (a deterministic, unbiased order for pruning ties)."""
    out = np.empty(addr.shape[0], np.uint64)
    for i in range(addr.shape[0]):
        out[i] = cell_hash(addr[i], depth)
    return out

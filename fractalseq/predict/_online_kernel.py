"""The online (predict-then-update) kernel of the predictor, one loop for both row layouts.

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
  12-bit counts at bits 0, 12, 24, 36 and the tag at bits 48..63; the row
  store is the tuple ``(table,)``;
* dense (any alphabet): ``uint16`` counts ``(rows, A)``, a ``uint16`` tag and
  a ``uint32`` total per row; the row store is ``(counts, flat counts, tags, totals)``.

Before an increment that would take a count past the depth's limit, every
count of the cell is halved (rounding up).

The loop is written once (:func:`_online_chunk`); the few operations that
touch a row (:func:`_row_tag`, :func:`_row_total`, :func:`_row_log`,
:func:`_row_empty`, :func:`_row_reset`, :func:`_row_bump`, :func:`_row_prefetch`) are chosen by
the type of the row store when the kernel is compiled (``numba.extending.overload``),
so each layout gets its own machine code with no branch on the layout.  The
bucket claim is written out in both update loops (forward and reverse
complement): folding the two loops into one cost 10% more instructions a
symbol (cachegrind, 1 Mbase of *K. pneumoniae*).
Mixing and scoring are described in :mod:`fractalseq.predict._kernel_tools`.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, types
from numba.extending import overload

from fractalseq.errors import ParameterError
from fractalseq.predict._kernel_tools import (
    BUCKET,
    CALIB_BINS,
    LOG_TABLE,
    LOOKAHEAD,
    LR_BOOST,
    LR_SCALE,
    RING,
    ST_BRIER,
    ST_COUNT,
    ST_EVICT,
    ST_INSERT,
    ST_NATS,
    ST_SIZE,
    ST_TOP1,
    ST_TOP3,
    _borrow,
    _bucket_and_tag,
    _mix_score_learn,
    _prefetch,
)

#: Largest count a packed row holds.
PACKED_LIMIT = 4095
#: Largest count a dense row holds.
DENSE_LIMIT = 65535

_M12 = np.uint64(0xFFF)
_TAGMASK = np.uint64(0xFFFF) << np.uint64(48)


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


# ------------------------------------------------- row operations by layout
def _packed(rows) -> bool:
    return isinstance(rows, types.BaseTuple) and len(rows) == 1


def _row_prefetch(rows, f, A):
    """Hint the processor to fetch row ``f``."""


def _row_tag(rows, r):
    """The 16-bit check tag of row ``r`` (0: never used)."""


def _row_total(rows, r):
    """Sum of the counts of row ``r``."""


def _row_empty(rows, r):
    """Whether row ``r`` has never held a cell (no tag, no counts)."""


def _row_log(rows, s, k, i, logt, alpha):
    """``log(c_k + alpha_i)`` of count ``k`` of row ``s`` (depth index ``i``)."""


def _row_reset(rows, s, tag, A):
    """Give row ``s`` to the cell with check tag ``tag``: set the tag, clear the counts."""


def _row_bump(rows, s, y, limit, A):
    """Add one to symbol ``y`` of row ``s``, halving every count first if ``y`` is at ``limit``."""


@overload(_row_prefetch)
def _ov_prefetch(rows, f, A):
    if _packed(rows):
        def impl(rows, f, A):
            _prefetch(rows[0], f)
    else:
        def impl(rows, f, A):
            _prefetch(rows[3], f)
            _prefetch(rows[1], f * A)
    return impl


@overload(_row_tag)
def _ov_tag(rows, r):
    if _packed(rows):
        return lambda rows, r: np.int64(rows[0][r] >> np.uint64(48))
    return lambda rows, r: np.int64(rows[2][r])


@overload(_row_total)
def _ov_total(rows, r):
    if _packed(rows):
        return lambda rows, r: _ptotal(rows[0][r])
    return lambda rows, r: np.int64(rows[3][r])


@overload(_row_empty)
def _ov_empty(rows, r):
    if _packed(rows):
        return lambda rows, r: rows[0][r] == 0
    return lambda rows, r: (np.int64(rows[3][r]) | np.int64(rows[2][r])) == 0


@overload(_row_log)
def _ov_log(rows, s, k, i, logt, alpha):
    # one expression each: small enough for LLVM to inline (a call would pass every array of the row store)
    if _packed(rows):
        return lambda rows, s, k, i, logt, alpha: logt[i, np.int64((rows[0][s] >> np.uint64(12 * k)) & _M12)]
    return lambda rows, s, k, i, logt, alpha: (
        logt[i, np.int64(rows[0][s, k])] if rows[0][s, k] < LOG_TABLE else math.log(np.int64(rows[0][s, k]) + alpha[i])
    )


@overload(_row_reset)
def _ov_reset(rows, s, tag, A):
    if _packed(rows):
        def impl(rows, s, tag, A):
            rows[0][s] = np.uint64(tag) << np.uint64(48)
    else:
        def impl(rows, s, tag, A):
            rows[2][s] = tag
            rows[3][s] = 0
            for k in range(A):
                rows[0][s, k] = 0
    return impl


@overload(_row_bump)
def _ov_bump(rows, s, y, limit, A):
    if _packed(rows):
        def impl(rows, s, y, limit, A):
            table = rows[0]
            table[s] = _pbump(table[s], y, limit)
    else:
        def impl(rows, s, y, limit, A):
            counts, totals = rows[0], rows[3]
            if np.int64(counts[s, y]) >= limit:
                tv = 0
                for k in range(A):
                    h = (np.int64(counts[s, k]) + 1) >> 1
                    counts[s, k] = h
                    tv += h
                totals[s] = tv
            counts[s, y] += 1
            totals[s] += 1
    return impl


@njit(cache=True)
def _find(rows, base, tg):
    """Row of the bucket at ``base`` whose tag is ``tg``, or -1."""
    for k in range(BUCKET):
        if _row_tag(rows, base + k) == tg:
            return base + k
    return -1


# ------------------------------------------------------------------ kernel
@njit(cache=True)
def _online_chunk(codes, starts, A, b, depth, direct, rbits, offset, limit, alpha, ir_on, masks, comp, logt,
                  lr, rows, weights, hist, seg, stats, calib, sur):
    """Predict-then-update over one chunk; see :func:`online_chunk` for the arguments. Returns the chunk's nats."""
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
                _row_prefetch(rows, f, A)
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
                    _row_prefetch(rows, f, A)
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
            s = ring_f[r, i]
            if not direct[i]:
                s = _find(rows, s, ring_ft[r, i])
            row[i] = s
            if s < 0 or _row_total(rows, s) == 0:
                continue
            for k in range(A):
                lin[nin, k] = _row_log(rows, s, k, i, logt, alpha)
            inp[nin] = i
            nin += 1
            deep = i + 1
        # geometric mixing, scoring, weight update (weights chosen by the deepest non-empty cell)
        nats, brier, top1, top3 = _mix_score_learn(
            _borrow(lin), _borrow(inp), nin, _borrow(weights), deep, _borrow(ps), A, x, t, lr_t, keep,
            _borrow(sur), _borrow(calib), nats, brier, top1, top3,
        )
        # ---- update the cells of the history with x; a cell not found takes the first empty row of its
        # bucket, else the bucket's rarest row (an eviction)
        for i in range(M):
            s = row[i]
            if s == -2:
                continue
            if s < 0:
                base = ring_f[r, i]
                s = base
                bt = 1 << 62
                for k in range(BUCKET):
                    if _row_empty(rows, base + k):
                        s = base + k
                        bt = -1
                        break
                    tv = _row_total(rows, base + k)
                    if tv < bt:
                        bt = tv
                        s = base + k
                if bt > 0:
                    evict += 1.0
                insert += 1.0
                _row_reset(rows, s, ring_ft[r, i], A)
            _row_bump(rows, s, x, limit[i], A)
        # ---- reverse-complement update: the word just completed, read on the other strand
        if use_ir:
            for i in range(M):
                if not ir_on[i] or L < depth[i]:
                    continue
                base = ring_r[r, i]
                s = base
                if not direct[i]:
                    tg = ring_rt[r, i]
                    s = _find(rows, base, tg)
                    if s < 0:
                        s = base
                        bt = 1 << 62
                        for k in range(BUCKET):
                            if _row_empty(rows, base + k):
                                s = base + k
                                bt = -1
                                break
                            tv = _row_total(rows, base + k)
                            if tv < bt:
                                bt = tv
                                s = base + k
                        if bt > 0:
                            evict += 1.0
                        insert += 1.0
                        _row_reset(rows, s, tg, A)
                _row_bump(rows, s, ring_y[r, i], limit[i], A)
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


# ------------------------------------------------------------------ wrapper
def _need(ok: bool, what: str, parameter: str) -> None:
    if not ok:
        raise ParameterError(f"online_chunk needs {what}.", parameter=parameter)


def online_chunk(codes, starts, A, b, depth, direct, rbits, offset, limit, alpha, ir_on, masks, comp, logt,
                 lr, rows, weights, hist, seg, stats, calib, sur) -> float:
    """Predict-then-update over one chunk, after checking every argument's type and shape.

    Parameters
    ----------
    codes : uint8/uint32 array, the chunk (codes in ``0..A-1``)
    starts : int64 array, sorted positions in the chunk where a segment begins
    A, b : alphabet size and bits per symbol
    depth, direct, rbits, offset, limit, alpha, ir_on, masks :
        per cell depth (M of them): depth in symbols; direct region or hashed; log2 of the
        region's rows; first row; count limit; additive constant; reverse-complement updates;
        address mask ``2**(b n) - 1``
    comp : int64 array mapping a code to its complement (empty: no reverse-complement updates)
    logt : float64 (M, LOG_TABLE) table of ``log(c + alpha_i)``
    lr : learning rate of the mixing weights (boosted early on, see LR_BOOST)
    rows : the row store, ``(table,)`` (packed, ``A <= 4``) or ``(counts, flat counts, tags, totals)`` (dense); updated in place
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
    M = int(np.asarray(depth).shape[0])
    _need(codes.ndim == 1 and codes.dtype in (np.uint8, np.uint32), "codes as a 1-d uint8 or uint32 array", "codes")
    _need(codes.size == 0 or int(codes.max()) < A, f"codes below the alphabet size {A}", "codes")
    _need(starts.dtype == np.int64 and starts.ndim == 1, "starts as a 1-d int64 array", "starts")
    _need(2 <= A <= (1 << b) and 1 <= b <= 16, "an alphabet size A with 2 <= A <= 2**b", "A")
    per = dict(depth=(depth, np.int64), direct=(direct, np.bool_), rbits=(rbits, np.int64), offset=(offset, np.int64),
               limit=(limit, np.int64), alpha=(alpha, np.float64), ir_on=(ir_on, np.bool_), masks=(masks, np.uint64))
    for name, (arr, dt) in per.items():
        _need(arr.dtype == dt and arr.shape == (M,), f"{name} as {np.dtype(dt).name}[{M}], one value per depth", name)
    _need(comp.dtype == np.int64 and comp.shape in ((0,), (A,)), "comp as int64 of length 0 or A", "comp")
    _need(logt.dtype == np.float64 and logt.shape == (M, LOG_TABLE), f"logt as float64 ({M}, {LOG_TABLE})", "logt")
    _need(isinstance(rows, tuple) and len(rows) in (1, 4), "rows as (table,) or (counts, flat counts, tags, totals)", "rows")
    if len(rows) == 1:
        _need(A <= 4 and rows[0].dtype == np.uint64 and rows[0].ndim == 1, "a packed uint64 table for A <= 4", "rows")
        n_rows = rows[0].shape[0]
        _need(bool(np.all(limit <= PACKED_LIMIT)), f"count limits of packed rows of at most {PACKED_LIMIT}", "limit")
    else:
        counts, flat, tags, totals = rows
        n_rows = counts.shape[0]
        _need(counts.dtype == np.uint16 and counts.shape == (n_rows, A) and counts.flags.c_contiguous, "counts as uint16 (rows, A)", "rows")
        _need(flat.dtype == np.uint16 and flat.size == counts.size and flat.ctypes.data == counts.ctypes.data,
              "flat counts over the counts' memory", "rows")
        _need(tags.dtype == np.uint16 and totals.dtype == np.uint32 and tags.shape == totals.shape == (n_rows,), "tags uint16 and totals uint32, one per row", "rows")
        _need(bool(np.all(limit <= DENSE_LIMIT)), f"count limits of dense rows of at most {DENSE_LIMIT}", "limit")
    _need(bool(np.all(offset + (1 << rbits) <= n_rows)), "regions (offset, 2**rbits rows) inside the table", "offset")
    _need(weights.dtype == np.float64 and weights.shape == (M + 1, M), f"weights as float64 ({M + 1}, {M})", "weights")
    _need(hist.dtype == np.uint64 and hist.shape == (2,) and seg.dtype == np.int64 and seg.shape == (1,), "hist uint64[2] and seg int64[1]", "hist")
    _need(stats.dtype == np.float64 and stats.shape == (ST_SIZE,), f"stats as float64[{ST_SIZE}]", "stats")
    _need(calib.dtype == np.float64 and calib.shape == (CALIB_BINS, 3), f"calib as float64 ({CALIB_BINS}, 3)", "calib")
    _need(sur.dtype == np.float32 and sur.shape in ((0,), (codes.size,)), "sur as float32 of length 0 or the chunk's", "sur")
    return _online_chunk(codes, starts, A, b, depth, direct, rbits, offset, limit, alpha, ir_on, masks, comp, logt,
                         lr, rows, weights, hist, seg, stats, calib, sur)

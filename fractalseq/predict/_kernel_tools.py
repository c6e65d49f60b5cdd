"""Shared pieces of the predictor's numba kernels: constants, intrinsics, the cell hash, scoring and mixing.

The online kernel (:mod:`fractalseq.predict._online_kernel`) and the fitted
kernels (:mod:`fractalseq.predict._fitted_kernels`) build on these.

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
The regions, row layouts (packed and dense) and hashing of the online tables are
described once, in :mod:`fractalseq.predict._online_kernel`.

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

Nothing here validates its input; the public wrappers of the kernel modules do.
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
def _cell_hash(address, depth):
    """64-bit mix of (address, depth)."""
    z = (address ^ (np.uint64(depth) * _K2)) * _K1
    z ^= z >> np.uint64(29)
    z *= _K3
    z ^= z >> np.uint64(32)
    return z


@njit(cache=True, inline="always")
def _bucket_and_tag(address, depth, rbits, offset):
    """First row of the bucket (top hash bits) and the non-zero 16-bit tag (bits 20..35)."""
    z = _cell_hash(address, depth)
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

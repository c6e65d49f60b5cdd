"""Per-level statistics of count tables: Rényi block entropies, Chhabra–Jensen sums, and their replicates.

A *level* is a depth n (word route) or a box side (box counting).  Each level
of a count table gives the vector of :func:`level_vector` (``H_q`` per q,
the f(alpha) sums, occupied boxes, Chao's unseen estimate, smallest count);
:func:`replicate_vectors` gives the same for every bootstrap replicate.
:class:`LevelData` holds everything the scaling fits of both routes need.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from fractalseq.dimensions._parameters import MIN_LEVELS, STARVE, UNSEEN_MAX
from fractalseq.resampling._block_tables import replicate_table
from fractalseq.resampling._plan import ResamplePlan


@njit(cache=True)
def level_vector(values, mult, qs, corrected, out):
    """Per-level statistics of a count table, written to ``out`` (length ``3 Q + 3``).

    ``out[:Q]`` block entropies ``H_q`` (nats; see the module notes for the
    estimator of each q), ``out[Q:2Q]`` the Chhabra–Jensen sums
    ``A_q = sum mu ln p``, ``out[2Q:3Q]`` ``F_q = sum mu ln mu`` (plug-in p),
    ``out[3Q]`` the number of occupied boxes, ``out[3Q+1]`` Chao's (1984)
    estimate of unseen boxes ``f1**2 / (2 f2)`` (``f1 (f1 - 1) / 2`` when ``f2 = 0``) and
    ``out[3Q+2]`` the smallest non-zero count.
    ``values`` are counts (zeros ignored), ``mult`` how many boxes have each.
    Sums are scaled by the largest (q >= 0) or smallest (q < 0) count, so
    any q is safe from overflow.
    """
    nq = qs.shape[0]
    total = 0.0
    distinct = 0.0
    f1 = 0.0
    f2 = 0.0
    clc = 0.0
    cmin = 1.0e300
    cmax = 0.0
    for i in range(values.shape[0]):
        c = float(values[i])
        m = float(mult[i])
        if c <= 0.0 or m <= 0.0:
            continue
        total += c * m
        distinct += m
        if c == 1.0:
            f1 += m
        elif c == 2.0:
            f2 += m
        clc += m * c * math.log(c)
        if c < cmin:
            cmin = c
        if c > cmax:
            cmax = c
    for j in range(3 * nq):
        out[j] = np.nan
    out[3 * nq] = distinct
    if distinct == 0.0:
        out[3 * nq + 1] = np.nan
    elif f2 > 0.0:
        out[3 * nq + 1] = f1 * f1 / (2.0 * f2)
    else:
        out[3 * nq + 1] = f1 * (f1 - 1.0) / 2.0
    out[3 * nq + 2] = cmin if distinct > 0 else 0.0
    if distinct == 0.0:
        return
    lnN = math.log(total)
    lmin = math.log(cmin)
    lmax = math.log(cmax)
    # logs (and log-factorials) of the counts, once for every q
    nv = values.shape[0]
    logc = np.zeros(nv)
    lgc = np.zeros(nv)
    need_lg = False
    if corrected:
        for j in range(nq):
            if qs[j] > 1.0:
                need_lg = True
    for i in range(nv):
        c = float(values[i])
        if c > 0.0:
            logc[i] = math.log(c)
            if need_lg:
                lgc[i] = math.lgamma(c + 1.0)
    for j in range(nq):
        q = qs[j]
        ref = lmax if q >= 0.0 else lmin
        s = 0.0
        sl = 0.0
        ff = 0.0
        for i in range(nv):
            c = float(values[i])
            m = float(mult[i])
            if c <= 0.0 or m <= 0.0:
                continue
            lc = logc[i]
            t = m * math.exp(q * (lc - ref))
            s += t
            sl += t * lc
            if corrected and q > 1.0:
                x = c + 1.0 - q
                if x > 0.0:
                    ff += m * math.exp(lgc[i] - math.lgamma(x) - q * ref)
                elif x != math.floor(x):
                    ff += m * math.gamma(c + 1.0) / math.gamma(x) * math.exp(-q * ref)
        ln_s = math.log(s) + q * ref
        mean_lnc = sl / s
        if q == 0.0:
            out[j] = math.log(distinct)
        elif q == 1.0:
            h = lnN - clc / total
            if corrected:
                h += (distinct - 1.0) / (2.0 * total)
            out[j] = h
        elif corrected and q > 1.0:
            if ff > 0.0 and total + 1.0 - q > 0.0:
                ln_z = math.log(ff) + q * ref - (math.lgamma(total + 1.0) - math.lgamma(total + 1.0 - q))
                out[j] = ln_z / (1.0 - q)
        else:
            out[j] = (ln_s - q * lnN) / (1.0 - q)
        out[nq + j] = mean_lnc - lnN
        out[2 * nq + j] = q * mean_lnc - ln_s


@dataclass(frozen=True)
class LevelStats:
    """Per-level quantities of one count table (nats).

    ``H[j]`` block (Rényi) entropy for ``qs[j]``, ``A[j] = sum mu ln p``,
    ``F[j] = sum mu ln mu`` (Chhabra–Jensen), the number of occupied boxes
    and Chao's (1984) estimate of unseen boxes.
    """

    H: np.ndarray
    A: np.ndarray
    F: np.ndarray
    total: float
    distinct: float
    unseen: float
    min_count: float

    def vector(self) -> np.ndarray:
        return np.concatenate([self.H, self.A, self.F, [self.distinct, self.unseen, self.min_count]])


def level_stats(values: np.ndarray, mult: np.ndarray | None, qs: np.ndarray, corrected: bool = True) -> LevelStats:
    """Entropies and Chhabra–Jensen sums of a count table (see :func:`level_vector`).

    Parameters
    ----------
    values, mult:
        Counts and how many boxes have each count (``mult=None``: one box per entry).
    qs:
        Orders q.
    corrected:
        Miller-corrected Shannon entropy and falling-factorial sums for ``q > 1``
        (otherwise plain plug-in for every q).
    """
    v = np.ascontiguousarray(values, dtype=np.float64)
    m = np.ones(v.size) if mult is None else np.ascontiguousarray(mult, dtype=np.float64)
    qv = np.ascontiguousarray(qs, dtype=np.float64)
    Q = qv.size
    out = np.empty(3 * Q + 3)
    level_vector(v, m, qv, bool(corrected), out)
    return LevelStats(
        out[:Q], out[Q : 2 * Q], out[2 * Q : 3 * Q], float((v * m).sum()), float(out[3 * Q]), float(out[3 * Q + 1]),
        float(out[3 * Q + 2]),
    )


@njit(cache=True)
def _table_vectors_positions(labels, span, m, starts, lens, offsets, qs, corrected, out):
    """Statistic vectors of every replicate, blocks given as positions (any scheme)."""
    buf = np.zeros(m, dtype=np.int64)
    ones = np.ones(m)
    R = offsets.shape[0] - 1
    for r in range(R):
        a = offsets[r]
        b = offsets[r + 1]
        replicate_table(labels, span, starts[a:b], lens[a:b], buf)
        level_vector(buf, ones, qs, corrected, out[r])


@njit(cache=True)
def _spectra_vectors(dense, big, qs, corrected, out):
    """Level vectors of every replicate from its count spectrum (dense small counts plus big ones)."""
    R = dense.shape[0]
    cap = dense.shape[1]
    nbig = big.shape[0]
    vals = np.empty(cap + nbig)
    mult = np.empty(cap + nbig)
    for r in range(R):
        k = 0
        for v in range(1, cap):
            if dense[r, v] > 0:
                vals[k] = v
                mult[k] = dense[r, v]
                k += 1
        for i in range(nbig):
            if big[i, r] > 0:
                vals[k] = big[i, r]
                mult[k] = 1.0
                k += 1
        level_vector(vals[:k], mult[:k], qs, corrected, out[r])


def replicate_vectors(
    labels: np.ndarray, span: int, m: int, plan: ResamplePlan, qs: np.ndarray, corrected: bool
) -> np.ndarray:
    """``(n_boot, 3Q + 3)`` level vectors of every replicate of one level (see :func:`level_vector`).

    Non-overlapping blocks: the replicates' count spectra are built at once
    from item-major block tables (:mod:`fractalseq.resampling._replicates`); other
    schemes sum the positions of each replicate's blocks.
    """
    from fractalseq.resampling import _replicates as rp

    qv = np.ascontiguousarray(qs, dtype=np.float64)
    out = np.empty((plan.n_boot, 3 * qv.size + 3))
    if plan.n_boot == 0:
        return out
    if plan.scheme == "nonoverlapping":
        tables = rp.item_tables(labels, span, plan.block_length, max(m, 1))
        spec = rp.replicate_spectra(tables, plan.block_weights())
        _spectra_vectors(spec.dense, spec.big, qv, bool(corrected), out)
    else:
        _table_vectors_positions(labels, span, max(m, 1), plan.starts, plan.lens, plan.offsets, qv, bool(corrected), out)
    return out


def spectra_vectors(spec, n_boot: int, qs: np.ndarray, corrected: bool) -> np.ndarray:
    """``(n_boot, 3Q + 3)`` level vectors of every replicate from their count spectra
    (:class:`~fractalseq.resampling._replicates.ReplicateSpectra`, e.g. streamed); see :func:`replicate_vectors`."""
    qv = np.ascontiguousarray(qs, dtype=np.float64)
    out = np.empty((n_boot, 3 * qv.size + 3))
    if n_boot:
        _spectra_vectors(spec.dense, spec.big, qv, bool(corrected), out)
    return out


@dataclass
class LevelData:
    """Everything the fits need: per-level statistics of the data and of every replicate."""

    x: np.ndarray  # abscissa per level: ln(1/eps)
    eps: np.ndarray
    est: np.ndarray  # (L, 3Q + 3) level vectors
    reps: np.ndarray | None  # (R, L, 3Q + 3)
    distinct: np.ndarray
    occurrences: np.ndarray
    unseen: np.ndarray
    data_limit: int  # index of the deepest level allowed (-1: none)
    complete_limit: int
    var: np.ndarray  # (L, Q) count-based variances of H_q per level (fit weights)
    dvar: np.ndarray  # (L - 1, Q) count-based variances of the differences H_q(i+1) - H_q(i)
    cov: np.ndarray | None = None  # (Q, L, L) batch-means covariance of the levels (needs the stream)
    starve: float = STARVE  # the data limit's rule: distinct words <= occurrences / starve
    limits_of: "LevelData | None" = None  # the levels the limits were found on, when more than these (a probe)

    def cov_of(self, j: int) -> np.ndarray | None:
        """The ``(L, L)`` covariance of ``H_q`` for the j-th q, or ``None``."""
        return None if self.cov is None else self.cov[j]


def negative_q_min_count(q: float, rel_bias: float = 0.01) -> float:
    """Occurrences the rarest box needs for ``q < 0``.

    For a Poisson count with mean ``lam``, ``E[c**q] / lam**q ~ 1 + q (q - 1) / (2 lam)``
    (second-order delta method), so ``lam >= q (q - 1) / (2 rel_bias)`` keeps the
    bias of the rarest box's term below ``rel_bias``.
    """
    return float(q * (q - 1.0) / (2.0 * rel_bias))


def _levels(k: int) -> str:
    return "no level" if k <= 0 else ("1 level" if k == 1 else f"{k} levels")


def range_shortfall(data: LevelData, j: int, q: float, top: int, need: float | None = None) -> str:
    """Why no scaling range was found for the ``j``-th q: the rule that left fewer than :data:`MIN_LEVELS` levels.

    Parameters
    ----------
    data:
        The levels of the fit.
    j, q:
        Index and value of the order.
    top:
        Index of the deepest level the fit could use (-1: none).
    need:
        For ``q < 0``, the occurrences the rarest box needs when that rule set ``top``, else ``None``.

    Returns
    -------
    str
        One flag, ``"too little data: ..."``, naming the rule and, when the levels are at hand, the first level
        it refused (a run of 3 levels that is not straight is not this case: the fit then uses the deepest 3
        levels and says so).
    """
    src = data.limits_of if data.limits_of is not None else data
    usable = top + 1
    if usable >= MIN_LEVELS:  # levels enough, but the statistic is not finite on some of them
        bad = np.flatnonzero(~np.isfinite(data.est[: usable, j]))
        at = f" from level {int(bad[0]) + 1} on" if bad.size else ""
        return f"too little data: the level statistic is not finite{at}, which leaves fewer than {MIN_LEVELS} levels"
    if need is not None:
        return (f"too little data: {_levels(usable)} whose rarest box has >= {need:.0f} occurrences; "
                f"a fit needs {MIN_LEVELS}")
    if q <= 0 and data.complete_limit < data.data_limit:
        i = data.complete_limit + 1
        detail = f" (level {i + 1}: {float(src.unseen[i]):.3g} unseen boxes estimated)" if i < src.unseen.size else ""
        return (f"too little data: {_levels(usable)} where every box is hit (estimated unseen boxes < {UNSEEN_MAX:g}); "
                f"a fit needs {MIN_LEVELS}{detail}")
    i = data.data_limit + 1
    detail = ""
    if i < src.distinct.size:
        detail = (f" (level {i + 1}: {int(round(float(src.distinct[i]))):,} occupied boxes in "
                  f"{int(round(float(src.occurrences[i]))):,} occurrences)")
    return (f"too little data: {_levels(usable)} with at most one occupied box (distinct word) per {data.starve:g} occurrences; "
            f"a fit needs {MIN_LEVELS}{detail}")


def limits_from(distinct: np.ndarray, occurrences: np.ndarray, unseen: np.ndarray, starve: float) -> tuple[int, int]:
    """Index of the deepest level not starved of data, and of the deepest complete level (-1: none)."""
    ok = distinct <= occurrences / starve
    ok &= occurrences > 0
    data_limit = -1
    for i in range(ok.size):
        if not ok[i]:
            break
        data_limit = i
    complete = -1
    for i in range(data_limit + 1):
        if not unseen[i] < UNSEEN_MAX:
            break
        complete = i
    return data_limit, complete

"""Generalised (Rényi) dimensions D_q and the f(alpha) spectrum, with intervals.

Word-count route
----------------
For non-overlapping maps (hypercube corners, ratio ``k <= 1/2``) the
occupied boxes of side ``k**n`` are the distinct n-words and box masses are
n-word frequencies, so the Rényi block entropy

    H_q(n) = ln( sum_w p_w**q ) / (1 - q)      (H_1 = -sum p ln p, H_0 = ln #words)

grows like ``D_q * n * ln(1/k)``.  ``D_q`` is the weighted least-squares
slope of ``H_q(n)`` against ``n ln(1/k)`` over a scaling range of depths,
i.e. a weighted average of the differences ``(H_q(n+1) - H_q(n)) / ln(1/k)``
(differences, not ratios ``H_q(n) / (n ln(1/k))``, which carry an O(1/n)
bias for correlated sources).  Estimators of the partition sum:

* ``q = 0``: the number of distinct words (exact box counts);
* ``q = 1``: Shannon entropy with the Miller (1955) correction ``(m - 1) / 2N``;
* ``q > 1``: the falling-factorial sum ``sum c!/(c-q)! / (N!/(N-q)!)``,
  unbiased for integer ``q`` under multinomial sampling (for ``q = 2`` the
  collision estimator ``sum c (c-1) / (N (N-1))``);
* other ``q``: plug-in ``sum (c/N)**q``.  Negative ``q`` is dominated by the
  rarest boxes and is flagged as unreliable.

Scaling range
-------------
Automatic unless given: the deepest depth used must keep the number of
distinct words below ``N / STARVE`` (data starvation; for plug-in
estimators this is the rule ``A**(n+1) <= N/100``), and for ``q <= 0``
every box must be hit (no sign of unseen words by Chao's 1984 estimate
``f1**2 / (2 f2) < 0.1`` from the words seen once and twice); for ``q < 0``
the rarest box must also be seen at least ``q (q - 1) / 0.02`` times (its
term of the partition sum is then biased by less than 1%).  Among depths 1..that limit the
longest run whose differences all agree with the run's slope within
``Z_LINEAR`` standard errors (plus a resolution of 0.001 in dimension
units) is taken; ties go to the deepest run.  The standard errors of the
differences are count-based (delta method on the nested words,
:mod:`fractalseq.dimensions._level_variance`), never bootstrap replicates.

Intervals
---------
By the block bootstrap of :mod:`fractalseq.resampling._bootstrap` (word counts of
blocks re-weighted, never recounted); ``centered`` intervals by default
(the estimate plus the replicates' spread around their median), chosen by
the calibration benchmark.  The fit weights are the inverse count-based
(multinomial delta-method) variances of ``H_q(n)``, so the point estimate
and its scaling range do not depend on the number of replicates or the
seed; each replicate is refitted with the same weights over the same range,
so its slope is the same linear function of its block entropies.  The
reported ``stderr`` is the bootstrap standard deviation of the slope;
``fit_stderr`` is the textbook WLS standard error from the residuals, which
ignores that the ``H_q(n)`` are nested and correlated (shown for reference
only).  For ``q <= 0`` the counts are exact and the error is the finite
depth, so the interval is widened to contain the per-depth differences of
the deeper half of the range (the finite-depth bracket).

f(alpha)
--------
Direct method of Chhabra & Jensen (1989, Phys. Rev. Lett. 62:1327):
``mu_w(q) = p_w**q / sum p**q``; ``alpha(q)`` and ``f(q)`` are the slopes of
``sum mu ln p`` and ``sum mu ln mu`` against ``ln eps = -n ln(1/k)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np
from numba import njit

from fractalseq.resampling import _bootstrap as bs
from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.dimensions._level_variance import word_level_variances
from fractalseq.words._counts import WordCounts, count_words

#: Deepest depth keeps distinct words <= occurrences / STARVE.
STARVE = 100
#: Linearity test: differences within Z_LINEAR count-based standard errors of the run's slope.
Z_LINEAR = 3.0
#: Differences smaller than this (dimension units) are not counted as curvature.
RESOLUTION = 1e-3
#: Automatic deepening of the word counts stops when addresses would exceed this many bits.
AUTO_ADDRESS_BITS = 32
#: A fit needs at least this many levels (depths or scales).
MIN_LEVELS = 3
#: Chao (1984) estimate of unseen boxes must stay below this for q <= 0.
UNSEEN_MAX = 0.1
#: Points dropped at the start of each segment before geometric box counting (REFERENCE-CHECKS rule 1).
TRANSIENT = 60

NEGATIVE_Q = "negative q: dominated by the rarest boxes, unreliable on finite data"
OVERLAP = "overlapping maps (ratio k too large for the corners): word counts are not box counts"


# ------------------------------------------------------------ per-level sums
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
        bs.replicate_table(labels, span, starts[a:b], lens[a:b], buf)
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
    labels: np.ndarray, span: int, m: int, plan: bs.ResamplePlan, qs: np.ndarray, corrected: bool
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


# ------------------------------------------------------------------- fits
def wls_coefficients(x: np.ndarray, var: np.ndarray, floor: float) -> np.ndarray:
    """Coefficients ``c`` with ``slope = c @ y`` for the weighted least-squares line (weights ``1/max(var, floor)``)."""
    w = 1.0 / np.maximum(np.where(np.isfinite(var), var, np.inf), floor)
    if not np.all(np.isfinite(w)) or w.sum() <= 0:
        w = np.ones_like(x)
    xb = np.sum(w * x) / np.sum(w)
    sxx = np.sum(w * (x - xb) ** 2)
    return w * (x - xb) / sxx


def wls_fit(x: np.ndarray, y: np.ndarray, var: np.ndarray, floor: float) -> tuple[float, float, float]:
    """Weighted least-squares line: ``(slope, intercept, slope standard error from the residuals)``."""
    w = 1.0 / np.maximum(np.where(np.isfinite(var), var, np.inf), floor)
    if not np.all(np.isfinite(w)) or w.sum() <= 0:
        w = np.ones_like(x)
    W = w.sum()
    xb = np.sum(w * x) / W
    yb = np.sum(w * y) / W
    sxx = np.sum(w * (x - xb) ** 2)
    slope = float(np.sum(w * (x - xb) * (y - yb)) / sxx)
    icpt = float(yb - slope * xb)
    if x.size > 2:
        res = y - icpt - slope * x
        s2 = float(np.sum(w * res**2) / (x.size - 2))
        se = math.sqrt(s2 / sxx) if s2 >= 0 else float("nan")
    else:
        se = float("nan")
    return slope, icpt, se


@dataclass(frozen=True)
class RangeChoice:
    lo: int  # index into the levels, inclusive
    hi: int  # inclusive
    how: str
    flags: tuple[str, ...] = ()


def choose_range(
    x: np.ndarray,
    est: np.ndarray,
    var: np.ndarray,
    dvar: np.ndarray,
    top: int,
    resolution: float = RESOLUTION,
    z: float = Z_LINEAR,
) -> RangeChoice | None:
    """Longest run of levels ``0..top`` (indices, inclusive) that is linear; ties to the deepest.

    ``est`` is the level statistic (e.g. ``H_q``) per level, ``var`` its
    count-based variance per level (the fit weights) and ``dvar`` the
    count-based variance of each difference ``est[i+1] - est[i]``
    (:mod:`fractalseq.dimensions._level_variance`).  A run is linear when every
    difference (per unit of ``x``) lies within ``z`` standard errors plus
    ``resolution`` of the run's WLS slope.  No bootstrap replicate enters, so
    the choice does not depend on the number of replicates or the seed.
    """
    L = int(top) + 1
    if L < MIN_LEVELS:
        return None
    y = est[:L]
    bad = ~np.isfinite(y)
    if bad.any():
        L = int(np.argmax(bad))
        if L < MIN_LEVELS:
            return None
        y = y[:L]
    xs = x[:L]
    dx = np.diff(xs)
    d_est = np.diff(y) / dx
    v = np.where(np.isfinite(var[:L]), var[:L], 0.0)
    d_se = np.sqrt(np.where(np.isfinite(dvar[: L - 1]), dvar[: L - 1], 0.0)) / dx
    floor = (resolution * float(np.mean(dx))) ** 2
    for length in range(L, MIN_LEVELS - 1, -1):
        for b in range(L - 1, length - 2, -1):
            a = b - length + 1
            c = wls_coefficients(xs[a : b + 1], v[a : b + 1], floor)
            slope = float(c @ y[a : b + 1])
            e = d_est[a:b] - slope
            if np.all(np.abs(e) <= z * d_se[a:b] + resolution):
                return RangeChoice(a, b, "automatic: longest linear run")
    a = L - MIN_LEVELS
    return RangeChoice(a, L - 1, "automatic", ("curved: no linear run of 3 levels; the deepest 3 were used",))


@dataclass(frozen=True)
class SlopeFit:
    estimate: float
    low: float
    high: float
    stderr: float
    fit_stderr: float
    replicates_used: int
    local: np.ndarray  # per-level differences (slope units)


def fit_slope(
    x: np.ndarray,
    est: np.ndarray,
    var: np.ndarray,
    reps: np.ndarray | None,
    lo: int,
    hi: int,
    level: float,
    interval: str,
    bracket: bool = False,
    resolution: float = RESOLUTION,
) -> SlopeFit:
    """WLS slope over levels ``lo..hi`` with its interval (and optional finite-depth bracket).

    The weights ``1 / var`` come from the counts (``var`` per level, see
    :mod:`fractalseq.dimensions._level_variance`); each bootstrap replicate in
    ``reps`` ``(R, L)`` is refitted with the same weights over the same range,
    so the slope is the same linear map of every replicate's level statistics
    and the point estimate does not depend on the replicates.
    """
    xs = x[lo : hi + 1]
    y = est[lo : hi + 1]
    dx = np.diff(x)
    local = np.diff(est) / dx
    have = reps is not None and reps.shape[0] >= 10
    R = None
    if have:
        R = reps[:, lo : hi + 1]
        R = R[np.all(np.isfinite(R), axis=1)]
        have = R.shape[0] >= 10
    v = var[lo : hi + 1]
    v = np.where(np.isfinite(v), v, 0.0)
    floor = (resolution * float(np.mean(np.diff(xs)))) ** 2
    c = wls_coefficients(xs, v, floor)
    slope = float(c @ y)
    _, _, fit_se = wls_fit(xs, y, v, floor)
    if not np.all(np.isfinite(y)):
        return SlopeFit(float("nan"), float("nan"), float("nan"), float("nan"), float("nan"), 0, local)
    if have:
        s_rep = R @ c
        lo_i, hi_i = bs.interval_from(np.array([slope]), s_rep[:, None], level, interval)
        low, high = float(lo_i[0]), float(hi_i[0])
        se = float(s_rep.std(ddof=1))
        used = int(s_rep.size)
    else:
        from scipy.special import ndtri

        zq = float(-ndtri((1 - level) / 2))
        se = float("nan")
        low, high = (slope - zq * fit_se, slope + zq * fit_se) if np.isfinite(fit_se) else (float("nan"),) * 2
        used = 0
    if bracket:
        mid = (lo + hi + 1) // 2
        deep = local[mid:hi]
        deep = deep[np.isfinite(deep)]
        if deep.size:
            low = float(np.nanmin([low, deep.min(), slope]))
            high = float(np.nanmax([high, deep.max(), slope]))
    return SlopeFit(slope, low, high, se, fit_se, used, local)


# ----------------------------------------------------------------- results
@dataclass(frozen=True)
class DimensionEstimate:
    """D_q with its interval and the scaling range used.

    ``n_lo``/``n_hi`` are depths (word route) or 1-based scale indices
    (geometric route); ``eps_lo``/``eps_hi`` the box sides at the ends.
    ``local`` holds the per-level differences (a local dimension per depth),
    ``stderr`` the bootstrap standard error, ``fit_stderr`` the WLS
    residual standard error (ignores correlation between levels).
    """

    q: float
    estimate: float
    low: float
    high: float
    stderr: float
    fit_stderr: float
    n_lo: int | None
    n_hi: int | None
    eps_lo: float | None
    eps_hi: float | None
    method: str
    range_rule: str
    flags: tuple[str, ...]
    local: tuple[float, ...]
    lattice_stderr: float | None = None

    def to_dict(self) -> dict:
        return {
            "q": self.q,
            "estimate": self.estimate,
            "low": self.low,
            "high": self.high,
            "stderr": self.stderr,
            "fit_stderr": self.fit_stderr,
            "n_lo": self.n_lo,
            "n_hi": self.n_hi,
            "eps_lo": self.eps_lo,
            "eps_hi": self.eps_hi,
            "method": self.method,
            "range_rule": self.range_rule,
            "flags": list(self.flags),
            "local": list(self.local),
            "lattice_stderr": self.lattice_stderr,
        }


@dataclass(frozen=True)
class FAlphaPoint:
    """One point of the f(alpha) spectrum (Chhabra–Jensen direct method) with intervals."""

    q: float
    alpha: float
    alpha_low: float
    alpha_high: float
    f: float
    f_low: float
    f_high: float
    n_lo: int | None
    n_hi: int | None
    flags: tuple[str, ...]

    def to_dict(self) -> dict:
        return {
            "q": self.q,
            "alpha": self.alpha,
            "alpha_low": self.alpha_low,
            "alpha_high": self.alpha_high,
            "f": self.f,
            "f_low": self.f_low,
            "f_high": self.f_high,
            "n_lo": self.n_lo,
            "n_hi": self.n_hi,
            "flags": list(self.flags),
        }


@dataclass(frozen=True)
class RateEstimate:
    """Rényi entropy rate h_q (bits per symbol) by the conditional form ``H_q(n+1) - H_q(n)`` at one order n."""

    q: float
    estimate: float
    low: float
    high: float
    stderr: float
    order: int | None
    method: str
    flags: tuple[str, ...]

    def to_dict(self) -> dict:
        return {
            "q": self.q,
            "estimate": self.estimate,
            "low": self.low,
            "high": self.high,
            "stderr": self.stderr,
            "order": self.order,
            "method": self.method,
            "flags": list(self.flags),
        }


@dataclass(frozen=True)
class SpectrumResult:
    """Rényi dimensions (and f(alpha)) of a stream or point cloud.

    Attributes
    ----------
    route:
        ``"word counts"`` or ``"geometric box counting"``.
    ratio:
        Contraction ratio k (``None`` for a bare point cloud).
    length:
        Symbols (or points) used.
    dims:
        One :class:`DimensionEstimate` per q, in the order asked.
    falpha:
        f(alpha) points, one per q (empty when not asked).
    levels:
        Per level (depth or scale): ``{"n", "eps", "distinct", "occurrences", "unseen"}``.
    data_limit, complete_limit:
        Deepest level not starved of data, and deepest with every box hit.
    block:
        Block length and its rule (``None`` without bootstrap).
    scheme, n_boot, seed, level, interval:
        Bootstrap settings.
    flags:
        Notes that apply to every row.
    rates:
        Conditional-form Rényi entropy rates from the same bootstrap (word route, when asked).
    """

    route: str
    ratio: float | None
    length: int
    dims: tuple[DimensionEstimate, ...]
    falpha: tuple[FAlphaPoint, ...]
    levels: tuple[dict, ...]
    data_limit: int | None
    complete_limit: int | None
    block: bs.BlockLength | None
    scheme: str
    n_boot: int
    seed: int
    level: float
    interval: str
    flags: tuple[str, ...] = field(default=())
    rates: tuple[RateEstimate, ...] = field(default=())

    def get(self, q: float) -> DimensionEstimate:
        """The estimate for order ``q``."""
        for d in self.dims:
            if d.q == float(q):
                return d
        raise ParameterError(f"q = {q} was not computed; ask for it in qs.")

    def rows(self) -> list[dict]:
        """One flat dict per q (for tables and CSV)."""
        return [
            {
                "q": d.q,
                "D_q": d.estimate,
                "low": d.low,
                "high": d.high,
                "stderr": d.stderr,
                "n_lo": d.n_lo,
                "n_hi": d.n_hi,
                "flags": "; ".join(d.flags),
            }
            for d in self.dims
        ]

    def to_dict(self) -> dict:
        return {
            "route": self.route,
            "ratio": self.ratio,
            "length": self.length,
            "dims": [d.to_dict() for d in self.dims],
            "falpha": [p.to_dict() for p in self.falpha],
            "levels": list(self.levels),
            "data_limit": self.data_limit,
            "complete_limit": self.complete_limit,
            "block": self.block.to_dict() if self.block else None,
            "scheme": self.scheme,
            "n_boot": self.n_boot,
            "seed": self.seed,
            "level": self.level,
            "interval": self.interval,
            "flags": list(self.flags),
            "rates": [r.to_dict() for r in self.rates],
        }


# ------------------------------------------------------------ validation
def check_qs(qs: Sequence[float] | float) -> np.ndarray:
    """Orders q as a float array (finite, at least one)."""
    arr = np.atleast_1d(np.asarray(qs, dtype=np.float64))
    if arr.size == 0 or arr.ndim != 1:
        raise ParameterError("Give at least one order q, e.g. qs=(0, 1, 2).")
    if not np.all(np.isfinite(arr)):
        raise ParameterError("Orders q must be finite numbers.")
    return arr


def check_boot(n_boot: int, level: float, interval: str, scheme: str) -> None:
    if not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise ParameterError(f"The number of bootstrap replicates must be 0 or more, not {n_boot!r}.")
    if 0 < n_boot < 20:
        raise ParameterError(f"{n_boot} bootstrap replicates are too few for an interval; use 0 (none) or at least 20.")
    if not 0.5 < level < 1:
        raise ParameterError(f"Confidence level {level} is outside (0.5, 1); use e.g. 0.95.")
    if interval not in bs.INTERVALS:
        raise ParameterError(f"Unknown interval method {interval!r}; use one of {', '.join(bs.INTERVALS)}.")
    if scheme not in bs.SCHEMES:
        raise ParameterError(f"Unknown bootstrap scheme {scheme!r}; use one of {', '.join(bs.SCHEMES)}.")


def method_name(q: float, corrected: bool) -> str:
    if q == 0:
        return "distinct words (occupied boxes)"
    if not corrected:
        return "plug-in partition sum"
    if q == 1:
        return "Shannon entropy, Miller-corrected"
    if q == 2:
        return "collision estimator sum c(c-1)/(N(N-1))"
    if q > 1:
        return "falling-factorial partition sum"
    return "plug-in partition sum"


# ------------------------------------------------------ shared estimation
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


def estimate_all(
    data: LevelData,
    qs: np.ndarray,
    user_range: tuple[int, int] | None,
    level: float,
    interval: str,
    route_method: Callable[[float], str],
    level_name: Callable[[int], int],
    want_falpha: bool,
    scale_factor: float = 1.0,
) -> tuple[list[DimensionEstimate], list[FAlphaPoint]]:
    """Ranges, fits and intervals for every q (shared by both routes).

    ``scale_factor`` divides slopes (``ln(1/k)`` when the abscissa is the depth).
    """
    Q = qs.size
    dims: list[DimensionEstimate] = []
    fal: list[FAlphaPoint] = []
    for j, q in enumerate(qs):
        flags: list[str] = []
        if q < 0:
            flags.append(NEGATIVE_Q)
        top = data.complete_limit if q <= 0 else data.data_limit
        if q < 0:
            need = negative_q_min_count(q)
            mins = data.est[:, 3 * Q + 2]
            neg_top = -1
            for i in range(mins.size):
                if not mins[i] >= need:
                    break
                neg_top = i
            if neg_top < top:
                top = neg_top
                if user_range is None:
                    flags.append(f"range limited to levels whose rarest box has >= {need:.0f} occurrences")
                elif user_range[1] > neg_top:
                    flags.append(f"range goes past the levels whose rarest box has >= {need:.0f} occurrences")
        H = data.est[:, j]
        Hr = data.reps[:, :, j] if data.reps is not None else None
        if user_range is not None:
            lo, hi = user_range
            rule = "set by the user"
            if hi > data.data_limit:
                flags.append("range goes past the data limit (too few occurrences per word)")
            if q <= 0 and hi > data.complete_limit:
                flags.append("range goes past the depth where every box is hit")
            choice = RangeChoice(lo, hi, rule)
        else:
            choice = choose_range(data.x, H, data.var[:, j], data.dvar[:, j], top)
            if choice is not None:
                rule = choice.how
                flags.extend(choice.flags)
        local_all = np.diff(data.est[:, j]) / np.diff(data.x) if data.x.size > 1 else np.zeros(0)
        if choice is None:
            flags.append("too little data: fewer than 3 usable levels")
            dims.append(
                DimensionEstimate(
                    float(q), float("nan"), float("nan"), float("nan"), float("nan"), float("nan"),
                    None, None, None, None, route_method(q), "none", tuple(flags), tuple(local_all / scale_factor),
                )
            )
            if want_falpha:
                fal.append(FAlphaPoint(float(q), *(float("nan"),) * 6, None, None, tuple(flags)))
            continue
        fit = fit_slope(data.x, H, data.var[:, j], Hr, choice.lo, choice.hi, level, interval, bracket=(q <= 0))
        if data.reps is not None and fit.replicates_used < 0.95 * data.reps.shape[0]:
            flags.append(f"only {fit.replicates_used} of {data.reps.shape[0]} replicates usable")
        sf = scale_factor
        dims.append(
            DimensionEstimate(
                float(q), fit.estimate / sf, fit.low / sf, fit.high / sf, fit.stderr / sf, fit.fit_stderr / sf,
                level_name(choice.lo), level_name(choice.hi), float(data.eps[choice.lo]), float(data.eps[choice.hi]),
                route_method(q), rule, tuple(flags), tuple(fit.local / sf),
            )
        )
        if want_falpha:
            # alpha, f are slopes against ln eps = -x: negate
            Ar = -data.reps[:, :, Q + j] if data.reps is not None else None
            Fr = -data.reps[:, :, 2 * Q + j] if data.reps is not None else None
            # same weights (those of H_q) and range as D_q
            fa = fit_slope(data.x, -data.est[:, Q + j], data.var[:, j], Ar, choice.lo, choice.hi, level, interval)
            ff = fit_slope(data.x, -data.est[:, 2 * Q + j], data.var[:, j], Fr, choice.lo, choice.hi, level, interval)
            fal.append(
                FAlphaPoint(
                    float(q), fa.estimate / sf, fa.low / sf, fa.high / sf, ff.estimate / sf, ff.low / sf, ff.high / sf,
                    level_name(choice.lo), level_name(choice.hi), tuple(f for f in flags if f == NEGATIVE_Q),
                )
            )
    return dims, fal


def negative_q_min_count(q: float, rel_bias: float = 0.01) -> float:
    """Occurrences the rarest box needs for ``q < 0``.

    For a Poisson count with mean ``lam``, ``E[c**q] / lam**q ~ 1 + q (q - 1) / (2 lam)``
    (second-order delta method), so ``lam >= q (q - 1) / (2 rel_bias)`` keeps the
    bias of the rarest box's term below ``rel_bias``.
    """
    return float(q * (q - 1.0) / (2.0 * rel_bias))


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


def rates_from(
    data: LevelData, qs: np.ndarray, order: int | None, level: float, interval: str, corrected: bool = True
) -> list[RateEstimate]:
    """Conditional-form rates ``(H_q(n+1) - H_q(n)) / ln 2`` (bits) from word-route level data.

    The order n is the user's, or the middle of the automatic linear run of
    ``H_q(n)`` (converged, and away from the starved deep end).  For ``q <= 0``
    the counts are exact and the interval also holds the deeper differences
    of the run (the finite-order bracket, as for D_0).
    """
    ln2 = math.log(2.0)
    top = data.est.shape[0]  # levels are depths 1..top
    out = []
    for j, q in enumerate(qs):
        flags = [NEGATIVE_Q] if q < 0 else []
        H = data.est[:, j]
        Hr = data.reps[:, :, j] if data.reps is not None else None
        o: int | None
        choice = None
        if order is not None:
            o = int(order) if 1 <= int(order) <= top - 1 else None
        else:
            lim = data.complete_limit if q <= 0 else data.data_limit
            choice = choose_range(data.x, H, data.var[:, j], data.dvar[:, j], lim)
            o = None if choice is None else max((choice.lo + choice.hi + 1) // 2, 1)
        est = lo = hi = se = float("nan")
        if o is None or not (np.isfinite(H[o]) and np.isfinite(H[o - 1])):
            flags.append("too little data")
        else:
            est = float((H[o] - H[o - 1]) / ln2)
            if Hr is not None:
                d = (Hr[:, o] - Hr[:, o - 1]) / ln2
                d = d[np.isfinite(d)]
                if d.size >= 10:
                    l_, h_ = bs.interval_from(np.array([est]), d[:, None], level, interval)
                    lo, hi, se = float(l_[0]), float(h_[0]), float(d.std(ddof=1))
            if q <= 0 and choice is not None:
                # exact counts: the error is the finite order, so hold the deeper differences of the run too
                deeper = (H[o : choice.hi + 1] - H[o - 1 : choice.hi]) / ln2
                deeper = deeper[np.isfinite(deeper)]
                if deeper.size:
                    lo = float(np.nanmin([lo, deeper.min(), est]))
                    hi = float(np.nanmax([hi, deeper.max(), est]))
            if Hr is None:
                flags.append("no bootstrap: no interval")
        method = "conditional form H_q(n+1) - H_q(n): " + method_name(float(q), corrected)
        out.append(RateEstimate(float(q), est, lo, hi, se, o, method, tuple(flags)))
    return out


# ------------------------------------------------------------ word route
def _counts_for(arr: SymbolArray, starve: float, max_depth: int | None, need: int | None) -> WordCounts:
    """Count words deep enough that the deepest level is starved of data (or the user's depth)."""
    A = max(arr.alphabet.size, 2)
    cap = arr.alphabet.max_depth if max_depth is None else min(int(max_depth), arr.alphabet.max_depth)
    if need is not None:
        if need > cap:
            raise ParameterError(f"Depth {need} exceeds the deepest countable {cap}; choose a shallower range.")
        return count_words(arr, need)
    T = len(arr)
    depth = int(min(cap, max(MIN_LEVELS + 1, math.ceil(math.log(max(T / starve, 2.0)) / math.log(A)) + 2)))
    if max_depth is None:
        # deepen automatically only while addresses fit 32 bits (low-entropy streams stop there)
        cap = max(depth, min(cap, AUTO_ADDRESS_BITS // arr.alphabet.bits))
    while True:
        wc = count_words(arr, depth)
        s = wc.spectrum(depth)
        if s.distinct > s.total / starve or depth >= cap:
            return wc
        depth = min(cap, 2 * depth)


def _word_level_data(
    wc: WordCounts,
    arr: SymbolArray | None,
    qs: np.ndarray,
    ratio: float,
    top_depth: int,
    starve: float,
    n_boot: int,
    seed: int,
    block: bs.BlockLength | None,
    scheme: str,
    corrected: bool,
) -> LevelData:
    depths = np.arange(1, top_depth + 1)
    L = depths.size
    K = 3 * qs.size + 3
    est = np.empty((L, K))
    distinct = np.empty(L)
    occ = np.empty(L)
    unseen = np.empty(L)
    for i, n in enumerate(depths):
        sp = wc.spectrum(int(n))
        st = level_stats(sp.value, sp.multiplicity, qs, corrected)
        est[i] = st.vector()
        distinct[i], occ[i], unseen[i] = st.distinct, st.total, st.unseen
    reps = None
    if arr is not None and n_boot > 0 and block is not None:
        plan = bs.make_plan(len(arr), block.length, n_boot, seed, scheme)
        reps = np.empty((n_boot, L, K))
        for i, n in enumerate(depths):
            labels, words = bs.word_labels(arr, int(n))
            reps[:, i] = replicate_vectors(labels, int(n), words.size, plan, qs, corrected)
    x = depths * math.log(1.0 / ratio)
    dl, cl = limits_from(distinct, occ, unseen, starve)
    var, dvar = word_level_variances(wc, L, qs)
    return LevelData(x, ratio ** depths.astype(float), est, reps, distinct, occ, unseen, dl, cl, var, dvar)


def _overlapping(alphabet: Alphabet, ratio: float, corners) -> tuple[bool, str]:
    from fractalseq import encoding

    layout = encoding.corner_layout(alphabet.size, corners)
    chk = encoding.overlap_check(ratio, layout)
    return chk.overlapping, chk.reason


def dimension_spectrum(
    data: SymbolArray | SymbolStream | WordCounts,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    ratio: float = 0.5,
    depth_range: tuple[int, int] | None = None,
    n_boot: int = 200,
    seed: int = 0,
    block_length: "int | bs.BlockLength | None" = None,
    scheme: str = "nonoverlapping",
    level: float = 0.95,
    interval: str = "centered",
    corners: np.ndarray | None = None,
    falpha: bool = True,
    starve: float = STARVE,
    corrected: bool = True,
    max_depth: int | None = None,
    rates: bool = False,
) -> SpectrumResult:
    """Rényi dimensions D_q of a stream's encoding from its word counts.

    Parameters
    ----------
    data:
        The stream (needed for bootstrap intervals) or its :class:`WordCounts`
        (then only fit standard errors are available).
    qs:
        Orders q (any finite numbers; q < 0 is flagged as unreliable).
    ratio:
        Contraction ratio k of the encoding.  Only ``ln(1/k)`` enters, and only
        when the maps do not overlap (hypercube corners: ``k <= 1/2``); for
        overlapping maps a stream is sent to :func:`fractalseq.dimensions._geometry.geometric_spectrum`.
    depth_range:
        ``(n_lo, n_hi)`` word lengths to fit over; automatic when ``None``.
    n_boot, seed, block_length, scheme, level, interval:
        Block bootstrap settings (see :mod:`fractalseq.resampling._bootstrap`); ``n_boot=0`` skips it.
    corners:
        Custom corner layout (default binary hypercube corners).
    falpha:
        Also estimate f(alpha) at the same qs.
    starve:
        The deepest depth keeps distinct words <= occurrences / ``starve``.
    corrected:
        Bias-corrected estimators (default) or plain plug-in.
    max_depth:
        Deepest depth counted (default: the address width).
    rates:
        Also give the conditional-form Rényi entropy rates h_q in bits from the
        same bootstrap (``result.rates``; see :func:`rates_from`).

    Returns
    -------
    SpectrumResult
    """
    from fractalseq.encoding import check_ratio

    qv = check_qs(qs)
    k = check_ratio(ratio)
    check_boot(n_boot, level, interval, scheme)
    if starve <= 1:
        raise ParameterError(f"The starvation factor must exceed 1 (default {STARVE}), not {starve}.")
    arr: SymbolArray | None
    if isinstance(data, WordCounts):
        wc0: WordCounts | None = data
        arr = None
        alphabet = data.alphabet
    elif isinstance(data, (SymbolArray, SymbolStream)):
        arr = data.to_array() if isinstance(data, SymbolStream) else data
        wc0 = None
        alphabet = arr.alphabet
    else:
        raise InputError("dimension_spectrum needs a SymbolArray, SymbolStream or WordCounts.")
    overlapping, reason = _overlapping(alphabet, k, corners)
    if overlapping:
        if arr is None:
            raise ParameterError(
                f"Word counts give box counts only for non-overlapping maps, and {reason}; "
                "pass the stream itself so geometric box counting is used."
            )
        from fractalseq import encoding
        from fractalseq.dimensions import _geometry as geometry

        pts = encoding.points(arr, k, corners, drop=0)
        valid = geometry.transient_mask(arr, TRANSIENT)
        res = geometry.geometric_spectrum(
            pts, qv, scales=None, n_boot=n_boot, seed=seed, block_length=block_length, scheme=scheme,
            level=level, interval=interval, valid=valid, falpha=falpha, starve=starve, corrected=corrected,
            scale_range=depth_range,
        )
        return SpectrumResult(
            res.route, k, res.length, res.dims, res.falpha, res.levels, res.data_limit, res.complete_limit,
            res.block, res.scheme, res.n_boot, res.seed, res.level, res.interval, res.flags + (OVERLAP + ": " + reason,),
        )
    user = None
    if depth_range is not None:
        try:
            lo, hi = (int(depth_range[0]), int(depth_range[1]))
        except (TypeError, ValueError, IndexError):
            raise ParameterError("depth_range must be two whole numbers (n_lo, n_hi).") from None
        if lo < 1 or hi - lo < 1:
            raise ParameterError(f"Depth range ({lo}, {hi}) needs 1 <= n_lo < n_hi; e.g. (4, 10).")
        user = (lo, hi)
    flags: list[str] = []
    if arr is not None:
        if len(arr) == 0:
            raise InputError("The stream is empty; there is nothing to measure.")
        wc = _counts_for(arr, starve, max_depth, user[1] if user else None)
    else:
        assert wc0 is not None
        wc = wc0
        if user and user[1] > wc.depth:
            raise ParameterError(f"Depth range ends at {user[1]} but the counts go to depth {wc.depth}; count deeper.")
        if n_boot:
            flags.append("word counts only: no bootstrap (it needs the stream); intervals from the fit residuals")
    # levels used: up to the data limit (or the user's end)
    probe = _word_level_data(wc, None, qv, k, wc.depth, starve, 0, seed, None, scheme, corrected)
    top = (user[1] if user else probe.data_limit + 1)
    top = max(min(top, wc.depth), 0)
    block = None
    if arr is not None and n_boot > 0 and top >= 1:
        block = bs.resolve_block(arr, top, block_length, scheme)
        if block.blocks < bs.MIN_BLOCKS:
            flags.append(f"only {block.blocks} blocks of {block.length} symbols: intervals are unreliable")
    if top >= 1:
        ld = _word_level_data(wc, arr, qv, k, top, starve, n_boot if arr is not None else 0, seed, block, scheme, corrected)
        # limits are computed on the probe (all counted depths) so a user range cannot move them
        ld.data_limit = min(probe.data_limit, top - 1)
        ld.complete_limit = min(probe.complete_limit, top - 1)
    else:
        ld = probe
    if n_boot == 0:
        flags.append("no bootstrap: intervals from the WLS residual standard error, which ignores dependence")
    user_idx = (user[0] - 1, user[1] - 1) if user else None
    dims, fal = estimate_all(
        ld, qv, user_idx, level, interval, lambda q: "word counts: " + method_name(q, corrected),
        lambda i: int(i + 1), falpha, scale_factor=1.0,
    )
    levels = tuple(
        {
            "n": int(i + 1),
            "eps": float(k ** (i + 1)),
            "distinct": int(probe.distinct[i]),
            "occurrences": int(probe.occurrences[i]),
            "unseen": float(probe.unseen[i]),
        }
        for i in range(probe.distinct.size)
    )
    return SpectrumResult(
        "word counts", k, int(wc.length), tuple(dims), tuple(fal), levels,
        int(probe.data_limit + 1) if probe.data_limit >= 0 else None,
        int(probe.complete_limit + 1) if probe.complete_limit >= 0 else None,
        block, scheme, int(n_boot if arr is not None else 0), int(seed), float(level), interval, tuple(flags),
        tuple(rates_from(ld, qv, None, level, interval, corrected)) if rates and top >= 1 else (),
    )


def binomial_dimension(p: float, q: float) -> float:
    """D_q of the binomial measure, ``log2(p**q + (1-p)**q) / (1 - q)`` (q = 1: binary entropy in bits).

    Halsey, Jensen, Kadanoff, Procaccia & Shraiman 1986, Phys. Rev. A 33:1141.
    Used by tests and benchmarks as ground truth.
    """
    if q == 1:
        return float(-(p * math.log2(p) + (1 - p) * math.log2(1 - p)))
    return float(math.log2(p**q + (1 - p) ** q) / (1 - q))

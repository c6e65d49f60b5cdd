"""Geometric box counting of any point cloud, with shifted grids and block-bootstrap intervals.

A point cloud (``n x D`` floats, in time order when it comes from a stream)
is covered by grids of cubic boxes of side ``eps``.  A grid is anchored at
``origin`` and shifted by ``offset * eps`` (``offset`` in ``[0, 1)^D``); the
box of a point is ``floor((x - origin) / eps + offset)`` per coordinate.
Several random offsets (seeded) are averaged to reduce lattice effects:
``H_q(eps)`` is the mean over offsets, and the spread of the per-offset
slopes is reported (``lattice_stderr``) and added to the interval.  Shifted
grids are wrapped on a torus (``period``) so they do not count an extra
partial layer of boxes at the edges.  Even so, shifted grids mix the mass of
neighbouring cylinders and their local slopes reach D_q only geometrically
in the depth (about 1-3% off over the scales a typical stream allows), which
is why :mod:`fractalseq.dimensions._consistency` bases its verdict on the aligned grid.

With ``origin = 0``, no offset and ``eps = k**m``, boxes of a chaos-game
cloud of a non-overlapping encoding are exactly the cylinders of m-words,
so box counts equal word counts (after the first ``m - 1`` points, which
still remember the starting point; see :func:`transient_mask`).

The slopes, scaling-range choice, estimators and intervals are those of
:mod:`fractalseq.dimensions._spectrum`, with ``ln(1/eps)`` as the abscissa.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
import math
from typing import Sequence

import numpy as np
from numba import njit

from fractalseq.resampling import _bootstrap as bs
from fractalseq.resampling._options import Resampling, as_resampling
from fractalseq.dimensions import _level_variance as lv
from fractalseq.dimensions import _levels as lev
from fractalseq.dimensions import _parameters as par
from fractalseq.dimensions import _scaling_fit as fit
from fractalseq.dimensions import _spectrum_results as res
from fractalseq.errors import InputError, ParameterError
from fractalseq.stream import SymbolArray

#: Default number of random grid offsets averaged.
OFFSETS = 8
#: Grids with at most this many cells (in the points' bounding box) are labelled densely, without sorting.
DENSE_CELLS = 1 << 24
#: Deepest scale tried by :func:`default_scales` (halvings of the extent).
MAX_HALVINGS = 40


@njit(cache=True)
def _cell(x, origin, scale, shift, top, wrap):
    """Box coordinate ``floor((x - origin) / scale + shift)``, clamped to ``top`` (if >= 0), modulo ``wrap`` (if > 0)."""
    j = int(math.floor((x - origin) / scale + shift))
    if top >= 0 and j > top:
        j = top
    if wrap > 0:
        j = j % wrap
    return j


@njit(cache=True)
def _coordinate_range(points, keep, xmin, xmax):
    """Smallest and largest coordinate per axis over the kept points; returns how many are kept."""
    n = points.shape[0]
    dim = points.shape[1]
    for d in range(dim):
        xmin[d] = np.inf
        xmax[d] = -np.inf
    kept = 0
    for t in range(n):
        if not keep[t]:
            continue
        kept += 1
        for d in range(dim):
            x = points[t, d]
            if x < xmin[d]:
                xmin[d] = x
            if x > xmax[d]:
                xmax[d] = x
    return kept


@njit(cache=True)
def _cell_range(xmin, xmax, scale, origin, shift, top, wrap, lo, hi):
    """Bounds of the box coordinates per axis from the coordinate bounds.

    The box coordinate is monotone in the point coordinate before wrapping,
    so the boxes of the extreme coordinates bound it; on a torus the bounds
    are ``0..wrap-1``.
    """
    for d in range(xmin.shape[0]):
        if wrap > 0:
            lo[d] = 0
            hi[d] = wrap - 1
        else:
            lo[d] = _cell(xmin[d], origin[d], scale, shift[d], top, wrap)
            hi[d] = _cell(xmax[d], origin[d], scale, shift[d], top, wrap)


@njit(cache=True)
def _dense_cells(points, keep, scale, origin, shift, top, wrap, lo, strides, cells, labels):
    """Label kept points with the rank of their box among the occupied ones (mixed-radix, no sort)."""
    n = points.shape[0]
    dim = points.shape[1]
    table = np.zeros(cells, dtype=np.int32)
    for t in range(n):
        if not keep[t]:
            labels[t] = -1
            continue
        key = 0
        for d in range(dim):
            key += (_cell(points[t, d], origin[d], scale, shift[d], top, wrap) - lo[d]) * strides[d]
        labels[t] = key
        table[key] += 1
    k = 0
    for c in range(cells):
        if table[c]:
            k += 1
    counts = np.empty(k, dtype=np.int64)
    k = 0
    for c in range(cells):
        if table[c]:
            counts[k] = table[c]
            table[c] = k
            k += 1
    for t in range(n):
        if labels[t] >= 0:
            labels[t] = table[labels[t]]
    return counts


@njit(cache=True)
def _packed_cells(points, keep, scale, origin, shift, top, wrap, lo, bits, pos_bits, keys):
    """Keys ``(box coordinates packed) << pos_bits | position`` of the kept points; returns how many."""
    n = points.shape[0]
    dim = points.shape[1]
    k = 0
    for t in range(n):
        if not keep[t]:
            continue
        key = np.uint64(0)
        for d in range(dim):
            j = _cell(points[t, d], origin[d], scale, shift[d], top, wrap)
            key = (key << np.uint64(bits[d])) | np.uint64(j - lo[d])
        keys[k] = (key << np.uint64(pos_bits)) | np.uint64(t)
        k += 1
    return k


@njit(cache=True)
def _cell_matrix(points, keep, scale, origin, shift, top, wrap, out):
    """Box coordinates of the kept points, one row each (the general, sorting fallback)."""
    k = 0
    for t in range(points.shape[0]):
        if keep[t]:
            for d in range(points.shape[1]):
                out[k, d] = _cell(points[t, d], origin[d], scale, shift[d], top, wrap)
            k += 1


def _check_points(points: np.ndarray) -> np.ndarray:
    p = np.asarray(points, dtype=np.float64)
    if p.ndim == 1:
        p = p[:, None]
    if p.ndim != 2:
        raise InputError("Points must be a two-dimensional array, one row per point.")
    if p.shape[1] < 1:
        raise InputError("Points need at least one coordinate.")
    if not np.all(np.isfinite(p)):
        raise InputError("Points contain NaN or infinite coordinates; remove them first.")
    return np.ascontiguousarray(p)


def _check_mask(valid: np.ndarray | None, n: int) -> np.ndarray:
    """The points kept: all (``valid=None``) or a boolean mask with one entry per point."""
    keep = np.ones(n, dtype=bool) if valid is None else np.asarray(valid, dtype=bool)
    if keep.shape != (n,):
        raise ParameterError("The validity mask must have one entry per point.", parameter="valid")
    return keep


def _check_scale(scale: float) -> float:
    s = float(scale)
    if not (s > 0 and math.isfinite(s)):
        raise ParameterError(f"Box side {scale} must be a positive number.", parameter="scale")
    return s


def box_labels(
    points: np.ndarray,
    scale: float,
    offset: np.ndarray | None = None,
    origin: np.ndarray | None = None,
    valid: np.ndarray | None = None,
    unit_cube: bool = False,
    period: float | None = None,
) -> tuple[np.ndarray, int]:
    """Index of the occupied box of every point.

    Parameters
    ----------
    points:
        ``(n, D)`` coordinates.
    scale:
        Box side ``eps``.
    offset:
        Grid shift in units of ``eps`` per coordinate, in ``[0, 1)`` (default 0).
    origin:
        Anchor of the grid (default the zero vector).
    valid:
        Boolean mask; other points get label -1.
    unit_cube:
        Points lie in ``[0, 1]^D`` and boxes are closed at the upper face (a
        coordinate exactly 1.0 goes to the last box, not a new one).
    period:
        Wrap the grid on a torus of this side (anchored at ``origin``): a
        shifted grid then has ``period / scale`` boxes per side instead of one
        more, which removes the edge effect of shifted grids (``round`` when
        ``period / scale`` is a whole number, else ``ceil``).

    Returns
    -------
    labels : int64 array, ``-1`` for masked points; boxes numbered in lexicographic order of their coordinates
    n_boxes : number of occupied boxes
    """
    p = _check_points(points)
    keep = _check_mask(valid, p.shape[0])
    labels, counts = _labels_and_counts(p, _check_scale(scale), offset, origin, keep, unit_cube, period)
    return labels.astype(np.int64, copy=False), int(counts.size)


@dataclass(frozen=True)
class _Extent:
    """Coordinate bounds of the kept points, computed once for every scale."""

    xmin: np.ndarray
    xmax: np.ndarray
    kept: int


def _extent(p: np.ndarray, keep: np.ndarray) -> _Extent:
    D = p.shape[1]
    xmin, xmax = np.empty(D), np.empty(D)
    kept = _coordinate_range(p, np.ascontiguousarray(keep), xmin, xmax)
    return _Extent(xmin, xmax, int(kept))


def _labels_and_counts(
    p: np.ndarray,
    s: float,
    offset: np.ndarray | None,
    origin: np.ndarray | None,
    keep: np.ndarray,
    unit_cube: bool,
    period: float | None,
    extent: _Extent | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`box_labels` on checked input, plus the number of points in each box (boxes in label order).

    Labels are int32 (int64 past 2**31 points); ``extent`` (from :func:`_extent`) saves a pass when many scales are counted.
    """
    D = p.shape[1]
    off = np.zeros(D) if offset is None else np.asarray(offset, dtype=np.float64).reshape(D)
    org = np.zeros(D) if origin is None else np.asarray(origin, dtype=np.float64).reshape(D)
    n = p.shape[0]
    labels = np.empty(n, dtype=np.int32 if n < 2**31 - 1 else np.int64)
    top = -1
    if unit_cube and not off.any():
        top = int(round(1.0 / s)) - 1 if abs(1.0 / s - round(1.0 / s)) < 1e-9 else int(math.floor(1.0 / s))
    wrap = 0
    if period is not None:
        ratio = float(period) / s
        wrap = int(round(ratio)) if abs(ratio - round(ratio)) <= 1e-6 * max(ratio, 1.0) else int(math.ceil(ratio))
        wrap = max(wrap, 1)
    keep = np.ascontiguousarray(keep)
    ext = extent if extent is not None else _extent(p, keep)
    kept = ext.kept
    lo = np.empty(D, dtype=np.int64)
    hi = np.empty(D, dtype=np.int64)
    _cell_range(ext.xmin, ext.xmax, s, org, off, top, wrap, lo, hi)
    if kept == 0:
        labels[:] = -1
        return labels, np.zeros(0, dtype=np.int64)
    span = hi - lo + 1
    cells = 1
    for r in span:
        cells *= int(r)
        if cells > DENSE_CELLS:
            break
    if cells <= DENSE_CELLS and cells <= 8 * kept + (1 << 20):
        # dense: mixed-radix cell number, occupied cells ranked in lexicographic order (no sort)
        strides = np.ones(D, dtype=np.int64)
        for d in range(D - 2, -1, -1):
            strides[d] = strides[d + 1] * int(span[d + 1])
        counts = _dense_cells(p, keep, s, org, off, top, wrap, lo, strides, int(cells), labels)
        return labels, counts
    labels[:] = -1
    bits = np.array([max(1, int(math.ceil(math.log2(int(r) + 1)))) for r in span], dtype=np.int64)
    pos_bits = max(int(n - 1).bit_length(), 1)
    if int(bits.sum()) + pos_bits <= 64:
        keys = np.empty(kept, dtype=np.uint64)
        _packed_cells(p, keep, s, org, off, top, wrap, lo, bits, pos_bits, keys)
        keys.sort()
        n_boxes = bs.rank_sorted_keys(keys, pos_bits, labels, np.empty(0, np.uint64))
        return labels, np.bincount(labels[labels >= 0], minlength=n_boxes).astype(np.int64)
    idx = np.empty((kept, D), dtype=np.int64)
    _cell_matrix(p, keep, s, org, off, top, wrap, idx)
    uniq, inv, cnt = np.unique(idx, axis=0, return_inverse=True, return_counts=True)
    labels[keep] = inv.ravel()
    return labels, cnt.astype(np.int64)


def box_counts(
    points: np.ndarray,
    scale: float,
    offset: np.ndarray | None = None,
    origin: np.ndarray | None = None,
    valid: np.ndarray | None = None,
    unit_cube: bool = False,
    period: float | None = None,
) -> np.ndarray:
    """Number of points in each occupied box (boxes in lexicographic order); see :func:`box_labels`."""
    p = _check_points(points)
    keep = _check_mask(valid, p.shape[0])
    return _labels_and_counts(p, _check_scale(scale), offset, origin, keep, unit_cube, period)[1]


def occupied_boxes(points: np.ndarray, scale: float, offset: np.ndarray | None = None, origin: np.ndarray | None = None) -> int:
    """Number of boxes of side ``scale`` holding at least one point."""
    return int(box_labels(points, scale, offset, origin)[1])


def grid_offsets(dim: int, count: int, seed: int = 0) -> np.ndarray:
    """``count`` random grid shifts in ``[0, 1)^dim`` (``numpy.random.default_rng(seed)``)."""
    if count < 1:
        raise ParameterError(f"Use at least one grid offset, not {count}.", parameter="count")
    return np.random.default_rng(seed).random((int(count), int(dim)))


def transient_mask(arr: SymbolArray, drop: int) -> np.ndarray:
    """True for points kept: all but the first ``drop`` of every segment (REFERENCE-CHECKS rule 1)."""
    keep = np.ones(len(arr), dtype=bool)
    if drop > 0:
        for a, b in arr.segment_bounds:
            keep[a : min(b, a + drop)] = False
    return keep


def default_scales(points: np.ndarray, valid: np.ndarray | None = None, starve: float = par.STARVE) -> np.ndarray:
    """Box sides ``extent * 2**-j``, j = 1, 2, ... one past the first scale starved of data."""
    p = _check_points(points)
    q = p[_check_mask(valid, p.shape[0])]
    if q.shape[0] == 0:
        raise InputError("There are no points to count (all masked or empty input).")
    extent = float((q.max(axis=0) - q.min(axis=0)).max())
    if extent <= 0:
        extent = 1.0
    out = []
    origin = q.min(axis=0)
    for j in range(1, MAX_HALVINGS + 1):
        eps = extent * 2.0**-j
        out.append(eps)
        if occupied_boxes(q, eps, origin=origin) > q.shape[0] / starve:
            break
    return np.asarray(out)


def geometric_spectrum(
    points: np.ndarray,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    scales: Sequence[float] | None = None,
    offsets: int = OFFSETS,
    resampling: Resampling | None = None,
    valid: np.ndarray | None = None,
    origin: np.ndarray | None = None,
    aligned: bool = False,
    falpha: bool = True,
    starve: float = par.STARVE,
    corrected: bool = True,
    scale_range: tuple[int, int] | None = None,
    unit_cube: bool = False,
    periodic: bool = True,
    period: float | None = None,
) -> SpectrumResult:
    """Rényi dimensions of a point cloud by box counting.

    Parameters
    ----------
    points:
        ``(n, D)`` coordinates in time order (blocks of consecutive points are
        resampled for intervals).
    qs:
        Orders q.
    scales:
        Box sides (any order; sorted from large to small).  Default
        :func:`default_scales`.
    offsets:
        Number of random grid shifts averaged (seeded by ``resampling.seed``); ignored when ``aligned``.
    resampling:
        Block bootstrap settings (:class:`~fractalseq.resampling.Resampling`; ``None``:
        ``Resampling()``; ``Resampling.none()``: no bootstrap); its seed also draws the offsets.
    valid:
        Mask of points to use (e.g. :func:`transient_mask`); others are skipped.
    origin:
        Grid anchor (default 0, or the cloud's minimum when ``scales`` is None).
    aligned:
        One grid without shift (anchored at ``origin``) instead of random offsets.
    falpha, starve, corrected:
        As in :func:`fractalseq.dimensions._spectrum.dimension_spectrum`.
    scale_range:
        ``(i_lo, i_hi)``: 1-based indices into the sorted scales to fit over; automatic when ``None``.
    unit_cube:
        Points lie in the unit cube; boxes are closed at the upper face (aligned grids only).
    periodic, period:
        Wrap shifted grids on a torus of side ``period`` anchored at the
        origin (default: the cloud's extent from the origin; a side that is
        not a whole number of boxes is rounded up to one),
        so that a shifted grid does not count a partial extra layer of boxes
        at the edges (for a cloud filling the cube that layer biases D_0 down
        by about ``2**-m`` per level).

    Returns
    -------
    SpectrumResult
        ``route = "geometric box counting"``; ``n_lo``/``n_hi`` are 1-based scale indices.
    """
    qv = par.check_qs(qs)
    rs = as_resampling(resampling)
    n_boot, seed, block_length, scheme, level, interval = rs.n_boot, rs.seed, rs.block_length, rs.scheme, rs.level, rs.interval
    p = _check_points(points)
    T, D = p.shape
    keep = _check_mask(valid, T)
    n_used = int(keep.sum())
    if n_used < 2:
        raise InputError("Box counting needs at least two points.")
    if scales is None:
        sc = default_scales(p, keep, starve)
        org = p[keep].min(axis=0) if origin is None else np.asarray(origin, float)
        per = float((p[keep].max(axis=0) - p[keep].min(axis=0)).max()) or 1.0
    else:
        sc = np.asarray([_check_scale(s) for s in np.atleast_1d(scales)], dtype=np.float64)
        org = np.zeros(D) if origin is None else np.asarray(origin, float)
        per = float((p[keep].max(axis=0) - org).max())
        per = per if per > 0 else 1.0
    if period is not None:
        per = float(period)
        if not (per > 0 and math.isfinite(per)):
            raise ParameterError(f"The period {period} must be a positive number.", parameter="period")
    if aligned or not periodic:
        per_used = None
    else:
        per_used = per
    sc = np.sort(np.unique(sc))[::-1]
    S = sc.size
    if aligned:
        offs = np.zeros((1, D))
    else:
        if not isinstance(offsets, (int, np.integer)) or offsets < 1:
            raise ParameterError(f"Use at least one grid offset, not {offsets!r}.", parameter="offsets")
        offs = grid_offsets(D, int(offsets), seed)
    O = offs.shape[0]
    Q = qv.size
    K = 3 * Q + 3
    flags: list[str] = []
    per_offset = np.empty((O, S, K))
    x = np.log(1.0 / sc)
    levels_J = max(1, int(math.ceil(math.log2(max(sc[0] / sc[-1], 2.0)))) + 1)
    block = None
    if n_boot > 0:
        if block_length is None:
            block = bs.choose_block_length(None, levels_J, length=T, series=p[keep, 0], scheme=scheme)
        else:
            block = bs.user_block_length(block_length, T)
        if block.blocks < bs.MIN_BLOCKS:
            flags.append(f"only {block.blocks} blocks of {block.length} points: intervals are unreliable")
        plan = bs.make_plan(T, block.length, n_boot, seed, scheme)
        reps = np.zeros((n_boot, S, K))
    else:
        reps = None
    extent = _extent(p, keep)
    # count-based variances of H_q per scale and of the differences between adjacent scales (fit weights
    # and linearity test), averaged over offsets; they need the previous scale's labels per offset
    var = np.zeros((S, Q))
    dvar = np.zeros((max(S - 1, 0), Q))
    previous: list[tuple[np.ndarray, np.ndarray] | None] = [None] * O
    # batches as long as the automatic bootstrap blocks (whatever block length the interval uses)
    auto = bs.choose_block_length(None, levels_J, length=T, series=p[keep, 0], scheme="nonoverlapping")
    batches = lv.BatchSums(T, S, Q, batch=auto.length)
    for j, eps in enumerate(sc):
        for o in range(O):
            labels, counts = _labels_and_counts(
                p, float(eps), offs[o], org, keep, unit_cube and aligned, per_used, extent=extent
            )
            m = counts.size
            per_offset[o, j] = lev.level_stats(counts, None, qv, corrected).vector()
            g = lv.box_influence(counts, qv)
            var[j] += lv.variance_from_influence(counts, g) / O
            prev = previous[o]
            if prev is not None:
                dvar[j - 1] += lv.point_difference_variance(prev[0], labels, prev[1], g) / O
            previous[o] = (labels, g)
            batches.add(j, labels, counts, g, weight=1.0 / O)
            if reps is not None:
                reps[:, j] += lev.replicate_vectors(labels, 1, m, plan, qv, corrected)
    del previous
    if reps is not None:
        reps /= O
    est = per_offset.mean(axis=0)
    distinct = est[:, 3 * Q]
    occ = np.full(S, float(n_used))
    unseen = per_offset[:, :, 3 * Q + 1].max(axis=0)
    dl, cl = lev.limits_from(distinct, occ, unseen, starve)
    ld = lev.LevelData(x, sc, est, reps, distinct, occ, unseen, dl, cl, var, dvar, batches.covariance(), starve=starve)
    user = None
    if scale_range is not None:
        lo, hi = int(scale_range[0]), int(scale_range[1])
        if lo < 1 or hi > S or hi - lo < 1:
            raise ParameterError(f"Scale range ({lo}, {hi}) must satisfy 1 <= lo < hi <= {S} (indices of the scales).", parameter="scale_range")
        user = (lo - 1, hi - 1)
    if n_boot == 0:
        flags.append("no bootstrap: intervals from the WLS residual standard error, which ignores dependence")
    grid = "aligned grid" if aligned else f"{O} random grid offsets averaged" + (", torus" if per_used else "")
    dims, fal = fit.estimate_all(
        ld, qv, user, level, interval, lambda q: f"box counting ({grid}): " + par.method_name(q, corrected),
        lambda i: int(i + 1), falpha, scale_factor=1.0,
    )
    # lattice spread: per-offset OLS slopes over the chosen range
    from scipy.special import ndtri

    zq = float(-ndtri((1 - level) / 2))
    out = []
    for j, d in enumerate(dims):
        if O > 1 and d.n_lo is not None and math.isfinite(d.estimate):
            a, b = d.n_lo - 1, d.n_hi - 1
            xs = x[a : b + 1]
            slopes = [np.polyfit(xs, per_offset[o, a : b + 1, j], 1)[0] for o in range(O)]
            lse = float(np.std(slopes, ddof=1) / math.sqrt(O))
            low = d.estimate - math.sqrt((d.estimate - d.low) ** 2 + (zq * lse) ** 2) if math.isfinite(d.low) else d.low
            high = d.estimate + math.sqrt((d.high - d.estimate) ** 2 + (zq * lse) ** 2) if math.isfinite(d.high) else d.high
            d = dataclasses.replace(d, low=float(low), high=float(high), lattice_stderr=lse)
        out.append(d)
    levels = tuple(
        {"n": int(i + 1), "eps": float(sc[i]), "distinct": float(distinct[i]), "occurrences": int(n_used), "unseen": float(unseen[i])}
        for i in range(S)
    )
    return res.SpectrumResult(
        "geometric box counting", None, n_used, tuple(out), tuple(fal), levels,
        int(dl + 1) if dl >= 0 else None, int(cl + 1) if cl >= 0 else None,
        block, scheme, int(n_boot), int(seed), float(level), interval, tuple(flags),
    )


SpectrumResult = res.SpectrumResult

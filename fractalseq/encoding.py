"""The contractive (chaos-game / iterated-function-system) encoding.

Each symbol is a corner of a hypercube; the point of a stream after symbol
``s_t`` is ``x_t = k x_{t-1} + (1 - k) corner(s_t)``, starting at the centre
of the cube at each segment start.  With binary hypercube corners (the
default: the corner of code ``c`` has the binary digits of ``c`` as its
coordinates, in ``D = ceil(log2 A)`` dimensions) and ``k <= 1/2`` the maps do
not overlap, so the box of side ``k**n`` a point falls in is fixed by its
last ``n`` symbols and dimension–entropy relations ``D_q = h_q / ln(1/k)``
hold.  For larger ``k`` or crowded custom corners the maps overlap and those
relations do not hold; :func:`overlap_check` says which case applies.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fractalseq.words import _kernels as kernels
from fractalseq.errors import InputError, ParameterError
from fractalseq.stream import SymbolArray


def check_ratio(ratio: float) -> float:
    """Return ``ratio`` if ``0 < ratio < 1``; raise :class:`ParameterError` otherwise."""
    try:
        r = float(ratio)
    except (TypeError, ValueError):
        raise ParameterError(f"Ratio {ratio!r} is not a number; give k with 0 < k < 1, e.g. --ratio 0.5.") from None
    if not (0.0 < r < 1.0) or not math.isfinite(r):
        raise ParameterError(f"Ratio k = {ratio} is outside (0, 1); the maps must contract, e.g. --ratio 0.5.")
    return r


def corner_layout(alphabet_size: int, corners: np.ndarray | None = None) -> np.ndarray:
    """Corner coordinates, one row per code.

    Parameters
    ----------
    alphabet_size:
        Number of symbols A.
    corners:
        Optional custom ``(A, D)`` array of corner coordinates.  The default
        uses the binary digits of each code (most significant first) in
        ``D = max(1, ceil(log2 A))`` dimensions.
    """
    if corners is not None:
        c = np.asarray(corners, dtype=np.float64)
        if c.ndim != 2 or c.shape[0] != alphabet_size:
            raise ParameterError(
                f"Custom corners must be a table of {alphabet_size} rows (one per symbol); got shape {c.shape}."
            )
        if not np.all(np.isfinite(c)):
            raise ParameterError("Custom corners must be finite numbers.")
        return c
    dim = max(1, math.ceil(math.log2(alphabet_size))) if alphabet_size > 1 else 1
    codes = np.arange(alphabet_size)
    digits = (codes[:, None] >> np.arange(dim - 1, -1, -1)[None, :]) & 1
    return digits.astype(np.float64)


@dataclass(frozen=True)
class OverlapCheck:
    """Whether the images of the maps overlap, and so whether D_q = h_q / ln(1/k) holds."""

    overlapping: bool
    reason: str
    ratio: float
    min_corner_distance: float

    def to_dict(self) -> dict:
        return {
            "overlapping": self.overlapping,
            "reason": self.reason,
            "ratio": self.ratio,
            "min_corner_distance": self.min_corner_distance,
        }


def _pairwise_separation(c: np.ndarray, k: float, block: int = 256) -> tuple[float, bool]:
    """Smallest distance between two corners, and whether every pair is separated along some axis.

    Custom corners: pairs are compared a block of rows at a time, so memory stays ``O(block * A * D)``.
    """
    A = c.shape[0]
    extent = c.max(axis=0) - c.min(axis=0)
    dmin = np.inf
    sep_all = True
    for lo in range(0, A, block):
        hi = min(A, lo + block)
        diff = np.abs(c[lo:hi, None, :] - c[None, :, :])
        dist = np.sqrt((diff**2).sum(-1))
        rows = np.arange(lo, hi)
        dist[rows - lo, rows] = np.inf
        dmin = min(dmin, float(dist.min()))
        # image of the bounding box under map i: [k*lo + (1-k)c_i, k*hi + (1-k)c_i]; disjoint along axis d if
        # (1-k)|c_i,d - c_j,d| >= k*extent_d (touching allowed)
        sep = ((1 - k) * diff >= k * extent[None, None, :] - 1e-12).any(axis=-1)
        sep[rows - lo, rows] = True
        sep_all = sep_all and bool(sep.all())
    return float(dmin), sep_all


def overlap_check(ratio: float, corners: np.ndarray) -> OverlapCheck:
    """Check the open-set (non-overlap) condition for maps ``x -> k x + (1 - k) c``.

    The attractor lies in the convex hull of the corners; the image of the
    hull under the map of corner ``c`` is the hull scaled by ``k`` towards
    ``c``.  For corners on the vertices of a unit hypercube (binary digits),
    images are disjoint boxes exactly when ``k <= 1/2`` (for ``k = 1/2`` they
    touch on boundaries, which does not affect dimensions).  For custom
    corners a sufficient test is used: images of the bounding box of the
    corners are disjoint when ``k * extent < (1 - k) * separation`` along some
    axis for every pair of corners.
    """
    k = check_ratio(ratio)
    c = np.asarray(corners, dtype=np.float64)
    A = c.shape[0]
    if A < 2:
        return OverlapCheck(False, "one symbol: a single map, nothing to overlap", k, float("inf"))
    if c.shape == (A, max(1, math.ceil(math.log2(A)))) and np.array_equal(c, corner_layout(A)):
        # binary hypercube corners, decided analytically (no table over pairs): distinct corners differ by 1 in
        # some coordinate and every coordinate spans [0, 1], so the images k*[0,1]^D + (1-k)c are disjoint
        # boxes (touching at k = 1/2) exactly when (1 - k) >= k
        if k <= 0.5:
            return OverlapCheck(False, f"images of the maps are disjoint (k = {k:g})", k, 1.0)
        dmin = 1.0
    else:
        dmin, sep_all = _pairwise_separation(c, k)
        if dmin == 0:
            return OverlapCheck(True, "two symbols share a corner, so their maps coincide", k, 0.0)
        if sep_all:
            return OverlapCheck(False, f"images of the maps are disjoint (k = {k:g})", k, dmin)
    return OverlapCheck(
        True,
        f"k = {k:g} is too large for these corners: the images of the maps overlap, so boxes are not words "
        "and D_q = h_q / ln(1/k) does not hold (use k <= 1/2 with hypercube corners)",
        k,
        dmin,
    )


def points(arr: SymbolArray, ratio: float = 0.5, corners: np.ndarray | None = None, drop: int = 0) -> np.ndarray:
    """Points of the encoding, one per symbol (numba kernel).

    Parameters
    ----------
    arr:
        The stream.
    ratio:
        Contraction ratio k, 0 < k < 1.
    corners:
        Custom corners (default: binary hypercube corners).
    drop:
        Drop the first ``drop`` points of every segment (the transient that
        still remembers the starting point; REFERENCE-CHECKS rule 1).

    Returns
    -------
    ndarray of shape ``(n, D)`` (float64), with ``n = len(arr)`` minus dropped points.
    """
    k = check_ratio(ratio)
    layout = corner_layout(arr.alphabet.size, corners)
    origin = np.full(layout.shape[1], 0.5) if corners is None else layout.mean(axis=0)
    pts = kernels.chaos_points(arr.codes, arr.starts, layout, k, origin)
    if drop > 0:
        keep = np.ones(len(arr), dtype=bool)
        for a, b in arr.segment_bounds:
            keep[a : min(b, a + drop)] = False
        pts = pts[keep]
    return pts


def density_image(pts: np.ndarray, size: int = 512, bounds: tuple | None = None) -> np.ndarray:
    """Counts of points on a ``size`` x ``size`` grid over the first two coordinates.

    One-dimensional clouds are drawn against a zero second coordinate.
    """
    if size < 8 or size > 8192:
        raise ParameterError(f"Image size {size} is outside 8..8192 pixels.")
    if pts.shape[0] == 0:
        raise InputError("There are no points to draw; the input is empty or shorter than the dropped transient.")
    p = pts if pts.shape[1] >= 2 else np.column_stack([pts[:, 0], np.zeros(pts.shape[0])])
    if bounds is None:
        lo = np.zeros(2)
        span = np.ones(2)
        if (p[:, :2].min() < 0) or (p[:, :2].max() > 1):
            lo = p[:, :2].min(axis=0)
            span = np.maximum(p[:, :2].max(axis=0) - lo, 1e-12)
    else:
        lo = np.asarray(bounds[0], float)
        span = np.asarray(bounds[1], float) - lo
    return kernels.density_grid(np.ascontiguousarray(p[:, :2]), size, lo, span)

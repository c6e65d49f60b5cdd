"""Geometry against information: D_q * log2(1/k) beside the Rényi entropy rate h_q in bits.

For non-overlapping maps theory gives ``D_q * log2(1/k) = h_q`` (bits per
symbol): the box of side ``k**n`` holding a point is fixed by the last n
symbols.  Reading both sides off the same word counts would make the check
circular, so the geometric side is measured on the point cloud itself:

geometry (the verdict uses this)
    box counting of the encoded point cloud (:func:`fractalseq.encoding.points`,
    floating-point chaos game, transient dropped) on the grid of side
    ``k**m`` anchored at the corners' bounding box -- the natural partition of
    the encoding -- with its own scaling range and slope
    (:func:`fractalseq.dimensions._geometry.geometric_spectrum`).  When the theory holds
    these boxes are the cylinders of m-words, so a difference exposes a broken
    premise: overlapping or crowded corners, a ratio whose grid does not tile
    the cylinders, a wrong transient.
geometry on shifted grids (reported, not used in the verdict)
    the same with random grid offsets averaged on a torus: independent of the
    word partition, but its local slopes converge to D_q only geometrically in
    the depth (measured: 2-D four-state chain at 10^5 symbols, D_1 1.5% high
    over the 4 usable scales; 2-state chain at 10^6, still +0.002 at depth 12),
    so on the scales data allow it is biased by about 1-3% (REFERENCE-CHECKS A1
    reports the same for misaligned grids).
information
    the Rényi entropy rate from word statistics in the conditional form
    ``h_q = H_q(n+1) - H_q(n)`` at the middle of the automatic linear run
    (Miller-corrected Shannon, falling-factorial sums for ``q > 1``, distinct
    words for ``q = 0``), a different estimator from the slope over a range
    that the geometric side uses.

Both sides use the same blocks and seed for their bootstrap intervals.
Verdict per q: ``consistent`` when the two intervals overlap,
``inconsistent`` when they do not (the scaling of box masses over the range
measured and the converged conditional entropy disagree: a non-stationary
stream whose block entropies are curved, or a broken premise as above),
``too little data`` when either side has no estimate, and ``not applicable``
for overlapping maps (the identity does not hold there).  Theory gives the
identity for a mixture of stationary sources too, so a mixture as such is
not expected to be flagged.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Sequence

import numpy as np

from fractalseq.dimensions import _spectrum as sp
from fractalseq.entropy._renyi_rates import RateEstimate
from fractalseq.resampling import _bootstrap as bs
from fractalseq.resampling._options import Resampling, as_resampling
from fractalseq.errors import InputError, ParameterError
from fractalseq.results import Result
from fractalseq.stream import SymbolArray, SymbolStream

CONSISTENT = "consistent"
INCONSISTENT = "inconsistent"
TOO_LITTLE = "too little data"
NOT_APPLICABLE = "not applicable"



@dataclass(frozen=True)
class RateResult(Result):
    """Conditional-form Rényi rates for several q, with the bootstrap settings."""

    rates: tuple[RateEstimate, ...]
    block: bs.BlockLength | None
    n_boot: int
    seed: int
    length: int

    def get(self, q: float) -> RateEstimate:
        for r in self.rates:
            if r.q == float(q):
                return r
        raise KeyError(q)



def conditional_rates(
    arr: SymbolArray,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    order: int | None = None,
    resampling: Resampling | None = None,
    starve: float = sp.STARVE,
    corrected: bool = True,
) -> RateResult:
    """Rényi entropy rates ``h_q = H_q(n+1) - H_q(n)`` in bits, with block-bootstrap intervals.

    ``order`` (``n``) is automatic when ``None``: the middle of the linear
    run of ``H_q(n)`` chosen as in :mod:`fractalseq.dimensions._spectrum` (the block
    entropies have converged to a straight line there, and the data are not
    yet starved; for ``q <= 0`` every word is seen).  ``resampling``: the
    block-bootstrap settings (``None``: ``Resampling()``; ``Resampling.none()``: no interval).
    """
    qv = sp.check_qs(qs)
    rs = as_resampling(resampling)
    n_boot, seed, block_length, scheme, level, interval = rs.n_boot, rs.seed, rs.block_length, rs.scheme, rs.level, rs.interval
    if isinstance(arr, SymbolStream):
        arr = arr.to_array()
    if not isinstance(arr, SymbolArray):
        raise InputError("conditional_rates needs the stream (a SymbolArray or SymbolStream).")
    if len(arr) < 3:
        raise InputError("The stream has fewer than 3 symbols; an entropy rate needs more.")
    wc = sp._counts_for(arr, starve, None, None if order is None else order + 1)
    probe = sp._word_level_data(wc, None, qv, 0.5, wc.depth, starve, 0, seed, None, scheme, corrected)
    top = probe.data_limit + 1 if order is None else order + 1
    top = max(min(top, wc.depth), 1)
    block = bs.resolve_block(arr, top, block_length, scheme) if n_boot else None
    ld = sp._word_level_data(wc, arr, qv, 0.5, top, starve, n_boot, seed, block, scheme, corrected)
    ld.data_limit = min(probe.data_limit, top - 1)
    ld.complete_limit = min(probe.complete_limit, top - 1)
    rates = sp.rates_from(ld, qv, order, level, interval, corrected)
    return RateResult(tuple(rates), block, int(n_boot), int(seed), len(arr))


@dataclass(frozen=True)
class ConsistencyRow(Result):
    """One q: geometric dimension in bits beside the information rate, and the verdict."""

    q: float
    dimension: float
    dimension_low: float
    dimension_high: float
    geometry_bits: float
    geometry_low: float
    geometry_high: float
    information_bits: float
    information_low: float
    information_high: float
    difference: float
    verdict: str
    flags: tuple[str, ...]
    shifted_bits: float = math.nan
    shifted_low: float = math.nan
    shifted_high: float = math.nan



@dataclass(frozen=True)
class ConsistencyResult(Result):
    """The table, plus the two results it was built from."""

    ratio: float
    rows: tuple[ConsistencyRow, ...]
    geometry: sp.SpectrumResult
    information: RateResult
    flags: tuple[str, ...] = field(default=())
    shifted: sp.SpectrumResult | None = None

    def get(self, q: float) -> ConsistencyRow:
        for r in self.rows:
            if r.q == float(q):
                return r
        raise KeyError(q)



#: Floating-point slack when comparing interval ends (exact counts give zero-width intervals).
TOUCH = 1e-9


def verdict(g_low: float, g_high: float, i_low: float, i_high: float) -> str:
    """``consistent`` if the intervals overlap (within ``TOUCH``), ``inconsistent`` if not, ``too little data`` if either is missing."""
    vals = (g_low, g_high, i_low, i_high)
    if not all(math.isfinite(float(v)) for v in vals):
        return TOO_LITTLE
    return CONSISTENT if (g_low <= i_high + TOUCH and i_low <= g_high + TOUCH) else INCONSISTENT


def consistency_table(
    data: SymbolArray | SymbolStream,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    ratio: float = 0.5,
    corners: np.ndarray | None = None,
    resampling: Resampling | None = None,
    offsets: int = 4,
    starve: float = sp.STARVE,
    information: RateResult | None = None,
    levels: int | None = None,
) -> ConsistencyResult:
    """The D_q * log2(1/k) vs h_q table with intervals and a verdict per q.

    Parameters
    ----------
    data:
        The stream.
    qs:
        Orders q.
    ratio, corners:
        The encoding (hypercube corners by default).
    resampling:
        Block bootstrap settings (:class:`~fractalseq.resampling.Resampling`; ``None``:
        ``Resampling()``), shared by both sides (same blocks).
    offsets:
        Random grid offsets averaged for the shifted-grid column (0: skip it).
    information:
        The information side already computed (:func:`conditional_rates` of
        this stream with the same settings, or the ``rates`` of
        :func:`fractalseq.dimensions._spectrum.dimension_spectrum`, which are the same
        numbers); its block length is then used for the geometric side too.
    levels:
        Number of scales ``k, k^2, ...`` of the geometric side (at least
        :data:`fractalseq.dimensions._spectrum.MIN_LEVELS`); default: down to the depth
        where word counts become starved of data, as in the spectrum
        (``SpectrumResult.data_limit``, which a caller may pass to save
        counting the words again).

    Returns
    -------
    ConsistencyResult
    """
    from fractalseq import encoding
    from fractalseq.dimensions import _geometry as geometry

    arr = data.to_array() if isinstance(data, SymbolStream) else data
    if not isinstance(arr, SymbolArray):
        raise InputError("consistency_table needs the stream (a SymbolArray or SymbolStream).")
    qv = sp.check_qs(qs)
    k = encoding.check_ratio(ratio)
    rs = as_resampling(resampling)
    if len(arr) <= sp.TRANSIENT + 10:
        raise InputError(f"The stream has {len(arr)} symbols; the consistency table needs more than {sp.TRANSIENT + 10}.")
    overlapping, reason = sp._overlapping(arr.alphabet, k, corners)
    if information is None:
        info = conditional_rates(arr, qv, resampling=rs, starve=starve)
    else:
        missing = [float(q) for q in qv if all(r.q != float(q) for r in information.rates)]
        if missing or information.length != len(arr):
            raise ParameterError("The information side given was computed on another stream or other orders q; recompute it.", parameter="information")
        info = information
    # the geometric side uses the same block length (same blocks, same seed)
    ell = info.block if info.block is not None else rs.block_length
    if levels is None:
        wc = sp._counts_for(arr, starve, None, None)
        probe = sp._word_level_data(wc, None, qv, k, wc.depth, starve, 0, rs.seed, None, rs.scheme, True)
        top = max(probe.data_limit + 1, sp.MIN_LEVELS)
    else:
        if not isinstance(levels, (int, np.integer)) or levels < 1:
            raise ParameterError(f"The number of scales must be a positive whole number, not {levels!r}.", parameter="levels")
        top = max(int(levels), sp.MIN_LEVELS)
    pts = encoding.points(arr, k, corners, drop=0)
    layout = encoding.corner_layout(arr.alphabet.size, corners)
    origin = layout.min(axis=0)  # grids are anchored on the corners' bounding box
    extent = float((layout.max(axis=0) - origin).max()) or 1.0
    scales = extent * k ** np.arange(1, top + 1, dtype=float)
    valid = geometry.transient_mask(arr, sp.TRANSIENT)
    flags: list[str] = []
    if overlapping:
        flags.append(sp.OVERLAP + ": " + reason)
    tiles = abs((1 - k) / k - round((1 - k) / k)) < 1e-9
    if not tiles:
        flags.append(f"the grid of side k^m does not tile the cylinders for k = {k:g}; the geometric side carries lattice bias")
    common = dict(
        scales=scales, resampling=replace(rs, block_length=ell),
        valid=valid, falpha=False, starve=starve, origin=origin,
    )
    geo = geometry.geometric_spectrum(pts, qv, aligned=True, unit_cube=(corners is None), **common)
    shifted = None
    if offsets:
        shifted = geometry.geometric_spectrum(pts, qv, offsets=offsets, period=extent, **common)
    factor = math.log2(1.0 / k)
    rows = []
    for q in qv:
        g = geo.get(float(q))
        h = info.get(float(q))
        gl, gh = g.low * factor, g.high * factor
        v = NOT_APPLICABLE if overlapping else verdict(float(gl), float(gh), h.low, h.high)
        extra = {}
        if shifted is not None:
            s_ = shifted.get(float(q))
            extra = dict(shifted_bits=s_.estimate * factor, shifted_low=s_.low * factor, shifted_high=s_.high * factor)
        rows.append(
            ConsistencyRow(
                float(q), g.estimate, g.low, g.high, g.estimate * factor, gl, gh, h.estimate, h.low, h.high,
                g.estimate * factor - h.estimate, v, tuple(dict.fromkeys(g.flags + h.flags)), **extra,
            )
        )
    return ConsistencyResult(k, tuple(rows), geo, info, tuple(flags), shifted)

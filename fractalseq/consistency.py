"""Geometry against information: D_q * log2(1/k) beside the Rényi entropy rate h_q in bits.

For non-overlapping maps theory gives ``D_q * log2(1/k) = h_q`` (bits per
symbol): the box of side ``k**n`` holding a point is fixed by the last n
symbols.  If both sides were read off the same word counts the check would
be circular (they would agree by construction), so the two sides are
measured independently:

geometry
    box counting of the encoded point cloud (:func:`fractalseq.encoding.points`)
    on grids of side ``k**m`` shifted by random offsets (averaged, seeded),
    after dropping the transient; slope over an automatic scaling range;
    block-bootstrap interval widened by the lattice spread of the offsets
    (:func:`fractalseq.geometry.geometric_spectrum`).
information
    the Rényi entropy rate from word statistics in the conditional form
    ``h_q = H_q(n+1) - H_q(n)`` at the deepest order ``n`` the data support
    (Miller-corrected Shannon, falling-factorial sums for ``q > 1``, distinct
    words for ``q = 0``), with a block-bootstrap interval.  This is a
    different estimator from the slope over a range that the geometric side
    uses.

Verdict per q: ``consistent`` when the two intervals overlap,
``inconsistent`` when they do not (which suggests a non-stationary stream or
a mixture of sources: the scaling of box masses across scales and the
deepest conditional entropy then disagree), ``too little data`` when either
side has no estimate, and ``not applicable`` for overlapping maps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from fractalseq import bootstrap as bs
from fractalseq import spectrum as sp
from fractalseq.errors import InputError
from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.words import count_words

CONSISTENT = "consistent"
INCONSISTENT = "inconsistent"
TOO_LITTLE = "too little data"
NOT_APPLICABLE = "not applicable"


RateEstimate = sp.RateEstimate


@dataclass(frozen=True)
class RateResult:
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

    def to_dict(self) -> dict:
        return {
            "rates": [r.to_dict() for r in self.rates],
            "block": self.block.to_dict() if self.block else None,
            "n_boot": self.n_boot,
            "seed": self.seed,
            "length": self.length,
        }


def conditional_rates(
    arr: SymbolArray,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    order: int | None = None,
    n_boot: int = 200,
    seed: int = 0,
    block_length: int | None = None,
    scheme: str = "nonoverlapping",
    level: float = 0.95,
    interval: str = "percentile",
    starve: float = sp.STARVE,
    corrected: bool = True,
) -> RateResult:
    """Rényi entropy rates ``h_q = H_q(n+1) - H_q(n)`` in bits, with block-bootstrap intervals.

    ``order`` (``n``) is automatic when ``None``: the middle of the linear
    run of ``H_q(n)`` chosen as in :mod:`fractalseq.spectrum` (the block
    entropies have converged to a straight line there, and the data are not
    yet starved; for ``q <= 0`` every word is seen).
    """
    qv = sp.check_qs(qs)
    sp.check_boot(n_boot, level, interval, scheme)
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
class ConsistencyRow:
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

    def to_dict(self) -> dict:
        return {
            "q": self.q,
            "dimension": self.dimension,
            "dimension_low": self.dimension_low,
            "dimension_high": self.dimension_high,
            "geometry_bits": self.geometry_bits,
            "geometry_low": self.geometry_low,
            "geometry_high": self.geometry_high,
            "information_bits": self.information_bits,
            "information_low": self.information_low,
            "information_high": self.information_high,
            "difference": self.difference,
            "verdict": self.verdict,
            "flags": list(self.flags),
        }


@dataclass(frozen=True)
class ConsistencyResult:
    """The table, plus the two results it was built from."""

    ratio: float
    rows: tuple[ConsistencyRow, ...]
    geometry: sp.SpectrumResult
    information: RateResult
    flags: tuple[str, ...] = field(default=())

    def get(self, q: float) -> ConsistencyRow:
        for r in self.rows:
            if r.q == float(q):
                return r
        raise KeyError(q)

    def to_dict(self) -> dict:
        return {
            "ratio": self.ratio,
            "rows": [r.to_dict() for r in self.rows],
            "geometry": self.geometry.to_dict(),
            "information": self.information.to_dict(),
            "flags": list(self.flags),
        }


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
    n_boot: int = 200,
    seed: int = 0,
    block_length: int | None = None,
    scheme: str = "nonoverlapping",
    offsets: int = 8,
    level: float = 0.95,
    interval: str = "percentile",
    starve: float = sp.STARVE,
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
    n_boot, seed, block_length, scheme, level, interval:
        Block bootstrap settings, shared by both sides (same blocks).
    offsets:
        Random grid offsets averaged on the geometric side.

    Returns
    -------
    ConsistencyResult
    """
    from fractalseq import encoding, geometry

    arr = data.to_array() if isinstance(data, SymbolStream) else data
    if not isinstance(arr, SymbolArray):
        raise InputError("consistency_table needs the stream (a SymbolArray or SymbolStream).")
    qv = sp.check_qs(qs)
    k = encoding.check_ratio(ratio)
    sp.check_boot(n_boot, level, interval, scheme)
    if len(arr) <= sp.TRANSIENT + 10:
        raise InputError(f"The stream has {len(arr)} symbols; the consistency table needs more than {sp.TRANSIENT + 10}.")
    overlapping, reason = sp._overlapping(arr.alphabet, k, corners)
    info = conditional_rates(arr, qv, n_boot=n_boot, seed=seed, block_length=block_length, scheme=scheme,
                             level=level, interval=interval, starve=starve)
    # the geometric side uses the same block length (same blocks, same seed)
    ell = info.block.length if info.block is not None else block_length
    wc = sp._counts_for(arr, starve, None, None)
    probe = sp._word_level_data(wc, None, qv, k, wc.depth, starve, 0, seed, None, scheme, True)
    top = max(probe.data_limit + 1, sp.MIN_LEVELS)
    scales = k ** np.arange(1, top + 1, dtype=float)
    pts = encoding.points(arr, k, corners, drop=0)
    layout = encoding.corner_layout(arr.alphabet.size, corners)
    origin = layout.min(axis=0)  # the grid is anchored on the corners' bounding box, wrapped on it
    period = float((layout.max(axis=0) - origin).max()) or 1.0
    valid = geometry.transient_mask(arr, sp.TRANSIENT)
    geo = geometry.geometric_spectrum(
        pts, qv, scales=scales, offsets=offsets, seed=seed, n_boot=n_boot, block_length=ell, scheme=scheme,
        level=level, interval=interval, valid=valid, falpha=False, starve=starve, period=period, origin=origin,
    )
    factor = math.log2(1.0 / k)
    rows = []
    flags: list[str] = []
    if overlapping:
        flags.append(sp.OVERLAP + ": " + reason)
    for q in qv:
        g = geo.get(float(q))
        h = info.get(float(q))
        gl, gh = g.low * factor, g.high * factor
        v = NOT_APPLICABLE if overlapping else verdict(float(gl), float(gh), h.low, h.high)
        rows.append(
            ConsistencyRow(
                float(q), g.estimate, g.low, g.high, g.estimate * factor, gl, gh, h.estimate, h.low, h.high,
                g.estimate * factor - h.estimate, v, tuple(dict.fromkeys(g.flags + h.flags)),
            )
        )
    return ConsistencyResult(k, tuple(rows), geo, info, tuple(flags))

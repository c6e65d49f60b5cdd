"""Ordinal patterns of a numeric column read block by block: tie keys, the delayed-window kernel's carry, pattern ends.

Helpers of :func:`fractalseq.sources.numeric.symbol_chunks` (the rules are in the
:mod:`fractalseq.sources.numeric` docstring): :class:`Keys` gives every value its tie
key in file order (its position, or a uniform number from ``numpy.random.default_rng(seed)``
for a dither, the same numbers whatever the block sizes); :func:`general_ordinal` runs
:func:`fractalseq.sources.kernels.ordinal_codes_delay` on one block and carries the last
``(m - 1) * delay`` values and keys; :func:`pattern_ends` says which values end a symbol.
"""

from __future__ import annotations

import numpy as np

from fractalseq.sources import kernels as K

__all__ = ["Keys", "general_ordinal", "pattern_ends"]


def pattern_ends(valid: np.ndarray, order: int, delay: int = 1) -> np.ndarray:
    """Which values end an ordinal pattern the reader emits: one boolean per value, in file order.

    ``valid`` marks the values that are present (NaN, a missing value or an inserted time gap, is
    ``False``), for the whole column as :func:`value_blocks` yields it.  The value at ``t`` ends a
    pattern when ``t, t - delay, ..., t - (order - 1) delay`` are all present, so
    ``np.flatnonzero(pattern_ends(...))[i]`` is the value (row) where symbol ``i`` ends: what a
    report needs to give a symbol's position in the file or in the time column.
    """
    v = np.asarray(valid, dtype=bool)
    span = (int(order) - 1) * int(delay)
    out = v.copy()
    for j in range(1, int(order)):
        lag = j * int(delay)
        out[lag:] &= v[:-lag] if lag < v.size else False
        out[:min(lag, v.size)] = False
    if span >= v.size:
        out[:] = False
    return out


class Keys:
    """Tie keys of the values in file order: their position (ties by time) or a seeded uniform number (dither)."""

    def __init__(self, ties: str, seed: int) -> None:
        self.rng = np.random.default_rng(seed) if ties == "dither" else None
        self.seen = 0
        self.carry = np.zeros(0)

    def next(self, n: int) -> np.ndarray:
        """Keys of the next ``n`` values (the same numbers whatever the block sizes)."""
        if self.rng is not None:
            out = self.rng.random(n)
        else:
            out = np.arange(self.seen, self.seen + n, dtype=np.float64)
        self.seen += n
        return out


def general_ordinal(
    x: np.ndarray, fresh: int, skip: int, key: Keys, m: int, delay: int, in_seg: int,
    codes: np.ndarray, starts: np.ndarray, fact: np.ndarray,
) -> tuple[int, int, int, int, np.ndarray]:
    """One block of :func:`fractalseq.sources.kernels.ordinal_codes_delay`; carries the last ``(m-1) delay`` values and keys."""
    k = key.next(fresh)
    keys = np.concatenate([key.carry, k]) if key.carry.size else k
    nc, ns, in_seg, nan = K.ordinal_codes_delay(x, keys, m, delay, skip, in_seg, codes, starts, fact)
    span = (m - 1) * delay
    key.carry = keys[-span:].copy() if span else keys[:0]
    return nc, ns, in_seg, nan, (x[-span:].copy() if span else x[:0])

"""Which blocks each replicate draws (non-overlapping, moving or stationary), seeded."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from fractalseq.errors import InputError, ParameterError


SCHEMES = ("nonoverlapping", "moving", "stationary")


@dataclass(frozen=True)
class ResamplePlan:
    """The blocks of every replicate: replicate ``r`` uses ``starts[offsets[r]:offsets[r+1]]`` (and ``lens``)."""

    length: int
    block_length: int
    scheme: str
    seed: int
    n_boot: int
    starts: np.ndarray
    lens: np.ndarray
    offsets: np.ndarray

    def blocks(self, r: int) -> tuple[np.ndarray, np.ndarray]:
        a, b = self.offsets[r], self.offsets[r + 1]
        return self.starts[a:b], self.lens[a:b]

    def block_weights(self) -> np.ndarray:
        """``(n_boot, B)`` multinomial weights of the disjoint blocks (non-overlapping scheme only)."""
        if self.scheme != "nonoverlapping":
            raise ParameterError("Block weights exist only for the non-overlapping scheme.", parameter="scheme")
        B = -(-self.length // self.block_length)
        W = np.zeros((self.n_boot, B), dtype=np.int64)
        for r in range(self.n_boot):  # one replicate at a time (no second copy of the plan)
            s, _ = self.blocks(r)
            W[r] = np.bincount(s // self.block_length, minlength=B)
        return W


def make_plan(length: int, block_length: int, n_boot: int, seed: int = 0, scheme: str = "nonoverlapping") -> ResamplePlan:
    """Draw the blocks of ``n_boot`` replicates (``numpy.random.default_rng(seed)``)."""
    if scheme not in SCHEMES:
        raise ParameterError(f"Unknown bootstrap scheme {scheme!r}; use one of {', '.join(SCHEMES)}.", parameter="scheme")
    T, ell = int(length), int(block_length)
    if T < 1:
        raise InputError("There is nothing to resample: the stream is empty.")
    ell = max(1, min(ell, T))
    from fractalseq.guards import check_memory

    blocks = -(-T // ell)
    check_memory(24 * int(n_boot) * blocks, f"{int(n_boot)} bootstrap replicates of {blocks} blocks each (24 bytes a block)",
                 "n_boot", "use fewer replicates or longer blocks")
    rng = np.random.default_rng(seed)
    if scheme == "nonoverlapping":
        nb = -(-T // ell)
        starts = rng.integers(0, nb, size=(n_boot, nb)).astype(np.int64, copy=False)
        starts *= ell  # in place: the plan's arrays are its only length-sized memory
        lens = np.subtract(T, starts)
        np.minimum(lens, ell, out=lens)
        offsets = np.arange(n_boot + 1, dtype=np.int64) * nb
        return ResamplePlan(T, ell, scheme, seed, n_boot, starts.ravel(), lens.ravel(), offsets)
    if scheme == "moving":
        nb = -(-T // ell)
        starts = rng.integers(0, T - ell + 1, size=(n_boot, nb)).astype(np.int64)
        lens = np.full((n_boot, nb), ell, dtype=np.int64)
        lens[:, -1] = T - ell * (nb - 1)
        offsets = np.arange(n_boot + 1, dtype=np.int64) * nb
        return ResamplePlan(T, ell, scheme, seed, n_boot, starts.ravel(), lens.ravel(), offsets)
    # stationary: geometric lengths with mean ell, uniform starts, circular
    s_parts, l_parts, offs = [], [], [0]
    p = 1.0 / ell
    for _ in range(n_boot):
        total = 0
        ls, ss = [], []
        while total < T:
            k = max(8, int(2 * (T - total) / ell) + 8)
            L = rng.geometric(p, size=k).astype(np.int64)
            S = rng.integers(0, T, size=k).astype(np.int64)
            cum = total + np.cumsum(L)
            j = int(np.searchsorted(cum, T))  # first index reaching T
            if j < k:
                L = L[: j + 1].copy()
                S = S[: j + 1]
                L[-1] -= int(cum[j] - T)
            ls.append(L)
            ss.append(S)
            total += int(L.sum())
        L = np.concatenate(ls)
        S = np.concatenate(ss)
        s_parts.append(S)
        l_parts.append(L)
        offs.append(offs[-1] + L.size)
    return ResamplePlan(
        T, ell, scheme, seed, n_boot,
        np.concatenate(s_parts) if s_parts else np.zeros(0, np.int64),
        np.concatenate(l_parts) if l_parts else np.zeros(0, np.int64),
        np.asarray(offs, dtype=np.int64),
    )


@njit(cache=True)
def _tally_draws(draws, wt):
    """``wt[b, r]`` = how often replicate ``r`` drew block ``b``."""
    R, nb = draws.shape
    for r in range(R):
        for j in range(nb):
            wt[draws[r, j], r] += 1


def block_major_weights(length: int, block_length: int, n_boot: int, seed: int = 0) -> np.ndarray:
    """``(blocks, n_boot)`` int32 weights of the non-overlapping scheme: ``make_plan(...).block_weights().T``.

    The same draws as :func:`make_plan` (one call of ``integers`` on ``default_rng(seed)``, taken as
    int32: numpy gives the same numbers for either width), tallied straight into the block-major table
    that :func:`fractalseq.resampling._replicates.replicate_spectra` uses, so the plan's starts,
    lengths and replicate-major weights (28 bytes per replicate and block) are never built: 8 bytes
    per replicate and block while drawing, 4 after.
    """
    T, ell = int(length), int(block_length)
    if T < 1:
        raise InputError("There is nothing to resample: the stream is empty.")
    ell = max(1, min(ell, T))
    from fractalseq.guards import check_memory

    nb = -(-T // ell)
    check_memory(8 * int(n_boot) * nb, f"{int(n_boot)} bootstrap replicates of {nb} blocks each (8 bytes a block)",
                 "n_boot", "use fewer replicates or longer blocks")
    draws = np.random.default_rng(seed).integers(0, nb, size=(n_boot, nb), dtype=np.int32)
    wt = np.zeros((nb, n_boot), dtype=np.int32)
    if n_boot:
        _tally_draws(draws, wt)
    return wt

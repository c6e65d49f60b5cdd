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


#: Draws taken from the generator at a time while tallying (16 MiB of int32).
DRAW_PIECE = 1 << 22

#: Table types tried in order: the first one that holds every tally is kept.
WEIGHT_DTYPES = (np.uint8, np.uint16, np.int32)


@njit(cache=True)
def _tally_piece(draws, start, first, nb, wt, top):
    """Add ``draws[start:]`` to ``wt``; stop before a tally would pass ``top``.

    ``draws`` are the flat ``(replicates, blocks)`` draws from flat index ``first`` on, so draw ``i``
    belongs to replicate ``(first + i) // nb``; ``wt[b, r]`` counts replicate ``r``'s draws of block
    ``b``.  Returns the index of the first draw not added (``draws.size``: all added).
    """
    for i in range(start, draws.size):
        r = (first + i) // nb
        b = draws[i]
        if wt[b, r] >= top:
            return i
        wt[b, r] += 1
    return draws.size


def _largest(dtype) -> int:
    """Largest tally a weight table of ``dtype`` holds."""
    return int(np.iinfo(dtype).max)


def block_major_weights(length: int, block_length: int, n_boot: int, seed: int = 0, piece: int = DRAW_PIECE) -> np.ndarray:
    """``(blocks, n_boot)`` weights of the non-overlapping scheme: ``make_plan(...).block_weights().T``.

    The same draws as :func:`make_plan` (``integers(0, blocks)`` on ``default_rng(seed)``, replicate
    after replicate), taken as int32 in pieces of :data:`DRAW_PIECE` (numpy's bounded 32-bit draws
    keep their state in the generator, so the pieces give the numbers of one whole call) and tallied
    straight into the block-major table that
    :func:`fractalseq.resampling._streamed.streamed_replicate_spectra` reads.  The table starts as
    uint8 and is widened (uint16, then int32) only when a tally would pass the type's largest value,
    so it holds the same numbers as an int32 table: one byte per replicate and block in practice
    (a block's weight is multinomial with mean 1), and the plan's starts, lengths and replicate-major
    weights (28 bytes per replicate and block) are never built.

    ``piece`` (draws held at once) changes no number, only the memory of the draws.
    """
    T, ell = int(length), int(block_length)
    if T < 1:
        raise InputError("There is nothing to resample: the stream is empty.")
    ell = max(1, min(ell, T))
    from fractalseq.guards import check_memory

    nb = -(-T // ell)
    R = int(n_boot)
    check_memory(R * nb + 4 * min(int(piece), R * nb), f"{R} bootstrap replicates of {nb} blocks each (1 byte a block)",
                 "n_boot", "use fewer replicates or longer blocks")
    rng = np.random.default_rng(seed)
    kinds = iter(WEIGHT_DTYPES)
    dtype = next(kinds)
    wt = np.zeros((nb, R), dtype=dtype)
    top = _largest(dtype)
    total = R * nb
    piece = max(int(piece), 1)
    for first in range(0, total, piece):
        draws = rng.integers(0, nb, size=min(piece, total - first), dtype=np.int32)
        # one flat piece of the (R, nb) draws; the kernel's replicate is (first + i) // nb
        i = 0
        while True:
            i = _tally_piece(draws, i, first, nb, wt, top)
            if i == draws.size:
                break
            dtype = next(kinds)  # a tally would overflow: widen, keep the counts, go on
            wt = wt.astype(dtype)
            top = _largest(dtype)
    return wt

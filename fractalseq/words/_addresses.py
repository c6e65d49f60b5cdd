"""Packed word addresses: encoding and decoding them, and the small table helpers built on them.

A word ``w_1 .. w_n`` over ``b``-bit codes has the address ``sum_i w_i << (b * (n - i))``: the
first symbol is the most significant, so numerical order is lexicographic order and the
``m``-symbol prefix is ``address >> (b * (n - m))`` (see :mod:`fractalseq.words._kernels`).
"""

from __future__ import annotations

from typing import Iterable

import numpy as np

__all__ = ["absent_prefixes", "decode_address", "encode_address", "reduce_tails"]


def encode_address(codes: Iterable[int], bits: int) -> int:
    """Packed address of a word given by its codes (first symbol most significant)."""
    a = 0
    for c in codes:
        a = (a << bits) | int(c)
    return a


def decode_address(address: int, n: int, bits: int) -> list[int]:
    """Codes of the n-word with the given address."""
    mask = (1 << bits) - 1
    return [(address >> (bits * (n - 1 - i))) & mask for i in range(n)]


def absent_prefixes(sorted_leaf: np.ndarray, prefixes: np.ndarray, shift: int, key_bits: int) -> int:
    """How many of the (few) ``prefixes`` start no leaf word (leaf words sorted; prefix = word >> shift)."""
    if sorted_leaf.size == 0:
        return int(prefixes.size)
    lo_vals = (prefixes << np.uint64(shift)).astype(sorted_leaf.dtype)
    lo = np.searchsorted(sorted_leaf, lo_vals, side="left")
    top = np.uint64(1) << np.uint64(key_bits - shift) if key_bits - shift < 64 else None
    nxt = prefixes + np.uint64(1)
    overflow = (nxt >= top) if top is not None else np.zeros(prefixes.size, bool)
    hi_vals = np.where(overflow, 0, nxt << np.uint64(shift)).astype(sorted_leaf.dtype)
    hi = np.where(overflow, sorted_leaf.size, np.searchsorted(sorted_leaf, hi_vals, side="left"))
    return int(np.count_nonzero(hi == lo))


def reduce_tails(lens: list[np.ndarray], addrs: list[np.ndarray], cnts: list[np.ndarray]):
    """Segment-end words of several tables as one: sorted by (length, address), counts of equal words added."""
    tl = np.concatenate(lens).astype(np.uint8) if lens else np.zeros(0, np.uint8)
    ta = np.concatenate(addrs).astype(np.uint64) if addrs else np.zeros(0, np.uint64)
    tc = np.concatenate(cnts).astype(np.int64) if cnts else np.zeros(0, np.int64)
    if tl.size == 0:
        return tl, ta, tc
    order = np.lexsort((ta, tl))
    tl, ta, tc = tl[order], ta[order], tc[order]
    new = np.ones(tl.size, dtype=bool)
    new[1:] = (tl[1:] != tl[:-1]) | (ta[1:] != ta[:-1])
    starts = np.flatnonzero(new)
    return tl[starts], ta[starts], np.add.reduceat(tc, starts).astype(np.int64)

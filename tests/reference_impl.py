"""Slow, obviously-correct reference implementations used only by the tests."""

from __future__ import annotations

from collections import Counter

import numpy as np


def segments_of(codes, starts):
    """Split a code list at the given segment starts."""
    bounds = sorted(set(int(s) for s in starts) | {0}) + [len(codes)]
    return [list(codes[a:b]) for a, b in zip(bounds[:-1], bounds[1:]) if b > a]


def word_counts(codes, starts, depth):
    """Counter of word tuples for every length 1..depth, never across segment starts."""
    out = {n: Counter() for n in range(1, depth + 1)}
    for seg in segments_of(list(int(c) for c in codes), starts):
        for n in range(1, depth + 1):
            for i in range(len(seg) - n + 1):
                out[n][tuple(seg[i : i + n])] += 1
    return out


def chaos_points(codes, starts, corners, ratio):
    """Plain-Python chaos game: x_t = k x_{t-1} + (1-k) corner(s_t), restart at the centre per segment."""
    dim = len(corners[0])
    start_set = set(int(s) for s in starts) | {0}
    pts = []
    x = [0.5] * dim
    for t, c in enumerate(codes):
        if t in start_set:
            x = [0.5] * dim
        x = [ratio * x[d] + (1 - ratio) * corners[int(c)][d] for d in range(dim)]
        pts.append(list(x))
    return np.array(pts, dtype=float).reshape(len(codes), dim)


def thue_morse(n):
    """First n letters of the Thue–Morse word (parity of the binary digit sum)."""
    return np.array([bin(i).count("1") % 2 for i in range(n)], dtype=np.uint8)


def fibonacci_word(n):
    """First n letters of the Fibonacci word (0 -> 01, 1 -> 0)."""
    w = "0"
    while len(w) < n:
        w = "".join("01" if ch == "0" else "0" for ch in w)
    return np.array([int(ch) for ch in w[:n]], dtype=np.uint8)

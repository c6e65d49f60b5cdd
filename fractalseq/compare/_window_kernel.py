"""The sliding-window kernel of a scan: word and context tables updated as the window slides (O(1) per symbol)."""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from fractalseq.words._kernels import AT_START, _segment_words


@njit(cache=True)
def _xlx(c):
    return c * math.log(c) if c > 0 else 0.0


@njit(cache=True)
def window_counts(codes, starts, depth, bits, window, step, n_windows):
    """Per window: words N, distinct words K_n, distinct contexts K_{n-1}, and
    sums ``sum c ln c`` over words and over contexts (the context of a word is
    its first ``n - 1`` symbols).

    Returns ``(N, Kw, Kc, Sw, Sc)`` arrays of length ``n_windows``.
    """
    T = codes.shape[0]
    words = np.empty(T, dtype=np.uint64)
    has_word = np.zeros(T, dtype=np.bool_)  # where a word of the segment starts
    _segment_words(codes, starts, depth, bits, T, AT_START, 0, words, has_word)
    cw = np.zeros(1 << (bits * depth), dtype=np.int64)
    cc = np.zeros(1 << (bits * (depth - 1)), dtype=np.int64)
    N = np.zeros(n_windows, dtype=np.int64)
    Kw = np.zeros(n_windows, dtype=np.int64)
    Kc = np.zeros(n_windows, dtype=np.int64)
    Sw = np.zeros(n_windows)
    Sc = np.zeros(n_windows)
    n = 0
    kw = 0
    kc = 0
    sw = 0.0
    sc = 0.0
    lo = 0  # words at positions [lo, hi) are in the tables
    hi = 0
    for j in range(n_windows):
        s0 = j * step
        e0 = s0 + window - depth + 1  # words must end inside the window
        while lo < s0:
            if lo < hi:
                if has_word[lo]:
                    a = np.int64(words[lo])
                    c = cw[a]
                    sw += _xlx(c - 1) - _xlx(c)
                    cw[a] = c - 1
                    if c == 1:
                        kw -= 1
                    x = a >> (bits)
                    c = cc[x]
                    sc += _xlx(c - 1) - _xlx(c)
                    cc[x] = c - 1
                    if c == 1:
                        kc -= 1
                    n -= 1
            lo += 1
        if hi < lo:
            hi = lo
        while hi < e0:
            if has_word[hi]:
                a = np.int64(words[hi])
                c = cw[a]
                sw += _xlx(c + 1) - _xlx(c)
                cw[a] = c + 1
                if c == 0:
                    kw += 1
                x = a >> (bits)
                c = cc[x]
                sc += _xlx(c + 1) - _xlx(c)
                cc[x] = c + 1
                if c == 0:
                    kc += 1
                n += 1
            hi += 1
        N[j] = n
        Kw[j] = kw
        Kc[j] = kc
        Sw[j] = sw
        Sc[j] = sc
    return N, Kw, Kc, Sw, Sc

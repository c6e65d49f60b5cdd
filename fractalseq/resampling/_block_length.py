"""How long the resampled blocks are: Politis & White's rule on a surprisal series, or the user's length.

Politis & White (2004, Econometric Reviews 23:53; corrected by Patton, Politis
& White 2009, Econometric Reviews 28:372) on the series of conditional
surprisals ``-ln p(x_t | previous symbols)``, floored at ``BLOCK_MULTIPLE``
times the deepest word length and capped so that at least ``MIN_BLOCKS``
blocks remain.  The rule used is reported with every result.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError
from fractalseq.results import Result
from fractalseq.resampling._word_labels import word_labels
from fractalseq.stream import SymbolArray


#: Block length floor, in multiples of the deepest word length used.
BLOCK_MULTIPLE = 10


#: A replicate needs at least this many blocks (else intervals are flagged).
MIN_BLOCKS = 10


def autocovariances(x: np.ndarray, max_lag: int, segment: int | None = None) -> np.ndarray:
    """``sum_t x_t x_{t+k} / n`` for ``k = 0..max_lag`` (``x`` already centred).

    Computed segment by segment with FFTs of a little more than the segment
    plus ``max_lag`` points (each segment correlated with itself extended by
    ``max_lag`` points), so the cost grows like ``n log(segment)`` and the
    memory like a few segments, instead of one FFT of ``2n`` points.
    """
    from scipy import fft as sfft

    x = np.ascontiguousarray(x, dtype=np.float64)
    n = x.size
    M = int(min(max(max_lag, 0), max(n - 1, 0)))
    L = int(segment) if segment else max(4 * M, 1 << 14)
    L = max(L, 1)
    N = sfft.next_fast_len(L + M, real=True)
    S = -(-n // L)
    out = np.zeros(M + 1)
    batch = max(1, (1 << 22) // N)
    for s0 in range(0, S, batch):
        s1 = min(S, s0 + batch)
        a = np.zeros((s1 - s0, N))
        b = np.zeros((s1 - s0, N))
        for i, s in enumerate(range(s0, s1)):  # past the end the rows stay zero (no padded copy of x)
            seg = x[s * L : s * L + L]
            a[i, : seg.size] = seg
            seg = x[s * L : s * L + L + M]
            b[i, : seg.size] = seg
        fa = sfft.rfft(a, axis=1)
        fb = sfft.rfft(b, axis=1)
        out += sfft.irfft(np.conj(fa) * fb, N, axis=1)[:, : M + 1].sum(axis=0)
    return out / n


def politis_white(series: np.ndarray) -> tuple[float, float]:
    """Automatic block lengths of Politis & White (2004) with the 2009 correction.

    Flat-top lag window, ``m`` = first lag after which ``K_N = max(5, sqrt(log10 N))``
    autocorrelations are all below ``2 sqrt(log10 N / N)``, ``M = 2 m``;
    ``G = sum lambda(k/M) |k| R(k)``, ``g = sum lambda(k/M) R(k)``;
    ``b = (2 G^2 / D)^(1/3) N^(1/3)`` with ``D = 2 g^2`` (stationary) or
    ``4/3 g^2`` (circular/moving blocks).  (Formulas as recalled from
    Politis & White 2004, Econometric Reviews 23:53-70, and Patton, Politis &
    White 2009, Econometric Reviews 28:372-375 -- from memory.)

    Returns
    -------
    (stationary, moving) block lengths, floats >= 1 (1 for a constant or white series).
    """
    x = np.asarray(series, dtype=np.float64)
    x = x[np.isfinite(x)]  # a copy, centred in place below
    n = x.size
    if n < 16:
        return 1.0, 1.0
    x -= x.mean()
    var = float(np.sum(x * x)) / n  # not BLAS: thread-count independent bits
    if var <= 1e-300:
        return 1.0, 1.0
    kn = max(5, int(math.sqrt(math.log10(n))))
    m_max = int(math.ceil(math.sqrt(n))) + kn
    m_max = min(m_max, n - 1)
    acov = autocovariances(x, m_max)
    rho = acov / acov[0]
    thr = 2.0 * math.sqrt(math.log10(n) / n)
    insignificant = np.abs(rho[1:]) < thr  # lag 1..m_max
    m_hat = None
    for m in range(0, m_max - kn + 1):
        if insignificant[m : m + kn].all():
            m_hat = m
            break
    if m_hat is None:
        m_hat = m_max - kn
    M = min(2 * max(m_hat, 1), m_max)
    k = np.arange(-M, M + 1)
    t = np.abs(k) / M
    lam = np.where(t <= 0.5, 1.0, np.where(t <= 1.0, 2.0 * (1.0 - t), 0.0))
    R = acov[np.abs(k)]
    G = float(np.sum(lam * np.abs(k) * R))
    g = float(np.sum(lam * R))
    if g <= 0 or G == 0:
        return 1.0, 1.0
    b_sb = (2.0 * G * G / (2.0 * g * g)) ** (1.0 / 3.0) * n ** (1.0 / 3.0)
    b_cb = (2.0 * G * G / (4.0 / 3.0 * g * g)) ** (1.0 / 3.0) * n ** (1.0 / 3.0)
    cap = math.ceil(min(3.0 * math.sqrt(n), n / 3.0))
    return float(min(max(b_sb, 1.0), cap)), float(min(max(b_cb, 1.0), cap))


@njit(cache=True)
def _surprisals(lab1, lab0, m1, m0, out):
    """``-ln(count(word) / count(context))`` per position from word and context labels (-1: undefined)."""
    n = lab1.shape[0]
    joint = np.zeros(m1, dtype=np.int64)
    ctx = np.zeros(max(m0, 1), dtype=np.int64)
    total = 0
    for t in range(n):
        if lab1[t] >= 0:
            joint[lab1[t]] += 1
            total += 1
            if m0 > 0:
                ctx[lab0[t]] += 1
    for t in range(n):
        if lab1[t] >= 0:
            den = ctx[lab0[t]] if m0 > 0 else total
            out[t] = -math.log(joint[lab1[t]] / den)


def surprisal_series(arr: SymbolArray, order: int) -> np.ndarray:
    """Plug-in conditional surprisal ``-ln p(x_t | x_{t-order} .. x_{t-1})`` per position (NaN where undefined).

    ``order = 0`` gives ``-ln p(x_t)``.  Value ``t`` belongs to the word
    starting at ``t`` (its last symbol is predicted).
    """
    T = len(arr)
    out = np.full(T, np.nan)
    if T == 0:
        return out
    lab1, w1 = word_labels(arr, order + 1)
    if order == 0:
        lab0, m0 = lab1, 0
    else:
        lab0, w0 = word_labels(arr, order)
        m0 = int(w0.size)
    _surprisals(lab1, lab0, int(max(w1.size, 1)), m0, out)
    return out


@dataclass(frozen=True)
class BlockLength(Result):
    """The block length used and how it was chosen.

    Attributes
    ----------
    length:
        Block length in symbols (or points).
    rule:
        How it was chosen, in words (the Politis–White value, the floor, a cap).
    politis_white:
        The Politis–White value (``None`` when the user gave the length).
    floor:
        ``BLOCK_MULTIPLE`` times the deepest depth (0 for a user's length).
    blocks:
        Number of blocks the stream is cut into.
    """

    length: int
    rule: str
    politis_white: float | None
    floor: int
    blocks: int


def choose_block_length(
    arr: SymbolArray | None,
    depth: int,
    length: int | None = None,
    series: np.ndarray | None = None,
    multiple: int = BLOCK_MULTIPLE,
    scheme: str = "nonoverlapping",
) -> BlockLength:
    """Block length from the data: Politis & White on a surprisal series, floored at ``multiple * depth``.

    Parameters
    ----------
    arr:
        The stream (its order-``min(2, depth - 1)`` surprisal series is used), or ``None`` with ``series``.
    depth:
        Deepest word length (or number of scale levels) the statistic looks at.
    length:
        Number of positions resampled (default ``len(arr)`` or ``len(series)``).
    series:
        A scalar series to use instead of surprisals (e.g. for point clouds).
    multiple:
        The floor is ``multiple * depth``.
    scheme:
        ``"stationary"`` uses the stationary-bootstrap value, the others the moving-block value.
    """
    if series is None:
        if arr is None:
            raise ParameterError("choose_block_length needs a stream or a series.", parameter="series")
        order = int(min(2, max(depth - 1, 0)))
        if arr.alphabet.size > 16:
            order = min(order, 1)
        series = surprisal_series(arr, order)
        what = f"order-{order} surprisal series"
    else:
        what = "supplied series"
    T = int(length if length is not None else (len(arr) if arr is not None else len(series)))
    b_sb, b_cb = politis_white(series)
    pw = b_sb if scheme == "stationary" else b_cb
    floor = int(multiple * max(int(depth), 1))
    ell = max(int(math.ceil(pw)), floor, 1)
    cap = max(T // MIN_BLOCKS, 1)
    rule = f"Politis-White on the {what}: {pw:.1f}; floor {multiple} x depth {depth} = {floor}"
    if ell > cap:
        rule += f"; capped at length/{MIN_BLOCKS} = {cap}"
        ell = cap
    ell = max(ell, 1)
    return BlockLength(int(ell), rule + f"; used {ell}", float(pw), floor, int(math.ceil(T / ell)) if T else 0)


def user_block_length(block_length: "int | BlockLength", length: int) -> BlockLength:
    """Validate a user-given block length (a :class:`BlockLength` chosen earlier is kept, with its rule)."""
    if isinstance(block_length, BlockLength):
        ell = min(block_length.length, max(int(length), 1))
        if ell == block_length.length and block_length.blocks == int(math.ceil(length / ell)):
            return block_length
        return BlockLength(ell, block_length.rule, block_length.politis_white, block_length.floor, int(math.ceil(length / ell)))
    if not isinstance(block_length, (int, np.integer)) or block_length < 1:
        raise ParameterError(f"Block length must be a positive whole number of symbols, not {block_length!r}.", parameter="block_length")
    if block_length > length:
        raise ParameterError(f"Block length {block_length} exceeds the stream length {length}; give a shorter block.", parameter="block_length")
    return BlockLength(int(block_length), f"set by the user: {block_length}", None, 0, int(math.ceil(length / block_length)))


def resolve_block(
    arr: SymbolArray, depth: int, block_length: "int | BlockLength | None", scheme: str, multiple: int = BLOCK_MULTIPLE
) -> BlockLength:
    """The block length to use: the user's (a number, or a :class:`BlockLength` chosen before), or :func:`choose_block_length`."""
    if block_length is None:
        return choose_block_length(arr, depth, multiple=multiple, scheme=scheme)
    return user_block_length(block_length, len(arr))

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
    (:class:`StreamedAutocovariances` with the whole series fed at once.)
    """
    x = np.ascontiguousarray(x, dtype=np.float64)
    acc = StreamedAutocovariances(x.size, max_lag, segment)
    acc.feed(x)
    return acc.finish()


class StreamedAutocovariances:
    """:func:`autocovariances` of a series handed over in pieces of any size (the same numbers, bit for bit).

    The series is cut into the same segments and FFT batches whatever the pieces: a batch is
    transformed once all of its points (and the ``max_lag`` points after it) have arrived, and the
    points before the next batch are dropped, so memory is a batch (about 2^22 points), not the series.

    Parameters
    ----------
    n:
        Length of the whole series.
    max_lag, segment:
        As for :func:`autocovariances`.
    """

    def __init__(self, n: int, max_lag: int, segment: int | None = None) -> None:
        from scipy import fft as sfft

        self._fft = sfft
        self.n = int(n)
        self.M = int(min(max(max_lag, 0), max(self.n - 1, 0)))
        L = int(segment) if segment else max(4 * self.M, 1 << 14)
        self.L = max(L, 1)
        self.N = sfft.next_fast_len(self.L + self.M, real=True)
        self.S = -(-self.n // self.L)
        self.batch = max(1, (1 << 22) // self.N)
        self.out = np.zeros(self.M + 1)
        self._parts: list[np.ndarray] = []
        self._have = 0  # points held in _parts
        self._g0 = 0  # global index of the first point held
        self._s0 = 0  # first segment not yet transformed
        self._seen = 0

    def feed(self, values: np.ndarray) -> None:
        """Append the next points of the series (float64, centred)."""
        v = np.ascontiguousarray(values, dtype=np.float64)
        if v.size == 0:
            return
        self._seen += v.size
        if self._seen > self.n:
            raise ParameterError(f"More than the announced {self.n} points were fed.", parameter="values")
        self._parts.append(v)
        self._have += v.size
        self._run(final=False)

    def finish(self) -> np.ndarray:
        """The autocovariances once every point has been fed."""
        self._run(final=True)
        return self.out / self.n if self.n else self.out

    def _run(self, final: bool) -> None:
        while self._s0 < self.S:
            s0 = self._s0
            s1 = min(self.S, s0 + self.batch)
            need = min(self.n, s1 * self.L + self.M)
            if self._g0 + self._have < need and not final:
                return
            x = np.concatenate(self._parts) if len(self._parts) > 1 else self._parts[0] if self._parts else np.zeros(0)
            self._parts = [x]
            self._batch(x, s0, s1)
            drop = min(s1 * self.L, self.n) - self._g0
            rest = x[drop:]
            self._parts = [rest] if rest.size else []
            self._have = rest.size
            self._g0 += drop
            self._s0 = s1

    def _batch(self, x: np.ndarray, s0: int, s1: int) -> None:
        sfft, L, M, N, g0 = self._fft, self.L, self.M, self.N, self._g0
        a = np.zeros((s1 - s0, N))
        b = np.zeros((s1 - s0, N))
        for i, s in enumerate(range(s0, s1)):  # past the end the rows stay zero (no padded copy of x)
            seg = x[s * L - g0 : s * L - g0 + L]
            a[i, : seg.size] = seg
            seg = x[s * L - g0 : s * L - g0 + L + M]
            b[i, : seg.size] = seg
        fa = sfft.rfft(a, axis=1)
        fb = sfft.rfft(b, axis=1)
        self.out += sfft.irfft(np.conj(fa) * fb, N, axis=1)[:, : M + 1].sum(axis=0)


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
    kn, m_max = _lag_limits(n)
    return _pw_from_acov(n, autocovariances(x, m_max), kn, m_max)


def _lag_limits(n: int) -> tuple[int, int]:
    """``K_N`` and the largest lag ``m_max`` of the Politis-White rule for ``n`` points."""
    kn = max(5, int(math.sqrt(math.log10(n))))
    return kn, min(int(math.ceil(math.sqrt(n))) + kn, n - 1)


def _pw_from_acov(n: int, acov: np.ndarray, kn: int, m_max: int) -> tuple[float, float]:
    """The Politis-White block lengths from the autocovariances (see :func:`politis_white`)."""
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


@njit(cache=True)
def _surprisal_tallies(lab1, lab0, m0, joint, ctx, ctx_of):
    """Add one chunk's word and context counts (and each word's context label); returns the words counted."""
    total = 0
    for t in range(lab1.shape[0]):
        if lab1[t] >= 0:
            joint[lab1[t]] += 1
            total += 1
            if m0 > 0:
                ctx[lab0[t]] += 1
                ctx_of[lab1[t]] = lab0[t]
    return total


@njit(cache=True)
def _word_surprisals(joint, ctx, ctx_of, m0, total, vals):
    """``vals[w] = -ln(count(w) / count(context of w))``: the operation :func:`_surprisals` does per position."""
    for w in range(joint.shape[0]):
        if joint[w] > 0:
            den = ctx[ctx_of[w]] if m0 > 0 else total
            vals[w] = -math.log(joint[w] / den)


def streamed_politis_white(arr: SymbolArray, order: int, chunk: int | None = None) -> tuple[float, float]:
    """:func:`politis_white` of :func:`surprisal_series` without holding the series.

    Two passes over the stream, chunk by chunk (:class:`~fractalseq.resampling._word_labels.WordIndex`):
    the word and context counts, then each chunk's surprisals (defined positions, in order) fed to
    :class:`StreamedAutocovariances`.  A stream of one chunk gives :func:`politis_white` of the series
    bit for bit.  With several chunks the mean is the exact sum over words ``sum_w count(w) s(w) / n``
    (:func:`math.fsum`), which no chunking can change; it may differ from ``numpy.mean`` of the whole
    series in the last bits.
    """
    from fractalseq.resampling._word_labels import WordIndex

    i1 = WordIndex(arr, order + 1, chunk)
    i0 = WordIndex(arr, order, chunk) if order > 0 else None
    m0 = i0.size if i0 is not None else 0
    joint = np.zeros(max(i1.size, 1), dtype=np.int64)
    ctx = np.zeros(max(m0, 1), dtype=np.int64)
    ctx_of = np.zeros(max(i1.size, 1), dtype=np.int64)
    spans = list(range(0, len(arr), i1.chunk))
    n = 0
    for a in spans:
        b = min(a + i1.chunk, len(arr))
        lab1 = i1.labels(a, b)
        lab0 = i0.labels(a, b) if i0 is not None else lab1
        n += int(_surprisal_tallies(lab1, lab0, m0, joint, ctx, ctx_of))
    vals = np.full(joint.size, np.nan)
    _word_surprisals(joint, ctx, ctx_of, m0, n, vals)
    if len(spans) <= 1:
        lab1 = i1.labels(0, len(arr))
        return politis_white(vals[lab1[lab1 >= 0]])
    if n < 16:
        return 1.0, 1.0
    hit = joint > 0
    mean = math.fsum((joint[hit] * vals[hit]).tolist()) / n
    var = math.fsum((joint[hit] * (vals[hit] - mean) ** 2).tolist()) / n
    if var <= 1e-300:
        return 1.0, 1.0
    kn, m_max = _lag_limits(n)
    acc = StreamedAutocovariances(n, m_max)
    for a in spans:
        lab1 = i1.labels(a, min(a + i1.chunk, len(arr)))
        acc.feed(vals[lab1[lab1 >= 0]] - mean)
    return _pw_from_acov(n, acc.finish(), kn, m_max)


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
        b_sb, b_cb = streamed_politis_white(arr, order)
        what = f"order-{order} surprisal series"
    else:
        what = "supplied series"
        b_sb, b_cb = politis_white(series)
    T = int(length if length is not None else (len(arr) if arr is not None else len(series)))
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

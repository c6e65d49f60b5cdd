"""Count-based variances of the level statistics ``H_q`` and of their differences.

The scaling fit of D_q weights each level by ``1 / Var(H_q(level))`` and the
scaling-range rule compares the per-level differences with their standard
errors.  Both variances come from the counts themselves (first-order delta
method under multinomial sampling), never from bootstrap replicates, so the
point estimate and its range do not depend on ``n_boot`` or the seed.

For a functional ``T(p)`` of the box probabilities, the delta method gives
``Var(T(p_hat)) ~ (sum_b p_b g_b**2) / N`` with the influence value
``g_b = dT/dp_b - sum_c p_c dT/dp_c`` (e.g. Bishop, Fienberg & Holland 1975,
*Discrete Multivariate Analysis*, §14.6; for the Shannon entropy this is
Basharin 1959, Theory Probab. Appl. 4:333, ``Var = (sum p ln^2 p - H^2) / N``).
For the Rényi entropy ``H_q = ln S_q / (1 - q)`` with ``S_q = sum p**q``:

    g_b = q / (1 - q) * (p_b**(q - 1) / S_q - 1)

(``q = 1``: ``g_b = -ln p_b - H``; ``q = 0``: the box count is exact, ``g = 0``).

Serial dependence and the overlap of a stream's words (the n-words at
positions t and t+1 share n-1 symbols) make the levels and their
differences move together, which a multinomial model cannot see.  When the
stream itself is at hand, the covariance of the levels is estimated by
*batch means* of the same influence values (:class:`BatchSums`): every
position (or point) contributes ``g_level(its box)``, positions are cut into
``B`` consecutive batches of length ``b``, and
``Cov(H_i, H_j) ~ B * Cov_batches(S_i / N_i, S_j / N_j)`` from the batch sums
``S`` (the subseries estimator of Carlstein 1986, Ann. Statist. 14:1171).
The routes take ``b`` = the automatic block length of the bootstrap
(Politis & White on the surprisal series, floored at 10 x the deepest
level; :func:`fractalseq.resampling._block_length.choose_block_length`), so
the covariance is what the non-overlapping block bootstrap of the linearised
statistics would give with infinitely many replicates -- computed exactly,
without resampling or a seed, and whatever block length the interval uses.
Without a block length, ``b = max(sqrt(N), 10 * levels)`` (Flegal & Jones
2010, Ann. Statist. 38:1034).

A difference of two nested levels ``H_q(n+1) - H_q(n)`` (every box of level
n+1 lies in one box of level n) has the influence value
``g_{n+1}(child) - g_n(parent)`` per box pair, so its variance is the
weighted variance of that over the pairs (for q = 1 this is the variance of
the conditional surprisal ``-ln p(a | w)`` divided by N).  The variances
ignore serial dependence; they set relative weights and a linearity
tolerance, while intervals come from the block bootstrap.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from fractalseq.dimensions._batch_covariance import MIN_BATCHES, BatchCovariance
from fractalseq.resampling._word_labels import STREAM_CHUNK
from fractalseq.words._counts import WordCounts


def box_influence(counts: np.ndarray, qs: np.ndarray) -> np.ndarray:
    """Centred influence values ``g_b`` of ``H_q`` per box, shape ``(boxes, Q)`` (nats).

    Parameters
    ----------
    counts:
        Occurrences per box (zeros allowed; they get ``g = 0``).
    qs:
        Orders q.
    """
    c = np.asarray(counts, dtype=np.float64)
    out = np.zeros((c.size, qs.size))
    N = float(c.sum())
    if N <= 0:
        return out
    hit = c > 0
    p = c[hit] / N
    lnp = np.log(p)
    for j, q in enumerate(qs):
        q = float(q)
        if q == 0.0:
            continue
        if q == 1.0:
            g = -lnp
        else:
            a = q * lnp
            ln_s = float(a.max() + math.log(np.exp(a - a.max()).sum()))
            g = q / (1.0 - q) * np.exp((q - 1.0) * lnp - ln_s)
        g = g - float(np.sum(p * g))
        out[hit, j] = g
    return out


def variance_from_influence(counts: np.ndarray, g: np.ndarray) -> np.ndarray:
    """``sum_b p_b g_b**2 / N`` per column of ``g`` (the delta-method variance)."""
    c = np.asarray(counts, dtype=np.float64)
    N = float(c.sum())
    if N <= 0:
        return np.full(g.shape[1], np.nan)
    mean = (c @ g) / N
    return np.maximum((c @ (g * g)) / N - mean * mean, 0.0) / N


#: Levels with at most this many (box, q) cells build the whole influence table at once; larger ones
#: go one q at a time (memory of a few box-length vectors instead of ``boxes x Q`` tables).
WHOLE_TABLE_CELLS = 1 << 22


def word_level_variances(wc: WordCounts, top: int, qs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Delta-method variances of ``H_q(n)``, n = 1..top, and of ``H_q(n+1) - H_q(n)``.

    Returns ``(var, dvar)`` of shapes ``(top, Q)`` and ``(top - 1, Q)``.  The parent of
    an (n+1)-word is its n-symbol prefix (the address shifted right by one symbol).
    Levels beyond :data:`WHOLE_TABLE_CELLS` cells are computed one q at a time (the same
    influence values; the sums over boxes may differ in the last bit from the whole-table product).
    """
    Q = qs.size
    var = np.full((top, Q), np.nan)
    dvar = np.full((max(top - 1, 0), Q), np.nan)
    prev_addr = prev_g = prev_cnt = None
    shift = np.uint64(wc.bits)
    for i in range(top):
        addr, cnt = wc.words(i + 1)
        addr = addr.astype(np.uint64, copy=False)
        parent = None
        if prev_addr is not None:
            parent = np.searchsorted(prev_addr, addr >> shift)
            parent = np.minimum(parent, prev_addr.size - 1)
        if cnt.size * Q <= WHOLE_TABLE_CELLS and (prev_cnt is None or prev_g is not None):
            g = box_influence(cnt, qs)
            var[i] = variance_from_influence(cnt, g)
            if parent is not None and prev_g is not None:
                dvar[i - 1] = variance_from_influence(cnt, g - prev_g[parent])
            prev_g = g if cnt.size * Q <= WHOLE_TABLE_CELLS else None
        else:
            c = np.asarray(cnt, dtype=np.float64)
            N = float(c.sum())
            for j in range(Q):
                gj = box_influence(cnt, qs[j : j + 1])[:, 0]
                var[i, j] = _column_variance(c, N, gj)
                if parent is not None and prev_cnt is not None:
                    pj = box_influence(prev_cnt, qs[j : j + 1])[:, 0]
                    dvar[i - 1, j] = _column_variance(c, N, gj - pj[parent])
            prev_g = None
        prev_addr, prev_cnt = addr, cnt
    return var, dvar


def _column_variance(c: np.ndarray, N: float, g: np.ndarray) -> float:
    """:func:`variance_from_influence` for one column."""
    if N <= 0:
        return float("nan")
    mean = float(np.dot(c, g)) / N
    return max(float(np.dot(c, g * g)) / N - mean * mean, 0.0) / N


@njit(cache=True)
def _pair_moments(lab_a, lab_b, ga, gb, out):
    """Sums over points kept at both levels of ``d = gb[lab_b] - ga[lab_a]``: out[0] = n, out[1] = sum d, out[2] = sum d^2."""
    Q = ga.shape[1]
    for t in range(lab_a.shape[0]):
        a = lab_a[t]
        b = lab_b[t]
        if a < 0 or b < 0:
            continue
        out[0, 0] += 1.0
        for j in range(Q):
            d = gb[b, j] - ga[a, j]
            out[1, j] += d
            out[2, j] += d * d


def point_difference_variance(lab_a: np.ndarray, lab_b: np.ndarray, ga: np.ndarray, gb: np.ndarray) -> np.ndarray:
    """Delta-method variance of ``H_q(b) - H_q(a)`` from every point's box at two scales (labels, -1 = skipped)."""
    Q = ga.shape[1]
    out = np.zeros((3, Q))
    _pair_moments(np.ascontiguousarray(lab_a), np.ascontiguousarray(lab_b), np.ascontiguousarray(ga),
                  np.ascontiguousarray(gb), out)
    n = out[0, 0]
    if n <= 0:
        return np.full(Q, np.nan)
    mean = out[1] / n
    return np.maximum(out[2] / n - mean * mean, 0.0) / n


#: Batch length of the batch-means covariance: at least this many times the number of levels.
BATCH_LEVELS = 10


def batch_length(length: int, levels: int) -> int:
    """Batch length ``max(ceil(sqrt(N)), BATCH_LEVELS * levels)``, at most ``N``."""
    return int(max(1, min(int(length), max(math.ceil(math.sqrt(max(length, 1))), BATCH_LEVELS * int(levels)))))


#: Levels whose largest count is below this get influence rows indexed by the count itself (no sort).
VALUE_ROWS = 1 << 16


def spectrum_influence(values: np.ndarray, multiplicity: np.ndarray, total: float, qs: np.ndarray) -> np.ndarray:
    """Centred influence values of ``H_q`` per count value, shape ``(values, Q)`` (nats).

    The influence ``g_b`` of a box depends on its count alone (module docstring), so a level needs one
    row per distinct count: ``values`` are counts, ``multiplicity`` how many boxes have each (rows with
    multiplicity 0 or value 0 get 0), ``total`` the occurrences ``N``.  The sums over boxes (``S_q`` and
    the centring mean) are sums over values weighted by multiplicity; otherwise the arithmetic of
    :func:`box_influence`, whose rows these are up to rounding.
    """
    v = np.asarray(values, dtype=np.float64)
    w = np.asarray(multiplicity, dtype=np.float64)
    out = np.zeros((v.size, qs.size))
    N = float(total)
    if N <= 0:
        return out
    hit = (w > 0) & (v > 0)
    p = v[hit] / N
    m = w[hit]
    lnp = np.log(p)
    for j, q in enumerate(qs):
        q = float(q)
        if q == 0.0:
            continue
        if q == 1.0:
            g = -lnp
        else:
            a = q * lnp
            top = float(a.max())
            ln_s = top + math.log(float(np.sum(m * np.exp(a - top))))
            g = q / (1.0 - q) * np.exp((q - 1.0) * lnp - ln_s)
        g = g - float(np.sum(m * (p * g)))
        out[hit, j] = g
    return out


def level_influence(counts: np.ndarray, qs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """One level's influence values as ``(key, rows)``: box ``b`` has the influence ``rows[key[b]]``.

    Integer counts below :data:`VALUE_ROWS` are their own keys (``rows`` has one row per count value
    up to the largest); other counts are keyed by the rank of their value (:func:`numpy.unique`).
    Keys are the smallest unsigned type that holds them (uint16 in practice: 2 bytes per box).  ``rows`` has at most ``sqrt(2 N) + 1`` used rows whatever the
    number of boxes (distinct counts summing to ``N``), so the table for every q is small and the
    batch sums of all q are made in one pass over the labels.
    """
    qs = np.asarray(qs, dtype=np.float64)
    c = np.asarray(counts).reshape(-1)
    total = float(np.sum(np.asarray(c, dtype=np.float64)))
    if c.size and c.dtype.kind in "iu" and int(c.min()) >= 0 and int(c.max()) < VALUE_ROWS:
        mult = np.bincount(c.astype(np.int64, copy=False), minlength=1)
        values = np.arange(mult.size, dtype=np.float64)
        key = c
    else:
        values, key = np.unique(np.asarray(c, dtype=np.float64), return_inverse=True)
        mult = np.bincount(key.reshape(-1), minlength=values.size)
    # the smallest key type: a deep level's keys are read once per position, at random (2 bytes a box
    # instead of 8 made the pass over a 4**12-word level three to four times faster)
    kind = np.uint16 if values.size <= 1 << 16 else np.uint32 if values.size <= 1 << 32 else np.int64
    key = np.ascontiguousarray(np.asarray(key).reshape(-1), dtype=kind)
    return key, np.ascontiguousarray(spectrum_influence(values, mult, total, qs))


@njit(cache=True)
def _batch_sums(labels, g, b, out):
    """``out[t // b] += g[labels[t]]`` over positions with a label (``-1`` skipped)."""
    Q = g.shape[1]
    for t in range(labels.shape[0]):
        a = labels[t]
        if a < 0:
            continue
        k = t // b
        for j in range(Q):
            out[k, j] += g[a, j]


@njit(cache=True)
def _keyed_batch_sums(labels, key, rows, b, t0, out):
    """``out[(t0 + t) // b] += rows[key[labels[t]]]`` over a chunk of labels whose first position is ``t0``
    (``-1`` skipped): every q of one level in one pass, each batch sum from 0.0 in order of position."""
    Q = rows.shape[1]
    for t in range(labels.shape[0]):
        a = labels[t]
        if a < 0:
            continue
        r = key[a]
        k = (t0 + t) // b
        for j in range(Q):
            out[k, j] += rows[r, j]


def _batch_shape(length: int, batch: int) -> tuple[int, int]:
    """Batch length and number of batches of :class:`BatchSums` with an explicit ``batch``."""
    b = int(max(1, min(int(length), int(batch))))
    return b, -(-int(length) // b)


class BatchSums:
    """Accumulates per-batch sums of the influence values of every level; gives their covariance.

    Parameters
    ----------
    length:
        Number of positions (or points).
    levels, q_count:
        Number of levels and of orders q.
    batch:
        Batch length (default :func:`batch_length`).
    """

    def __init__(self, length: int, levels: int, q_count: int, batch: int | None = None) -> None:
        self.b, self.B = _batch_shape(length, batch_length(length, levels) if batch is None else batch)
        self.sums = np.zeros((levels, self.B, q_count))
        self.total = np.zeros(levels)

    def add(self, level: int, labels: np.ndarray, counts: np.ndarray, g: np.ndarray, weight: float = 1.0) -> None:
        """Add one level's labels (index into ``counts``/``g``, -1 = none) with influence table ``g``."""
        out = np.zeros((self.B, g.shape[1]))
        _batch_sums(np.ascontiguousarray(labels), np.ascontiguousarray(g), self.b, out)
        self.sums[level] += weight * out
        self.total[level] += weight * float(np.sum(counts))

    def add_counts(self, level: int, labels: np.ndarray, counts: np.ndarray, qs: np.ndarray) -> None:
        """:meth:`add` with the influence values of ``counts`` (:func:`level_influence`, every q at once):
        the sums :func:`streamed_batch_covariance` makes."""
        key, rows = level_influence(counts, qs)
        out = np.zeros((self.B, rows.shape[1]))
        _keyed_batch_sums(np.ascontiguousarray(labels), key, rows, self.b, 0, out)
        self.sums[level] += 1.0 * out
        self.total[level] += 1.0 * float(np.sum(counts))

    def add_chunks(self, level: int, chunks, counts: np.ndarray, qs: np.ndarray) -> None:
        """:meth:`add_counts` with the labels given chunk by chunk: ``chunks()`` yields ``(first position, labels)``
        in order of position, so every batch sum adds the same terms in the same order (the same bits)."""
        key, rows = level_influence(counts, qs)
        out = np.zeros((self.B, rows.shape[1]))
        for t0, lab in chunks():
            _keyed_batch_sums(np.ascontiguousarray(lab), key, rows, self.b, int(t0), out)
        self.sums[level] += 1.0 * out
        self.total[level] += 1.0 * float(np.sum(counts))

    def covariance(self) -> np.ndarray | None:
        """``(Q, L, L)`` batch-means covariance of the level statistics; ``None`` with fewer than 10 batches.

        The accumulator of :func:`streamed_batch_covariance` (:class:`BatchCovariance`) on the whole
        table: the same sums give the same bits."""
        if self.B < MIN_BATCHES:
            return None
        acc = BatchCovariance(self.total, self.sums.shape[2])
        acc.add(self.sums)
        return acc.covariance()


def streamed_batch_covariance(
    length: int, batch: int, levels: list, qs: np.ndarray, chunk: int | None = None
) -> np.ndarray | None:
    """:meth:`BatchSums.covariance` after :meth:`BatchSums.add_counts` of every level, in one pass over
    the positions for every level and every q, without the ``(levels, batches, Q)`` table.

    Parameters
    ----------
    length, batch:
        Number of positions and batch length (as for :class:`BatchSums`).
    levels:
        One ``(labels, counts)`` per level: ``labels(a, b)`` gives the labels of positions ``a..b-1``
        (e.g. :meth:`fractalseq.resampling._word_labels.WordIndex.labels`), ``counts`` the occurrences.
    qs:
        Orders q.
    chunk:
        Positions per chunk (default :data:`~fractalseq.resampling._word_labels.STREAM_CHUNK`, rounded
        down to whole batches, at least one batch).

    Each chunk's ``(levels, batches, Q)`` sums (every batch's sum from 0.0 in order of position, as
    :func:`level_batch_sums` makes them) go to a :class:`BatchCovariance`, which holds one block of
    :data:`COV_BLOCK` batches: memory is the chunk's sums, one block and the levels' small influence
    tables (:func:`level_influence`); the result does not depend on ``chunk``.
    """
    qs = np.asarray(qs, dtype=np.float64)
    b, B = _batch_shape(length, batch)
    if B < MIN_BATCHES:
        return None
    L, Q = len(levels), qs.size
    tables = [level_influence(counts, qs) for _, counts in levels]
    acc = BatchCovariance(np.array([float(np.sum(counts)) for _, counts in levels]), Q)
    step = max(int(STREAM_CHUNK if chunk is None else chunk) // b, 1) * b
    S = np.empty((L, step // b, Q))
    for a in range(0, int(length), step):
        e = min(a + step, int(length))
        part = S[:, : -(-(e - a) // b)]
        part[...] = 0.0
        for i, (labels, _) in enumerate(levels):
            key, rows = tables[i]
            _keyed_batch_sums(np.ascontiguousarray(labels(a, e)), key, rows, b, 0, part[i])
        acc.add(part)
    return acc.covariance()


def level_batch_sums(length: int, batch: int, chunks, counts: np.ndarray, qs: np.ndarray) -> np.ndarray | None:
    """One level's ``(batches, Q)`` batch sums of its influence values, as :func:`streamed_batch_covariance` adds them.

    Parameters
    ----------
    length, batch:
        Number of positions and batch length (as for :class:`BatchSums`).
    chunks:
        ``chunks()`` yields ``(first position, labels)`` in order of position.
    counts:
        Occurrences of each label.
    qs:
        Orders q.

    Returns ``None`` when there are fewer than 10 batches (no covariance).  Column j holds the sums that
    :func:`streamed_batch_covariance` adds for this level and ``qs[j]`` (the same influence values, added
    per batch in order of position from 0.0), so :func:`covariance_from_level_sums` of every level's sums
    is its result, bit for bit.  Every q in one pass over the labels (:func:`level_influence`).
    """
    qs = np.asarray(qs, dtype=np.float64)
    b, B = _batch_shape(length, batch)
    if B < MIN_BATCHES:
        return None
    key, rows = level_influence(counts, qs)
    out = np.zeros((B, qs.size))
    for t0, lab in chunks():
        _keyed_batch_sums(np.ascontiguousarray(lab), key, rows, b, int(t0), out)
    return out


def covariance_from_level_sums(sums: list[np.ndarray], totals: np.ndarray) -> np.ndarray:
    """``(Q, L, L)`` batch-means covariance from every level's :func:`level_batch_sums` (in level order).

    ``totals`` are the levels' occurrence totals (``float(np.sum(counts))``).  The same accumulator
    (:class:`BatchCovariance`, the same blocks) as :func:`streamed_batch_covariance` on the same sums:
    the same result, bit for bit.
    """
    acc = BatchCovariance(np.asarray(totals, dtype=np.float64), sums[0].shape[1])
    acc.add_levels(sums)
    return acc.covariance()

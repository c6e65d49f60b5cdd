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
def _batch_sums_at(labels, g, b, t0, out):
    """:func:`_batch_sums` of a chunk of labels whose first position is ``t0``."""
    Q = g.shape[1]
    for t in range(labels.shape[0]):
        a = labels[t]
        if a < 0:
            continue
        k = (t0 + t) // b
        for j in range(Q):
            out[k, j] += g[a, j]


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
        self.b = batch_length(length, levels) if batch is None else int(max(1, min(int(length), int(batch))))
        self.B = -(-int(length) // self.b)
        self.sums = np.zeros((levels, self.B, q_count))
        self.total = np.zeros(levels)

    def add(self, level: int, labels: np.ndarray, counts: np.ndarray, g: np.ndarray, weight: float = 1.0) -> None:
        """Add one level's labels (index into ``counts``/``g``, -1 = none) with influence table ``g``."""
        out = np.zeros((self.B, g.shape[1]))
        _batch_sums(np.ascontiguousarray(labels), np.ascontiguousarray(g), self.b, out)
        self.sums[level] += weight * out
        self.total[level] += weight * float(np.sum(counts))

    def add_counts(self, level: int, labels: np.ndarray, counts: np.ndarray, qs: np.ndarray) -> None:
        """:meth:`add` with the influence table of ``counts`` (:func:`box_influence`), built one q at a time
        when it would exceed :data:`WHOLE_TABLE_CELLS` cells (the same sums, in the same order)."""
        qs = np.asarray(qs, dtype=np.float64)
        if counts.size * qs.size <= WHOLE_TABLE_CELLS:
            self.add(level, labels, counts, box_influence(counts, qs))
            return
        lab = np.ascontiguousarray(labels)
        out = np.zeros((self.B, qs.size))
        col = np.zeros((self.B, 1))
        for j in range(qs.size):
            col[:] = 0.0
            _batch_sums(lab, np.ascontiguousarray(box_influence(counts, qs[j : j + 1])), self.b, col)
            out[:, j] = col[:, 0]
        self.sums[level] += 1.0 * out
        self.total[level] += 1.0 * float(np.sum(counts))

    def add_chunks(self, level: int, chunks, counts: np.ndarray, qs: np.ndarray) -> None:
        """:meth:`add_counts` with the labels given chunk by chunk: ``chunks()`` yields ``(first position, labels)``
        in order of position, so every batch sum adds the same terms in the same order (the same bits)."""
        qs = np.asarray(qs, dtype=np.float64)
        whole = counts.size * qs.size <= WHOLE_TABLE_CELLS
        out = np.zeros((self.B, qs.size))
        col = np.zeros((self.B, 1))
        for j in [None] if whole else range(qs.size):
            g = np.ascontiguousarray(box_influence(counts, qs if j is None else qs[j : j + 1]))
            dest = out if j is None else col
            dest[:] = 0.0
            for t0, lab in chunks():
                _batch_sums_at(np.ascontiguousarray(lab), g, self.b, int(t0), dest)
            if j is not None:
                out[:, j] = col[:, 0]
        self.sums[level] += 1.0 * out
        self.total[level] += 1.0 * float(np.sum(counts))

    def covariance(self) -> np.ndarray | None:
        """``(Q, L, L)`` batch-means covariance of the level statistics; ``None`` with fewer than 10 batches."""
        if self.B < 10:
            return None
        L, B, Q = self.sums.shape
        N = np.where(self.total > 0, self.total, np.nan)
        out = np.empty((Q, L, L))
        for j in range(Q):
            S = self.sums[:, :, j] / N[:, None]  # (L, B): each batch's share of the linearised deviation
            out[j] = B * np.cov(S, ddof=1).reshape(L, L)
        return out


#: Batch sums held at once by :func:`streamed_batch_covariance` (float64 cells: 256 MB).
BATCH_CELLS = 1 << 25


def streamed_batch_covariance(
    length: int, batch: int, levels: list, qs: np.ndarray, cells: int | None = None
) -> np.ndarray | None:
    """:meth:`BatchSums.covariance` after :meth:`BatchSums.add_counts` of every level, without the
    ``(levels, batches, Q)`` table: a group of q at a time.

    Parameters
    ----------
    length, batch:
        Number of positions and batch length (as for :class:`BatchSums`).
    levels:
        One ``(chunks, counts)`` per level: ``chunks()`` yields ``(first position, labels)`` in order
        (e.g. :meth:`fractalseq.resampling._word_labels.WordIndex.chunks`), ``counts`` the occurrences.
    qs:
        Orders q.
    cells:
        Batch sums held at once (default :data:`BATCH_CELLS`): ``levels x batches x group``.

    Each level's influence values of a group of q are summed per batch in order of position (the
    same terms in the same order as the whole table), so the result is the same, bit for bit; the
    labels are read once per level and group.
    """
    qs = np.asarray(qs, dtype=np.float64)
    sums = BatchSums(length, 1, 1, batch=batch)  # batch length and count only
    b, B, L, Q = sums.b, sums.B, len(levels), qs.size
    if B < 10:
        return None
    per_q = max(L * B, 1)
    group = int(max(1, min(Q, (BATCH_CELLS if cells is None else int(cells)) // per_q)))
    total = np.array([float(np.sum(c)) for _, c in levels])
    N = np.where(total > 0, total, np.nan)
    out = np.empty((Q, L, L))
    for j0 in range(0, Q, group):
        j1 = min(Q, j0 + group)
        S = np.zeros((L, B, j1 - j0))
        for i, (chunks, counts) in enumerate(levels):
            if counts.size * qs.size <= WHOLE_TABLE_CELLS:
                g = np.ascontiguousarray(box_influence(counts, qs)[:, j0:j1])
            else:
                g = np.ascontiguousarray(box_influence(counts, qs[j0:j1]))
            for t0, lab in chunks():
                _batch_sums_at(np.ascontiguousarray(lab), g, b, int(t0), S[i])
        for j in range(j0, j1):
            # one q's (L, B) shares, in place when S holds that q alone (no copies of a length-sized table)
            Sj = S[:, :, 0] if j1 - j0 == 1 else np.ascontiguousarray(S[:, :, j - j0])
            Sj += 0.0  # the whole table's zero start (no -0.0)
            Sj /= N[:, None]
            out[j] = B * _cov_rows_in_place(Sj).reshape(L, L)
        del S
    return out


#: Cells of one level's influence table held at once by :func:`level_batch_sums` beyond
#: :data:`WHOLE_TABLE_CELLS` (float64: 256 MB); a level with more distinct words is summed a group of q at a time.
LEVEL_SUMS_CELLS = 1 << 25


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
    is its result, bit for bit.  A level whose table would exceed :data:`WHOLE_TABLE_CELLS` cells is
    summed a group of q at a time (at most :data:`LEVEL_SUMS_CELLS` influence values held).
    """
    qs = np.asarray(qs, dtype=np.float64)
    shape = BatchSums(length, 1, 1, batch=batch)
    b, B, Q = shape.b, shape.B, qs.size
    if B < 10:
        return None
    whole = counts.size * Q <= WHOLE_TABLE_CELLS
    group = Q if whole else int(max(1, min(Q, LEVEL_SUMS_CELLS // max(int(counts.size), 1))))
    out = np.zeros((B, Q))
    for j0 in range(0, Q, group):
        j1 = min(Q, j0 + group)
        g = box_influence(counts, qs)[:, j0:j1] if whole else box_influence(counts, qs[j0:j1])
        g = np.ascontiguousarray(g)
        dest = np.zeros((B, j1 - j0))
        for t0, lab in chunks():
            _batch_sums_at(np.ascontiguousarray(lab), g, b, int(t0), dest)
        out[:, j0:j1] = dest
        del g
    return out


def covariance_from_level_sums(sums: list[np.ndarray], totals: np.ndarray) -> np.ndarray:
    """``(Q, L, L)`` batch-means covariance from every level's :func:`level_batch_sums` (in level order).

    ``totals`` are the levels' occurrence totals (``float(np.sum(counts))``).  The same arithmetic as
    :func:`streamed_batch_covariance` on the same sums: the same result, bit for bit.
    """
    L = len(sums)
    B, Q = sums[0].shape
    total = np.asarray(totals, dtype=np.float64)
    N = np.where(total > 0, total, np.nan)
    out = np.empty((Q, L, L))
    S = np.empty((L, B))
    for j in range(Q):
        for i in range(L):
            S[i] = sums[i][:, j]
        Sj = (S + 0.0) / N[:, None]
        out[j] = B * _cov_rows_in_place(Sj).reshape(L, L)  # Sj is this loop's own array
    return out


def _cov_rows_in_place(X: np.ndarray) -> np.ndarray:
    """``numpy.cov(X, ddof=1)`` of the rows of a float64 ``X``, the same operations in the same order
    (numpy 2's ``cov``: row means by ``numpy.average``, centring in place, ``dot(X, X.T)``, times
    ``1 / (columns - 1)``), but centring ``X`` itself instead of a copy (``X`` is overwritten)."""
    avg = np.average(X, axis=1)
    fact = X.shape[1] - 1
    if fact <= 0:
        return np.cov(X, ddof=1)  # numpy's own warning and result for too few columns
    X -= avg[:, None]
    c = np.dot(X, X.T.conj())
    c *= np.true_divide(1, fact)
    return c.squeeze()

"""The block accumulator of the levels' batch-means covariance and the influence rows keyed by count.

References: ``numpy.cov(X, ddof=1)`` (numpy documentation: the unbiased sample covariance of the rows)
is the value the accumulator must reproduce to rounding; the method is the pairwise update of means
and co-moments of Chan, Golub & LeVeque (1983), "Algorithms for computing the sample variance:
analysis and recommendations", The American Statistician 37(3):242-247.  The influence rows are
checked against the per-box ``box_influence`` (the delta-method influence of the Rényi entropy, its
module docstring) evaluated box by box.
"""

from __future__ import annotations

import tracemalloc

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.dimensions import _batch_covariance as bc
from fractalseq.dimensions import _level_variance as lv
from fractalseq.resampling import _word_labels as wl
from fractalseq.stream import SymbolArray


def _numpy_reference(S: np.ndarray, totals: np.ndarray) -> np.ndarray:
    """``B * numpy.cov(S[:, :, j] / N, ddof=1)`` per q (NaN rows for a level with total 0)."""
    L, B, Q = S.shape
    N = np.where(totals > 0, totals, np.nan)
    return np.stack([B * np.cov(S[:, :, j] / N[:, None], ddof=1).reshape(L, L) for j in range(Q)])


def _feed(acc: bc.BatchCovariance, S: np.ndarray, cuts: list[int]) -> None:
    """Feed ``S`` (L, B, Q) in pieces cut at the given batch indices."""
    edges = [0, *sorted({c for c in cuts if 0 < c < S.shape[1]}), S.shape[1]]
    for a, b in zip(edges[:-1], edges[1:]):
        acc.add(S[:, a:b])


@settings(max_examples=60, deadline=None)
@given(L=st.integers(1, 5), B=st.integers(10, 300), Q=st.integers(1, 3), block=st.sampled_from([1, 2, 7, 64, 4096]),
       cuts=st.lists(st.integers(0, 300), max_size=6), zero=st.booleans(), seed=st.integers(0, 2**20))
def test_accumulator_is_numpy_cov(L, B, Q, block, cuts, zero, seed):
    """Blocks of any size (B below, at and not a multiple of the block), pieces of any length, one level or
    several, a level with total 0: ``B * numpy.cov`` of the shares to rtol 1e-10, NaN where it is NaN."""
    rng = np.random.default_rng(seed)
    S = rng.standard_normal((L, B, Q)) * rng.uniform(0.01, 100, (L, 1, Q)) + rng.uniform(-50, 50, (L, 1, Q))
    totals = rng.uniform(1, 1e6, L)
    if zero:
        totals[rng.integers(0, L)] = 0.0
    old = bc.COV_BLOCK
    try:
        bc.COV_BLOCK = block
        acc = bc.BatchCovariance(totals, Q)
        _feed(acc, S, cuts)
    finally:
        bc.COV_BLOCK = old
    got = acc.covariance()
    ref = _numpy_reference(S, totals)
    assert acc.batches == B and got.shape == (Q, L, L)
    assert np.array_equal(np.isnan(got), np.isnan(ref))
    assert np.isnan(got).any() == zero
    finite = np.abs(ref[np.isfinite(ref)])
    np.testing.assert_allclose(got, ref, rtol=1e-10, atol=1e-12 * (finite.max() if finite.size else 0.0))


@settings(max_examples=30, deadline=None)
@given(cuts_a=st.lists(st.integers(0, 9_000), max_size=8), cuts_b=st.lists(st.integers(0, 9_000), max_size=8))
def test_accumulator_bits_do_not_depend_on_the_pieces(cuts_a, cuts_b):
    """The blocks are cut by batch index only: the same sums fed in different pieces give the same bits
    (the real COV_BLOCK, 9,000 batches: two whole blocks and a partial one)."""
    S = np.random.default_rng(5).standard_normal((4, 9_000, 3))
    totals = np.array([3.0, 5.0, 7.0, 11.0])
    a, b = bc.BatchCovariance(totals, 3), bc.BatchCovariance(totals, 3)
    _feed(a, S, cuts_a)
    _feed(b, S, cuts_b)
    assert a.covariance().tobytes() == b.covariance().tobytes()


def test_accumulator_keeps_precision_far_from_zero_mean():
    """Shares with a mean 10^7 times their spread: the centred blocks and the pairwise update keep the
    covariance (rtol 1e-6 against numpy.cov's two-pass centring); the one-pass textbook formula
    sum(x y) / (B - 1) - B mean_x mean_y / (B - 1) loses it (Chan, Golub & LeVeque 1983, section 1)."""
    rng = np.random.default_rng(9)
    S = 1e7 + rng.standard_normal((2, 20_000, 1))
    totals = np.ones(2)
    acc = bc.BatchCovariance(totals, 1)
    _feed(acc, S, [5_000, 12_345])
    got = acc.covariance()
    ref = _numpy_reference(S, totals)
    np.testing.assert_allclose(got, ref, rtol=1e-6)
    X = S[:, :, 0]
    B = X.shape[1]
    naive = B * (X @ X.T - B * np.outer(X.mean(1), X.mean(1))) / (B - 1)
    assert np.max(np.abs(naive - ref[0]) / np.abs(ref[0])) > 1e-3  # the naive formula is visibly off here


def test_too_few_batches_give_no_covariance():
    """Fewer than 10 batches: None (as before the accumulator), also through the streamed pass."""
    acc = bc.BatchCovariance(np.ones(2), 1)
    acc.add(np.ones((2, 9, 1)))
    assert acc.covariance() is None
    acc.add(np.ones((2, 1, 1)))
    assert acc.covariance() is not None
    arr = SymbolArray(al.dna(), np.zeros(90, np.uint8), np.array([0]))
    index = wl.WordIndex(arr, 1)
    assert lv.streamed_batch_covariance(90, 10, [(index.labels, index.counts())], np.array([1.0])) is None


@settings(max_examples=40, deadline=None)
@given(counts=st.lists(st.integers(0, 300), min_size=1, max_size=60), big=st.integers(0, 3),
       values=st.booleans())
def test_influence_rows_are_box_influence(counts, big, values):
    """Rows keyed by count value (or by the rank of the value) give every box its ``box_influence``
    value to rounding, zero counts included, for both keyings and for counts beyond the value table."""
    c = np.array(counts, dtype=np.int64)
    c[: min(big, c.size)] *= 100_003  # a few large counts: keyed by rank unless they fit the value table
    qs = np.array([-2.0, -0.5, 0.0, 0.5, 1.0, 1.5, 3.0])
    old = lv.VALUE_ROWS
    try:
        lv.VALUE_ROWS = old if values else 0
        key, rows = lv.level_influence(c, qs)
    finally:
        lv.VALUE_ROWS = old
    ref = lv.box_influence(c, qs)
    got = rows[key]
    assert got.shape == ref.shape
    np.testing.assert_allclose(got, ref, rtol=1e-11, atol=1e-11 * max(1.0, float(np.abs(ref).max())))
    assert np.all(got[c == 0] == 0.0)
    by_value = values and int(c.max()) < old
    assert rows.shape[0] == (int(c.max()) + 1 if by_value else np.unique(c).size)


def test_streamed_pass_holds_no_batch_length_table():
    """The streamed covariance holds one chunk's sums and one block, not the ``(levels, batches, Q)``
    table: 400,000 batches of 3 levels and 4 q (a 38-MB table) in small chunks peak far below it
    (tracemalloc counts numpy's buffers)."""
    rng = np.random.default_rng(4)
    T = 400_000
    arr = SymbolArray(al.dna(), rng.integers(0, 4, T).astype(np.uint8), np.array([0, 150_000]))
    qs = np.array([0.5, 1.0, 2.0, 3.0])
    index = [wl.WordIndex(arr, n, chunk=8_192) for n in (1, 4, 7)]
    levels = [(i.labels, i.counts()) for i in index]
    table = len(levels) * T * qs.size * 8
    tracemalloc.start()
    try:
        base = tracemalloc.get_traced_memory()[0]
        tracemalloc.reset_peak()
        got = lv.streamed_batch_covariance(T, 1, levels, qs, chunk=8_192)
        peak = tracemalloc.get_traced_memory()[1] - base
    finally:
        tracemalloc.stop()
    assert got.shape == (4, 3, 3) and np.all(np.isfinite(got))
    assert peak < table // 10, (peak, table)

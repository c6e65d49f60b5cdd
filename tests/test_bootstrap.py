"""Block bootstrap by re-weighting block count tables.

Exactness: a replicate's table is a sum of block tables (checked against
recounting).  Calibration of the variance: checked against closed-form
asymptotic variances (Basharin 1959 for the plug-in entropy; the Markov-chain
central limit theorem for a symbol frequency).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.resampling import _bootstrap as bs
from fractalseq.datasets import _markov as markov
from fractalseq.errors import ParameterError
from fractalseq.resampling import Resampling
from fractalseq.stream import from_codes
from fractalseq.words._counts import count_words

BIN = al.binary()
DNA = al.dna()


def test_word_labels_match_word_counts():
    rng = np.random.default_rng(0)
    arr = from_codes(DNA, rng.integers(0, 4, 5000), starts=[0, 700, 701, 2500])
    wc = count_words(arr, 6)
    for n in range(1, 7):
        labels, words = bs.word_labels(arr, n)
        w, c = wc.words(n)
        assert np.array_equal(words, w)
        assert np.array_equal(np.bincount(labels[labels >= 0], minlength=words.size), c)


def test_word_labels_of_long_words_match_word_counts():
    """Past the dense table (depth 13+ for DNA) labels come from a sort; the same words and counts result."""
    rng = np.random.default_rng(3)
    codes = rng.integers(0, 4, 6000)
    codes[3000:3400] = np.tile([0, 1, 2], 134)[:400]  # repeats so that long words recur
    arr = from_codes(DNA, codes, starts=[0, 1500, 1501])
    wc = count_words(arr, 20)
    for n in (12, 13, 20):
        labels, words = bs.word_labels(arr, n)
        w, c = wc.words(n)
        assert np.array_equal(words, w)
        assert np.array_equal(np.bincount(labels[labels >= 0], minlength=words.size), c)
        assert labels.dtype == np.int32 and (labels[1500 - n + 1 : 1501] == -1).all()


def test_each_block_once_equals_recounting_with_breaks():
    """With every block taken once, a replicate is the stream cut at block edges (words never straddle)."""
    rng = np.random.default_rng(1)
    T, ell, n = 3001, 97, 5
    arr = from_codes(DNA, rng.integers(0, 4, T), starts=[0, 1234])
    labels, words = bs.word_labels(arr, n)
    starts = np.arange(0, T, ell, dtype=np.int64)
    lens = np.minimum(ell, T - starts).astype(np.int64)
    out = np.zeros(words.size, np.int64)
    bs.replicate_table(labels, n, starts, lens, out)
    cut = from_codes(DNA, arr.codes, starts=np.concatenate([arr.starts, starts]))
    w, c = count_words(cut, n).words(n)
    table = dict(zip(words.tolist(), out.tolist()))
    assert {k: v for k, v in table.items() if v} == dict(zip(w.tolist(), c.tolist()))
    # the block-table route gives the same table
    tabs = bs.block_tables(labels, n, ell)
    out2 = np.zeros(words.size, np.int64)
    bs.weighted_table(tabs.ptr, tabs.label, tabs.count, np.ones(tabs.ptr.size - 1, np.int64), out2)
    assert np.array_equal(out, out2)


def test_block_weights_equal_position_replicates():
    rng = np.random.default_rng(2)
    arr = from_codes(BIN, rng.integers(0, 2, 20_000))
    labels, words = bs.word_labels(arr, 7)
    plan = bs.make_plan(len(arr), 123, 15, seed=9, scheme="nonoverlapping")
    W = plan.block_weights()
    assert np.all(W.sum(axis=1) == W.shape[1])  # multinomial: as many blocks as the stream has
    tabs = bs.block_tables(labels, 7, 123)
    for r in range(plan.n_boot):
        a = np.zeros(words.size, np.int64)
        b = np.zeros(words.size, np.int64)
        s, ln = plan.blocks(r)
        bs.replicate_table(labels, 7, s, ln, a)
        bs.weighted_table(tabs.ptr, tabs.label, tabs.count, W[r], b)
        assert np.array_equal(a, b)


@pytest.mark.parametrize("scheme", bs.SCHEMES)
def test_plans_cover_the_stream_length(scheme):
    plan = bs.make_plan(10_007, 50, 12, seed=3, scheme=scheme)
    for r in range(12):
        s, ln = plan.blocks(r)
        if scheme == "nonoverlapping":
            # as many disjoint blocks as the stream has, drawn with replacement (the last one is short)
            assert ln.size == 201 and set(ln.tolist()) <= {50, 7}
            assert np.all(s % 50 == 0)
        else:
            assert ln.sum() == 10_007
        assert np.all(ln >= 1) and np.all(s >= 0) and np.all(s < 10_007)
    again = bs.make_plan(10_007, 50, 12, seed=3, scheme=scheme)
    assert np.array_equal(plan.starts, again.starts) and np.array_equal(plan.lens, again.lens)


def test_generic_bootstrap_estimate_and_determinism():
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    arr = from_codes(BIN, markov.simulate_markov(P, 30_000, seed=4))
    wc = count_words(arr, 3)

    def stat(tables):
        c = tables[3]
        c = c[c > 0] / c.sum()
        return [float(-(c * np.log(c)).sum()), float(tables[1][1] / tables[1].sum())]

    res = bs.block_bootstrap(arr, [1, 3], stat, resampling=Resampling(n_boot=40, seed=1))
    ref = wc.frequencies(3)
    assert res.estimate[0] == pytest.approx(float(-(ref * np.log(ref)).sum()), abs=1e-12)
    again = bs.block_bootstrap(arr, [1, 3], stat, resampling=Resampling(n_boot=40, seed=1))
    assert res.replicates.tobytes() == again.replicates.tobytes()
    other = bs.block_bootstrap(arr, [1, 3], stat, resampling=Resampling(n_boot=40, seed=2))
    assert not np.array_equal(res.replicates, other.replicates)
    # percentile intervals are numpy's quantiles of the replicates (general-purpose reference)
    lo, hi = res.interval(0.9, "percentile")
    assert np.allclose(lo, np.quantile(res.replicates, 0.05, axis=0), rtol=0, atol=1e-15)
    assert np.allclose(hi, np.quantile(res.replicates, 0.95, axis=0), rtol=0, atol=1e-15)
    d = res.to_dict()
    assert d["block"]["length"] == res.block_length and d["n_boot"] == 40
    assert np.allclose(d["stderr"], np.std(res.replicates, axis=0, ddof=1), rtol=1e-12) and "replicates" not in d


def test_bootstrap_se_of_plugin_entropy_matches_basharin():
    """Asymptotic variance of the plug-in entropy: (sum p ln^2 p - H^2) / N (Basharin 1959, Theory Probab. Appl. 4:333)."""
    p = np.array([0.1, 0.2, 0.3, 0.4])
    arr = from_codes(DNA, markov.iid(40_000, p, seed=5))

    def stat(tables):
        c = tables[1]
        f = c[c > 0] / c.sum()
        return float(-(f * np.log(f)).sum())

    res = bs.block_bootstrap(arr, [1], stat, resampling=Resampling(n_boot=400, seed=0, block_length=50))
    H = float(-(p * np.log(p)).sum())
    theory = math.sqrt((float((p * np.log(p) ** 2).sum()) - H * H) / 40_000)
    # 400 replicates: the SE of a bootstrap SE is ~ 1/sqrt(800) = 3.5%; allow 15%
    assert res.stderr()[0] == pytest.approx(theory, rel=0.15)


def test_blocks_capture_markov_dependence():
    """Symbol frequency of a 2-state chain: Var = pi0 pi1 (1 + lam)/(1 - lam) / N, lam = 1 - a - b.

    Markov-chain central limit theorem (e.g. Kemeny & Snell 1960, Finite Markov Chains, ch. 4; common practice).
    Blocks reproduce it; blocks of length 1 (i.i.d. resampling) miss the factor (1+lam)/(1-lam) = 3.
    """
    a, b = 0.1, 0.4
    P = np.array([[1 - a, a], [b, 1 - b]])
    N = 100_000
    arr = from_codes(BIN, markov.simulate_markov(P, N, seed=6))
    pi1 = a / (a + b)
    lam = 1 - a - b
    theory = math.sqrt(pi1 * (1 - pi1) * (1 + lam) / (1 - lam) / N)

    def stat(tables):
        return float(tables[1][1] / tables[1].sum())

    blocked = bs.block_bootstrap(arr, [1], stat, resampling=Resampling(n_boot=300, seed=0, block_length=100))
    assert blocked.stderr()[0] == pytest.approx(theory, rel=0.15)
    iid = bs.block_bootstrap(arr, [1], stat, resampling=Resampling(n_boot=300, seed=0, block_length=1))
    assert iid.stderr()[0] == pytest.approx(theory / math.sqrt(3), rel=0.15)


def test_politis_white_on_ar1_approaches_the_optimal_block():
    """AR(1), phi = 0.6: R(k) = s^2 phi^|k| / (1 - phi^2), so G/g = 2 phi / (1 - phi^2) and the optimal

    moving-block length is (2 G^2 / (4/3 g^2))^(1/3) N^(1/3) (Politis & White 2004, Econometric Reviews 23:53;
    formula from memory).  The automatic estimate must land near it.
    """
    phi, N = 0.6, 200_000
    rng = np.random.default_rng(7)
    e = rng.standard_normal(N)
    x = np.empty(N)
    x[0] = e[0]
    for i in range(1, N):
        x[i] = phi * x[i - 1] + e[i]
    ratio = 2 * phi / (1 - phi**2)
    theory_cb = (1.5 * ratio**2) ** (1 / 3) * N ** (1 / 3)
    theory_sb = (ratio**2) ** (1 / 3) * N ** (1 / 3)
    sb, cb = bs.politis_white(x)
    assert cb == pytest.approx(theory_cb, rel=0.3)
    assert sb == pytest.approx(theory_sb, rel=0.3)
    # white noise needs no blocks
    assert bs.politis_white(rng.standard_normal(N))[1] < 5


def test_choose_block_length_reports_rule_and_floor():
    arr = from_codes(BIN, markov.bernoulli(50_000, 0.3, seed=1))
    b = bs.choose_block_length(arr, 8)
    assert b.length >= 80 and b.floor == 80
    assert "Politis-White" in b.rule and "floor" in b.rule
    small = bs.choose_block_length(from_codes(BIN, markov.bernoulli(300, 0.3, seed=1)), 8)
    assert small.length == 30 and "capped" in small.rule


def test_interval_methods_on_known_replicates():
    reps = np.arange(1, 1001, dtype=float)[:, None]  # uniform 1..1000
    est = np.array([400.0])
    lo, hi = bs.interval_from(est, reps, 0.9, "percentile")
    assert lo[0] == pytest.approx(np.quantile(reps, 0.05)) and hi[0] == pytest.approx(np.quantile(reps, 0.95))
    lo_b, hi_b = bs.interval_from(est, reps, 0.9, "basic")
    assert lo_b[0] == pytest.approx(800 - hi[0]) and hi_b[0] == pytest.approx(800 - lo[0])
    # bias-corrected percentile: the estimate sits at the 40% point, so the interval shifts down
    lo_c, hi_c = bs.interval_from(est, reps, 0.9, "bc")
    assert lo_c[0] < lo[0] and hi_c[0] < hi[0]
    # centered: the estimate plus the replicates' spread around their median
    lo_m, hi_m = bs.interval_from(est, reps, 0.9, "centered")
    assert lo_m[0] == pytest.approx(400 + lo[0] - 500.5) and hi_m[0] == pytest.approx(400 + hi[0] - 500.5)
    nan_lo, _ = bs.interval_from(np.array([1.0]), np.full((5, 1), 1.0))
    assert math.isnan(nan_lo[0])  # fewer than 10 replicates: no interval


def test_bad_bootstrap_parameters():
    arr = from_codes(BIN, markov.bernoulli(1000, 0.3, seed=1))
    with pytest.raises(ParameterError):
        bs.make_plan(1000, 10, 5, scheme="jackknife")
    with pytest.raises(ParameterError):
        bs.block_bootstrap(arr, [1], lambda t: 0.0, resampling=Resampling(block_length=5000))
    with pytest.raises(ParameterError):
        bs.block_bootstrap(arr, [1], lambda t: 0.0, resampling=Resampling(n_boot=-1))
    with pytest.raises(ParameterError):
        bs.block_bootstrap(arr, [], lambda t: 0.0)


def test_segmented_autocovariances_equal_direct_sums():
    """Segment-wise FFT autocovariances equal the direct lagged dot products (numpy), any segment length."""
    rng = np.random.default_rng(4)
    x = np.convolve(rng.standard_normal(20000), np.ones(7), "same")
    x -= x.mean()
    ref = np.array([x[: x.size - k] @ x[k:] for k in range(201)]) / x.size
    for seg in (None, 50, 999, 20000, 10**6):
        assert np.allclose(bs.autocovariances(x, 200, seg), ref, rtol=0, atol=1e-12)


def test_surprisal_series_equals_direct_plug_in_counts():
    """-ln(count(context + symbol) / count(context)) with counts over the words inside segments (direct Python)."""
    rng = np.random.default_rng(6)
    codes = rng.integers(0, 3, 400)
    arr = from_codes(DNA, codes, starts=[0, 150])
    for order in (0, 2):
        got = bs.surprisal_series(arr, order)
        words = []
        for a, b in ((0, 150), (150, 400)):
            words += [(t, tuple(codes[t : t + order + 1])) for t in range(a, b - order)]
        joint: dict = {}
        ctx: dict = {}
        for _, w in words:
            joint[w] = joint.get(w, 0) + 1
            ctx[w[:-1]] = ctx.get(w[:-1], 0) + 1
        want = np.full(400, np.nan)
        for t, w in words:
            want[t] = -np.log(joint[w] / ctx[w[:-1]])
        assert np.allclose(got, want, equal_nan=True)


# ------------------------------------------------------------ naive twin
def naive_replicate_tables(codes, starts, depths, plan):
    """Slow, obviously correct resampler: glue each replicate's blocks and recount its words in Python.

    A block ``[s, s + len)`` runs past the end circularly (stationary scheme); a word is counted when
    it lies wholly inside one run of one block and inside one segment of the stream.  Tables are in the
    order of the whole stream's distinct words, sorted lexicographically (= address order).
    """
    T = len(codes)
    seg_of = np.zeros(T, dtype=np.int64)
    for k, s in enumerate(list(starts) + [T]):
        if k < len(starts):
            seg_of[s:] = k
    out = []
    for n in depths:
        words = sorted({tuple(codes[t : t + n]) for t in range(T - n + 1) if seg_of[t] == seg_of[t + n - 1]})
        index = {w: i for i, w in enumerate(words)}
        rows = []
        for r in range(plan.n_boot):
            table = [0] * len(words)
            bstarts, blens = plan.blocks(r)
            for s, ln in zip(bstarts.tolist(), blens.tolist()):
                e = s + ln
                runs = [(s, min(e, T))] + ([(0, e - T)] if e > T else [])
                for a, b in runs:
                    for t in range(a, b - n + 1):
                        if seg_of[t] == seg_of[t + n - 1]:
                            table[index[tuple(codes[t : t + n])]] += 1
            rows.append(table)
        out.append(np.array(rows, dtype=float).reshape(plan.n_boot, len(words)))
    return out


@st.composite
def bootstrap_cases(draw):
    A = draw(st.sampled_from([2, 4]))
    T = draw(st.integers(12, 240))
    codes = np.array(draw(st.lists(st.integers(0, A - 1), min_size=T, max_size=T)), dtype=np.uint8)
    cuts = sorted(set(draw(st.lists(st.integers(1, T - 1), max_size=4))))
    depths = sorted(set(draw(st.lists(st.integers(1, 4), min_size=1, max_size=3))))
    ell = draw(st.integers(1, T))
    n_boot = draw(st.integers(1, 6))
    seed = draw(st.integers(0, 10_000))
    scheme = draw(st.sampled_from(list(bs.SCHEMES)))
    return A, codes, [0] + cuts, depths, ell, n_boot, seed, scheme


@settings(max_examples=60, deadline=None, derandomize=True)
@given(bootstrap_cases())
def test_block_bootstrap_equals_naive_recounting(case):
    """The fast bootstrap (labels, block tables, weights) gives exactly the tables of recounting each replicate."""
    A, codes, starts, depths, ell, n_boot, seed, scheme = case
    arr = from_codes(DNA if A == 4 else BIN, codes, starts=starts)
    # any replicate count (the public function asks for 0 or at least 20): the runner with plain settings
    res = bs.run_block_bootstrap(arr, depths, lambda t: np.concatenate([t[n] for n in depths]).astype(float),
                                 n_boot, seed, ell, scheme)
    plan = bs.make_plan(len(codes), res.block_length, n_boot, seed, scheme)
    expected = np.concatenate(naive_replicate_tables(codes, starts, depths, plan), axis=1)
    assert res.replicates.shape == expected.shape
    assert np.array_equal(res.replicates, expected)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(bootstrap_cases())
def test_replicate_spectra_equal_naive_recounting(case):
    """The one-pass spectra of all replicates (non-overlapping blocks) equal the spectra of recounted tables."""
    A, codes, starts, depths, ell, n_boot, seed, _ = case
    arr = from_codes(DNA if A == 4 else BIN, codes, starts=starts)
    T = len(codes)
    # a replicate glues whole blocks (the last one is not cut), so it may hold more than T words, never 2T
    size = 2 * T

    def histogram(t):
        h = np.zeros((len(depths), size + 1))
        for i, n in enumerate(depths):
            np.add.at(h[i], np.asarray(t[n].value, dtype=np.int64), np.asarray(t[n].multiplicity, dtype=float))
        return h.ravel()

    res = bs.run_block_bootstrap(arr, depths, histogram, n_boot, seed, ell, "nonoverlapping", spectra=True)
    plan = bs.make_plan(T, res.block_length, n_boot, seed, "nonoverlapping")
    tables = naive_replicate_tables(codes, starts, depths, plan)
    for r in range(n_boot):
        expected = np.zeros((len(depths), size + 1))
        for i, table in enumerate(tables):
            c = table[r].astype(np.int64)
            np.add.at(expected[i], c[c > 0], 1.0)  # words absent from a replicate are not in its spectrum
        assert np.array_equal(res.replicates[r], expected.ravel())

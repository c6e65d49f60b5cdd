"""The profile's per-position work done chunk by chunk equals the work done on whole arrays.

Streamed pieces (``resampling._word_labels.WordIndex``, ``resampling._streamed``,
``resampling._plan.block_major_weights``, ``resampling._block_length.StreamedAutocovariances`` and
``streamed_politis_white``, ``dimensions._level_variance.BatchSums.add_chunks`` and
``streamed_batch_covariance``, ``count_words`` of
an array in pieces) are compared with the whole-array forms they replace, with random chunk sizes
(hypothesis), and the autocovariances also with ``numpy.correlate`` (an outside reference:
``sum_t x_t x_{t+k}`` is the lag-k entry of the full cross-correlation, numpy documentation).
Integers must agree exactly and floats bit for bit, except where a docstring says otherwise.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.resampling import _block_length as bl
from fractalseq.resampling import _plan
from fractalseq.resampling import _replicates as rp
from fractalseq.resampling import _streamed as sr
from fractalseq.resampling import _word_labels as wl
from fractalseq.stream import Chunk, SymbolArray, SymbolStream


def _markov_stream(T: int, seed: int, starts=(0,)) -> SymbolArray:
    """An order-1 Markov stream over ACGT with sticky transitions (invented, for tests)."""
    rng = np.random.default_rng(seed)
    P = np.array([[0.7, 0.1, 0.1, 0.1], [0.2, 0.5, 0.2, 0.1], [0.1, 0.1, 0.4, 0.4], [0.3, 0.3, 0.2, 0.2]])
    cum = P.cumsum(axis=1)
    u = rng.random(T)
    codes = np.empty(T, np.uint8)
    s = 0
    for t in range(T):
        s = int(np.searchsorted(cum[s], u[t]))
        s = min(s, 3)
        codes[t] = s
    return SymbolArray(al.dna(), codes, np.array(sorted(set(starts) | {0}), dtype=np.int64))


@settings(max_examples=80, deadline=None)
@given(
    data=st.data(),
    T=st.integers(30, 3000),
    n=st.sampled_from([1, 2, 3, 6, 13]),
    chunk=st.integers(1, 700),
    ell=st.one_of(st.integers(1, 60), st.integers(250, 300)),  # pair counts stored as uint8, then uint16
    budget=st.integers(1, 5000),
)
def test_streamed_spectra_equal_whole_tables(data, T, n, chunk, ell, budget):
    codes = np.array(data.draw(st.lists(st.integers(0, 3), min_size=T, max_size=T)), dtype=np.uint8)
    starts = data.draw(st.lists(st.integers(0, T - 1), max_size=6))
    arr = SymbolArray(al.dna(), codes, np.array(sorted(set([0] + starts)), dtype=np.int64))
    ell = min(ell, T)
    labels, words = wl.word_labels(arr, n)
    index = wl.WordIndex(arr, n, chunk)
    assert np.array_equal(index.words, words)
    got = np.concatenate([lab for _, lab in index.chunks(ell)])
    assert np.array_equal(got, labels)
    W = _plan.make_plan(T, ell, 7, seed=3).block_weights()
    wt = _plan.block_major_weights(T, ell, 7, seed=3, piece=data.draw(st.integers(1, 9000)))
    assert np.array_equal(wt, W.T) and wt.dtype == np.uint8  # weights here stay far below 256
    ref = rp.replicate_spectra(rp.item_tables(labels, n, ell, words.size), W)
    # both routes: item-major rows in ranges of items, and every item's replicate counts in one pass
    direct = data.draw(st.booleans())
    old = sr.DIRECT_CELLS
    sr.DIRECT_CELLS = old if direct else -1
    try:
        occ, spec = sr.streamed_replicate_spectra(index, n, ell, wt, budget=budget)
        assert np.array_equal(occ, np.bincount(labels[labels >= 0], minlength=words.size))
        assert np.array_equal(spec.dense, ref.dense)
        assert np.array_equal(spec.big, ref.big)
        # the kernels are generic over the table's integer type: a wider table gives the same spectra
        wide = data.draw(st.sampled_from([np.uint16, np.int32]))
        _, spec_w = sr.streamed_replicate_spectra(index, n, ell, wt.astype(wide), budget=budget)
        assert np.array_equal(spec_w.dense, spec.dense) and np.array_equal(spec_w.big, spec.big)
    finally:
        sr.DIRECT_CELLS = old


def test_pair_budget_grows_with_the_length_between_bounds():
    assert sr.default_budget(0) == sr.ITEM_BUDGET
    assert sr.default_budget(sr.ITEM_BUDGET_MAX * sr.POSITIONS_PER_PAIR * 4) == sr.ITEM_BUDGET_MAX
    mid = (sr.ITEM_BUDGET + 12_345) * sr.POSITIONS_PER_PAIR
    assert sr.default_budget(mid) == sr.ITEM_BUDGET + 12_345
    # a count in a block never exceeds the block length, so it fits the narrowest type holding that length
    assert [np.dtype(sr.count_type(e)) for e in (1, 255, 256, 65_535, 65_536)] == [np.uint8, np.uint8, np.uint16, np.uint16, np.int32]


@settings(max_examples=40, deadline=None)
@given(T=st.integers(1, 5000), ell=st.integers(1, 80), R=st.integers(0, 30), seed=st.integers(0, 2**32), piece=st.integers(1, 20_000))
def test_block_weights_in_pieces_are_numpys_whole_draw(T, ell, R, seed, piece):
    # Reference: numpy's Generator.integers drawn in one call of shape (replicates, blocks) and
    # tallied by numpy.bincount (a general-purpose library), the draws make_plan uses.
    ell = min(ell, T)
    nb = -(-T // ell)
    draws = np.random.default_rng(seed).integers(0, nb, size=(R, nb))
    ref = np.array([np.bincount(row, minlength=nb) for row in draws], dtype=np.int64).reshape(R, nb)
    wt = _plan.block_major_weights(T, ell, R, seed=seed, piece=piece)
    assert wt.shape == (nb, R)
    assert np.array_equal(wt.astype(np.int64), ref.T)
    assert wt.dtype == np.uint8  # the smallest type that holds these tallies (all below 256)


def test_block_weights_widen_when_a_tally_would_overflow(monkeypatch):
    # Pretend uint8 holds tallies up to 1 and uint16 up to 3: the table must widen twice and keep
    # every count (reference: numpy.bincount of the same numpy draws).
    real = _plan._largest
    monkeypatch.setattr(_plan, "_largest", lambda d: {np.uint8: 1, np.uint16: 3}.get(d, real(d)))
    T, ell, R = 40, 10, 300  # 4 blocks drawn 4 times per replicate: tallies of 2, 3 and 4 occur
    draws = np.random.default_rng(11).integers(0, 4, size=(R, 4))
    ref = np.array([np.bincount(row, minlength=4) for row in draws]).T
    assert ref.max() >= 4
    wt = _plan.block_major_weights(T, ell, R, seed=11, piece=7)
    assert wt.dtype == np.int32 and np.array_equal(wt, ref)
    monkeypatch.setattr(_plan, "_largest", lambda d: {np.uint8: 1}.get(d, real(d)))
    wt = _plan.block_major_weights(T, ell, R, seed=11, piece=7)
    assert wt.dtype == np.uint16 and np.array_equal(wt, ref)


@settings(max_examples=60, deadline=None)
@given(
    pieces=st.lists(st.tuples(st.integers(0, 3000), st.lists(st.integers(0, 3000), max_size=3)), max_size=12),
    hint=st.one_of(st.none(), st.integers(0, 40_000)),
    first=st.integers(1, 5000),
)
def test_to_array_equals_the_chunks_concatenated(pieces, hint, first):
    # Reference: numpy.concatenate of the chunks' codes and of their starts shifted by the codes
    # before them, the join the growing array replaces; the length hint may be short or long.
    import fractalseq.stream as stream_mod

    rng = np.random.default_rng(len(pieces))
    chunks = []
    for n, st_ in pieces:
        chunks.append(Chunk(rng.integers(0, 4, n).astype(np.uint8), np.array(sorted({x for x in st_ if x <= n}), np.int64)))
    old = stream_mod.TO_ARRAY_FIRST
    stream_mod.TO_ARRAY_FIRST = first
    try:
        got = SymbolStream(al.dna(), lambda report: iter(chunks), length_hint=hint).to_array()
    finally:
        stream_mod.TO_ARRAY_FIRST = old
    kept = [c for c in chunks if len(c.codes) or len(c.starts)]
    codes = np.concatenate([c.codes for c in kept]) if kept else np.zeros(0, np.uint8)
    offsets = np.cumsum([0] + [len(c.codes) for c in kept])
    starts = np.concatenate([c.starts + o for c, o in zip(kept, offsets)]) if kept else np.zeros(0, np.int64)
    want = SymbolArray(al.dna(), codes, starts)
    assert got.codes.dtype == want.codes.dtype and np.array_equal(got.codes, want.codes)
    assert np.array_equal(got.starts, want.starts)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2**31), n=st.integers(1, 5000), lag=st.integers(0, 300), data=st.data())
def test_streamed_autocovariances_equal_whole_and_numpy(seed, n, lag, data):
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    x -= x.mean()
    whole = bl.autocovariances(x, lag, segment=data.draw(st.sampled_from([None, 7, 64])))
    acc = bl.StreamedAutocovariances(n, lag, segment=None)
    i = 0
    while i < n:
        k = data.draw(st.integers(1, 900))
        acc.feed(x[i : i + k])
        i += k
    assert np.array_equal(acc.finish(), bl.autocovariances(x, lag))
    M = min(lag, n - 1)
    ref = np.correlate(x, x, mode="full")[n - 1 : n + M] / n  # numpy: lag k at index n - 1 + k
    np.testing.assert_allclose(whole, ref, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("order", [0, 1, 2])
def test_streamed_politis_white_one_chunk_is_bitwise(order):
    arr = _markov_stream(40_000, 7, starts=(0, 9_000, 9_001, 30_000))
    assert bl.streamed_politis_white(arr, order) == bl.politis_white(bl.surprisal_series(arr, order))


@settings(max_examples=15, deadline=None)
@given(chunk=st.integers(50, 20_000))
def test_streamed_politis_white_does_not_depend_on_chunks(chunk):
    """Several chunks: the mean is the exact sum over words, the same for every chunking, and within
    rounding of numpy's mean of the whole series."""
    arr = _markov_stream(40_000, 8, starts=(0, 12_345))
    a = bl.streamed_politis_white(arr, 2, chunk=chunk)
    b = bl.streamed_politis_white(arr, 2, chunk=20_001)
    assert a == b
    np.testing.assert_allclose(a, bl.politis_white(bl.surprisal_series(arr, 2)), rtol=1e-9)


@settings(max_examples=20, deadline=None)
@given(chunk=st.integers(1, 3000))
def test_batch_sums_in_chunks_equal_whole(chunk):
    from fractalseq.dimensions import _level_variance as lv

    arr = _markov_stream(6_000, 9, starts=(0, 2_500))
    qs = np.array([0.0, 0.5, 1.0, 2.0, 3.0])
    labels, words = wl.word_labels(arr, 7)
    counts = np.bincount(labels[labels >= 0], minlength=words.size)
    a = lv.BatchSums(len(arr), 3, qs.size, batch=97)
    a.add_counts(1, labels, counts, qs)
    b = lv.BatchSums(len(arr), 3, qs.size, batch=97)
    index = wl.WordIndex(arr, 7, chunk)
    b.add_chunks(1, index.chunks, counts, qs)
    assert np.array_equal(a.sums, b.sums) and np.array_equal(a.total, b.total)


@settings(max_examples=20, deadline=None)
@given(piece=st.integers(1, 5000), depth=st.sampled_from([3, 8, 14]))
def test_array_counted_in_pieces(piece, depth):
    from fractalseq.words import _counts as wc_mod

    arr = _markov_stream(12_000, 10, starts=(0, 100, 101, 7_000))
    whole = wc_mod.count_words(arr, depth)
    old = wc_mod.ARRAY_PIECE
    try:
        wc_mod.ARRAY_PIECE = piece
        parts = wc_mod.count_words(arr, depth)
    finally:
        wc_mod.ARRAY_PIECE = old
    assert (parts.length, parts.segments) == (whole.length, whole.segments)
    for n in range(1, depth + 1):
        wa, ca = whole.words(n)
        wb, cb = parts.words(n)
        assert np.array_equal(wa, wb) and np.array_equal(ca, cb)


def _profile_json(arr, **kw) -> tuple[str, list[float]]:
    """The profile's JSON (timings left out) with every Politis-White value taken out, and those values.

    Beyond one chunk the Politis-White value uses the exact mean over words instead of numpy's mean
    of the whole series (``streamed_politis_white``): it may differ in the last bits, nothing else may.
    """
    from fractalseq.jobs._profile import profile_source
    from fractalseq.resampling._options import Resampling

    res = profile_source(arr, resampling=Resampling(n_boot=30, seed=2), **kw)
    d = res.to_dict()
    d.pop("timings", None)
    pw: list[float] = []

    def strip(x):
        if isinstance(x, dict):
            if "politis_white" in x and x["politis_white"] is not None:
                pw.append(float(x["politis_white"]))
                x["politis_white"] = "taken out"
            for v in x.values():
                strip(v)
        elif isinstance(x, list):
            for v in x:
                strip(v)

    strip(d)
    return json.dumps(d, sort_keys=True, default=str), pw


def _same_profile(a, b) -> None:
    assert a[0] == b[0]
    np.testing.assert_allclose(a[1], b[1], rtol=1e-12, atol=0)


@pytest.mark.parametrize("chunk,budget,piece", [(1000, 300, 777), (4096, 1 << 24, 5000), (333, 50, 1 << 24)])
def test_profile_in_small_chunks_equals_default(monkeypatch, chunk, budget, piece):
    """The whole profile of a multi-record stream is the same with tiny chunks, item budgets and count
    pieces as with the defaults (one chunk for this length), bit for bit (the Politis-White value to
    the last bits, see :func:`_profile_json`)."""
    from fractalseq.words import _counts as wc_mod

    arr = _markov_stream(20_000, 11, starts=(0, 4_000, 4_001, 15_000))
    base = _profile_json(arr, image=False)
    monkeypatch.setattr(wl, "STREAM_CHUNK", chunk)
    monkeypatch.setattr(sr, "ITEM_BUDGET", budget)
    monkeypatch.setattr(sr.streamed_replicate_spectra, "__defaults__", (rp.DEFAULT_CAP, budget))
    monkeypatch.setattr(wc_mod, "ARRAY_PIECE", piece)
    _same_profile(_profile_json(arr, image=False), base)


def test_rate_intervals_take_the_spectrum_levels_made_in_process(monkeypatch):
    """In process, the entropy-rate bootstrap takes the replicate spectra of the depths the spectrum
    already made over the same blocks and seed (the same arrays), so those depths are not read again;
    the document is the one made without that reuse, byte for byte."""
    from fractalseq.dimensions import _spectrum as spm
    from fractalseq.resampling import _bootstrap as bsm

    arr = _markov_stream(200_000, 5, starts=(0, 7_000))  # 5 levels; the rates ask for depths 5 and 6
    calls: list[int] = []
    real = bsm.streamed_replicate_spectra

    def counted(index, span, *a, **k):
        calls.append(int(span))
        return real(index, span, *a, **k)

    monkeypatch.setattr(bsm, "streamed_replicate_spectra", counted)
    reused = _profile_json(arr, image=False)
    made_by_bootstrap = list(calls)
    calls.clear()
    monkeypatch.setattr(spm, "keep_spectra", lambda *a, **k: None)
    again = _profile_json(arr, image=False)
    _same_profile(reused, again)
    assert calls, "without the kept spectra the bootstrap makes its depths itself"
    assert len(made_by_bootstrap) < len(calls)


@settings(max_examples=40, deadline=None)
@given(data=st.data(), T=st.integers(1, 600), n=st.integers(1, 9), chunk=st.integers(1, 200), A=st.sampled_from([2, 3, 4, 20]))
def test_distinct_words_in_chunks_equal_a_set(data, T, n, chunk, A):
    """Koslicki's p(n) counted chunk by chunk equals the size of a Python set of the words (common practice)."""
    from fractalseq.entropy import _topological as topo

    codes = np.array(data.draw(st.lists(st.integers(0, A - 1), min_size=T, max_size=T)), dtype=np.uint8)
    starts = sorted(set([0] + data.draw(st.lists(st.integers(0, T - 1), max_size=4))))
    bounds = starts + [T]
    ref = {tuple(codes[p : p + n]) for a, b in zip(bounds[:-1], bounds[1:]) for p in range(a, b - n + 1)}
    got = topo.distinct_words(codes, np.array(starts, np.int64), n, A, chunk=chunk)
    assert got == len(ref)
    old = topo._DENSE_DISTINCT
    try:
        topo._DENSE_DISTINCT = 1  # the sorted route too
        assert topo.distinct_words(codes, np.array(starts, np.int64), n, A, chunk=chunk) == len(ref)
    finally:
        topo._DENSE_DISTINCT = old


@settings(max_examples=15, deadline=None)
@given(chunk=st.integers(1, 3000), label_chunk=st.integers(1, 3000), block=st.sampled_from([3, 17, 4096]),
       batch=st.integers(1, 60), values=st.booleans())
def test_streamed_batch_covariance_equals_whole_table(chunk, label_chunk, block, batch, values):
    """The levels' batch-means covariance made in one streamed pass, for any chunk of positions, equals
    the whole ``(levels, batches, Q)`` table's (``BatchSums``), bit for bit: the same sums in the same
    blocks of the accumulator."""
    from fractalseq.dimensions import _batch_covariance as bc
    from fractalseq.dimensions import _level_variance as lv

    arr = _markov_stream(8_000, 12, starts=(0, 3_100))
    qs = np.array([-1.0, 0.0, 0.5, 1.0, 2.0, 4.0])
    depths = (1, 3, 6, 9)
    old = (bc.COV_BLOCK, lv.VALUE_ROWS)
    try:
        bc.COV_BLOCK, lv.VALUE_ROWS = block, (old[1] if values else 0)  # rows by count value, or by rank
        whole = lv.BatchSums(len(arr), len(depths), qs.size, batch=batch)
        levels = []
        for i, n in enumerate(depths):
            labels, words = wl.word_labels(arr, n)
            counts = np.bincount(labels[labels >= 0], minlength=words.size)
            whole.add_counts(i, labels, counts, qs)
            levels.append((wl.WordIndex(arr, n, label_chunk).labels, counts))
        got = lv.streamed_batch_covariance(len(arr), batch, levels, qs, chunk=chunk)
        ref = whole.covariance()
    finally:
        bc.COV_BLOCK, lv.VALUE_ROWS = old
    assert got.shape == (qs.size, len(depths), len(depths))
    assert got.tobytes() == ref.tobytes()


def test_per_record_profiles_in_small_chunks_equal_default(tmp_path, monkeypatch):
    """Each record of a multi-record FASTA (invented sequences) profiled on its own gives the same
    document with tiny chunks as with the defaults."""
    import fractalseq as fs
    from fractalseq.jobs._records import record_arrays
    from fractalseq.words import _counts as wc_mod

    letters = np.frombuffer(b"ACGT", np.uint8)
    recs = [_markov_stream(T, 20 + i).codes for i, T in enumerate((9_000, 6_500, 12_000))]
    text = "".join(f">rec{i} invented\n{letters[c].tobytes().decode()}\n" for i, c in enumerate(recs))
    path = tmp_path / "three.fa"
    path.write_text(text)
    arr = fs.open_source(str(path)).to_array()
    parts = list(record_arrays(arr, "three.fa"))
    assert [len(p) for p in parts] == [9_000, 6_500, 12_000]
    base = [_profile_json(p, image=False) for p in parts]
    monkeypatch.setattr(wl, "STREAM_CHUNK", 777)
    monkeypatch.setattr(sr.streamed_replicate_spectra, "__defaults__", (rp.DEFAULT_CAP, 400))
    monkeypatch.setattr(wc_mod, "ARRAY_PIECE", 1_000)
    for p, b in zip(parts, base):
        _same_profile(_profile_json(p, image=False), b)

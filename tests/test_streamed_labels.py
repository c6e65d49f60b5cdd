"""Word labels computed chunk by chunk equal the labels of a plain per-position reference.

The reference (common practice): the word starting at position t is valid when its
n symbols lie inside one segment; its label is its rank among the distinct valid
words in lexicographic (address) order.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.resampling import _bootstrap as bs
from fractalseq.resampling._word_labels import word_labels
from fractalseq.stream import SymbolArray


def naive_labels(codes, starts, n, A):
    bounds = sorted(set(int(s) for s in starts) | {0}) + [len(codes)]
    seg_end = np.empty(len(codes), dtype=np.int64)
    for a, b in zip(bounds[:-1], bounds[1:]):
        seg_end[a:b] = b
    words = {}
    for t in range(len(codes)):
        if t + n <= seg_end[t]:
            words[t] = tuple(int(c) for c in codes[t : t + n])
    order = sorted(set(words.values()))
    rank = {w: i for i, w in enumerate(order)}
    labels = np.array([rank[words[t]] if t in words else -1 for t in range(len(codes))], dtype=np.int64)
    addr = np.array([sum(c * A ** (n - 1 - i) for i, c in enumerate(w)) for w in order], dtype=np.uint64)
    return labels, addr


@settings(max_examples=60, deadline=None)
@given(
    data=st.data(),
    T=st.integers(1, 400),
    n=st.sampled_from([1, 2, 3, 5, 13, 14, 20]),
    chunk=st.integers(1, 97),
)
def test_chunked_labels_equal_reference(data, T, n, chunk):
    codes = np.array(data.draw(st.lists(st.integers(0, 3), min_size=T, max_size=T)), dtype=np.uint8)
    starts = data.draw(st.lists(st.integers(0, T - 1), max_size=5))
    arr = SymbolArray(al.dna(), codes, np.array([0] + starts, dtype=np.int64))
    labels, words = word_labels(arr, n, chunk=chunk)
    ref_labels, ref_words = naive_labels(codes, arr.starts, n, 4)
    assert np.array_equal(labels.astype(np.int64), ref_labels)
    assert np.array_equal(words, ref_words)
    # and the whole-stream call (one chunk) gives the same bytes
    l2, w2 = word_labels(arr, n)
    assert np.array_equal(l2, labels) and l2.dtype == labels.dtype and np.array_equal(w2, words)


def test_bootstrap_does_not_depend_on_the_label_chunk(monkeypatch):
    """The bootstrap's replicates are a function of the labels only, so the chunk size cannot change them."""
    from fractalseq.resampling import _word_labels as wl

    rng = np.random.default_rng(5)
    arr = SymbolArray(al.dna(), rng.integers(0, 4, 20_000).astype(np.uint8), np.array([0, 7000]))

    def stat(tables):
        return [float((c > 0).sum()) for c in tables.values()]

    a = bs.block_bootstrap(arr, (3, 14), stat, bs.Resampling(n_boot=25, seed=4))
    monkeypatch.setattr(wl, "LABEL_CHUNK", 333)
    monkeypatch.setattr(wl.word_labels, "__defaults__", (333,))
    b = bs.block_bootstrap(arr, (3, 14), stat, bs.Resampling(n_boot=25, seed=4))
    assert np.array_equal(a.replicates, b.replicates) and np.array_equal(a.estimate, b.estimate)


def test_level_variances_one_q_at_a_time_equal_the_whole_table(monkeypatch):
    """Large levels go one q at a time; the influence values are the same, the sums agree to rounding."""
    from fractalseq.dimensions import _level_variance as lv
    from fractalseq.words._counts import count_words

    rng = np.random.default_rng(11)
    arr = SymbolArray(al.dna(), rng.integers(0, 4, 30_000).astype(np.uint8), np.array([0, 12_000]))
    wc = count_words(arr, 9)
    qs = np.array([-1.0, 0.0, 0.5, 1.0, 2.0, 3.0])
    whole = lv.word_level_variances(wc, 9, qs)
    monkeypatch.setattr(lv, "WHOLE_TABLE_CELLS", 0)
    column = lv.word_level_variances(wc, 9, qs)
    for a, b in zip(whole, column):
        # tolerance: sums of up to 30,000 terms in another order (BLAS matrix product against dot
        # products), a few ulps per term at most
        np.testing.assert_allclose(b, a, rtol=1e-10, atol=0)


@settings(max_examples=4, deadline=None)
@given(chunk=st.integers(50, 5000))
def test_profile_does_not_depend_on_the_label_chunk(chunk):
    """The profile's JSON is the same bytes whatever chunk size the labels are computed in."""
    from fractalseq.io._outputs import to_json
    from fractalseq.jobs._profile import profile_source
    from fractalseq.resampling import _word_labels as wl
    from fractalseq.resampling._options import Resampling

    rng = np.random.default_rng(2)
    arr = SymbolArray(al.dna(), rng.integers(0, 4, 12_000).astype(np.uint8), np.array([0, 5000]), name="invented")
    rs = Resampling(n_boot=20, seed=3)
    ref = to_json(profile_source(arr, resampling=rs, image=False).to_dict())
    saved = wl.word_labels.__defaults__
    try:
        wl.word_labels.__defaults__ = (chunk,)
        got = to_json(profile_source(arr, resampling=rs, image=False).to_dict())
    finally:
        wl.word_labels.__defaults__ = saved
    assert got == ref


def test_consistency_beyond_its_cap_is_the_table_of_the_prefix():
    """Past ``consistency_max_length`` both sides are measured on the prefix, and a note says so."""
    from fractalseq.dimensions._consistency import consistency_table
    from fractalseq.jobs._profile import profile_source
    from fractalseq.resampling._options import Resampling

    rng = np.random.default_rng(4)
    arr = SymbolArray(al.dna(), rng.integers(0, 4, 60_000).astype(np.uint8), np.array([0]), name="invented")
    rs = Resampling(n_boot=20, seed=1)
    capped = profile_source(arr, resampling=rs, consistency_max_length=30_000, image=False)
    direct = consistency_table(arr.slice(0, 30_000), (0.0, 1.0, 2.0), resampling=rs, offsets=0)
    from fractalseq.io._outputs import to_json

    assert to_json([r.to_dict() for r in capped.consistency.rows]) == to_json([r.to_dict() for r in direct.rows])
    assert any("first 30,000 of 60,000 symbols" in n for n in capped.notes)
    assert {r.verdict for r in direct.rows} <= {"consistent", "inconsistent"}  # a table with numbers in it
    assert capped.to_dict()["settings"]["consistency_max_length"] == 30_000
    whole = profile_source(arr, resampling=rs, consistency_max_length=None, image=False)
    same = profile_source(arr, resampling=rs, consistency_max_length=60_000, image=False)
    assert to_json(whole.consistency_rows()) == to_json(same.consistency_rows())

"""Learning in bounded memory gives the same model: chunking, 32-bit counts, part-wise tables, handed-over counts.

``learn`` counts its input chunk by chunk into ``uint32`` counts (widened to ``int64`` before
the symbols counted reach ``2**32``), builds each deep depth in address parts from slices of the
leaf table (reverse complements collected part by part), and drops the word counts as soon as
the cell tables are built.  None of this may change a count.  The references are outside the
code under test: words counted by hand (``tests/reference_impl.word_counts``), the cells of every
depth counted by hand on both strands (``naive_cells`` of ``tests/test_predict_naive.py``, written
from the model's docstring: complement of an ACGT code = 3 - code), and plain Python dictionaries
for the merge and the reverse complements.  The cell cap's order is checked against pruning at
the end in ``tests/test_predict_capped.py`` (which runs through the same part-wise builder).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq.alphabet import dna
from fractalseq.errors import ParameterError
from fractalseq.predict import CellPredictor
from fractalseq.predict import _cells as cells_module
from fractalseq.predict._fitted_kernels import RevcompParts
from fractalseq.stream import from_codes
from fractalseq.words import _counts as C
from fractalseq.words._kernels import merge_into_first, merge_sorted_counts
from reference_impl import word_counts
from test_predict_naive import naive_cells

SETTINGS = settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _stream(data, max_len=1500):
    n = data.draw(st.integers(30, max_len), label="length")
    seed = data.draw(st.integers(0, 2**32 - 1), label="seed")
    rng = np.random.default_rng(seed)
    codes = rng.integers(0, 4, n)
    k = n // 3
    codes[n - k :] = codes[:k]  # a repeat, so cells are seen more than once
    starts = np.unique(rng.integers(0, n, data.draw(st.integers(0, 4), label="breaks")))
    return codes, starts


def _arrays(model: CellPredictor) -> dict[str, np.ndarray]:
    return model.to_state().arrays


@SETTINGS
@given(data=st.data())
def test_fit_is_the_same_for_every_chunk_size_and_equals_cells_by_hand(data):
    codes, starts = _stream(data)
    arr = from_codes(dna(), codes, starts)
    chunk = data.draw(st.integers(1, 700), label="chunk")
    reverse = data.draw(st.booleans(), label="reverse")
    params = dict(depths=(2, 5, 9), reverse_complement=reverse)
    whole = CellPredictor(**params).fit(arr)
    chunked = CellPredictor(**params).fit(arr.as_stream(chunk))
    a, b = _arrays(whole), _arrays(chunked)
    assert sorted(a) == sorted(b)
    for k in a:
        assert a[k].dtype == b[k].dtype and np.array_equal(a[k], b[k]), k
    # every stored depth equals the cells counted by hand (no cap binds at this size)
    assert chunked.pruned_cells_ == 0
    for n in chunked.depths_:
        ref = naive_cells(codes, starts, dna(), n, reverse)
        got = {int(c): row.tolist() for c, row in zip(chunked.counts_[n].cells, chunked.counts_[n].dense(4))}
        assert got == ref, n


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(data=st.data())
def test_a_binding_cap_keeps_the_same_cells_for_every_chunk_size(data):
    codes, starts = _stream(data, 2500)
    if codes.size < 300:
        codes = np.concatenate([codes, codes[::-1], codes, np.arange(300) % 4])  # enough deep cells to cut
    arr = from_codes(dna(), codes, starts)
    whole = CellPredictor(depths=(3, 7, 12)).fit(arr)
    deep = whole.cells_[12].size  # depths up to the baseline orders (10 for DNA) are never pruned
    cap = whole.n_cells_ - max(1, int(deep * data.draw(st.floats(0.05, 0.95), label="share cut")))
    ref = CellPredictor(depths=(3, 7, 12), max_cells=cap).fit(arr)
    got = CellPredictor(depths=(3, 7, 12), max_cells=cap).fit(arr.as_stream(data.draw(st.integers(1, 900), label="chunk")))
    assert got.n_cells_ == ref.n_cells_ == cap and got.pruned_cells_ == ref.pruned_cells_ > 0
    a, b = _arrays(ref), _arrays(got)
    assert all(np.array_equal(a[k], b[k]) for k in a)


@SETTINGS
@given(data=st.data())
def test_compact_counts_equal_words_counted_by_hand(data):
    codes, starts = _stream(data, 800)
    depth = data.draw(st.integers(1, 9), label="depth")
    chunk = data.draw(st.integers(1, 300), label="chunk")
    wc = C.count_words(from_codes(dna(), codes, starts).as_stream(chunk), depth, compact=True, dense=False)
    assert wc.leaf_counts.dtype == np.uint32
    ref = word_counts(codes, starts, depth)
    for n in range(1, depth + 1):
        w, c = wc.words(n)
        got = {tuple(C.decode_address(int(x), n, 2)): int(k) for x, k in zip(w, c)}
        assert got == dict(ref[n]), n


def test_compact_counts_widen_before_they_could_overflow(monkeypatch):
    # with the limit lowered to 5,000 symbols, counting 20,000 widens the counts mid-stream
    monkeypatch.setattr(C, "U32_MAX", 5_000)
    codes = np.random.default_rng(7).integers(0, 4, 20_000)
    arr = from_codes(dna(), codes)
    wide = C.count_words(arr.as_stream(1_000), 12, compact=True)
    plain = C.count_words(arr.as_stream(1_000), 12)
    assert wide.leaf_counts.dtype == np.int64
    for n in (1, 6, 12):
        assert all(np.array_equal(x, y) for x, y in zip(wide.words(n), plain.words(n)))


def test_compact_threaded_counts_equal_plain_counts():
    # above 2**18 symbols a chunk is sorted on two threads; 32-bit counts change nothing
    codes = np.random.default_rng(8).integers(0, 4, 700_000)
    codes[400_000:500_000] = codes[:100_000]
    arr = from_codes(dna(), codes, np.array([0, 300_000]))
    a = C.count_words(arr.as_stream(1 << 19), 21, parallel=True, compact=True)
    b = C.count_words(arr, 21)
    assert a.leaf_counts.dtype == np.uint32
    assert np.array_equal(a.leaf_words, b.leaf_words) and np.array_equal(a.leaf_counts, b.leaf_counts)


@SETTINGS
@given(st.lists(st.tuples(st.integers(0, 60), st.integers(1, 9)), max_size=40),
       st.lists(st.tuples(st.integers(0, 60), st.integers(1, 9)), max_size=40),
       st.sampled_from([np.int64, np.uint32]))
def test_merge_is_sized_exactly_and_adds_equal_words(a, b, dtype):
    da, db = dict(a), dict(b)
    wa, wb = np.array(sorted(da), np.uint64), np.array(sorted(db), np.uint64)
    ca = np.array([da[k] for k in sorted(da)], dtype)
    cb = np.array([db[k] for k in sorted(db)], dtype)
    ref = {k: da.get(k, 0) + db.get(k, 0) for k in da.keys() | db.keys()}
    # the plain merge, and the merge grown in the first table's own memory (given copies: it takes them over)
    for w, c in (merge_sorted_counts(wa, ca, wb, cb, dtype), merge_into_first(wa.copy(), ca.copy(), wb, cb, dtype),
                 merge_into_first(wb.copy(), cb.copy(), wa, ca, dtype)):
        assert c.dtype == dtype and w.size == len(ref)
        assert np.all(np.diff(w.astype(np.int64)) > 0)
        assert dict(zip(w.tolist(), c.tolist())) == ref


@SETTINGS
@given(data=st.data())
def test_reverse_complements_by_part_equal_a_dictionary(data):
    depth = data.draw(st.integers(3, 12), label="depth")
    n = data.draw(st.integers(3, depth), label="n")
    words = data.draw(st.lists(st.integers(0, 4**depth - 1), unique=True, max_size=200), label="leaves")
    leaf = np.array(sorted(words), np.uint64)
    counts = np.array(data.draw(st.lists(st.integers(1, 50), min_size=leaf.size, max_size=leaf.size)), np.uint32)
    shift = 2 * (depth - n)
    ref: dict[int, int] = {}
    for w, c in zip(leaf.tolist(), counts.tolist()):
        p = w >> shift
        r = 0
        for i in range(n):
            r = (r << 2) | (3 - ((p >> (2 * i)) & 3))  # complement = 3 - code, symbols read backwards
        ref[r] = ref.get(r, 0) + c
    bits = data.draw(st.integers(0, min(8, 2 * n - 2)), label="part bits")
    parts = RevcompParts(leaf, counts, shift, n, 2, bits)
    got: dict[int, int] = {}
    for p in range(1 << bits):
        rw, rc = parts.part(p)
        assert np.all(np.diff(rw.astype(np.int64)) > 0) and np.all(rw >> np.uint64(2 * n - bits) == p)
        got.update(zip(rw.tolist(), rc.tolist()))
    assert got == ref


@pytest.mark.parametrize("reverse", [False, True])
def test_the_number_of_address_parts_changes_no_table(monkeypatch, reverse):
    # 4 leaves a part: up to 256 parts at the deep depths instead of 16; a binding cap cuts inside parts
    codes = np.random.default_rng(10).integers(0, 4, 9_000)
    codes[6_000:8_000] = codes[:2_000]
    arr = from_codes(dna(), codes, np.array([0, 4_321]))
    params = dict(depths=(3, 8, 13), reverse_complement=reverse)
    plain = CellPredictor(**params).fit(arr)
    cap = plain.n_cells_ - plain.cells_[13].size // 2
    ref = [_arrays(plain), _arrays(CellPredictor(**params, max_cells=cap).fit(arr))]
    monkeypatch.setattr(cells_module, "PART_LEAVES", 4)
    got = [_arrays(CellPredictor(**params).fit(arr)), _arrays(CellPredictor(**params, max_cells=cap).fit(arr))]
    for a, b in zip(ref, got):
        assert sorted(a) == sorted(b) and all(a[k].dtype == b[k].dtype and np.array_equal(a[k], b[k]) for k in a)


def test_counts_handed_to_the_fit_are_dropped_and_the_model_is_the_same():
    codes = np.random.default_rng(9).integers(0, 4, 30_000)
    arr = from_codes(dna(), codes)
    model = CellPredictor(max_depth=12)
    kept = C.count_words(arr, model.count_depth(dna()), compact=True)
    given_up = C.count_words(arr, model.count_depth(dna()), compact=True)
    a = CellPredictor(max_depth=12).fit_counts(kept)
    b = CellPredictor(max_depth=12).fit_counts(given_up, consume=True)
    assert kept.words(3)[0].size  # still usable
    with pytest.raises(ParameterError, match="discarded"):
        given_up.words(3)
    x, y = _arrays(a), _arrays(b)
    assert all(np.array_equal(x[k], y[k]) for k in x)

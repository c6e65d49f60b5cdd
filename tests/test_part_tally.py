"""Deep words counted in a parted direct table.

References: ``numpy.unique`` (sorted distinct values with their counts) on the word addresses built
with plain numpy.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.stream import from_codes
from fractalseq.words import _counts as wc_mod
from fractalseq.words import _part_tally as pt
from fractalseq.words._counts import WordCounter, count_words


def _numpy_words(codes: np.ndarray, starts: np.ndarray, depth: int, bits: int) -> tuple[np.ndarray, np.ndarray]:
    """Every full ``depth``-word address of each segment (first symbol most significant) by numpy sliding
    windows, then ``numpy.unique(..., return_counts=True)``."""
    bounds = list(starts) + [codes.size]
    keys = []
    for a, e in zip(bounds[:-1], bounds[1:]):
        seg = codes[a:e].astype(np.uint64)
        if seg.size < depth:
            continue
        win = np.lib.stride_tricks.sliding_window_view(seg, depth)
        weights = np.uint64(1) << (np.uint64(bits) * np.arange(depth - 1, -1, -1, dtype=np.uint64))
        keys.append((win * weights).sum(axis=1, dtype=np.uint64))
    allk = np.concatenate(keys) if keys else np.zeros(0, np.uint64)
    return np.unique(allk, return_counts=True)


@st.composite
def cases(draw):
    size = draw(st.sampled_from([2, 3, 4]))
    length = draw(st.integers(0, 3000))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    codes = rng.integers(0, size, length).astype(np.uint8)
    cuts = sorted(set(draw(st.lists(st.integers(1, max(length - 1, 1)), max_size=5)))) if length > 1 else []
    starts = np.array([0, *[c for c in cuts if c < length]], dtype=np.int64)
    bits = int(size - 1).bit_length()
    depth = draw(st.integers(1, 10))
    part_log2 = draw(st.integers(0, bits * depth))
    return codes, starts, depth, bits, part_log2


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(cases())
def test_parted_table_equals_numpy_unique(case):
    """Any split of the address space into parts gives the sorted distinct words and counts of numpy.unique."""
    codes, starts, depth, bits, part_log2 = case
    key_dtype = np.dtype(np.uint32 if bits * depth <= 32 else np.uint64)
    words, counts = pt.tally_in_parts(codes, starts, depth, bits, key_dtype, np.dtype(np.int64), part_log2=part_log2)
    ref_w, ref_c = _numpy_words(codes, starts, depth, bits)
    assert words.dtype == key_dtype and counts.dtype == np.int64
    assert np.array_equal(words.astype(np.uint64), ref_w)
    assert np.array_equal(counts, ref_c)


def _sorted_runs(arr, depth: int, piece: int, compact: bool):
    """The sorted-run counter fed the array in pieces (the route the parted table replaces)."""
    counter = WordCounter(arr.alphabet, depth, dense=False, compact=compact)
    T, st_ = len(arr), arr.starts
    for a in range(0, T, piece):
        b = min(a + piece, T)
        counter.add(arr.codes[a:b], st_[(st_ >= a) & (st_ < b)] - a, final=b >= T)
    return counter.finish()


@pytest.mark.parametrize("compact", [False, True])
@pytest.mark.parametrize("starts", [[0], [0, 1, 5000, 5003, 11_999], [0, 7_000]])
def test_count_words_takes_the_parted_table_with_the_same_counts(monkeypatch, compact, starts):
    """count_words of a long in-memory stream (table path forced by small parts) equals the sorted runs
    field for field (leaves, tails, dtypes, length, segments) and numpy.unique of the words."""
    rng = np.random.default_rng(5)
    codes = rng.integers(0, 4, 12_000).astype(np.uint8)
    arr = from_codes(al.dna(), codes, np.array(starts))
    depth = 7  # 14 address bits: sparse storage (beyond DENSE_MAX_BITS forced below), 2**14 <= 16 x length
    monkeypatch.setattr(wc_mod, "DENSE_MAX_BITS", 8)
    monkeypatch.setattr(wc_mod, "ARRAY_PIECE", 1_000)
    monkeypatch.setattr(pt, "PART_CELLS_LOG2", 11)  # 8 parts
    assert pt.parts_for(len(arr), 2, depth, pt.PART_CELLS_LOG2) == 8
    calls = []
    real = pt.tally_in_parts
    monkeypatch.setattr(wc_mod, "tally_in_parts", lambda *a, **k: calls.append(1) or real(*a, part_log2=11))
    got = count_words(arr, depth, compact=compact)
    assert calls, "the parted table was not used"
    ref = _sorted_runs(arr, depth, 1_000, compact)
    assert got.storage == ref.storage == "sparse"
    for key in ("leaf_words", "leaf_counts", "tail_len", "tail_addr", "tail_count"):
        a, b = getattr(got, key), getattr(ref, key)
        assert a.dtype == b.dtype and np.array_equal(a, b), key
    assert (got.length, got.segments) == (ref.length, ref.segments) == (12_000, len(starts))
    w, c = _numpy_words(arr.codes, arr.starts, depth, 2)
    assert np.array_equal(got.leaf_words.astype(np.uint64), w) and np.array_equal(got.leaf_counts, c)
    for n in (1, 3, depth):
        assert np.array_equal(got.spectrum(n).value, ref.spectrum(n).value)
        assert np.array_equal(got.spectrum(n).multiplicity, ref.spectrum(n).multiplicity)
        assert got.distinct(n) == ref.distinct(n)


def test_parts_for_declines_short_streams_and_deep_words():
    """The table is used only when it would be at least 1/16 full and needs at most 16 passes."""
    assert pt.parts_for(10**9, 2, 14) == 4  # 28 address bits: four parts of 2**26 counters
    assert pt.parts_for(3 * 10**8, 2, 13) == 1
    assert pt.parts_for(10**9, 2, 16) == 0  # 64 parts: sorted runs
    assert pt.parts_for(10**6, 2, 13) == 0  # 2**26 counters for 10**6 words: mostly empty

"""The contractive encoding: points, overlap check, and the box <-> word identity."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq import encoding as enc
from fractalseq.errors import ParameterError
from fractalseq.stream import from_codes
from fractalseq.words._counts import count_words

from reference_impl import chaos_points, thue_morse


@settings(max_examples=60, deadline=None)
@given(
    st.integers(2, 9),
    st.lists(st.integers(0, 8), min_size=0, max_size=200),
    st.lists(st.integers(0, 199), max_size=4),
    st.floats(0.05, 0.95),
)
def test_points_equal_reference(size, raw, starts, ratio):
    codes = np.array([c % size for c in raw], dtype=np.uint8)
    arr = from_codes(al.from_symbols("abcdefghi"[:size]), codes, [s for s in starts if s < len(codes)])
    corners = enc.corner_layout(size)
    got = enc.points(arr, ratio)
    want = chaos_points(arr.codes, arr.starts, corners.tolist(), ratio)
    assert got.shape == want.shape
    assert np.allclose(got, want, rtol=0, atol=1e-12)


def test_corner_layout_is_binary_hypercube():
    c = enc.corner_layout(5)
    assert c.shape == (5, 3)  # D = ceil(log2 5) = 3
    assert c.tolist()[3] == [0, 1, 1]  # binary digits of code 3, most significant first
    assert len({tuple(r) for r in c.tolist()}) == 5


def _box_count(points, ratio, m):
    side = ratio**m
    nb = int(round(1 / side))
    idx = np.floor(points / side).astype(np.int64).clip(0, nb - 1)
    return len({tuple(r) for r in idx.tolist()})


@pytest.mark.parametrize("ratio", [0.5, 1 / 3])
def test_occupied_boxes_equal_distinct_words(ratio):
    # For non-overlapping maps (hypercube corners, k <= 1/2) the box of side k^m that x_t falls in is
    # fixed by the last m symbols; after dropping the first m-1 points (REFERENCE-CHECKS rule 1, A3)
    # occupied boxes on the aligned grid equal distinct m-words exactly.
    rng = np.random.default_rng(4)
    probs = np.array([0.5, 0.2, 0.2, 0.1])
    arr = from_codes(al.dna(), rng.choice(4, size=30_000, p=probs))
    wc = count_words(arr, 8)
    pts = enc.points(arr, ratio)
    for m in range(1, 9):
        assert _box_count(pts[m - 1 :], ratio, m) == wc.distinct(m)


def test_thue_morse_box_counts_follow_a005942():
    # REFERENCE-CHECKS A3: 1-D encoding (binary alphabet, k = 1/2) of the Thue–Morse prefix of length 2^16;
    # N(2^-m) = A005942(m) (OEIS), here for m = 1..16.
    a005942 = [2, 4, 6, 10, 12, 16, 20, 22, 24, 28, 32, 36, 40, 42, 44, 46]
    arr = from_codes(al.binary(), thue_morse(1 << 16))
    pts = enc.points(arr, 0.5)
    got = [_box_count(pts[60:], 0.5, m) for m in range(1, 17)]
    assert got == a005942


@pytest.mark.parametrize("A", [2, 3, 5, 8, 9, 33, 70])
@pytest.mark.parametrize("k", [0.25, 1 / 3, 0.5, 0.5000001, 0.6])
def test_overlap_check_of_hypercube_corners_decided_analytically_matches_the_pairwise_test(A, k):
    # hypercube corners are decided without a table over pairs; the pairwise separating-axis test (the
    # custom-corner route, a block of rows at a time) must agree on the same corners: disjoint iff k <= 1/2
    # (common practice: the maps x -> k x + (1 - k) c of the unit cube's vertices tile it for k = 1/2)
    corners = enc.corner_layout(A)
    fast = enc.overlap_check(k, corners)
    dmin, sep_all = enc._pairwise_separation(corners, k, block=7)
    assert fast.overlapping == (k > 0.5) == (not sep_all)
    assert dmin == fast.min_corner_distance == 1.0


def test_overlap_check():
    two = enc.corner_layout(2)
    four = enc.corner_layout(4)
    assert not enc.overlap_check(0.5, four).overlapping
    assert not enc.overlap_check(1 / 3, two).overlapping
    # REFERENCE-CHECKS A2 (elementary): k = 0.6 with two corners on [0, 1] overlaps; the attractor is [0, 1].
    assert enc.overlap_check(0.6, two).overlapping
    assert enc.overlap_check(0.5, np.array([[0.0, 0.0], [0.0, 0.0]])).overlapping


def test_overlapping_maps_fill_the_interval():
    # REFERENCE-CHECKS A2: k = 0.6, A = 2: the attractor is [0, 1], so boxes of side 2^-m are all occupied
    # (D_0 = 1, not ln 2 / ln(1/0.6) = 1.357).
    rng = np.random.default_rng(1)
    arr = from_codes(al.binary(), rng.integers(0, 2, 200_000))
    pts = enc.points(arr, 0.6, drop=60)
    counts = [_box_count(pts, 0.5, m) for m in range(4, 11)]
    slope = np.polyfit(np.arange(4, 11) * np.log(2), np.log(counts), 1)[0]
    assert abs(slope - 1.0) < 1e-2


@pytest.mark.parametrize("bad", [0, 1, -0.5, 1.5, float("nan")])
def test_ratio_outside_unit_interval_is_refused(bad):
    with pytest.raises(ParameterError):
        enc.check_ratio(bad)


def test_density_image_counts_every_point():
    rng = np.random.default_rng(0)
    arr = from_codes(al.dna(), rng.integers(0, 4, 10_000))
    pts = enc.points(arr, 0.5)
    img = enc.density_image(pts, 64)
    assert img.sum() == 10_000
    # the four quadrants hold the points whose last symbol is the quadrant's corner
    last = np.bincount(arr.codes, minlength=4)
    quads = [img[:32, :32].sum(), img[32:, :32].sum(), img[:32, 32:].sum(), img[32:, 32:].sum()]
    assert sorted(quads) == sorted(last.tolist())

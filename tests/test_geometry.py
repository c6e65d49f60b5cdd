"""Geometric box counting of point clouds: the box <-> word identity and published dimensions."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fractalseq import alphabet as al
from fractalseq import encoding as enc
from fractalseq.dimensions import _geometry as geo
from fractalseq.datasets import _markov as markov
from fractalseq.errors import InputError, ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.resampling import Resampling
from fractalseq.stream import from_codes
from fractalseq.words._counts import count_words

from reference_impl import thue_morse

BIN = al.binary()
DNA = al.dna()

# OEIS A005942 (factor complexity of the Thue-Morse word), n = 1..20 (REFERENCE-CHECKS C1, confirmed)
A005942 = [2, 4, 6, 10, 12, 16, 20, 22, 24, 28, 32, 36, 40, 42, 44, 46, 48, 52, 56, 60]


def test_thue_morse_boxes_equal_factor_complexity():
    """REFERENCE-CHECKS A3: aligned boxes of side 2^-m of the Thue-Morse encoding = A005942(m), after the transient."""
    codes = np.array(thue_morse(1 << 16), dtype=np.uint8)
    arr = from_codes(BIN, codes)
    pts = enc.points(arr, 0.5)
    keep = geo.transient_mask(arr, 60)  # rule 1: drop the points that still remember the start
    for m, expected in enumerate(A005942, start=1):
        assert geo.box_counts(pts, 2.0**-m, valid=keep, unit_cube=True).size == expected, m
    # without dropping the transient the count is wrong (REFERENCE-CHECKS rule 1: 13 instead of 12 at m = 5)
    assert geo.box_counts(pts, 2.0**-5, unit_cube=True).size == 13


@pytest.mark.parametrize("size, ratio", [(4, 0.5), (2, 1 / 3), (3, 0.5), (2, 0.25)])
def test_aligned_box_masses_equal_word_counts(size, ratio):
    """Aligned grid of side k^m: box masses are m-word counts (the words ending at kept points).

    Alignment needs (1 - k)/k to be a whole number (k = 1/2, 1/3, 1/4, ...): then the cylinders of
    level m tile the grid anchored at 0.
    """
    rng = np.random.default_rng(size)
    alphabet = BIN if size == 2 else (al.from_symbols("abc") if size == 3 else DNA)
    arr = from_codes(alphabet, rng.integers(0, size, 30_000))
    pts = enc.points(arr, ratio)
    drop = 60
    keep = geo.transient_mask(arr, drop)
    for m in (1, 3, 5, 7):
        boxes = np.sort(geo.box_counts(pts, ratio**m, valid=keep, unit_cube=True))
        words = np.sort(count_words(arr.slice(drop - m + 1, len(arr)), m).counts(m))
        assert np.array_equal(boxes, words), (size, ratio, m)


@pytest.mark.parametrize(
    "size, ratio, expected",
    [
        # Cantor set: log 2 / log 3 (Stein & Shakarchi 2005, ch. 7, Thm 2.12)
        (2, 1 / 3, 0.630929753571),
        # Sierpinski triangle (3 corners of the square, k = 1/2): log 3 / log 2 (same theorem)
        (3, 0.5, 1.584962500721),
    ],
)
def test_aligned_grid_similarity_dimension(size, ratio, expected):
    rng = np.random.default_rng(10 + size)
    alphabet = BIN if size == 2 else al.from_symbols("abc")
    arr = from_codes(alphabet, rng.integers(0, size, 100_000))
    pts = enc.points(arr, ratio)
    keep = geo.transient_mask(arr, 60)
    scales = ratio ** np.arange(3, 9, dtype=float)
    res = geo.geometric_spectrum(pts, (0,), scales=scales, aligned=True, valid=keep, falpha=False, unit_cube=True,
                                 resampling=Resampling.none())
    # REFERENCE-CHECKS A1: aligned grid, q = 0: abs tol 1e-9 when every m-word occurs
    assert res.get(0).estimate == pytest.approx(expected, abs=1e-9)


def test_shifted_grids_cantor_within_three_percent():
    """REFERENCE-CHECKS A1: misaligned grids are within 3% (relative); offsets are averaged and wrapped on a torus."""
    arr = from_codes(BIN, markov.bernoulli(200_000, 0.5, seed=3))
    pts = enc.points(arr, 1 / 3)
    keep = geo.transient_mask(arr, 60)
    res = geo.geometric_spectrum(pts, (0, 1, 2), scales=(1 / 3) ** np.arange(2, 9, dtype=float), offsets=8,
                                 valid=keep, falpha=False, resampling=Resampling(n_boot=0, seed=1))
    for q in (0, 1, 2):
        assert res.get(q).estimate == pytest.approx(math.log(2) / math.log(3), rel=0.03)
    assert res.get(0).lattice_stderr is not None


def test_overlapping_maps_fill_the_interval():
    """REFERENCE-CHECKS A2: k = 0.6, A = 2 on [0, 1]: the attractor is [0, 1], D_0 = 1 (n = 1e6, tol 1e-3)."""
    arr = from_codes(BIN, markov.bernoulli(1_000_000, 0.5, seed=4))
    pts = enc.points(arr, 0.6)
    keep = geo.transient_mask(arr, 60)
    scales = 2.0 ** -np.arange(4, 11, dtype=float)
    res = geo.geometric_spectrum(pts, (0,), scales=scales, aligned=True, valid=keep, falpha=False, unit_cube=True,
                                 resampling=Resampling.none())
    assert res.get(0).estimate == pytest.approx(1.0, abs=1e-3)


def test_binomial_measure_by_box_counting():
    """Binomial measure p = 0.3 (Halsey et al. 1986, Phys. Rev. A 33:1141; REFERENCE-CHECKS A4), shifted grids."""
    arr = from_codes(BIN, markov.bernoulli(200_000, 0.3, seed=5))
    pts = enc.points(arr, 0.5)
    keep = geo.transient_mask(arr, 60)
    res = geo.geometric_spectrum(pts, (1, 2), scales=2.0 ** -np.arange(3, 10, dtype=float), offsets=4,
                                 valid=keep, resampling=Resampling(n_boot=30, seed=2))
    assert res.get(1).estimate == pytest.approx(0.881290899, abs=0.01)
    assert res.get(2).estimate == pytest.approx(0.785875195, abs=0.01)
    # the intervals (bootstrap plus lattice spread) hold the closed forms within 3 standard errors
    for d, value in zip(res.dims, (0.881290899, 0.785875195)):
        slack = 3 * math.hypot(d.stderr, d.lattice_stderr or 0.0)
        assert d.low - slack <= value <= d.high + slack
        assert d.high - d.low < 0.05
    assert res.block is not None
    again = geo.geometric_spectrum(pts, (1, 2), scales=2.0 ** -np.arange(3, 10, dtype=float), offsets=4,
                                   valid=keep, resampling=Resampling(n_boot=30, seed=2))
    assert to_json(res.to_dict()) == to_json(again.to_dict())


def test_default_scales_on_a_plain_cloud():
    # uniform points in the unit square: D_q = 2 for every q (Lebesgue measure; common practice)
    rng = np.random.default_rng(0)
    pts = rng.random((100_000, 2))
    res = geo.geometric_spectrum(pts, (0, 2), offsets=4, resampling=Resampling.none())
    assert res.get(0).estimate == pytest.approx(2.0, abs=0.02)
    assert res.get(2).estimate == pytest.approx(2.0, abs=0.02)
    assert res.route == "geometric box counting"


def test_box_labels_small_example_and_wide_keys():
    pts = np.array([[0.1, 0.1], [0.2, 0.15], [0.9, 0.1], [0.1, 0.9], [0.95, 0.95]])
    labels, n = geo.box_labels(pts, 0.5)
    assert n == 4 and labels[0] == labels[1] and len(set(labels.tolist())) == 4
    counts = geo.box_counts(pts, 0.5)
    assert sorted(counts.tolist()) == [1, 1, 1, 2]
    # shifted by half a box: (0.1+0.25)/0.5 etc.
    assert geo.occupied_boxes(pts, 0.5, offset=np.array([0.5, 0.5])) == 4
    # more than 63 key bits: rows are compared directly, same answer as packing would give
    rng = np.random.default_rng(1)
    wide = rng.random((2000, 6))
    lab, m = geo.box_labels(wide, 1e-4)
    assert m == np.unique(np.floor(wide / 1e-4).astype(np.int64), axis=0).shape[0]
    # torus: a shifted grid of side 1/4 on [0, 1) has exactly 4 boxes per side
    line = np.linspace(0, 0.999, 1000)[:, None]
    assert geo.occupied_boxes(line, 0.25, offset=np.array([0.3])) == 5
    assert geo.box_counts(line, 0.25, offset=np.array([0.3]), period=1.0).size == 4


@pytest.mark.parametrize("dim,scale", [(2, 0.25), (2, 1e-4), (3, 1e-4), (3, 1e-9)])
def test_box_labels_equal_numpy_unique_on_every_path(dim, scale):
    """Dense (no sort), packed-key sort and row-unique paths all number boxes like ``np.unique(axis=0)``.

    Reference: numpy's lexicographic ``unique`` of the floored coordinates (general-purpose library).
    """
    rng = np.random.default_rng(dim)
    pts = rng.random((3000, dim))
    keep = rng.random(3000) > 0.1
    labels, n = geo.box_labels(pts, scale, valid=keep)
    uniq, inv = np.unique(np.floor(pts[keep] / scale).astype(np.int64), axis=0, return_inverse=True)
    assert n == uniq.shape[0]
    assert np.array_equal(labels[keep], inv.ravel()) and (labels[~keep] == -1).all()


def test_geometry_errors():
    with pytest.raises(InputError):
        geo.box_labels(np.array([[np.nan, 0.0]]), 0.1)
    with pytest.raises(ParameterError):
        geo.box_labels(np.zeros((3, 2)), 0.0)
    with pytest.raises(ParameterError):
        geo.geometric_spectrum(np.random.default_rng(0).random((500, 2)), (0,), offsets=0)
    with pytest.raises(InputError):
        geo.geometric_spectrum(np.zeros((1, 2)), (0,))

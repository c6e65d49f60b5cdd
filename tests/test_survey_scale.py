"""Surveys of many sources: blocked distance matrices, the page and the list file at scale.

References: scipy's ``jensenshannon`` (base 2; it returns the square root of the divergence,
scipy.spatial.distance documentation) for the blocked Jensen–Shannon matrix, and the
pairwise :func:`spectrum_distance` for the vectorised spectrum matrix.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.distance import jensenshannon

from fractalseq.compare import _distances as D
from fractalseq.jobs._sources import expand_inputs
from fractalseq.report.survey import block_means


@pytest.mark.parametrize("budget", [64, 1 << 22])  # many small blocks, and one block for all
def test_blocked_js_matrix_equals_scipy(monkeypatch, budget):
    monkeypatch.setattr(D, "BLOCK_ELEMENTS", budget)
    rng = np.random.default_rng(4)
    counts = rng.integers(0, 30, (23, 16))
    counts[5, :8] = 0  # words one source never shows
    js = D.js_matrix(counts)
    assert np.array_equal(js, js.T) and not np.diag(js).any()
    for i in range(23):
        for j in range(23):
            if i != j:
                ref = jensenshannon(counts[i], counts[j], base=2) ** 2  # scipy: distance = sqrt(divergence)
                assert js[i, j] == pytest.approx(ref, abs=1e-12)
                assert js[i, j] == pytest.approx(D.js_divergence(counts[i], counts[j]), abs=1e-14)


def test_blocks_bound_the_temporary_arrays():
    blocks = list(D._row_blocks(10_000, 64))
    assert blocks[0][0] == 0 and blocks[-1][1] == 10_000
    assert all(b[1] == c[0] for b, c in zip(blocks, blocks[1:]))
    assert all((hi - lo) * (10_000 - lo) * 64 <= D.BLOCK_ELEMENTS or hi - lo == 1 for lo, hi in blocks)


def test_vectorised_spectrum_matrix_equals_pairwise(monkeypatch):
    monkeypatch.setattr(D, "BLOCK_ELEMENTS", 50)
    rng = np.random.default_rng(9)
    spectra = []
    for k in range(17):
        qs = [0.0, 1.0, 2.0, 3.0] if k % 3 else [0.0, 2.0]
        ds = [None if rng.random() < 0.25 else float(rng.random()) for _ in qs]
        spectra.append((qs, ds))
    spectra.append(([5.0], [1.0]))  # no order in common with the others: NaN
    got = D.spectrum_matrix(spectra)
    for i in range(len(spectra)):
        for j in range(len(spectra)):
            ref = 0.0 if i == j else D.spectrum_distance(*spectra[i], *spectra[j])
            if math.isnan(ref):
                assert math.isnan(got[i, j])
            else:
                assert got[i, j] == pytest.approx(ref, abs=1e-15)


def test_heat_map_of_many_sources_is_block_means():
    rng = np.random.default_rng(2)
    m = rng.random((1000, 1000))
    m = m + m.T
    order = rng.permutation(1000)
    small = block_means(m, order, 100)
    assert small.shape == (100, 100)
    ordered = m[np.ix_(order, order)]
    assert small[3, 7] == pytest.approx(ordered[30:40, 70:80].mean())  # 1000 / 100: blocks of ten
    assert np.array_equal(block_means(m[:50, :50], order[order < 50], 100), m[:50, :50][np.ix_(order[order < 50], order[order < 50])])


def test_a_long_list_file_is_read_line_by_line(tmp_path):
    files = []
    for i in range(3):
        p = tmp_path / f"s{i}.fa"
        p.write_text(f">s{i} invented\nACGT\n")
        files.append(p.name)
    listing = tmp_path / "list.txt"
    with open(listing, "w") as fh:
        fh.write("# a comment\n\n")
        for k in range(300_000):
            fh.write(files[k % 3] + "\n")
    specs = expand_inputs([], str(listing))
    assert [s.name for s in specs] == ["s0.fa", "s1.fa", "s2.fa"]  # duplicates removed, order kept

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


# ------------------------------------------------------------------ condensed distances and ordering
def test_condensed_upper_is_scipys_squareform_and_mirror_is_exact(monkeypatch):
    from scipy.spatial.distance import squareform

    monkeypatch.setattr(D, "BLOCK_ELEMENTS", 40)  # several row blocks of the mirror copy
    rng = np.random.default_rng(11)
    upper = np.triu(rng.random((19, 19)), 1)
    full = upper.copy()
    D.mirror_upper(full)
    assert np.array_equal(full, upper + upper.T)  # what js_matrix returned before: same bits
    assert np.array_equal(D.condensed_upper(full), squareform(full, checks=False))
    assert np.array_equal(D.condensed_upper(full, np.sqrt), np.sqrt(squareform(full, checks=False)))


def test_clustering_of_condensed_equals_square_and_large_surveys_keep_the_linkage_order(monkeypatch):
    from scipy.cluster.hierarchy import leaves_list, linkage
    from scipy.spatial.distance import pdist, squareform

    x = np.random.default_rng(5).random((30, 3))
    cond = pdist(x)  # Euclidean distances (scipy), a metric
    square = D.cluster(squareform(cond), "average")
    condensed = D.cluster(cond, "average")
    assert np.array_equal(square.linkage, condensed.linkage) and square.order == condensed.order
    assert square.leaf_order == "optimal" and square.to_dict()["leaf_order"] == "optimal"
    monkeypatch.setattr(D, "OPTIMAL_ORDER_MAX", 29)  # 30 sources: one more than the optimal ordering takes
    big = D.cluster(cond, "average")
    z = linkage(cond, method="average")
    assert big.leaf_order == "linkage" and np.array_equal(big.linkage, z)
    assert big.order == [int(i) for i in leaves_list(z)]  # scipy's own leaf order of the same tree
    assert np.array_equal(np.sort(big.order), np.arange(30))


# ------------------------------------------------------------------ matrices beside survey.json
def _three_sources(tmp_path):
    from fractalseq.datasets._markov import simulate_markov
    from fractalseq.jobs._sources import SourceSpec

    specs = []
    for i in range(3):
        x = simulate_markov(np.random.default_rng(i).dirichlet(np.full(4, 2.0), size=4), 3000, seed=i)
        p = tmp_path / f"s{i}.fa"
        p.write_text(f">s{i} invented test sequence\n" + np.frombuffer(b"ACGT", np.uint8)[x].tobytes().decode() + "\n")
        specs.append(SourceSpec(str(p), p.name))
    return specs


def test_large_survey_json_references_a_checksummed_matrix_file(tmp_path, monkeypatch):
    import json

    from fractalseq.errors import ModelFileError
    from fractalseq.io._matrices import read_matrix
    from fractalseq.jobs import _survey as S
    from fractalseq.report import survey as R

    specs = _three_sources(tmp_path)
    opts = S.SurveyOptions(quick=True, seed=3)
    result = S.run_survey(specs, opts)
    small = json.loads(result.to_json())
    assert len(small["distances"]["matrix"]) == 3 and "matrix_file" not in small["distances"]  # small: inline, as before
    S.write_outputs(result, tmp_path / "small")
    assert (tmp_path / "small" / "distances.csv").exists() and not (tmp_path / "small" / R.MATRIX_FILE).exists()

    for module in (S, R):  # the same three sources treated as a large survey
        monkeypatch.setattr(module, "MATRICES_IN_JSON", 2)
    monkeypatch.setattr(R, "MATRIX_CSV_MAX", 2)
    S.write_outputs(result, tmp_path / "large")
    doc = json.loads((tmp_path / "large" / "survey.json").read_text())
    dist = doc["distances"]
    assert "matrix" not in dist and "matrix" not in dist["spectrum"]
    # the large form's keys, as the README's survey contract states them
    assert set(dist) == {"names", "matrix_file", "measure", "depth", "alphabet", "spectrum", "clustering"}
    assert set(dist["spectrum"]) == {"matrix_file", "measure"}
    assert set(dist["matrix_file"]) == {"file", "array", "shape", "dtype", "sha256"} and dist["matrix_file"]["dtype"] == "<f8"
    assert dist["matrix_file"]["file"] == R.MATRIX_FILE and dist["matrix_file"]["shape"] == [3, 3]
    assert not (tmp_path / "large" / "distances.csv").exists()
    assert doc["sources"] == small["sources"] and dist["clustering"] == small["distances"]["clustering"]
    assert result.to_json() == (tmp_path / "large" / "survey.json").read_text()  # --json prints the same reference
    js = read_matrix(dist, tmp_path / "large")
    spec = read_matrix(dist["spectrum"], tmp_path / "large")
    assert np.array_equal(js, result.js) and np.array_equal(spec, result.spectrum, equal_nan=True)  # unrounded
    assert np.array_equal(read_matrix(small["distances"], tmp_path), js)  # inline JSON: the same numbers (repr round-trips)
    with np.load(tmp_path / "large" / R.MATRIX_FILE) as plain:  # numpy opens it without fractalseq
        assert np.array_equal(plain["js"], result.js)
    # a matrix file of the same sources in another order is refused by its checksum
    other = S.run_survey(specs[::-1], opts)
    R.write_report(S.report_view(other), tmp_path / "other")
    (tmp_path / "large" / R.MATRIX_FILE).write_bytes((tmp_path / "other" / R.MATRIX_FILE).read_bytes())
    with pytest.raises(ModelFileError, match="SHA-256"):
        read_matrix(dist, tmp_path / "large")


def test_command_line_says_where_the_matrices_of_a_large_survey_go(tmp_path, monkeypatch, capsys):
    import json

    from fractalseq.cli.app import main
    from fractalseq.jobs import _survey as S
    from fractalseq.report import survey as R

    specs = _three_sources(tmp_path)
    for module in (S, R):  # three sources treated as a large survey
        monkeypatch.setattr(module, "MATRICES_IN_JSON", 2)
    capsys.readouterr()
    assert main(["survey", *[s.path for s in specs], "--quick", "--no-cache", "--json", "-q"]) == 0
    printed = capsys.readouterr()
    assert json.loads(printed.out)["distances"]["matrix_file"]["file"] == "distances.npz"
    assert "3 x 3 distance matrices are too large for the JSON" in printed.err and "only --out writes that file" in printed.err
    assert main(["survey", *[s.path for s in specs], "--quick", "--no-cache", "--out", str(tmp_path / "o"), "-q"]) == 0
    assert "too large" not in capsys.readouterr().err and (tmp_path / "o" / "distances.npz").is_file()

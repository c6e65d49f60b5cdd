"""The low-memory way ``learn`` builds and saves its tables writes the same model file as the plain route.

The plain route, written out here: count every word, build every depth's whole table
(:func:`fractalseq.predict._cells.cell_tables`), prune at the end (:func:`prune_cells`, the cap's
rule), and save arrays made with numpy (``np.repeat`` of the cells, shifted, OR the symbols).  The
learned route builds the deep depths in parts cut to the cap while they are built, holds the parts
packed, finds the hash cut from a window of the hashes, drops the word counts before joining the
parts, and makes each depth's word array only while it is written.  Inputs are open data: phage
lambda (bowtie2-examples, ``reference/lambda_virus.fa.gz``) and the dpkg log excerpt
(``reference/logs/dpkg-excerpt.log``, see its PROVENANCE.md); each with the cap not binding and
binding.  The selections are checked against numpy's sort; the saved file is read back with
``numpy.load`` and its checksums with ``hashlib``.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pytest
from _paths import LAMBDA, REFERENCE

from fractalseq.io._npz import write_container
from fractalseq.jobs._learn_score import learn_files
from fractalseq.predict import CellPredictor
from fractalseq.predict._params import baseline_orders
from fractalseq.predict._cells import _kth_smallest, cell_tables, prune_cells
from fractalseq.predict._modelfile import ModelState, write_state
from fractalseq.predict._fitted_kernels import cell_words
from fractalseq.sources import open_source
from fractalseq.words._counts import count_words

DPKG = REFERENCE / "logs" / "dpkg-excerpt.log"


def _plain_route_file(path, fmt: str, params: dict, out) -> None:
    """The model file of the plain route: whole tables, pruned at the end, arrays made by numpy."""
    model = CellPredictor(**params)
    src = open_source(str(path), fmt=fmt)
    wc = count_words(src, model.count_depth(src.alphabet), compact=True)
    ladder, reverse = model._validate(src.alphabet)
    K_b = baseline_orders(src.alphabet)
    depths = sorted(set(range(K_b + 1)) | set(ladder))
    tables, pruned = prune_cells(cell_tables(wc, depths, reverse), K_b, model._cap())
    model._install(src.alphabet, ladder, reverse, K_b, tables, wc.length, wc.segments, pruned, {})
    state = model.to_state()
    b = src.alphabet.bits
    arrays = {}
    for n in model.depths_:
        t = model.counts_[n]
        arrays[f"words_{n}"] = (np.repeat(t.cells, np.diff(t.ptr)) << np.uint64(b)) | t.syms.astype(np.uint64)
        arrays[f"counts_{n}"] = t.counts.astype(np.uint32)
    write_state(ModelState(header=state.header, arrays=arrays), out)


@pytest.mark.parametrize("path, fmt", [(LAMBDA, "fasta"), (DPKG, "log")], ids=["lambda", "dpkg"])
def test_learned_file_equals_the_plain_route_with_and_without_a_binding_cap(tmp_path, path, fmt):
    whole = learn_files([str(path)], out=tmp_path / "whole.npz", fmt=fmt)
    deep = sum(r.cells for r in whole.stored_depths if r.depth > whole.predictor.baseline_max_order_)
    assert whole.pruned_cells == 0 and deep > 100
    for cap, label in ((whole.cells + 1000, "loose"), (whole.cells - deep // 3, "binding")):
        got = tmp_path / f"{label}.npz"
        report = learn_files([str(path)], out=got, fmt=fmt, params={"max_cells": cap})
        ref = tmp_path / f"{label}_ref.npz"
        _plain_route_file(path, fmt, {"max_cells": cap}, ref)
        assert got.read_bytes() == ref.read_bytes(), label
        assert report.cells == min(cap, whole.cells)
        assert report.pruned_cells == max(0, whole.cells - cap)
        # observations per depth are the sums of the stored counts (numpy reads the file back)
        with np.load(got) as z:
            for r in report.stored_depths:
                assert r.observations == int(z[f"counts_{r.depth}"].sum(dtype=np.int64))
                assert r.cells == np.unique(z[f"words_{r.depth}"] >> np.uint64(whole.predictor.alphabet_.bits)).size


@pytest.mark.parametrize("kind", ["uniform", "low", "ties"])
def test_kth_smallest_matches_numpy_sort(kind):
    rng = np.random.default_rng(7)
    if kind == "uniform":
        h = rng.integers(0, 2**63, 50_000, dtype=np.uint64) * np.uint64(2)
    elif kind == "low":  # far from uniform: the window misses and the second pass holds them all
        h = rng.integers(0, 1000, 50_000).astype(np.uint64)
    else:
        h = np.repeat(rng.integers(0, 2**63, 500, dtype=np.uint64), 100)
    pieces = lambda: iter(np.array_split(h, 7))  # noqa: E731
    ordered = np.sort(h)  # reference: numpy's sort
    for k in (1, 2, 333, h.size // 2, h.size - 1, h.size):
        cut, below = _kth_smallest(pieces, h.size, k)
        assert cut == ordered[k - 1]
        assert below == int(np.searchsorted(ordered, cut, side="left"))


def test_cell_words_equal_numpy_repeat():
    rng = np.random.default_rng(3)
    cells = np.unique(rng.integers(0, 2**40, 2000, dtype=np.uint64))
    lens = rng.integers(1, 5, cells.size)
    ptr = np.concatenate([[0], np.cumsum(lens)]).astype(np.int64)
    syms = np.concatenate([np.sort(rng.choice(4, k, replace=False)) for k in lens]).astype(np.uint32)
    ref = (np.repeat(cells, lens) << np.uint64(2)) | syms.astype(np.uint64)
    assert np.array_equal(cell_words(cells, ptr, syms, 2), ref)
    assert cell_words(cells[:0], ptr[:1], syms[:0], 2).size == 0


def test_container_arrays_made_when_written(tmp_path):
    a = np.arange(1000, dtype=np.uint64) * np.uint64(3)
    made = []

    def make():
        made.append(1)
        return a.copy()

    header = {"format": "test", "version": 1}
    write_container(tmp_path / "lazy.npz", header, {"w": make, "c": a[:10].astype(np.uint32)})
    write_container(tmp_path / "plain.npz", header, {"w": a, "c": a[:10].astype(np.uint32)})
    assert len(made) == 2  # once for the checksum, once when written
    assert (tmp_path / "lazy.npz").read_bytes() == (tmp_path / "plain.npz").read_bytes()
    with np.load(tmp_path / "lazy.npz") as z:  # reference reader: numpy
        assert np.array_equal(z["w"], a)
        head = json.loads(z["header"].tobytes())
    assert head["sha256"]["w"] == hashlib.sha256(a.tobytes()).hexdigest()
    calls = iter([a, a + np.uint64(1)])
    with pytest.raises(ValueError, match="different"):
        write_container(tmp_path / "bad.npz", header, {"w": lambda: next(calls)})


def test_parts_kept_in_a_temporary_file_give_the_same_file(tmp_path, monkeypatch):
    """With no parts held in memory (every kept part goes to the temporary file), the file is still the plain route's."""
    import fractalseq.predict._cells as cells_module

    written = []
    write = cells_module._PartStore._write

    def counted(self, p):
        written.append(int(p.syms.size))
        return write(self, p)

    monkeypatch.setattr(cells_module, "SPILL_BYTES", 0)
    monkeypatch.setattr(cells_module._PartStore, "_write", counted)
    whole = learn_files([str(LAMBDA)], out=None, fmt="fasta")
    deep = sum(r.cells for r in whole.stored_depths if r.depth > whole.predictor.baseline_max_order_)
    for cap, label in ((whole.cells + 1000, "loose"), (whole.cells - deep // 3, "binding")):
        written.clear()
        got = tmp_path / f"{label}.npz"
        learn_files([str(LAMBDA)], out=got, fmt="fasta", params={"max_cells": cap})
        ref = tmp_path / f"{label}_ref.npz"
        _plain_route_file(LAMBDA, "fasta", {"max_cells": cap}, ref)
        assert len(written) > 16 and sum(written) > 0, label  # the parts did go through the file
        assert got.read_bytes() == ref.read_bytes(), label


def test_fitted_tables_are_held_narrow_and_score_alike():
    """DNA tables keep one-byte symbols, uint32 pointers and uint32 cells up to depth 15; scoring reads them as before."""
    src = open_source(str(LAMBDA), fmt="fasta")
    model = CellPredictor().fit(src)
    for n, t in model.counts_.items():
        assert t.syms.dtype == np.uint8 and t.ptr.dtype == np.uint32 and t.counts.dtype == np.uint32
        assert t.cells.dtype == (np.uint32 if 2 * (n + 1) <= 32 else np.uint64), n
        # the totals kernel against numpy's cumulative sums (reference)
        c = np.concatenate([[0], np.cumsum(t.counts, dtype=np.int64)])
        assert np.array_equal(t.totals(), c[t.ptr[1:].astype(np.int64)] - c[t.ptr[:-1].astype(np.int64)])
        # the words made in pieces are the whole array
        pieces = list(t.word_pieces(2, entries=1000))
        assert np.array_equal(np.concatenate(pieces + [np.zeros(0, np.uint64)]), t.words(2))
        # taking rows equals selecting them with a mask
        rows = np.arange(0, t.size, 7)
        mask = np.zeros(t.size, bool)
        mask[rows] = True
        a, b = t.take(rows), t.select(mask)
        for f in ("cells", "ptr", "syms", "counts"):
            assert getattr(a, f).dtype == getattr(b, f).dtype and np.array_equal(getattr(a, f), getattr(b, f)), (n, f)
    # the wide tables of before (uint64 cells, int64 pointers, uint32 symbols) give the same blend and baseline
    from fractalseq.predict._baselines import kt_bits_by_order
    from fractalseq.predict._cells import CellTable, fit_blend

    ladder, reverse = model._validate(src.alphabet)
    K_b = baseline_orders(src.alphabet)
    wc = count_words(open_source(str(LAMBDA), fmt="fasta"), model.count_depth(src.alphabet), compact=True)
    wide = {n: CellTable(t.cells.astype(np.uint64), t.ptr.astype(np.int64), t.syms.astype(np.uint32), t.counts)
            for n, t in cell_tables(wc, model.depths_, reverse).items()}
    assert fit_blend(model.depths_, wide, src.alphabet, 0.5, "auto") == (model.concentration_, model.discount_)
    base = {k: wide[k] for k in range(K_b + 1)}
    assert kt_bits_by_order(base, 2 * wc.length, 4) == kt_bits_by_order({k: model.counts_[k] for k in base}, 2 * wc.length, 4)


def test_kt_code_length_without_priors_equals_the_general_formula():
    """The in-place KT sum (no priors) equals the formula with explicit zero priors, bit for bit, and a direct lgamma sum."""
    import math

    from fractalseq.predict._baselines import kt_bits_sparse

    rng = np.random.default_rng(11)
    counts = rng.integers(1, 50, 5000).astype(np.uint32)
    ptr = np.concatenate([[0], np.cumsum(rng.integers(1, 4, 2000))])
    ptr = ptr[ptr <= counts.size]
    counts = counts[: ptr[-1]]
    totals = np.add.reduceat(counts.astype(np.int64), ptr[:-1])
    A = 4
    fast = kt_bits_sparse(totals, counts, A)
    general = kt_bits_sparse(totals, counts, A, np.zeros(totals.size), np.zeros(counts.size))
    assert fast == general
    # the KT code length from the standard library's lgamma (closed form, e.g. Krichevsky & Trofimov 1981)
    direct = sum(math.lgamma(t + A / 2) - math.lgamma(A / 2) for t in totals.tolist())
    direct -= sum(math.lgamma(c + 0.5) - math.lgamma(0.5) for c in counts.tolist())
    assert fast == pytest.approx(direct / math.log(2), rel=1e-12)


def test_container_arrays_written_in_pieces(tmp_path):
    """An array given in pieces is stored as numpy stores the whole array (same file bytes), also past numpy's 16-MiB write chunks."""
    from fractalseq.io._npz import ArrayPieces

    a = np.random.default_rng(5).integers(0, 2**40, 3_000_000, dtype=np.uint64)
    header = {"format": "test", "version": 1}
    pieces = ArrayPieces(np.dtype(np.uint64), a.size, lambda: iter(np.array_split(a, 37)))
    write_container(tmp_path / "pieces.npz", header, {"w": pieces, "c": a[:10].astype(np.uint32)})
    write_container(tmp_path / "plain.npz", header, {"w": a, "c": a[:10].astype(np.uint32)})
    assert (tmp_path / "pieces.npz").read_bytes() == (tmp_path / "plain.npz").read_bytes()
    with np.load(tmp_path / "pieces.npz") as z:  # reference reader: numpy
        assert np.array_equal(z["w"], a)
        head = json.loads(z["header"].tobytes())
    assert head["sha256"]["w"] == hashlib.sha256(a.tobytes()).hexdigest()
    short = ArrayPieces(np.dtype(np.uint64), a.size, lambda: iter([a[:10]]))
    with pytest.raises(ValueError, match="declared"):
        write_container(tmp_path / "short.npz", header, {"w": short})
    calls = iter([[a[:5]], [a[:4], a[4:5] + np.uint64(1)]])
    changing = ArrayPieces(np.dtype(np.uint64), 5, lambda: iter(next(calls)))
    with pytest.raises(ValueError, match="different"):
        write_container(tmp_path / "bad.npz", header, {"w": changing})
    assert not (tmp_path / "bad.npz").exists() and not (tmp_path / "short.npz").exists()


def test_parts_stay_in_memory_without_a_temporary_folder(tmp_path, monkeypatch):
    """When no temporary file can be made, the parts stay in memory and the file is the same."""
    import tempfile

    import fractalseq.predict._cells as cells_module

    def refuse(*args, **kwargs):
        raise OSError("no temporary folder")

    monkeypatch.setattr(cells_module, "SPILL_BYTES", 0)
    monkeypatch.setattr(tempfile, "TemporaryFile", refuse)
    got = tmp_path / "mem.npz"
    learn_files([str(LAMBDA)], out=got, fmt="fasta", params={"max_cells": 300_000})
    ref = tmp_path / "ref.npz"
    _plain_route_file(LAMBDA, "fasta", {"max_cells": 300_000}, ref)
    assert got.read_bytes() == ref.read_bytes()

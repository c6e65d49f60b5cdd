"""The count-based predictor against closed forms, textbook entropy rates and the standard library's compressors."""

from __future__ import annotations

import bz2
import hashlib
import lzma
import math
import re
import zlib
from pathlib import Path

import numpy as np
import pytest
from scipy.special import gammaln

from fractalseq import alphabet as al
from fractalseq.predict import _kernel_tools as K
from fractalseq.errors import InputError, ModelFileError, ParameterError
from fractalseq.predict._online import OnlineCoder, evaluate_online, online_code_length
from fractalseq.predict._predictor import CellPredictor
from fractalseq.predict._baselines import compressor_bits, kt_bits, packed_bytes
from fractalseq.stream import from_codes

REF = Path(__file__).resolve().parent.parent / "reference"
LAMBDA = REF / "lambda_virus.fa.gz"
LAMBDA_SHA256 = "08fe207fcb4bbe47e80cc7469e68d1f1d8d497a836fe1c09f5a9734d2e4cd9e0"


def markov_chain(P: np.ndarray, order: int, n: int, seed: int) -> np.ndarray:
    """An order-m chain (rows of P indexed by the context, oldest symbol most significant)."""
    from fractalseq.datasets._markov import simulate_markov

    return simulate_markov(P, n, seed=seed, order=order)


def entropy_rate(P: np.ndarray, order: int) -> float:
    """Entropy rate (bits) of an order-m chain: sum_c pi(c) H(P[c]) with pi stationary on contexts.

    Cover & Thomas 2006, Elements of Information Theory, 2nd ed., Thm 4.2.4.
    """
    A = P.shape[1]
    S = A**order
    T = np.zeros((S, S))
    for c in range(S):
        for s in range(A):
            T[c, (c * A + s) % S] += P[c, s]
    w, v = np.linalg.eig(T.T)
    pi = np.real(v[:, np.argmin(np.abs(w - 1))])
    pi = pi / pi.sum()
    with np.errstate(divide="ignore", invalid="ignore"):
        H = -np.nansum(np.where(P > 0, P * np.log2(P), 0.0), axis=1)
    return float(pi @ H)


# ------------------------------------------------------------------ closed forms
def test_laplace_rule_of_succession_sequential_probability():
    # Laplace 1814; Cover & Thomas 2006, ch. 13: P(string with a zeros, b ones) = a! b! / (n+1)!; P(0010) = 1/20.
    arr = from_codes(al.binary(), np.array([0, 0, 1, 0]))
    r = online_code_length(arr, depths=(0,), smoothing=1.0, learning_rate=0.0)
    assert 2.0 ** -r.total_bits == pytest.approx(1 / 20, rel=1e-12)
    rng = np.random.default_rng(11)
    for _ in range(200):
        n = int(rng.integers(1, 60))
        x = rng.integers(0, 2, n)
        a, b = int((x == 0).sum()), int((x == 1).sum())
        exact = -(math.lgamma(a + 1) + math.lgamma(b + 1) - math.lgamma(n + 2)) / math.log(2)
        got = online_code_length(from_codes(al.binary(), x), depths=(0,), smoothing=1.0, learning_rate=0.0).total_bits
        assert got == pytest.approx(exact, rel=1e-12, abs=1e-12)


def test_krichevsky_trofimov_closed_form_and_regret():
    # Krichevsky & Trofimov 1981: P_KT(0010) = 5/128; all-zero strings cost 1.0, 2.5047, 4.1495, 5.8088 bits
    # at n = 1, 10, 100, 1000; regret -log2 P_KT - n H_emp <= 1/2 log2 n + 1 (bound from memory).
    arr = from_codes(al.binary(), np.array([0, 0, 1, 0]))
    kt = dict(depths=(0,), smoothing=0.5, learning_rate=0.0)
    assert 2.0 ** -online_code_length(arr, **kt).total_bits == pytest.approx(5 / 128, rel=1e-12)
    for n, bits in ((1, 1.0), (10, 2.5047), (100, 4.1495), (1000, 5.8088)):
        got = online_code_length(from_codes(al.binary(), np.zeros(n, np.uint8)), **kt).total_bits
        assert got == pytest.approx(bits, abs=1e-4)
    rng = np.random.default_rng(12)
    for _ in range(200):
        n = int(rng.integers(1, 300))
        x = rng.integers(0, 2, n)
        a = int((x == 0).sum())
        b = n - a
        closed = -(gammaln(a + 0.5) + gammaln(b + 0.5) - math.log(math.pi) - gammaln(n + 1)) / math.log(2)
        got = online_code_length(from_codes(al.binary(), x), **kt).total_bits
        assert got == pytest.approx(closed, rel=1e-10)
        h = 0.0 if a in (0, n) else -(a / n) * math.log2(a / n) - (b / n) * math.log2(b / n)
        assert got - n * h <= 0.5 * math.log2(n) + 1 + 1e-9
        # the baseline's closed form over final counts gives the same sequential code length
        assert kt_bits(np.array([[a, b]])) == pytest.approx(closed, rel=1e-10)


# -------------------------------------------------------------- convergence
def test_online_converges_to_two_state_markov_entropy_rate():
    # Cover & Thomas 2006 §4.2: alpha = 0.1, beta = 0.4 gives h = 0.5693865938 bits (REFERENCE-CHECKS B2).
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    assert entropy_rate(P, 1) == pytest.approx(0.5693865938, abs=1e-9)
    x = markov_chain(P, 1, 10**6, seed=3)
    r = online_code_length(from_codes(al.binary(), x))
    assert abs(r.bits_per_symbol - 0.5693865938) < 0.01
    assert r.bits_per_symbol > 0.5693865938 - 0.003  # a code length cannot beat the entropy rate by more than noise


def test_online_converges_to_order_two_chain_entropy_rate():
    # order-2 chain on three symbols with a known transition matrix; entropy rate by Cover & Thomas Thm 4.2.4
    rng = np.random.default_rng(7)
    P = rng.dirichlet(np.full(3, 0.7), size=9)
    h = entropy_rate(P, 2)
    x = markov_chain(P, 2, 10**6, seed=4)
    r = online_code_length(from_codes(al.from_symbols("abc"), x))
    assert abs(r.bits_per_symbol - h) < 0.01
    assert r.bits_per_symbol > h - 0.003


def test_online_converges_to_iid_shannon_entropy():
    # dyadic i.i.d. source: H = 1.75 bits exactly (Shannon 1948)
    rng = np.random.default_rng(5)
    x = rng.choice(4, size=10**6, p=[0.5, 0.25, 0.125, 0.125]).astype(np.uint8)
    r = online_code_length(from_codes(al.from_symbols("wxyz"), x))
    assert abs(r.bits_per_symbol - 1.75) < 0.01
    assert r.expected_calibration_error < 0.03
    # order-0 KT alone is calibrated on an i.i.d. source
    kt = online_code_length(from_codes(al.from_symbols("wxyz"), x[:100_000]), depths=(0,), learning_rate=0.0)
    assert kt.expected_calibration_error < 0.005


def test_top1_accuracy_matches_bayes_optimal_rate():
    # REFERENCE-CHECKS F3: sum_i pi_i max_j P_ij = 0.84 for [[.9,.1],[.4,.6]] (order-0 best 0.80)
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    x = markov_chain(P, 1, 10**5, seed=8)
    r = online_code_length(from_codes(al.binary(), x), depths=(1,))
    assert abs(r.top1_accuracy - 0.84) < 0.01
    assert r.top3_accuracy == 1.0


# ------------------------------------------------------------- mechanics
def test_contexts_reset_at_segment_starts():
    # with one cell depth k, the first k symbols of every segment have no cell: exactly log2 A bits each
    rng = np.random.default_rng(2)
    x = np.tile(rng.integers(0, 4, 50), 40).astype(np.uint8)
    starts = [0, 700, 1300]
    arr = from_codes(al.from_symbols("abcd"), x, starts)
    r = online_code_length(arr, depths=(3,), keep_surprisal=True)
    for s in starts:
        assert np.all(r.surprisal[s : s + 3] == np.float32(2.0))
    joined = online_code_length(from_codes(al.from_symbols("abcd"), x), depths=(3,), keep_surprisal=True)
    assert not np.all(joined.surprisal[700:703] == np.float32(2.0))
    assert r.surprisal.sum() == pytest.approx(r.total_bits, rel=1e-5)


def test_chunking_does_not_change_the_online_code_length():
    rng = np.random.default_rng(3)
    x = rng.integers(0, 4, 30000).astype(np.uint8)
    arr = from_codes(al.dna(), x, [0, 1234, 20000])
    whole = online_code_length(arr)
    coder = OnlineCoder(al.dna(), length_hint=len(arr))
    for ch in arr.chunks(997):
        coder.feed(ch.codes, ch.starts)
    assert coder.result("x").total_bits == pytest.approx(whole.total_bits, rel=1e-12)


def test_packed_and_dense_rows_give_identical_results():
    # the packed (A <= 4) and dense (any A) kernels implement one algorithm; small tables force evictions
    rng = np.random.default_rng(4)
    x = rng.integers(0, 4, 40000).astype(np.uint8)
    x[20000:30000] = 3 - x[10000:20000][::-1]  # a reverse-complement repeat
    arr = from_codes(al.dna(), x, [0, 777])
    coders = []
    for packed in (True, False):
        c = OnlineCoder(al.dna(), depths=(2, 5, 9, 14), max_cells=4096)
        if not packed:  # switch the same configuration to dense rows
            c.packed = False
            c.rows = c.dense_rows()
        c.feed(arr.codes, arr.starts)
        coders.append(c)
    a, b = coders
    assert a.stats[K.ST_EVICT] > 0
    assert np.array_equal(a.stats, b.stats)
    assert np.array_equal(a.weights, b.weights)
    assert np.array_equal(a.calib, b.calib)


def test_online_probabilities_sum_to_one_at_every_alphabet_size():
    # the model state before the last symbol is the same whatever that symbol is: the A probabilities must add to 1
    rng = np.random.default_rng(6)
    for A in (2, 3, 4, 5, 17):
        a = al.from_symbols([f"s{i}" for i in range(A)])
        x = rng.integers(0, A, 3000)
        total = 0.0
        for s in range(A):
            y = x.copy()
            y[-1] = s
            r = online_code_length(from_codes(a, y), keep_surprisal=True, depths=(1, 2, 4))
            total += 2.0 ** -float(r.surprisal[-1].astype(np.float64))
        assert total == pytest.approx(1.0, abs=1e-5)  # surprisals are stored as float32


def test_reverse_complement_counting_recognises_the_other_strand():
    rng = np.random.default_rng(9)
    x = rng.integers(0, 4, 20000).astype(np.uint8)
    y = np.concatenate([x, 3 - x[::-1]])  # the sequence, then its reverse complement
    arr = from_codes(al.dna(), y)
    both = online_code_length(arr, keep_surprisal=True)
    one = online_code_length(arr, keep_surprisal=True, reverse_complement=False)
    assert both.reverse_complement and not one.reverse_complement
    assert both.surprisal[21000:].mean() < 0.2
    assert one.surprisal[21000:].mean() > 1.9
    with pytest.raises(ParameterError):
        online_code_length(from_codes(al.protein(), np.zeros(10, np.uint8)), reverse_complement=True)


def test_memory_cap_is_respected_and_reported():
    rng = np.random.default_rng(10)
    arr = from_codes(al.dna(), rng.integers(0, 4, 50000).astype(np.uint8))
    r = online_code_length(arr, max_cells=1 << 12)
    assert r.memory.cells_cap == 1 << 12
    assert r.memory.cells_stored <= 1 << 12
    assert r.memory.evictions > 0
    assert r.memory.table_bytes <= 8 * (1 << 12)
    with pytest.raises(ParameterError):
        online_code_length(arr, max_cells=10)


def test_bad_parameters_are_one_sentence_errors():
    arr = from_codes(al.dna(), np.zeros(100, np.uint8))
    for kw in (dict(depths=(40,)), dict(smoothing=-1.0), dict(learning_rate=2.0), dict(depths=()), dict(max_cells=10)):
        with pytest.raises(ParameterError) as e:
            online_code_length(arr, **kw)
        msg = str(e.value)
        assert re.search(r"[.!?] [A-Z]", msg) is None and msg.endswith(".") and "\n" not in msg
        # the library names the parameter (the command line maps it to its option), never an option
        assert e.value.parameter == next(iter(kw)) and "--" not in msg
    for kw in (dict(discount=1.5), dict(smoothing=0), dict(max_cells=0), dict(reverse_complement="sideways")):
        with pytest.raises(ParameterError) as e:
            CellPredictor(**kw).fit(arr)
        assert e.value.parameter == next(iter(kw)) and "--" not in str(e.value)


# ---------------------------------------------------------- real genome
def _lambda_array():
    assert hashlib.sha256(LAMBDA.read_bytes()).hexdigest() == LAMBDA_SHA256
    from fractalseq.sources import open_source

    return open_source(LAMBDA, fmt="fasta", alphabet="dna").to_array()


def test_lambda_phage_beats_standard_library_compressors_and_fixed_order_markov():
    # phage lambda, NC_001416.1, 48,502 bp (Sanger et al. 1982); compressors from Python's standard library
    arr = _lambda_array()
    assert len(arr) == 48502
    r = evaluate_online(arr)
    text = bytes(np.frombuffer(b"ACGT", np.uint8)[arr.codes])
    packed = packed_bytes(arr.codes, 2)
    for data in (text, packed):
        for size in (
            len(lzma.compress(data, preset=9 | lzma.PRESET_EXTREME)),
            len(bz2.compress(data, 9)),
            len(zlib.compress(data, 9)),
        ):
            assert r.bits_per_symbol < 8.0 * size / len(arr)
    comp = compressor_bits(arr.codes, arr.alphabet)
    assert comp["lzma_text"] == pytest.approx(8.0 * len(lzma.compress(text, preset=9 | lzma.PRESET_EXTREME)) / len(arr))
    assert r.baselines["compressors"]["bz2_packed"] == pytest.approx(8.0 * len(bz2.compress(packed, 9)) / len(arr))
    assert r.bits_per_symbol < r.baselines["markov"]["bits_per_symbol"]
    assert 1.85 < r.bits_per_symbol < 2.0  # a small phage genome is close to incompressible
    assert r.records and r.records[0].length == 48502
    assert r.records[0].total_bits == pytest.approx(r.total_bits, rel=1e-6)


# ---------------------------------------------------------------- fitted mode
def test_fitted_model_scores_a_markov_source_near_its_entropy_rate():
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    train = from_codes(al.binary(), markov_chain(P, 1, 200_000, seed=20))
    test = from_codes(al.binary(), markov_chain(P, 1, 100_000, seed=21))
    m = CellPredictor(depths=(1, 2, 4)).fit(train)
    assert abs(m.bits_per_symbol(test) - 0.5693865938) < 0.01  # Cover & Thomas §4.2 (B2)
    assert m.baseline_order_ == 1
    e = m.evaluate(test)
    assert abs(e.baselines["markov"]["bits_per_symbol"] - 0.5693865938) < 0.01
    assert abs(e.top1_accuracy - 0.84) < 0.01  # REFERENCE-CHECKS F3


def test_predict_proba_rows_are_distributions_and_match_score():
    rng = np.random.default_rng(13)
    a = al.from_symbols("abc")
    x = rng.integers(0, 3, 5000).astype(np.uint8)
    m = CellPredictor(depths=(1, 3, 6)).fit(from_codes(a, x))
    test = rng.integers(0, 3, 300).astype(np.uint8)
    ctxs = [test[:t] for t in range(len(test))]
    p = m.predict_proba(ctxs)
    assert p.shape == (300, 3)
    assert np.all(p > 0)
    assert np.allclose(p.sum(axis=1), 1.0, atol=1e-12)
    bits = -np.log2(p[np.arange(300), test]).mean()
    assert m.bits_per_symbol(from_codes(a, test)) == pytest.approx(bits, rel=1e-12)
    assert m.score(from_codes(a, test)) == -m.bits_per_symbol(from_codes(a, test))  # higher is better
    assert m.predict_proba(["abcab"]).shape == (1, 3)
    with pytest.raises(InputError):
        m.predict_proba(["abz"])
    # accuracy and expected calibration error (10 equal-width bins of the top-1 confidence) recomputed by hand
    e = m.evaluate(from_codes(a, test), baselines=False)
    conf = p.max(axis=1)
    hit = p.argmax(axis=1) == test
    assert e.top1_accuracy == pytest.approx(hit.mean())
    bins = np.minimum((conf * 10).astype(int), 9)
    ece = sum(abs(hit[bins == k].sum() - conf[bins == k].sum()) for k in range(10)) / len(test)
    assert e.expected_calibration_error == pytest.approx(ece, rel=1e-9)
    rank = (p > p[np.arange(300), test][:, None]).sum(axis=1)
    assert e.top3_accuracy == pytest.approx((rank < 3).mean())


def test_scikit_learn_contract():
    m = CellPredictor(max_depth=5, smoothing=1.0)
    assert m.get_params()["max_depth"] == 5
    clone = CellPredictor(**m.get_params())
    assert clone.get_params() == m.get_params()
    assert m.set_params(discount=0.25) is m and m.discount == 0.25
    with pytest.raises(ParameterError):
        m.set_params(nonsense=1)
    with pytest.raises(ParameterError):
        m.predict_proba(["A"])
    assert not [k for k in vars(m) if k.endswith("_")]
    m.fit(from_codes(al.dna(), np.tile([0, 1, 2, 3], 500)))
    learned = [k for k in vars(m) if k.endswith("_") and not k.startswith("_")]
    assert {"alphabet_", "depths_", "cells_", "counts_", "n_symbols_", "baseline_order_"} <= set(learned)
    assert m.predict_proba(["ACG"]).argmax() == 3
    # parameters are introspected from __init__ (scikit-learn's BaseEstimator does the same)
    import inspect

    assert list(m.get_params()) == [p for p in inspect.signature(CellPredictor.__init__).parameters if p != "self"]
    # every fit starts from scratch: refitting on other data equals a fresh fit, nothing of the first survives
    m.fit(from_codes(al.binary(), np.tile([0, 1, 1], 300)), reader={"column": "v"})
    fresh = CellPredictor(**m.get_params()).fit(from_codes(al.binary(), np.tile([0, 1, 1], 300)), reader={"column": "v"})
    assert sorted(vars(m)) == sorted(vars(fresh))
    assert m.depths_ == fresh.depths_ and m.alphabet_.size == 2 and m.reader_ == {"column": "v"}
    assert all(np.array_equal(m.counts_[n].dense(2), fresh.counts_[n].dense(2)) for n in m.depths_)
    m.fit(from_codes(al.binary(), np.tile([0, 1, 1], 300)))
    assert m.reader_ == {}


def test_fitted_reverse_complement_counts_both_strands():
    x = np.array([0, 0, 1], np.uint8)  # AAC; other strand GTT
    m = CellPredictor(depths=(1,), max_cells=100).fit(from_codes(al.dna(), x))
    # depth-1 cells: forward A->A, A->C; reverse GTT gives G->T, T->T
    cells = dict(zip(m.cells_[1].tolist(), m.counts_[1].dense(4).tolist()))
    assert cells == {0: [1, 1, 0, 0], 2: [0, 0, 0, 1], 3: [0, 0, 0, 1]}
    f = CellPredictor(depths=(1,), reverse_complement=False).fit(from_codes(al.dna(), x))
    assert dict(zip(f.cells_[1].tolist(), f.counts_[1].dense(4).tolist())) == {0: [1, 1, 0, 0]}


def test_fitted_pruning_respects_the_cap():
    rng = np.random.default_rng(14)
    arr = from_codes(al.dna(), rng.integers(0, 4, 20000).astype(np.uint8))
    full = CellPredictor(reverse_complement=False).fit(arr)
    small = CellPredictor(reverse_complement=False, max_cells=100_000).fit(arr)
    assert small.n_cells_ <= 100_000 < full.n_cells_
    assert small.pruned_cells_ == full.n_cells_ - small.n_cells_
    for n in range(0, small.baseline_max_order_ + 1):  # baseline depths are never pruned
        assert np.array_equal(small.counts_[n].dense(4), full.counts_[n].dense(4))
    with pytest.raises(ParameterError):
        CellPredictor(max_cells=10).fit(arr)


# ---------------------------------------------------------------- model file
def test_model_file_round_trip_and_rejections(tmp_path):
    rng = np.random.default_rng(15)
    arr = from_codes(al.dna(), rng.integers(0, 4, 5000).astype(np.uint8))
    m = CellPredictor(max_depth=8).fit(arr)
    path = tmp_path / "m.npz"
    m.save(path)
    back = CellPredictor.load(path)
    assert back.get_params() == m.get_params()
    assert back.reader_ == m.reader_ == {}
    assert back.bits_per_symbol(arr) == m.bits_per_symbol(arr)
    with np.load(path, allow_pickle=False) as z:
        assert all(z[k].dtype != object for k in z.files)
    from fractalseq.errors import OutputError

    with pytest.raises(OutputError):
        m.save(path)
    raw = path.read_bytes()
    (tmp_path / "short.npz").write_bytes(raw[: len(raw) // 2])
    with pytest.raises(ModelFileError, match="truncated or damaged"):
        CellPredictor.load(tmp_path / "short.npz")
    # a damaged array: rewrite one count and keep the old checksum
    import io
    import json

    with np.load(path, allow_pickle=False) as z:
        data = {k: z[k] for k in z.files}
    data["counts_1"] = data["counts_1"] + np.uint32(1)
    buf = io.BytesIO()
    np.savez(buf, **data)
    (tmp_path / "bad.npz").write_bytes(buf.getvalue())
    with pytest.raises(ModelFileError, match="checksum"):
        CellPredictor.load(tmp_path / "bad.npz")
    header = json.loads(bytes(data["header"]).decode())
    header["version"] = 99
    data["counts_1"] = data["counts_1"] - np.uint32(1)
    data["header"] = np.frombuffer(json.dumps(header).encode(), np.uint8)
    buf = io.BytesIO()
    np.savez(buf, **data)
    (tmp_path / "v99.npz").write_bytes(buf.getvalue())
    with pytest.raises(ModelFileError, match="version"):
        CellPredictor.load(tmp_path / "v99.npz")
    with pytest.raises(InputError):
        CellPredictor.load(tmp_path / "missing.npz")
    # a model applied to data over another alphabet
    with pytest.raises(ModelFileError, match="alphabet"):
        back.bits_per_symbol(from_codes(al.protein(), np.zeros(10, np.uint8)))

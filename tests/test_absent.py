"""Absent and under-represented words: simulated chains with known gaps, phage lambda, a human fragment."""

from __future__ import annotations

import gzip
import itertools
import math
from pathlib import Path

import numpy as np
import pytest

from fractalseq.words import _absent as AB
from fractalseq.datasets import _markov as mk
from fractalseq.alphabet import dna
from fractalseq.errors import ParameterError
from fractalseq.stream import from_codes
from fractalseq.words._counts import count_words

from _paths import LAMBDA, REFERENCE
CHR17 = REFERENCE / "chr17.hg19.part.fa"

# DNA-like chain with one forbidden transition C -> G (rows A, C, G, T)
FORBIDDEN = np.array([[0.4, 0.1, 0.2, 0.3], [0.3, 0.3, 0.0, 0.4], [0.25, 0.25, 0.3, 0.2], [0.2, 0.2, 0.3, 0.3]])


def load_fasta(path: Path) -> str:
    """Tiny FASTA loader for the tests (one record, upper case); independent of fractalseq.sources."""
    opener = gzip.open if path.suffix == ".gz" else open
    with opener(path, "rt") as fh:
        return "".join(line.strip() for line in fh if not line.startswith(">")).upper()


@pytest.fixture(scope="module")
def forbidden_counts():
    x = mk.simulate_markov(FORBIDDEN, 100_000, seed=2)
    return x, count_words(from_codes(dna(), x), 8)


@pytest.fixture(scope="module")
def lambda_counts():
    s = load_fasta(LAMBDA)
    return s, count_words(from_codes(dna(), dna().encode(s)), 8)


@pytest.fixture(scope="module")
def chr17_counts():
    s = load_fasta(CHR17)
    return s, count_words(from_codes(dna(), dna().encode(s)), 8)


def naive_count(text: str, word: str) -> int:
    return sum(1 for i in range(len(text) - len(word) + 1) if text.startswith(word, i))


# ===================================================================== simulated
def test_forbidden_transition_tops_the_list(forbidden_counts):
    x, wc = forbidden_counts
    rep = AB.absent_words(wc, 2, model_order=0)
    assert rep.words() == ["CG"] and rep.matching == 1 and rep.absent_total == 1
    row = rep.rows[0]
    # expected count under the composition model ~ N pi_C pi_G (stationary law of the chain, Cover & Thomas §4.1)
    pi = mk.symbol_marginal(FORBIDDEN)
    assert row.expected == pytest.approx((x.size - 1) * pi[1] * pi[2], rel=0.05)
    assert row.minimal is True and row.period == 2 and row.overlap == 0.0
    assert row.p_absent == pytest.approx(math.exp(-row.expected)) and row.p_absent < 1e-100
    assert rep.reliable


def test_words_containing_the_gap_are_exactly_the_absent_ones(forbidden_counts):
    x, wc = forbidden_counts
    rep = AB.absent_words(wc, 4, model_order=0, max_list=1000)
    listed = set(rep.words())
    assert listed and all("CG" in w for w in listed)
    # every 4-word containing CG with expected count >= 10 under the composition model is listed
    p = np.bincount(x, minlength=4) / x.size
    for w in map("".join, itertools.product("ACGT", repeat=4)):
        e = wc.total(4) * np.prod([p["ACGT".index(c)] for c in w])
        if "CG" in w and e >= 10.5:
            assert w in listed
    exp = [r.expected for r in rep.rows]
    assert exp == sorted(exp, reverse=True)
    # the minimal absent words all contain CG at the edge only
    assert all(r.minimal is False for r in rep.rows)  # CG itself is already absent: no 4-word is minimal


def test_first_order_model_explains_the_gap(forbidden_counts):
    _, wc = forbidden_counts
    rep = AB.absent_words(wc, 5, model_order=1)
    # an order-1 model has p(G|C) = 0, so no word with CG is expected: nothing surprising is absent
    assert rep.matching == 0 and rep.rows == () and rep.candidates > 0
    assert rep.absent_total > 0  # ... although many 5-words never occur


def test_expected_counts_match_a_direct_formula(forbidden_counts):
    x, wc = forbidden_counts
    text = "".join("ACGT"[c] for c in x[:30_000])
    small = count_words(from_codes(dna(), x[:30_000]), 5)
    rep = AB.word_deviations(small, 5, model_order=2, min_expected=3.0, max_list=10_000)
    rep_over = AB.word_deviations(small, 5, model_order=2, min_expected=3.0, max_list=10_000, direction="over")
    rows = rep.rows + rep_over.rows
    assert len(rows) > 200
    c3 = {w: naive_count(text, w) for w in map("".join, itertools.product("ACGT", repeat=3))}
    N3 = sum(c3.values())
    N5 = len(text) - 4
    for r in rows[:300]:
        w = r.word
        e = N5 * c3[w[:3]] / N3
        for i in range(3, 5):
            ctx = w[i - 2 : i]
            den = sum(c3[ctx + y] for y in "ACGT")
            e *= c3[ctx + w[i]] / den
        assert r.expected == pytest.approx(e, rel=1e-10)
        assert r.observed == naive_count(text, w)


def test_overlap_correction():
    x = mk.iid(50_000, [0.4, 0.2, 0.2, 0.2], seed=4)
    wc = count_words(from_codes(dna(), x), 6)
    rep = AB.word_deviations(wc, 4, model_order=0, min_expected=1.0, max_list=300, direction="over")
    rep2 = AB.word_deviations(wc, 4, model_order=0, min_expected=1.0, max_list=300)
    rows = {r.word: r for r in rep.rows + rep2.rows}
    pA = wc.count_of("A") / wc.total(1)
    # AAAA has period 1: an occurrence continues with A with probability p(A) (Reinert, Schbath & Waterman 2000)
    assert rows["AAAA"].period == 1 and rows["AAAA"].overlap == pytest.approx(pA, rel=1e-12)
    assert rows["AAAA"].p_absent == pytest.approx(math.exp(-rows["AAAA"].expected * (1 - pA)))
    # ACAC has period 2: continuation "AC"
    pC = wc.count_of("C") / wc.total(1)
    assert rows["ACAC"].period == 2 and rows["ACAC"].overlap == pytest.approx(pA * pC, rel=1e-12)
    assert rows["ACGT"].period == 4 and rows["ACGT"].overlap == 0.0
    assert rows["ACGT"].p_absent == rows["ACGT"].p_absent_poisson


def test_short_stream_is_flagged():
    x = mk.iid(20_000, [0.25] * 4, seed=1)
    wc = count_words(from_codes(dna(), x), 8)
    rep = AB.absent_words(wc, 8, model_order=0)
    # every 8-word is expected 0.3 times: nothing can be called missing
    assert rep.candidates == 0 and not rep.reliable and "too short" in rep.note
    with pytest.raises(ParameterError):
        AB.absent_words(wc, 4, model_order=3)
    with pytest.raises(ParameterError):
        AB.absent_words(wc, 9)


# ====================================================================== genomes
def test_lambda_composition(lambda_counts):
    # Phage lambda NC_001416.1: 48,502 bp (Sanger et al. 1982, J. Mol. Biol. 162:729); composition
    # A 12334, C 11362, G 12820, T 11986 and CpG o/e 1.0366 computed (REFERENCE-CHECKS G1).
    s, wc = lambda_counts
    assert wc.length == 48_502
    assert [wc.count_of(b) for b in "ACGT"] == [12334, 11362, 12820, 11986]
    assert wc.count_of("CG") == 3113
    assert AB.observed_expected(wc, "CG") == pytest.approx(1.0366, abs=1e-4)


def test_lambda_nothing_absurd(lambda_counts):
    s, wc = lambda_counts
    # every word up to length 5 occurs (47 expected per 5-word): no absent word at all
    for n in (3, 4, 5):
        assert AB.absent_words(wc, n, model_order=0).absent_total == 0
    # against the default model (order 3 here: A^4 <= 48502/100) no 6-word expected >= 10 times is missing
    rep = AB.absent_words(wc, 6)
    assert rep.model_order == 3 and rep.matching == 0 and rep.reliable
    # against the composition alone, the listed 6-words truly never occur and are expected 10-15 times
    rep0 = AB.absent_words(wc, 6, model_order=0, max_list=100)
    assert 0 < rep0.matching <= 100
    for r in rep0.rows:
        assert naive_count(s, r.word) == 0 and 10 <= r.expected < 20 and 0 < r.p_absent < 1e-4
    # CTAG is strongly avoided in enterobacteria and their phages (Karlin, Burge & Campbell 1992,
    # Nucleic Acids Res. 20:1363 — from memory): it is the most under-represented 4-word here.
    under = AB.word_deviations(wc, 4, model_order=0, max_list=5)
    assert under.rows[0].word == "CTAG" and under.rows[0].ratio < 0.1
    assert under.rows[0].observed == naive_count(s, "CTAG")


def test_chr17_cpg_depletion(chr17_counts, lambda_counts):
    # Human hg19 chr17 fragment: CpG o/e = N_CG L/(N_C N_G) = 0.3430 (computed pin, REFERENCE-CHECKS G3);
    # bulk vertebrate CpG depletion (Sved & Bird 1990, PNAS 87:4692) against lambda > 1 (G1).
    s, wc = chr17_counts
    assert wc.length == 40_000
    assert [wc.count_of(b) for b in "ACGT"] == [8934, 11043, 11005, 9018]
    assert wc.count_of("CG") == 1042
    pin = wc.count_of("CG") * wc.total(1) / (wc.count_of("C") * wc.count_of("G"))
    assert pin == pytest.approx(0.3430, abs=1e-4)
    assert AB.observed_expected(wc, "CG") == pytest.approx(0.3430, abs=1e-4)
    assert AB.observed_expected(wc, "CG") < 0.5 < 1.0 < AB.observed_expected(lambda_counts[1], "CG")
    # at depth 4 against the composition, the most under-represented words all contain CG
    under = AB.word_deviations(wc, 4, model_order=0, max_list=20)
    assert all("CG" in w for w in under.words())
    assert under.rows[0].ratio < 0.2 and under.rows[0].z < -8
    # ... and the first-order model absorbs most of it: its top 4-word no longer looks as extreme
    under1 = AB.word_deviations(wc, 4, model_order=1, max_list=5)
    assert under1.rows[0].ratio > under.rows[0].ratio
    # the only absent 5-word expected >= 10 times under the composition starts with CG (computed on this file)
    rep = AB.absent_words(wc, 5, model_order=0)
    assert rep.words() == ["CGAAA"] and naive_count(s, "CGAAA") == 0

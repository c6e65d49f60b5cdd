"""Lempel-Ziv (1976) complexity: worked examples, two independent parsers, entropy-rate normalisation."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fractalseq.entropy import _lz as lz
from fractalseq.datasets import _markov as mk
from fractalseq.alphabet import dna
from fractalseq.errors import InputError, ParameterError
from fractalseq.stream import from_codes


def bits(s: str) -> np.ndarray:
    return np.array([int(c) for c in s], dtype=np.uint8)


def pieces(s: str, method: str) -> list[str]:
    return [s[a:b] for a, b in lz.lz76_phrases(bits(s), method)]


def definition_parse(s) -> list[int]:
    """Phrase lengths straight from the definition (slow): the longest prefix of the rest that starts
    at an earlier position (overlap allowed), plus one symbol; the last phrase may end without one."""
    s = list(s)
    n = len(s)
    out = []
    pos = 0
    while pos < n:
        k = 0
        while pos + k < n and any(s[j : j + k + 1] == s[pos : pos + k + 1] for j in range(pos)):
            k += 1
        length = min(k + 1, n - pos)
        out.append(length)
        pos += length
    return out


@pytest.mark.parametrize("method", ["suffix", "ks"])
def test_worked_example(method):
    # Lempel & Ziv 1976, IEEE Trans. Inf. Theory IT-22:75-81; Kaspar & Schuster 1987, Phys. Rev. A 36:842
    # (example string from memory; REFERENCE-CHECKS D1): 0001101001000101 -> 0.001.10.100.1000.101, c = 6.
    assert pieces("0001101001000101", method) == ["0", "001", "10", "100", "1000", "101"]
    assert lz.lz76_complexity(bits("0001101001000101")) == 6


@pytest.mark.parametrize("method", ["suffix", "ks"])
def test_second_example(method):
    # Wikipedia, "Lempel-Ziv complexity" (secondary source; REFERENCE-CHECKS D2): 1.0.01.1110.1100.0010, c = 6.
    assert pieces("1001111011000010", method) == ["1", "0", "01", "1110", "1100", "0010"]
    assert lz.lz76_complexity_ks(bits("1001111011000010")) == 6


def test_degenerate_strings():
    # REFERENCE-CHECKS D3 (from the definition): c(0^n) = 2 for n >= 2, c((01)^*) = 3 for n >= 3, c((012)^*) = 4.
    assert lz.lz76_complexity(np.zeros(1, np.uint8)) == 1
    for n in (2, 3, 10, 1000, 100_000):
        assert lz.lz76_complexity(np.zeros(n, np.uint8)) == 2
        assert lz.lz76_complexity_ks(np.zeros(n, np.uint8)) == 2
    for n in (3, 4, 11, 5000):
        assert lz.lz76_complexity(np.arange(n) % 2) == 3
    for n in (4, 9, 3001):
        assert lz.lz76_complexity(np.arange(n) % 3) == 4
    assert lz.lz76_complexity(np.zeros(0, np.uint8)) == 0


def test_parsers_agree_with_each_other_and_the_definition():
    # Two independent constructions (REFERENCE-CHECKS D1: they agree on 3000 random strings, A = 2..4),
    # plus a slow definition-based parse, on random and highly repetitive strings.
    rng = np.random.default_rng(17)
    for _ in range(1500):
        A = int(rng.integers(2, 5))
        n = int(rng.integers(1, 70))
        x = rng.integers(0, A, n)
        if rng.random() < 0.3:  # repetitive strings stress overlapping copies
            x = np.tile(x[: int(rng.integers(1, 6))], 80)[:n]
        ks = lz.lz76_phrases(x, "ks")
        assert lz.lz76_phrases(x, "suffix") == ks
        assert [b - a for a, b in ks] == definition_parse(x.tolist())


def test_parsers_agree_on_long_markov_stream():
    x = mk.simulate_markov(np.array([[0.9, 0.1], [0.4, 0.6]]), 20_000, seed=5)
    assert lz.lz76_complexity(x) == lz.lz76_complexity_ks(x)
    y = mk.iid(20_000, [0.25] * 4, seed=6)
    assert lz.lz76_complexity(y) == lz.lz76_complexity_ks(y)


@pytest.mark.parametrize(
    "name,make,A,h,tol",
    [
        # REFERENCE-CHECKS D4 (Lempel & Ziv 1976; Kaspar & Schuster 1987; finite-n means computed, abs tol 0.05 at 1e5)
        ("fair coin", lambda: mk.bernoulli(100_000, 0.5, seed=1), 2, 1.0, 0.05),
        ("biased coin", lambda: mk.bernoulli(100_000, 0.1, seed=2), 2, 0.4689955936, 0.05),
        ("uniform DNA", lambda: mk.iid(100_000, [0.25] * 4, seed=3), 4, 1.0, 0.05),
        ("two-state chain", lambda: mk.simulate_markov(np.array([[0.9, 0.1], [0.4, 0.6]]), 100_000, seed=4), 2, 0.5693865938, 0.05),
    ],
)
def test_entropy_rate_normalisation(name, make, A, h, tol):
    # c(n) log_A(n)/n -> h in units of log A (Kaspar & Schuster 1987, C = c/b with b = n/log_A n).
    est = lz.h_lz76(make(), A)
    assert est.fraction_of_max == pytest.approx(h, abs=tol), name
    assert est.estimate == pytest.approx(est.fraction_of_max * math.log2(A))
    assert est.reliable and est.method == "lz76" and est.details["parsed"] == 100_000
    # converges from above at these lengths (REFERENCE-CHECKS D4 means all exceed h except uniform A=4)
    c = est.details["complexity"]
    assert est.estimate == pytest.approx(c * math.log2(100_000) / 100_000)


def test_segments_prefix_cap_and_short_flag():
    x = mk.iid(30_000, [0.25] * 4, seed=8)
    arr = from_codes(dna(), x, starts=np.array([0, 12_000]))
    est = lz.h_lz76(arr)
    c1, c2 = lz.lz76_complexity(x[:12_000]), lz.lz76_complexity(x[12_000:])
    assert est.details["complexity"] == c1 + c2
    assert est.estimate == pytest.approx((c1 * math.log2(12_000) + c2 * math.log2(18_000)) / 30_000)
    assert "2 segments" in est.note
    cut = lz.h_lz76(x, 4, max_length=10_000)
    assert cut.details["parsed"] == 10_000 and "first 10000 of 30000" in cut.note
    assert cut.details["complexity"] == lz.lz76_complexity(x[:10_000])
    short = lz.h_lz76(x[:2000], 4)
    assert not short.reliable and "too short" in short.note


def test_bad_input():
    with pytest.raises(InputError):
        lz.h_lz76(np.zeros(0, np.uint8), 2)
    with pytest.raises(InputError):
        lz.lz76_complexity(np.array([0.5, 1.0]))
    with pytest.raises(InputError):
        lz.h_lz76(np.array([0, 1, 5]), 4)
    with pytest.raises(ParameterError):
        lz.lz76_phrases(np.array([0, 1]), method="other")


def test_prefix_parse_converts_only_the_prefix():
    """A long stream with ``max_length`` is checked whole but only its prefix is converted and parsed:
    the memory taken is that of the prefix, not 4 bytes per symbol of the stream (a 1-Gbase profile
    briefly held 4 GB here). numpy reports its array memory to tracemalloc (standard library)."""
    import tracemalloc

    x = np.tile(mk.iid(1 << 16, [0.25] * 4, seed=3).astype(np.uint8), 256)  # 16.8 M symbols
    whole = lz.h_lz76(x[: 1 << 16], 4)
    tracemalloc.start()
    try:
        cut = lz.h_lz76(x, 4, max_length=1 << 16)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert cut.details["complexity"] == whole.details["complexity"] and cut.details["parsed"] == 1 << 16
    assert peak < 4 * x.size // 8, peak  # far below an int32 copy of the stream (67 MB)
    with pytest.raises(InputError):  # a bad code anywhere in the stream is still found
        y = x.copy()
        y[-1] = 7
        lz.h_lz76(y, 4, max_length=1 << 16)

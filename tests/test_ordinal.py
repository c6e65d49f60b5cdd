"""Ordinal patterns: permutation entropy, its per-step form, forbidden patterns, ties, delay, and the profile of a pattern stream.

Every check is against a fact from outside the package: a published count or limit, a closed form derived
here from exchangeability, or an independent computation with the standard library and scipy.
"""

from __future__ import annotations

import itertools
import math
from collections import Counter

import numpy as np
import pytest
import scipy.stats

from fractalseq.entropy import ordinal_patterns, permutation_entropy, permutation_entropy_of_codes, permutation_entropy_orders
from fractalseq.entropy._ordinal import sub_pattern_map
from fractalseq.errors import InputError, ParameterError
from fractalseq.jobs._profile import profile_source
from fractalseq.sources.numeric import ordinal_alphabet
from fractalseq.resampling import Resampling
from fractalseq.stream import SymbolArray


def logistic(n: int, x0: float = 0.4) -> np.ndarray:
    """The logistic map x -> 4x(1-x) from x0 (plain Python: the test's own reference orbit)."""
    x = np.empty(n)
    v = x0
    for i in range(n):
        x[i] = v
        v = 4.0 * v * (1.0 - v)
    return x


@pytest.fixture(scope="module")
def orbit() -> np.ndarray:
    x = logistic(300_000)
    assert np.all((x > 0) & (x < 1))  # the floating-point orbit has not fallen onto the fixed point 0
    return x


def stdlib_codes(x, m: int, delay: int = 1) -> list[int]:
    """Lexicographic rank of the stable sorting permutation of each window, by sorted() and itertools (stdlib)."""
    rank = {p: i for i, p in enumerate(itertools.permutations(range(m)))}
    out = []
    for t in range(len(x) - (m - 1) * delay):
        w = [x[t + j * delay] for j in range(m)]
        out.append(rank[tuple(sorted(range(m), key=lambda j: w[j]))])
    return out


# ------------------------------------------------------------ the patterns
@pytest.mark.parametrize("m,delay", [(3, 1), (4, 1), (4, 3), (5, 2)])
def test_codes_match_a_stable_sort_with_ties_and_delay(m, delay):
    # values on a coarse grid so that ties are frequent; Python's sort is stable (language reference)
    x = np.random.default_rng(m * 10 + delay).integers(0, 4, 600).astype(float)
    codes, starts = ordinal_patterns(x, m, delay=delay)
    assert codes.tolist() == stdlib_codes(x.tolist(), m, delay)
    assert starts.tolist() == [0]


def test_codes_match_the_numeric_reader(tmp_path):
    from fractalseq.sources import open_source

    x = np.round(np.random.default_rng(5).normal(size=400), 1)
    x[[50, 51, 200]] = np.nan
    path = tmp_path / "series.csv"
    path.write_text("value\n" + "\n".join("NA" if np.isnan(v) else f"{v:.1f}" for v in x) + "\n")
    arr = open_source(path, fmt="numeric", ordinal=4).to_array()
    codes, starts = ordinal_patterns(x, 4)
    assert arr.codes.astype(np.int64).tolist() == codes.tolist()
    assert arr.starts.tolist() == starts.tolist()
    # the runs between the gaps: 50 values, 148, 199 -> 47 + 145 + 196 windows of four
    assert len(codes) == 47 + 145 + 196 and starts.tolist() == [0, 47, 47 + 145]


def test_sub_patterns_are_the_patterns_of_the_first_values():
    x = np.random.default_rng(2).random(2_000)
    c5, _ = ordinal_patterns(x, 5)
    for k in (2, 3, 4):
        ck, _ = ordinal_patterns(x, k)
        assert sub_pattern_map(5, k)[c5].tolist() == ck[: len(c5)].tolist()


def test_ties_by_time_or_by_dither():
    flat = np.zeros(20_000)
    # by time, a constant series is one monotone pattern: entropy 0 (the stable-sort rule)
    assert permutation_entropy(flat, 3, n_boot=0).bits == 0.0
    # a random dither orders the ties at random: every order equally likely, as for i.i.d. noise
    pe = permutation_entropy(flat, 3, ties="dither", seed=4, n_boot=0)
    assert abs(pe.normalized - 1.0) < 1e-3
    again = permutation_entropy(flat, 3, ties="dither", seed=4, n_boot=0)
    assert again.bits == pe.bits  # same seed, same patterns


# ------------------------------------------------------- published facts
@pytest.mark.parametrize("m", [3, 4, 5])
def test_iid_noise_has_normalised_permutation_entropy_one(m):
    # Bandt & Pompe (2002), Phys. Rev. Lett. 88:174102: for i.i.d. noise all m! patterns are equally likely
    pe = permutation_entropy(np.random.default_rng(m).random(200_000), m, n_boot=100, seed=1)
    assert abs(pe.normalized - 1.0) < 2e-3
    assert pe.normalized_low <= 1.0 <= pe.normalized_high + 1e-12
    assert pe.forbidden["count"] == 0


@pytest.mark.parametrize("m", [3, 4, 5])
def test_iid_noise_next_pattern_entropy_closed_form(m):
    # All (m+1)! orders of m+1 i.i.d. values are equally likely (exchangeability). Given the pattern of the first m,
    # the next pattern is fixed by the rank r of the new value among the last m-1: the gap holding the dropped value
    # has 2 of the m+1 slots, the other m-1 gaps one each, so H = log2(m+1) - 2/(m+1) bits.
    # The same number by enumerating the (m+1)! orders with itertools:
    counts = Counter()
    for perm in itertools.permutations(range(m + 1)):
        first = tuple(sorted(range(m), key=lambda j: perm[j]))
        second = tuple(sorted(range(m), key=lambda j: perm[j + 1]))
        counts[(first, second)] += 1
    firsts = Counter()
    for (a, _), c in counts.items():
        firsts[a] += c
    enumerated = scipy.stats.entropy(list(counts.values()), base=2) - scipy.stats.entropy(list(firsts.values()), base=2)
    closed = math.log2(m + 1) - 2.0 / (m + 1)
    assert enumerated == pytest.approx(closed, abs=1e-12)
    pe = permutation_entropy(np.random.default_rng(10 + m).random(300_000), m, n_boot=0)
    assert pe.conditional_bits == pytest.approx(closed, abs=0.01)


def test_random_walk_increments_and_levels():
    # a stock-like random walk (simulated, Gaussian steps): its increments are i.i.d., so normalised PE -> 1
    # (Bandt & Pompe 2002); its levels have p(012) = p(210) = 1/4 and 1/8 for each other pattern of order 3
    # (independent symmetric increments; the larger of two opposite steps is either with probability 1/2),
    # so H(3) = 2 * (1/4) * 2 + 4 * (1/8) * 3 = 2.5 bits.
    steps = np.random.default_rng(8).standard_normal(200_000)
    walk = np.cumsum(steps)
    inc = permutation_entropy(np.diff(walk), 4, n_boot=0)
    assert abs(inc.normalized - 1.0) < 2e-3
    lev = permutation_entropy(walk, 3, n_boot=100, seed=2)
    assert lev.bits == pytest.approx(2.5, abs=0.01)
    assert lev.low <= 2.5 <= lev.high


def test_logistic_map_allowed_pattern_counts(orbit):
    # Amigó, Zambrano & Sanjuán (2007), Europhys. Lett. 79:50001 (from memory): the logistic map at r = 4 has
    # 5, 12, 31, 75 allowed ordinal patterns of orders 3..6; all others are forbidden
    for m, allowed in ((3, 5), (4, 12), (5, 31), (6, 75)):
        pe = permutation_entropy(orbit, m, n_boot=0)
        assert pe.distinct == allowed, m
        assert pe.forbidden["count"] == math.factorial(m) - allowed
        # far more missing than chance would leave if the patterns were equally likely
        assert pe.forbidden["expected_missing_if_uniform"] < 1e-6
    # the one forbidden pattern of order 3 is the decreasing one: x[t] > x[t+1] > x[t+2] never happens
    assert permutation_entropy(orbit, 3, n_boot=0).forbidden["patterns"] == ["210"]


def test_logistic_map_pattern_stream_rate_is_at_most_one_bit(orbit):
    # The logistic map at r = 4 has Kolmogorov-Sinai entropy ln 2 per step = 1 bit (conjugate to the tent map;
    # common practice); the pattern stream is a factor of the map, so its entropy rate is at most 1 bit per step.
    # The single-pattern entropy is far above that (4.70 bits at m = 5): the profile must not report it as a rate.
    for m in (3, 4, 5):
        codes, starts = ordinal_patterns(orbit[:100_000], m)
        arr = SymbolArray(ordinal_alphabet(m), codes, starts, name=f"logistic-m{m}")
        res = profile_source(arr, image=False, resampling=Resampling.none())
        d = res.to_dict()
        rates = d["entropy_rate_bits"]
        for name in ("plugin", "miller-madow", "grassberger"):
            assert 0.5 <= rates[name]["estimate"] <= 1.0, (m, name, rates[name])
            assert rates[name]["depth"] >= 1 and rates[name]["within_bounds"] is True
        pe = d["permutation_entropy"]
        assert pe["order"] == m and pe["conditional_bits"] <= 1.0
        assert d["rate_to_use"]["estimate"] <= 1.0
    assert pe["bits"] == pytest.approx(4.70, abs=0.02)  # order 5, the figure in the simulation


def test_logistic_map_per_step_forms_across_orders(orbit):
    # The Kolmogorov-Sinai entropy of the logistic map at r = 4 is 1 bit per step. The increments H(m+1) - H(m)
    # of single-pattern entropies approach it slowly from above (Bandt, Keller & Pompe 2002, Nonlinearity 15:1595,
    # from memory; 1.31, 1.28, 1.22 bits for m = 4, 5, 6 in a 2-million-step simulation reported with the issue),
    # while the entropy of the next pattern given the current one stays at or below 1 bit and rises toward it.
    rows = permutation_entropy_orders(orbit, range(3, 8))
    assert [r["distinct"] for r in rows] == [5, 12, 31, 75, 178]  # Amigó et al. 2007 (from memory), orders 3..7
    inc = {r["order"] - 1: r["increment_bits"] for r in rows[1:]}
    for m, expect in ((4, 1.31), (5, 1.28), (6, 1.22)):
        assert inc[m] == pytest.approx(expect, abs=0.01), m
    cond = [r["conditional_bits"] for r in rows]
    assert all(c <= 1.0 for c in cond) and cond == sorted(cond)
    assert cond[-1] > 0.95


@pytest.mark.parametrize("m", [3, 4, 5, 6])
def test_periodic_series_has_per_step_rate_near_zero(m):
    # a periodic series (25 samples) has entropy rate 0 (its words stop growing in number: common practice)
    t = np.arange(20_000)
    codes, starts = ordinal_patterns(np.sin(2 * np.pi * t / 12.5 + 0.3), m)
    arr = SymbolArray(ordinal_alphabet(m), codes, starts, name="periodic")
    d = profile_source(arr, image=False, resampling=Resampling.none()).to_dict()
    assert abs(d["entropy_rate_bits"]["grassberger"]["estimate"]) < 0.01
    assert d["rate_to_use"]["estimate"] < 0.02
    assert d["permutation_entropy"]["distinct"] <= 25  # one pattern per phase at most


def test_json_block_keys_and_values():
    x = np.random.default_rng(1).random(5_000)
    codes, starts = ordinal_patterns(x, 4)
    pe = permutation_entropy_of_codes(codes, starts, 4, n_boot=50, seed=3).to_dict()
    for key in ("order", "delay", "bits", "normalized", "low", "high", "conditional_bits", "forbidden"):
        assert key in pe, key
    # the plug-in permutation entropy is scipy's entropy of the pattern frequencies
    assert pe["bits"] == pytest.approx(scipy.stats.entropy(np.bincount(codes), base=2), abs=1e-12)
    assert pe["normalized"] == pytest.approx(pe["bits"] / math.log2(24), abs=1e-12)
    # 24 patterns, 5,000 windows: the chance of a pattern never showing up is (1 - 1/24)^4997 (closed form)
    assert pe["forbidden"]["expected_missing_if_uniform"] == pytest.approx(24 * (23 / 24) ** 4997, rel=1e-9)
    again = permutation_entropy_of_codes(codes, starts, 4, n_boot=50, seed=3).to_dict()
    assert again == pe  # same seed, same interval


def test_bad_parameters_are_refused():
    x = np.arange(100.0)
    with pytest.raises(ParameterError, match="order"):
        ordinal_patterns(x, 9)
    with pytest.raises(ParameterError, match="delay"):
        ordinal_patterns(x, 3, delay=0)
    with pytest.raises(ParameterError, match="tie rule"):
        ordinal_patterns(x, 3, ties="random")
    with pytest.raises(InputError, match="fewer than 2"):
        permutation_entropy(np.array([1.0, 2.0, 3.0]), 3)
    with pytest.raises(ParameterError, match="too few"):
        permutation_entropy(x, 3, n_boot=5)

"""Rényi dimensions from word counts, checked against published closed forms.

Sources are simulated with fractalseq.datasets._markov (seeded); every expected value
comes from a closed form in the literature, with the citation beside it
(values recomputed in /work/shared/REFERENCE-CHECKS.md, rows A1-A6, E2-E4).
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
from scipy.stats import entropy as scipy_entropy
from scipy.stats import multinomial

from fractalseq import alphabet as al
from fractalseq.datasets import _markov as markov
from fractalseq.errors import InputError, ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.dimensions._spectrum import (
    NEGATIVE_Q,
    OVERLAP,
    binomial_dimension,
    dimension_spectrum,
    level_stats,
)
from fractalseq.resampling import Resampling
from fractalseq.stream import from_codes
from fractalseq.words._counts import count_words

PHI = (1 + math.sqrt(5)) / 2
BIN = al.binary()
DNA = al.dna()


def binary_stream(codes):
    return from_codes(BIN, codes)


@pytest.fixture(scope="module")
def bernoulli_1e6():
    return binary_stream(markov.bernoulli(1_000_000, 0.3, seed=11))


# ------------------------------------------------------------ A1 full shift
@pytest.mark.parametrize(
    "size, ratio, expected",
    [
        # Stein & Shakarchi, Real Analysis (2005), ch. 7 Thm 2.12: log m / log(1/r); Cantor set log 2 / log 3
        (2, 1 / 3, 0.630929753571),
        # Falconer, Fractal Geometry (2003), Thm 9.3 (theorem number from memory): A = 4, k = 1/3
        (4, 1 / 3, 1.261859507143),
        # same similarity dimension, A = 4, k = 0.4 (REFERENCE-CHECKS A1)
        (4, 0.4, 1.512941594732),
        # A = 4, k = 1/2 fills the square: D_0 = 2
        (4, 0.5, 2.0),
    ],
)
def test_full_shift_similarity_dimension(size, ratio, expected):
    rng = np.random.default_rng(size)
    alphabet = BIN if size == 2 else DNA
    arr = from_codes(alphabet, rng.integers(0, size, 200_000))
    res = dimension_spectrum(arr, qs=(0, 1, 2), ratio=ratio, resampling=Resampling.none())
    d0 = res.get(0)
    # every n-word occurs at the depths used, so D_0 = ln A / ln(1/k) up to rounding
    assert d0.estimate == pytest.approx(expected, abs=1e-9)
    assert math.isclose(expected, math.log(size) / math.log(1 / ratio), abs_tol=1e-11)
    # uniform measure: D_1 = D_2 = D_0 (REFERENCE-CHECKS A1: 5e-3 with A^m <= n/100)
    assert res.get(1).estimate == pytest.approx(expected, abs=5e-3)
    assert res.get(2).estimate == pytest.approx(expected, abs=5e-3)
    # the automatic range respects A^(n+1) <= N/100 at its deepest depth (rule 4: distinct <= N/100)
    assert size ** d0.n_hi <= len(arr) / 100


# ------------------------------------------------------------ A4 binomial cascade
BINOMIAL_P03 = {
    # Halsey, Jensen, Kadanoff, Procaccia & Shraiman 1986, Phys. Rev. A 33:1141 (two-scale Cantor set);
    # D_q = log2(p^q + (1-p)^q) / (1 - q); explicit binomial formula from memory, values REFERENCE-CHECKS A4
    0: 1.0,
    1: 0.881290899,
    2: 0.785875195,
    3: 0.717201412,
}


def test_binomial_formula_matches_published_values():
    for q, value in BINOMIAL_P03.items():
        assert binomial_dimension(0.3, q) == pytest.approx(value, abs=1e-9)
    assert binomial_dimension(0.3, -2) == pytest.approx(1.239067446, abs=1e-9)
    # Meneveau & Sreenivasan 1987 p-model: p = 0.7 gives the same D_q
    assert binomial_dimension(0.7, 2) == pytest.approx(0.785875195, abs=1e-9)


def test_binomial_cascade_fixed_range(bernoulli_1e6):
    res = dimension_spectrum(bernoulli_1e6, qs=(-2, 0, 1, 2, 3), depth_range=(6, 10), resampling=Resampling.none())
    for q, value in BINOMIAL_P03.items():
        # REFERENCE-CHECKS A4: n = 1e6, m in [6, 10]: abs tol 2e-3 for 0 <= q <= 3
        assert res.get(q).estimate == pytest.approx(value, abs=2e-3), q
        assert res.get(q).n_lo == 6 and res.get(q).n_hi == 10
    neg = res.get(-2)
    assert NEGATIVE_Q in neg.flags
    assert NEGATIVE_Q not in res.get(2).flags
    assert any("rarest box" in f for f in neg.flags)  # depth 10's rarest box is seen ~6 times, far too few
    # the automatic range stops where the rarest box is seen >= q(q-1)/(2 * 0.01) = 300 times;
    # REFERENCE-CHECKS A4: 0.02 for q = -2 (there per level; differences amplify the deepest level's noise)
    auto = dimension_spectrum(bernoulli_1e6, qs=(-2,), falpha=False, resampling=Resampling.none()).get(-2)
    assert auto.estimate == pytest.approx(1.239067446, abs=0.02)
    assert 1e6 * 0.3**auto.n_hi >= 300 / 3


def test_binomial_cascade_automatic_range(bernoulli_1e6):
    res = dimension_spectrum(bernoulli_1e6, qs=(0, 1, 2), resampling=Resampling.none())
    for q in (0, 1, 2):
        d = res.get(q)
        assert d.estimate == pytest.approx(BINOMIAL_P03[q], abs=2e-3), q
        assert d.n_hi - d.n_lo + 1 >= 3
        assert d.range_rule.startswith("automatic")
    # D_0 needs every box hit (rule 4): at the deepest depth used all 2^n words were seen
    n_hi = res.get(0).n_hi
    assert res.levels[n_hi - 1]["distinct"] == 2**n_hi


def test_binomial_falpha_chhabra_jensen(bernoulli_1e6):
    """Direct f(alpha) (Chhabra & Jensen 1989, PRL 62:1327) against the binomial measure's Legendre transform.

    REFERENCE-CHECKS A4 (Halsey et al. 1986): p = 0.3, alpha(2) = 0.704254755, f = 0.622634316;
    alpha(0) = 1.125769384 with f = 1; alpha(1) = f(alpha(1)) = D_1.
    """
    res = dimension_spectrum(bernoulli_1e6, qs=(0, 1, 2), depth_range=(6, 10), resampling=Resampling.none())
    fa = {p.q: p for p in res.falpha}
    assert fa[2.0].alpha == pytest.approx(0.704254755, abs=3e-3)
    assert fa[2.0].f == pytest.approx(0.622634316, abs=3e-3)
    assert fa[0.0].alpha == pytest.approx(1.125769384, abs=3e-3)
    assert fa[0.0].f == pytest.approx(1.0, abs=1e-9)
    assert fa[1.0].alpha == pytest.approx(0.881290899, abs=3e-3)
    assert fa[1.0].f == pytest.approx(fa[1.0].alpha, abs=1e-9)


# ------------------------------------------------------------ A5 Markov chains
def test_two_state_markov_renyi_dimensions():
    """Rached, Alajaji & Campbell 2001, IEEE Trans. Inf. Theory 47:1553: D_q = h_q / ln(1/k).

    P = [[.9, .1], [.4, .6]], k = 1/2: D_1 = 0.569386594, D_2 = 0.297736275 (REFERENCE-CHECKS A5;
    formula shape from memory, verified there by exact block sums); tolerance 0.01 at n = 1e6.
    """
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    arr = binary_stream(markov.simulate_markov(P, 1_000_000, seed=5))
    res = dimension_spectrum(arr, qs=(0, 1, 2), resampling=Resampling.none())
    assert res.get(0).estimate == pytest.approx(1.0, abs=1e-9)
    assert res.get(1).estimate == pytest.approx(0.569386594, abs=0.01)
    assert res.get(2).estimate == pytest.approx(0.297736275, abs=0.01)


@pytest.mark.parametrize("ratio, d1, d2", [(0.5, 1.901215753, 1.841698278), (1 / 3, 1.199533587, 1.161982241)])
def test_dna_like_chain(ratio, d1, d2):
    """The 4x4 DNA-like chain of REFERENCE-CHECKS A5 (Rached et al. 2001), k = 1/2 and 1/3, tol 0.01."""
    P = np.array([[0.4, 0.1, 0.2, 0.3], [0.3, 0.3, 0.05, 0.35], [0.25, 0.25, 0.3, 0.2], [0.2, 0.2, 0.3, 0.3]])
    arr = from_codes(DNA, markov.simulate_markov(P, 1_000_000, seed=7))
    res = dimension_spectrum(arr, qs=(1, 2), ratio=ratio, resampling=Resampling.none())
    assert res.get(1).estimate == pytest.approx(d1, abs=0.01)
    assert res.get(2).estimate == pytest.approx(d2, abs=0.01)


# ------------------------------------------------------------ A6 golden-mean shift
def test_golden_mean_shift():
    """No '11' (golden-mean shift), k = 1/2: D_0 = log2 phi (Furstenberg 1967, from memory);

    chain [[1/2, 1/2], [1, 0]]: D_1 = 2/3 exactly (Cover & Thomas 2006, Problem 4.7: H(p)/(1+p)),
    D_2 = -log2((1 + sqrt 17)/8) = 0.642981363 (REFERENCE-CHECKS A6); tolerance 3e-3 at n = 1e6.
    """
    arr = binary_stream(markov.golden_mean(1_000_000, seed=3, p=0.5))
    res = dimension_spectrum(arr, qs=(0, 1, 2), resampling=Resampling.none())
    assert res.get(0).estimate == pytest.approx(math.log2(PHI), abs=3e-3)
    assert res.get(1).estimate == pytest.approx(2 / 3, abs=3e-3)
    assert res.get(2).estimate == pytest.approx(-math.log2((1 + math.sqrt(17)) / 8), abs=3e-3)
    assert -math.log2((1 + math.sqrt(17)) / 8) == pytest.approx(0.642981363, abs=1e-9)
    # distinct words of the golden-mean shift are Fibonacci numbers F(n+2) (REFERENCE-CHECKS B1)
    fib = [1, 2]
    while len(fib) < 30:
        fib.append(fib[-1] + fib[-2])
    for row in res.levels[:12]:
        assert row["distinct"] == fib[row["n"]]


# ------------------------------------------------------------ intervals
@pytest.fixture(scope="module")
def markov_boot():
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    arr = binary_stream(markov.simulate_markov(P, 100_000, seed=21))
    return arr, dimension_spectrum(arr, qs=(0, 1, 2, -1), resampling=Resampling(n_boot=60, seed=4))


def test_bootstrap_intervals_cover_truth_and_are_reported(markov_boot):
    arr, res = markov_boot
    truth = {0: 1.0, 1: 0.569386594, 2: 0.297736275}  # REFERENCE-CHECKS A5
    for q, value in truth.items():
        d = res.get(q)
        # a 95% interval may miss; allow 4 bootstrap standard errors beyond it (a clear failure only)
        se = max(d.stderr, 1e-12)
        assert abs(d.estimate - value) <= 4 * se + 1e-9
        assert d.low - 4 * se <= value <= d.high + 4 * se
        assert d.stderr > 0 or q == 0
    assert res.block is not None and res.block.length >= 10 * res.get(1).n_hi
    assert "Politis-White" in res.block.rule
    assert res.n_boot == 60 and res.scheme == "nonoverlapping"
    assert NEGATIVE_Q in res.get(-1).flags


def test_same_seed_same_bytes(markov_boot):
    arr, res = markov_boot
    again = dimension_spectrum(arr, qs=(0, 1, 2, -1), resampling=Resampling(n_boot=60, seed=4))
    assert to_json(res.to_dict()) == to_json(again.to_dict())
    other = dimension_spectrum(arr, qs=(0, 1, 2, -1), resampling=Resampling(n_boot=60, seed=5))
    assert other.get(1).low != res.get(1).low
    # the fit weights and the range come from the counts, so only the interval moves with the seed
    assert other.get(1).estimate == res.get(1).estimate
    json.loads(to_json(res.to_dict()))


def test_point_estimates_do_not_depend_on_resampling(markov_boot):
    """D_q, its scaling range, f(alpha) and the rates are the same with 0, 60 or 200 replicates and any seed."""
    arr, _ = markov_boot
    runs = [
        dimension_spectrum(arr, qs=(0, 1, 2, -1), rates=True, resampling=Resampling(n_boot=b, seed=s))
        for b, s in ((0, 0), (60, 4), (60, 5), (200, 9))
    ]
    first = runs[0]
    for other in runs[1:]:
        for a, b in zip(first.dims, other.dims):
            assert (a.q, a.estimate, a.n_lo, a.n_hi) == (b.q, b.estimate, b.n_lo, b.n_hi)
        for a, b in zip(first.falpha, other.falpha):
            assert (a.alpha, a.f) == (b.alpha, b.f) or (math.isnan(a.alpha) and math.isnan(b.alpha))
        for a, b in zip(first.rates, other.rates):
            assert (a.estimate, a.order) == (b.estimate, b.order)
    # and the interval does come from the bootstrap
    assert runs[1].get(2).low != runs[3].get(2).low


def test_word_counts_input_gives_same_estimates():
    arr = binary_stream(markov.bernoulli(50_000, 0.3, seed=2))
    from_stream = dimension_spectrum(arr, qs=(1, 2), depth_range=(2, 7), resampling=Resampling.none())
    wc = count_words(arr, 9)
    from_counts = dimension_spectrum(wc, qs=(1, 2), depth_range=(2, 7), resampling=Resampling(n_boot=30))
    for q in (1, 2):
        assert from_counts.get(q).estimate == pytest.approx(from_stream.get(q).estimate, abs=1e-12)
        assert math.isfinite(from_counts.get(q).low)
    assert any("no bootstrap" in f for f in from_counts.flags)


def test_short_stream_reports_too_little_data():
    arr = binary_stream(markov.bernoulli(300, 0.5, seed=1))
    res = dimension_spectrum(arr, qs=(1, 2), resampling=Resampling.none())
    for d in res.dims:
        assert math.isnan(d.estimate)
        assert any("too little data" in f for f in d.flags)


def test_periodic_stream_has_dimension_zero():
    # a periodic sequence has a finite set of words: D_q = 0 for every q (entropy rate 0; REFERENCE-CHECKS B7)
    arr = binary_stream(np.tile(np.array([0, 1, 1], np.uint8), 20_000))
    res = dimension_spectrum(arr, qs=(0, 1, 2), resampling=Resampling.none())
    for q in (0, 1, 2):
        assert res.get(q).estimate == pytest.approx(0.0, abs=1e-4)


# ------------------------------------------------------------ estimators
def test_miller_madow_and_plugin_pinned_values():
    # REFERENCE-CHECKS E2: counts [5,3,1,1,0]: ML 1.1682824502, MM 1.3182824502 (Miller 1955)
    counts = np.array([5, 3, 1, 1, 0])
    qs = np.array([1.0])
    assert level_stats(counts, None, qs, corrected=False).H[0] == pytest.approx(1.1682824502, abs=1e-9)
    assert level_stats(counts, None, qs, corrected=True).H[0] == pytest.approx(1.3182824502, abs=1e-9)
    # plug-in equals scipy's entropy (general-purpose reference library)
    assert level_stats(counts, None, qs, corrected=False).H[0] == pytest.approx(scipy_entropy(counts), abs=1e-12)


def test_spectrum_form_equals_count_vector_form():
    counts = np.array([7, 7, 7, 3, 3, 1, 12])
    values, mult = np.unique(counts, return_counts=True)
    qs = np.array([-1.0, 0.0, 0.5, 1.0, 2.0, 3.0, 2.5])
    a = level_stats(counts, None, qs).vector()
    b = level_stats(values, mult, qs).vector()
    assert np.allclose(a, b, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("q", [2, 3])
def test_falling_factorial_partition_sum_is_unbiased(q):
    """E[sum c(c-1)...(c-q+1)] / (N(N-1)...(N-q+1)) = sum p^q exactly (REFERENCE-CHECKS E4: binomial factorial moments)."""
    p = np.array([0.5, 0.3, 0.15, 0.05])
    N = 7
    qs = np.array([float(q)])
    expect = 0.0
    for counts in itertools.product(range(N + 1), repeat=3):
        if sum(counts) > N:
            continue
        c = np.array(list(counts) + [N - sum(counts)])
        H = level_stats(c, None, qs).H[0]
        z = math.exp((1 - q) * H) if math.isfinite(H) else 0.0
        expect += multinomial.pmf(c, N, p) * z
    assert expect == pytest.approx(float((p**q).sum()), abs=1e-12)


def test_large_counts_and_extreme_q_do_not_overflow():
    counts = np.array([10**9, 10**9, 1, 5])
    st = level_stats(counts, None, np.array([-40.0, 40.0, 0.0]))
    assert np.all(np.isfinite(st.H))
    # q -> +inf tends to -ln max p; q = 40 is already close
    assert st.H[1] == pytest.approx(-math.log(0.5), rel=0.05)


# ------------------------------------------------------------ overlap and errors
def test_overlapping_maps_switch_to_box_counting():
    # REFERENCE-CHECKS A2: k = 0.6, A = 2 on [0, 1]: the maps overlap; measured D_0 = 1, not ln 2 / ln(1/0.6)
    arr = binary_stream(markov.bernoulli(200_000, 0.5, seed=8))
    res = dimension_spectrum(arr, qs=(0,), ratio=0.6, falpha=False, resampling=Resampling.none())
    assert res.route == "geometric box counting"
    assert any(f.startswith(OVERLAP) for f in res.flags)
    assert res.get(0).estimate == pytest.approx(1.0, abs=0.01)
    assert abs(res.get(0).estimate - math.log(2) / math.log(1 / 0.6)) > 0.3
    with pytest.raises(ParameterError):
        dimension_spectrum(count_words(arr, 8), qs=(0,), ratio=0.6)


def test_bad_parameters_raise_one_sentence_errors():
    """Each error names the parameter to change (the command line maps it to its option)."""
    arr = binary_stream(markov.bernoulli(10_000, 0.5, seed=1))
    cases = [
        (dict(qs=()), "qs"),
        (dict(qs=(float("nan"),)), "qs"),
        (dict(depth_range=(5, 5)), "depth_range"),
        (dict(resampling=200), "resampling"),  # the replicate count alone is not the settings object
        (dict(starve=0.5), "starve"),
    ]
    for kwargs, parameter in cases:
        with pytest.raises(ParameterError) as err:
            dimension_spectrum(arr, **kwargs)
        assert err.value.parameter == parameter, (kwargs, err.value.parameter)
        assert "--" not in str(err.value)
    with pytest.raises(ParameterError):
        dimension_spectrum(arr, ratio=1.5)  # checked by the encoding
    with pytest.raises(InputError):
        dimension_spectrum(from_codes(BIN, np.zeros(0, np.uint8)))
    with pytest.raises(InputError):
        dimension_spectrum([0, 1, 0])  # not a stream


@pytest.mark.parametrize("scheme", ["moving", "stationary"])
def test_other_block_schemes_and_rates(scheme):
    """Moving (Kuensch 1989) and stationary (Politis & Romano 1994) blocks give intervals too; the rates

    from the same bootstrap match h_1 = 0.5693865938 bits (Cover & Thomas 2006, §4.2; REFERENCE-CHECKS B2).
    """
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    arr = binary_stream(markov.simulate_markov(P, 50_000, seed=12))
    res = dimension_spectrum(arr, qs=(1,), falpha=False, rates=True, resampling=Resampling(n_boot=40, seed=1, scheme=scheme))
    d = res.get(1)
    h1 = 0.5693865938
    assert res.scheme == scheme
    assert d.estimate == pytest.approx(h1, abs=0.02) and d.stderr > 0
    assert d.low - 4 * d.stderr <= h1 <= d.high + 4 * d.stderr  # a clear failure only
    r = res.rates[0]
    assert r.q == 1.0 and r.order is not None
    assert r.estimate == pytest.approx(h1, abs=0.02)
    assert r.low - 4 * r.stderr <= h1 <= r.high + 4 * r.stderr


# ------------------------------------------------------------ count-based fit weights
@pytest.mark.parametrize("q", [1.0, 2.0, 0.5])
def test_delta_method_variance_matches_exact_multinomial_variance(q):
    """Var(H_q) ~ sum p g^2 / N (delta method; Basharin 1959 for q = 1), against exact enumeration.

    The exact variance of the plug-in H_q over every multinomial sample of N = 300 from
    p = (0.5, 0.3, 0.2) (scipy's multinomial pmf) agrees with the first-order value up to the
    second-order terms (relative size O(1/N); measured 0.4% for q = 1, 4% for q = 1/2).
    """
    from fractalseq.dimensions._level_variance import box_influence, variance_from_influence

    p = np.array([0.5, 0.3, 0.2])
    N = 300
    a, b = np.meshgrid(np.arange(N + 1), np.arange(N + 1), indexing="ij")
    keep = a + b <= N
    c = np.stack([a[keep], b[keep], N - a[keep] - b[keep]], axis=1).astype(float)
    w = multinomial.pmf(c, N, p)
    ph = c / N
    with np.errstate(divide="ignore", invalid="ignore"):
        if q == 1.0:
            h = -np.where(ph > 0, ph * np.log(ph), 0.0).sum(axis=1)
        else:
            h = np.log((ph**q).sum(axis=1)) / (1 - q)
    exact = float(np.sum(w * h**2) - np.sum(w * h) ** 2)
    qs = np.array([q])
    delta = float(variance_from_influence(N * p, box_influence(N * p, qs))[0])
    if q == 1.0:  # closed form (Basharin 1959): (sum p ln^2 p - H^2) / N
        H = -float(np.sum(p * np.log(p)))
        assert delta == pytest.approx((float(np.sum(p * np.log(p) ** 2)) - H**2) / N, rel=1e-12)
    assert delta == pytest.approx(exact, rel=0.05)


def test_difference_variance_matches_simulation():
    """The count-based variance of H_q(3) - H_q(2) (nested words) against 300 simulated i.i.d. streams.

    For an i.i.d. source the conditional plug-in entropy is asymptotically normal with the delta-method
    variance; 300 streams estimate a variance to about 8% (chi-square), so 25% is a clear failure only.
    """
    from fractalseq.dimensions._level_variance import word_level_variances

    qs = np.array([1.0, 2.0])
    diffs, levels, predicted = [], [], []
    for s in range(300):
        wc = count_words(binary_stream(markov.bernoulli(4000, 0.3, seed=1000 + s)), 3)
        st2 = level_stats(wc.counts(2), None, qs, corrected=False).H
        st3 = level_stats(wc.counts(3), None, qs, corrected=False).H
        diffs.append(st3 - st2)
        levels.append(st3)
        var, dvar = word_level_variances(wc, 3, qs)
        predicted.append((var[2], dvar[1]))
    diffs, levels = np.array(diffs), np.array(levels)
    pv = np.array(predicted).mean(axis=0)  # (2 [var, dvar], Q)
    assert np.allclose(diffs.var(axis=0, ddof=1), pv[1], rtol=0.25)
    # the levels themselves: a stream's overlapping n-words are not a multinomial sample, so the
    # multinomial value understates Var(H_q(3)) (measured about 2.4x here); it only sets relative weights
    assert np.all(levels.var(axis=0, ddof=1) > pv[0])
    # nested levels are strongly correlated: the difference varies much less than the levels
    assert np.all(pv[1] < pv[0])


def test_batch_means_covariance_matches_simulation():
    """Batch means of the influence values see the overlap of words (Carlstein 1986; Flegal & Jones 2010).

    On 200 simulated two-state Markov streams (P = [[.9, .1], [.4, .6]]) the batch-means variances of
    H_q(3) and of H_q(4) - H_q(3) agree with the spread of those statistics across the streams (a
    variance from 200 draws is good to about 10%; 30% is a clear failure only).
    """
    from fractalseq.dimensions._level_variance import BatchSums, box_influence
    from fractalseq.resampling._word_labels import word_labels

    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    qs = np.array([1.0, 2.0])
    h3, d34, var3, var_d = [], [], [], []
    for s in range(200):
        arr = binary_stream(markov.simulate_markov(P, 20_000, seed=500 + s))
        batches = BatchSums(len(arr), 2, qs.size)
        H = []
        for i, n in enumerate((3, 4)):
            labels, words = word_labels(arr, n)
            counts = np.bincount(labels[labels >= 0], minlength=words.size)
            batches.add(i, labels, counts, box_influence(counts, qs))
            H.append(level_stats(counts, None, qs, corrected=False).H)
        C = batches.covariance()
        h3.append(H[0])
        d34.append(H[1] - H[0])
        var3.append(C[:, 0, 0])
        var_d.append(C[:, 0, 0] + C[:, 1, 1] - 2 * C[:, 0, 1])
    assert np.allclose(np.var(h3, axis=0, ddof=1), np.mean(var3, axis=0), rtol=0.3)
    assert np.allclose(np.var(d34, axis=0, ddof=1), np.mean(var_d, axis=0), rtol=0.3)


def test_profile_prints_the_same_dimensions_with_and_without_bootstrap():
    """The command line: ``profile --boot 0`` and ``--boot 60`` print identical D_q on phage lambda.

    Data: reference/lambda_virus.fa.gz (phage lambda genome, NC_001416.1; provenance in reference/PROVENANCE.md).
    """
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    out = {}
    for boot in (0, 60):
        run = subprocess.run(
            [sys.executable, "-m", "fractalseq", "profile", str(root / "reference" / "lambda_virus.fa.gz"), "--json",
             "--boot", str(boot), "--seed", str(boot + 3)],
            capture_output=True, text=True, check=True, cwd=root,
        )
        out[boot] = json.loads(run.stdout)["sources"][0]
    for key in ("dimensions", "spectrum"):
        a = [(d["q"], d["estimate"]) for d in out[0][key]]
        b = [(d["q"], d["estimate"]) for d in out[60][key]]
        assert a == b and len(a) >= 3
    # only the intervals differ: residual-based without replicates, bootstrap with them
    no_boot, boot = ([d for d in out[b]["dimensions"] if d["q"] == 2.0][0] for b in (0, 60))
    assert no_boot["stderr"] is None and boot["stderr"] > 0 and boot["low"] != no_boot["low"]


def test_results_follow_the_result_contract(markov_boot):
    """Estimates derive from Estimate, documents keep their old keys (flags) beside the new ones (notes)."""
    from fractalseq.results import Estimate, Result

    _, res = markov_boot
    assert isinstance(res, Result) and all(isinstance(d, Estimate) for d in res.dims)
    d = res.to_dict()
    dim = d["dims"][1]
    old = {"q", "estimate", "low", "high", "stderr", "fit_stderr", "n_lo", "n_hi", "eps_lo", "eps_hi", "method",
           "range_rule", "flags", "local", "lattice_stderr"}
    assert old | {"reliable", "notes"} <= set(dim)
    assert dim["flags"] == dim["notes"] == list(res.get(1).flags)
    assert res.get(-1).reliable is False  # negative q is flagged unreliable
    assert set(d) >= {"route", "ratio", "length", "dims", "falpha", "levels", "data_limit", "complete_limit", "block",
                      "scheme", "n_boot", "seed", "level", "interval", "flags", "rates"}
    assert set(d["block"]) == {"length", "rule", "politis_white", "floor", "blocks"}

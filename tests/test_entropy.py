"""Entropy estimators against published formulas, closed forms and general-purpose libraries."""

from __future__ import annotations

import bz2
import itertools
import lzma
import math
import zlib

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import digamma, gammaln
from scipy.stats import entropy as scipy_entropy

from fractalseq.entropy import _estimators as E
from fractalseq.entropy import _topological as topological
from fractalseq.entropy._compressors import _pack
from fractalseq.datasets import _markov as mk
from fractalseq.alphabet import binary, dna
from fractalseq.errors import InputError, ParameterError
from fractalseq.resampling import Resampling
from fractalseq.stream import from_codes
from fractalseq.words._counts import count_words

from reference_impl import thue_morse

TWO_STATE = np.array([[0.9, 0.1], [0.4, 0.6]])
DNA_CHAIN = np.array(
    [[0.4, 0.1, 0.2, 0.3], [0.3, 0.3, 0.05, 0.35], [0.25, 0.25, 0.3, 0.2], [0.2, 0.2, 0.3, 0.3]]
)
LN2 = math.log(2)


def counts_of(codes, alphabet, depth):
    return count_words(from_codes(alphabet, codes), depth)


# ================================================================ count vectors
def test_grassberger_g_table():
    # Grassberger 2003, arXiv:physics/0307138 (digamma form from memory; REFERENCE-CHECKS E1):
    # G(1) = -gamma - ln 2, G(2) = G(3) = 2 - gamma - ln 2, ...
    table = {1: -1.270362845461, 2: 0.729637154539, 3: 0.729637154539, 4: 1.396303821205, 5: 1.396303821205,
             6: 1.796303821205, 7: 1.796303821205, 8: 2.082018106919, 9: 2.082018106919, 10: 2.304240329142}
    got = E.grassberger_g(np.array(list(table)))
    np.testing.assert_allclose(got, list(table.values()), atol=1e-12, rtol=0)
    assert float(E.grassberger_g(1)) == pytest.approx(-np.euler_gamma - math.log(2), abs=1e-14)


def test_grassberger_g_integral_form_and_identities():
    # Integral form G(n) = psi(n) + (-1)^n int_0^1 t^(n-1)/(1+t) dt (confirmed in the R package entropart,
    # bcShannon "Grassberger2003"; REFERENCE-CHECKS E1), checked with scipy.special.digamma and scipy.integrate.quad.
    n = np.arange(1, 80)
    integral = np.array([quad(lambda t, k=k: t ** (k - 1) / (1 + t), 0, 1, epsabs=1e-14)[0] for k in n])
    np.testing.assert_allclose(E.grassberger_g(n), digamma(n) + (-1.0) ** n * integral, atol=1e-12, rtol=0)
    g = E.grassberger_g(np.arange(1, 120))
    evens = np.arange(2, 118, 2)
    np.testing.assert_allclose(g[evens], g[evens - 1], atol=1e-10)  # G(2n+1) = G(2n)
    np.testing.assert_allclose(g[evens + 1] - g[evens - 1], 2.0 / (evens + 1), atol=1e-10)  # G(2n+2) = G(2n) + 2/(2n+1)
    assert float(E.grassberger_g(100)) - math.log(100) == pytest.approx(1.667e-5, abs=5e-8)


@pytest.mark.parametrize(
    "counts,ml,mm,g03,g03psi",
    [
        ([5, 3, 1, 1, 0], 1.1682824502, 1.3182824502, 1.6396146051, 1.5887821012),
        ([10, 10, 10, 10], 1.3862943611, 1.4237943611, 1.3846391250, 1.3720870449),
        ([1, 1, 1, 1, 1, 1], 1.7917594692, 2.2084261359, 3.0621223147, 2.9764805139),
        ([50, 30, 15, 4, 1], 1.1671401642, 1.1871401642, 1.1895764082, 1.1845680750),
        ([2, 1], 0.6365141683, 0.8031808350, 1.0356418008, 0.8598138472),
    ],
)
def test_pinned_estimator_values(counts, ml, mm, g03, g03psi):
    # Miller 1955 (H_MM = H_ML + (m-1)/2N); Grassberger 2003; pinned values REFERENCE-CHECKS E2 (nats).
    c = np.array(counts)
    assert E.entropy_counts(c, "plugin", base=None) == pytest.approx(ml, abs=1e-9)
    assert E.entropy_counts(c, "miller-madow", base=None) == pytest.approx(mm, abs=1e-9)
    # We implement the psi(N) variant of Grassberger 2003 ...
    assert E.entropy_counts(c, "grassberger", base=None) == pytest.approx(g03psi, abs=1e-9)
    # ... and the ln N variant differs only by the leading term (checks G(n) on real count vectors).
    nz = c[c > 0]
    ln_variant = math.log(nz.sum()) - float((nz * E.grassberger_g(nz)).sum()) / nz.sum()
    assert ln_variant == pytest.approx(g03, abs=1e-9)
    # bits = nats / ln 2
    assert E.entropy_counts(c, "plugin") == pytest.approx(ml / LN2, abs=1e-9)


def test_plugin_matches_scipy_and_spectrum_form():
    # Plug-in entropy equals scipy.stats.entropy of the normalised counts (general-purpose reference).
    rng = np.random.default_rng(0)
    for _ in range(50):
        c = rng.integers(0, 40, size=rng.integers(2, 30))
        c[0] += 1
        for base in (2, math.e, None):
            ref = scipy_entropy(c, base=base)
            assert E.entropy_counts(c, "plugin", base=base) == pytest.approx(ref, abs=1e-12)
        # frequency-of-frequencies form gives the same numbers for every method
        v, m = np.unique(c[c > 0], return_counts=True)

        class Spec:
            value, multiplicity = v, m

        for meth in E.METHODS:
            assert E.entropy_counts(Spec, meth) == pytest.approx(E.entropy_counts(c, meth), abs=1e-12)


def _compositions(N, m):
    """Every count vector of N balls in m bins (stars and bars)."""
    for cuts in itertools.combinations(range(N + m - 1), m - 1):
        prev = -1
        out = []
        for c in cuts:
            out.append(c - prev - 1)
            prev = c
        out.append(N + m - 1 - prev - 1)
        yield np.array(out)


def _exact_expectation(p, N, method):
    p = np.asarray(p, float)
    total = 0.0
    for c in _compositions(N, p.size):
        logw = gammaln(N + 1) - gammaln(c + 1).sum() + float((c * np.log(p)).sum())
        total += math.exp(logw) * E.entropy_counts(c, method, base=None)
    return total


@pytest.mark.parametrize(
    "p,N,biases",
    [
        ([0.25] * 4, 10, {"plugin": -0.171012, "miller-madow": -0.032275, "grassberger": -0.000180}),
        ([0.5, 0.3, 0.15, 0.05], 20, {"plugin": -0.082246, "miller-madow": -0.017197, "grassberger": -0.002284}),
        ([0.125] * 8, 8, {"plugin": -0.522780, "miller-madow": -0.257084, "grassberger": -0.039125}),
    ],
)
def test_exact_bias_by_enumeration(p, N, biases):
    # Exact multinomial expectations (Paninski 2003, Neural Comput. 15:1191 for the framework;
    # Miller 1955 first-order bias -(m-1)/2N); values REFERENCE-CHECKS E3.  The 'grassberger' column
    # is the psi(N) variant, the one this package implements.
    H = -sum(x * math.log(x) for x in p)
    for meth, bias in biases.items():
        assert _exact_expectation(p, N, meth) - H == pytest.approx(bias, abs=2e-6)


def test_collision_estimator_is_unbiased():
    # E[sum n_i(n_i-1)] / (N(N-1)) = sum p_i^2 exactly (binomial factorial moment; REFERENCE-CHECKS E4).
    p = np.array([0.5, 0.3, 0.15, 0.05])
    N = 12
    total = 0.0
    for c in _compositions(N, p.size):
        logw = gammaln(N + 1) - gammaln(c + 1).sum() + float((c * np.log(p)).sum())
        total += math.exp(logw) * math.exp(E.log_power_sum(c, 2))
    assert total == pytest.approx(float((p**2).sum()), abs=1e-12)


def test_float_counts_and_reliability_note():
    c = np.array([3.0, 2.5, 1.2, 0.0])
    assert E.entropy_counts(c, "plugin") == pytest.approx(scipy_entropy(c, base=2), abs=1e-12)
    # Grassberger rounds non-integer counts (documented) and says so
    assert E.entropy_counts(c, "grassberger") == pytest.approx(E.entropy_counts(np.rint(c), "grassberger"), abs=1e-12)
    est = E.block_entropy(c, "grassberger", depth=1, alphabet_size=4)
    assert "rounded" in est.note and not est.reliable and "too short" in est.note
    big = E.block_entropy(np.full(4, 1000), "plugin", depth=1, alphabet_size=4)
    assert big.reliable and big.estimate == pytest.approx(2.0) and big.fraction_of_max == pytest.approx(1.0)
    d = big.to_dict()
    assert d["estimate"] == pytest.approx(2.0) and d["nats"] == pytest.approx(2 * LN2) and d["unit"] == "bits"


def test_bad_counts():
    with pytest.raises(InputError):
        E.entropy_counts([0, 0, 0])
    with pytest.raises(InputError):
        E.entropy_counts([1, -1, 3])
    with pytest.raises(ParameterError):
        E.entropy_counts([1, 2], method="magic")
    with pytest.raises(ParameterError):
        E.grassberger_g(0)


# ================================================================ entropy rates
@pytest.fixture(scope="module")
def two_state_1e6():
    x = mk.simulate_markov(TWO_STATE, 1_000_000, seed=2024)
    return counts_of(x, binary(), 16)


def test_difference_estimator_two_state_chain(two_state_1e6):
    # Cover & Thomas 2006, §4.2: h = 0.5693865938 bits (REFERENCE-CHECKS B2: abs tol 0.004 at n = 1e6).
    truth = mk.entropy_rate(TWO_STATE)
    assert truth == pytest.approx(0.5693865938, abs=1e-9)
    for meth in E.METHODS:
        est = E.h_difference(two_state_1e6, method=meth)
        # rule: largest n with 2^(n+1) <= 1e6/100 -> n = 12
        assert est.depth == 12 and est.reliable and est.note == ""
        assert est.estimate == pytest.approx(truth, abs=0.004)
        assert est.fraction_of_max == pytest.approx(est.estimate)
        assert est.method == f"difference/{meth}" and est.unit == "bits/symbol"


def test_ratio_is_biased_on_correlated_source(two_state_1e6):
    # REFERENCE-CHECKS rule 3: H_n/n carries an O(1/n) bias on a correlated source; the difference does not.
    truth = mk.entropy_rate(TWO_STATE)
    ratio = E.h_ratio(two_state_1e6)
    diff = E.h_difference(two_state_1e6)
    assert ratio.depth == 13
    exact_ratio = mk.block_entropy_exact(TWO_STATE, 13) / 13  # the bias predicted by the closed form
    assert ratio.estimate == pytest.approx(exact_ratio, abs=0.004)
    assert ratio.estimate - truth > 0.008
    assert abs(diff.estimate - truth) < 0.004


def test_renyi_rates_two_state(two_state_1e6):
    # Rached, Alajaji & Campbell 2001; REFERENCE-CHECKS A5 (simulated n = 1e6, difference estimator, tol 0.01).
    for q in (2.0, 3.0):
        est = E.h_renyi(two_state_1e6, q)
        assert est.reliable and est.q == q and est.method == "difference/factorial-moment"
        assert est.estimate == pytest.approx(mk.renyi_rate(TWO_STATE, q), abs=0.01)
    est = E.h_renyi(two_state_1e6, 0.5)  # plug-in sums for non-integer q, flagged in the note
    assert est.estimate == pytest.approx(0.795048868, abs=0.05)
    assert "rare words" in est.note


def test_dna_chain_rates():
    # REFERENCE-CHECKS A5: DNA-like chain, simulated n = 1e6, rule A^(m+1) <= n/100 (m = 5), tol 0.01.
    x = mk.simulate_markov(DNA_CHAIN, 1_000_000, seed=7)
    wc = counts_of(x, dna(), 7)
    est = E.h_difference(wc)
    assert est.depth == 5 and est.reliable
    assert est.estimate == pytest.approx(1.901215753, abs=0.004)
    assert est.fraction_of_max == pytest.approx(est.estimate / 2)
    assert E.h_renyi(wc, 2).estimate == pytest.approx(1.841698278, abs=0.01)
    assert E.h_renyi(wc, 3).estimate == pytest.approx(1.785079086, abs=0.01)
    # REFERENCE-CHECKS rule 4: past the rule the plug-in difference drops by the Miller-Madow
    # bias (A^(m+1) - A^m)/(2N) (in nats); the corrected estimators stay close.
    plug = E.h_difference(wc, depth=6, method="plugin")
    assert not plug.reliable and "too short" in plug.note
    mm_bias_bits = (4**7 - 4**6) / (2 * 1e6) / LN2
    assert 1.901215753 - plug.estimate == pytest.approx(mm_bias_bits, abs=0.004)
    assert E.h_difference(wc, depth=6, method="grassberger").estimate == pytest.approx(1.901215753, abs=0.004)


def test_table_rows_consistent(two_state_1e6):
    rows = E.entropy_table(two_state_1e6, max_depth=6)
    assert [r["depth"] for r in rows] == list(range(1, 7))
    for meth in E.METHODS:
        H = [0.0] + [r[f"H_{meth}"] for r in rows]
        for r in rows:
            n = r["depth"]
            assert r[f"difference_{meth}"] == pytest.approx(H[n] - H[n - 1], abs=1e-12)
            assert r[f"ratio_{meth}"] == pytest.approx(H[n] / n, abs=1e-12)
    blocks = E.block_entropies(two_state_1e6, "plugin", max_depth=3)
    assert [b.estimate for b in blocks] == pytest.approx([r["H_plugin"] for r in rows[:3]])


def test_logistic_full_chaos_one_bit():
    # Logistic map r = 4, partition at 1/2: h = ln 2 = one bit per step (Ulam & von Neumann 1947,
    # from memory; REFERENCE-CHECKS B5: n = 1e6, m <= 8, abs tol 2e-3 nats).
    x = mk.logistic_symbols(1_000_000, 4.0, x0=0.2718, burn=1000)
    wc = counts_of(x, binary(), 9)
    for m in range(1, 9):
        assert E.h_difference(wc, depth=m, method="plugin").nats == pytest.approx(math.log(2), abs=2e-3)


def test_logistic_period_three_window():
    # r = 3.83 lies in the period-3 window: symbols (011)^inf, block-entropy rate exactly 0 (REFERENCE-CHECKS B7:
    # abs tol 1e-9 after 1000 burn-in steps, n = 1e5).  The map's topological entropy is ln phi (Milnor & Thurston
    # 1988, from memory), but an orbit on the attracting cycle cannot show it: data-based estimates give 0.
    x = mk.logistic_symbols(100_000, 3.83, burn=1000)
    wc = counts_of(x, binary(), 10)
    for m in range(2, 9):
        assert abs(E.h_difference(wc, depth=m, method="plugin").estimate) < 1e-9
        assert wc.distinct(m) == 3
    assert E.h_difference(wc, depth=1, method="plugin").estimate == pytest.approx(math.log2(3) - E.entropy_counts(wc.counts(1)), abs=1e-12)
    growth = E.h_topological_growth(wc, depth=5)
    assert growth.estimate == 0.0
    assert mk.topological_rate([[1, 1], [1, 0]], base=None) == pytest.approx(0.481212, abs=1e-6)


# ============================================================ topological entropy
def _fibs(k):
    f = [1, 1]
    while len(f) < k:
        f.append(f[-1] + f[-2])
    return f


def test_golden_mean_word_counts_and_growth():
    # Golden-mean shift: #allowed n-words = F(n+2) (Lind & Marcus 1995, ch. 4; Cover & Thomas 2006, Problem 4.7);
    # h_top = log2 phi = 0.694241913631 bits (REFERENCE-CHECKS B1).  Parry measure sample, n = 1e5.
    x = mk.golden_mean(100_000, seed=5)
    wc = counts_of(x, binary(), 20)
    F = _fibs(30)  # F[0] = F(1)
    for n in range(1, 11):
        assert wc.distinct(n) == F[n + 1]
    est = E.h_topological_growth(wc)
    # rule: largest n with p(n+1) <= N/20 = 5000: p(17) = F(19) = 4181 -> n = 16
    assert est.depth == 16 and est.reliable
    assert est.estimate == pytest.approx(math.log2(F[18] / F[17]), abs=1e-12)  # log2(F(19)/F(18))
    assert est.estimate == pytest.approx(0.694241913631, abs=1e-6)
    # the growth rate converges geometrically; log p(n)/n only as O(1/n) (REFERENCE-CHECKS B1)
    assert math.log2(wc.distinct(16)) / 16 - 0.694241913631 > 0.01  # 0.7085 at n = 16


def test_growth_on_thue_morse_matches_oeis():
    # Thue-Morse factor complexity p(n), OEIS A005942 (Brlek 1989; de Luca & Varricchio 1989; REFERENCE-CHECKS C1).
    a005942 = [1, 2, 4, 6, 10, 12, 16, 20, 22, 24, 28, 32, 36, 40, 42, 44, 46, 48, 52, 56, 60]
    tm = np.array(thue_morse(1 << 14), dtype=np.uint8)
    wc = counts_of(tm, binary(), 20)
    for n in range(3, 20):
        est = E.h_topological_growth(wc, depth=n)
        assert est.estimate == pytest.approx(math.log2(a005942[n + 1] / a005942[n]), abs=1e-12)


def _de_bruijn(k, n):
    """Fredricksen-Kessler-Maiorana (FKM) construction of the cyclic de Bruijn sequence B(k, n)."""
    a = [0] * (k * n)
    seq = []

    def db(t, p):
        if t > n:
            if n % p == 0:
                seq.extend(a[1 : p + 1])
        else:
            a[t] = a[t - p]
            db(t + 1, p)
            for j in range(a[t - p] + 1, k):
                a[t] = j
                db(t + 1, t)

    db(1, 1)
    return seq


def test_koslicki_rule():
    # Koslicki 2011, Bioinformatics 27:1061 (truncation rule from memory; values REFERENCE-CHECKS E5).
    for n in (3, 5, 6):
        db = _de_bruijn(4, n)
        lin = np.array(db + db[: n - 1], dtype=np.uint8)  # every n-word exactly once
        est = E.h_topological_koslicki(lin, 4)
        assert est.depth == n and est.fraction_of_max == pytest.approx(1.0, abs=1e-12)
        assert est.estimate == pytest.approx(2.0, abs=1e-12)
    assert E.h_topological_koslicki(np.zeros(5000, np.uint8), 4).fraction_of_max == 0.0
    periodic = np.tile(np.arange(4, dtype=np.uint8), 1100)[:4101]
    est = E.h_topological_koslicki(periodic, 4)
    assert est.depth == 6 and est.fraction_of_max == pytest.approx(1 / 6, abs=1e-12)
    # iid uniform, one word of length 4101: 0.94486 +- 0.006 (REFERENCE-CHECKS E5)
    u = mk.iid(4101, [0.25] * 4, seed=9)
    est = E.h_topological_koslicki(u, 4)
    assert est.depth == 6 and est.fraction_of_max == pytest.approx(0.94486, abs=0.006)
    # SymbolArray input and a prefix shorter than the stream
    est2 = E.h_topological_koslicki(from_codes(dna(), mk.iid(5000, [0.25] * 4, seed=9)))
    assert est2.details["prefix"] == 4101 and "prefix of 4101" in est2.note


# ============================================================== compressor bound
def test_compressor_bound_against_stdlib():
    # Outside upper bound from the standard library's compressors (lzma, bz2, zlib).
    x = mk.bernoulli(100_000, 0.1, seed=3)
    est = E.h_compressors(x, 2)
    truth = h = -(0.1 * math.log2(0.1) + 0.9 * math.log2(0.9))  # 0.4690 bits
    assert h == pytest.approx(0.4689955936, abs=1e-9)
    # no code beats the entropy of an iid source by more than a few bits in total (Cover & Thomas 2006, ch. 5)
    assert truth - 0.01 < est.estimate < 0.75
    assert est.details["compressed_bytes"]["zlib/byte"] == len(zlib.compress(x.tobytes(), 9))
    assert est.details["compressed_bytes"]["bz2/byte"] == len(bz2.compress(x.tobytes(), 9))
    raw = np.packbits(x).tobytes()  # 1-bit packing, first symbol in the high bit (numpy.packbits convention)
    assert est.details["compressed_bytes"]["bz2/1-bit"] == len(bz2.compress(raw, 9))
    filt = [{"id": lzma.FILTER_LZMA2, "preset": 9 | lzma.PRESET_EXTREME}]
    assert est.details["compressed_bytes"]["lzma/1-bit"] == len(lzma.compress(raw, format=lzma.FORMAT_RAW, filters=filt))
    assert est.estimate == min(est.details["bits_per_symbol"].values())
    assert est.reliable


def test_two_bit_packing_round_trip():
    codes = mk.iid(1001, [0.25] * 4, seed=1)
    packed = np.frombuffer(_pack(codes, 2), np.uint8)
    bits = np.unpackbits(packed).reshape(-1, 2)
    back = (bits[:, 0] * 2 + bits[:, 1])[: codes.size]
    assert np.array_equal(back, codes)
    est = E.h_compressors(codes, 4)
    assert "2-bit" in " ".join(est.details["bits_per_symbol"]) and not est.reliable and "too short" in est.note


# ====================================================================== short data
def test_too_short_is_flagged_everywhere():
    x = mk.iid(3000, [0.25] * 4, seed=1)
    wc = counts_of(x, dna(), 6)
    d = E.h_difference(wc)
    # A^(n+1) <= 30 -> n = 1 (16 <= 30)
    assert d.depth == 1 and d.reliable
    d3 = E.h_difference(wc, depth=3)
    assert not d3.reliable and d3.note.startswith("too short: A^4 = 256 > length/100 = 30")
    tiny = counts_of(mk.iid(200, [0.25] * 4, seed=1), dna(), 3)
    t = E.h_difference(tiny)
    assert t.depth == 0 and not t.reliable and "too short" in t.note
    assert not E.h_ratio(tiny).reliable
    assert not E.h_renyi(tiny, 2).reliable
    assert not E.h_topological_growth(tiny, depth=2).reliable
    with pytest.raises(ParameterError):
        E.h_difference(wc, depth=6)  # needs 7-words, only 6 counted


# ==================================================================== intervals
def test_block_bootstrap_interval_for_rates():
    # REFERENCE-CHECKS B2: across independent chains at n = 1e5 the plug-in difference has sd 0.0035 bits;
    # the block bootstrap of one chain should find a standard error of that size and cover the truth.
    x = mk.simulate_markov(TWO_STATE, 100_000, seed=3)
    arr = from_codes(binary(), x)
    wc = count_words(arr, 12)
    truth = mk.entropy_rate(TWO_STATE)
    est = E.bootstrap_rate(E.h_difference(wc), arr, resampling=Resampling(n_boot=100, seed=1))
    assert est.low < truth < est.high
    assert 0.002 < est.details["bootstrap"]["stderr"] < 0.007
    assert "block bootstrap" in est.note and est.reliable
    assert est.to_dict()["low"] == est.low
    r2 = E.bootstrap_rate(E.h_renyi(wc, 2), arr, resampling=Resampling(n_boot=100, seed=1))
    assert r2.low < mk.renyi_rate(TWO_STATE, 2) < r2.high
    # same seed, same interval
    again = E.bootstrap_rate(E.h_difference(wc), arr, resampling=Resampling(n_boot=100, seed=1))
    assert (again.low, again.high) == (est.low, est.high)
    other = from_codes(binary(), mk.simulate_markov(TWO_STATE, 100_000, seed=4))
    with pytest.raises(InputError):
        E.bootstrap_rate(E.h_difference(wc), other, resampling=Resampling(n_boot=20))
    with pytest.raises(ParameterError):
        E.bootstrap_rate(E.h_compressors(x, 2), arr)


def test_distinct_word_count_dense_table_equals_sorting(monkeypatch):
    """Koslicki's distinct-word count: the byte-table path and the sorting path agree with ``len(set(...))``."""
    rng = np.random.default_rng(8)
    codes = rng.integers(0, 3, 4000).astype(np.int64)
    starts = np.array([0, 1000, 1001], np.int64)
    words = set()
    for a, b in ((0, 1000), (1000, 1001), (1001, 4000)):
        for i in range(a, b - 5 + 1):
            words.add(tuple(codes[i : i + 5]))
    for dense in (True, False):
        monkeypatch.setattr(topological, "_DENSE_DISTINCT", 1 if not dense else 1 << 28)
        assert E.distinct_words(codes, starts, 5, 3) == len(words)

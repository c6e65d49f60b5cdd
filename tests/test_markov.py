"""Closed forms for Markov sources and the simulators, against published values."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from fractalseq.datasets import _markov as mk
from fractalseq.errors import ParameterError

TWO_STATE = np.array([[0.9, 0.1], [0.4, 0.6]])
# DNA-like chain of REFERENCE-CHECKS A5 (rows A, C, G, T)
DNA_CHAIN = np.array(
    [[0.4, 0.1, 0.2, 0.3], [0.3, 0.3, 0.05, 0.35], [0.25, 0.25, 0.3, 0.2], [0.2, 0.2, 0.3, 0.3]]
)


def h2(p: float) -> float:
    return 0.0 if p in (0.0, 1.0) else -(p * math.log2(p) + (1 - p) * math.log2(1 - p))


# ------------------------------------------------------------ Shannon rate
def test_two_state_stationary_and_entropy_rate():
    # Cover & Thomas 2006, Elements of Information Theory, §4.2 (two-state chain, Thm 4.2.4):
    # pi = (beta, alpha)/(alpha+beta), h = [beta H(alpha) + alpha H(beta)]/(alpha+beta).
    # alpha=0.1, beta=0.4: pi = (0.8, 0.2), h = 0.5693865938 bits = 0.3946687121 nats (REFERENCE-CHECKS B2).
    np.testing.assert_allclose(mk.stationary(TWO_STATE), [0.8, 0.2], atol=1e-12)
    assert mk.entropy_rate(TWO_STATE) == pytest.approx(0.5693865938, abs=1e-9)
    assert mk.entropy_rate(TWO_STATE, base=None) == pytest.approx(0.3946687121, abs=1e-9)


@pytest.mark.parametrize("alpha,beta", [(0.2, 0.7), (0.05, 0.5), (0.5, 0.5), (0.33, 0.9)])
def test_two_state_formula(alpha, beta):
    # Cover & Thomas 2006, §4.2: the two-state closed form, for several chains.
    P = np.array([[1 - alpha, alpha], [beta, 1 - beta]])
    expect = (beta * h2(alpha) + alpha * h2(beta)) / (alpha + beta)
    assert mk.entropy_rate(P) == pytest.approx(expect, abs=1e-12)


def test_golden_mean_chain_rate_and_maximum():
    # Cover & Thomas 2006, Problem 4.7(d): [[1-p, p], [1, 0]] has h(p) = H(p)/(1+p);
    # h(1/2) = 2/3 bit; the maximum is at p = (3 - sqrt 5)/2 with h_max = log2 phi (REFERENCE-CHECKS B3).
    assert mk.entropy_rate(mk.golden_mean_matrix(0.5)) == pytest.approx(2 / 3, abs=1e-12)
    res = minimize_scalar(lambda p: -mk.entropy_rate(mk.golden_mean_matrix(p)), bounds=(0.01, 0.99),
                          method="bounded", options={"xatol": 1e-12})
    assert res.x == pytest.approx((3 - math.sqrt(5)) / 2, abs=1e-6)
    assert -res.fun == pytest.approx(0.694241914, abs=1e-8)


def test_parry_measure():
    # Lind & Marcus 1995, §13.3 (from memory): the Parry measure on the golden-mean shift has
    # P(0->1) = 1/phi^2 = 0.381966011, pi_1 = (5 - sqrt 5)/10 = 0.276393202, rate log2 phi (REFERENCE-CHECKS B1).
    P = mk.golden_mean_matrix()
    assert P[0, 1] == pytest.approx(0.381966011, abs=1e-9)
    assert mk.stationary(P)[1] == pytest.approx(0.276393202, abs=1e-9)
    assert mk.entropy_rate(P) == pytest.approx(0.694241913631, abs=1e-11)


# -------------------------------------------------------------- Rényi rate
@pytest.mark.parametrize(
    "q,expect",
    [(0.0, 1.0), (0.5, 0.795048868), (1.0, 0.569386594), (2.0, 0.297736275), (3.0, 0.227881234)],
)
def test_renyi_rate_two_state(q, expect):
    # Rached, Alajaji & Campbell 2001, IEEE Trans. Inf. Theory 47(4):1553-1561:
    # h_q = ln rho([P_ij^q])/(1-q).  With k = 1/2, D_q = h_q/ln 2 = h_q in bits (REFERENCE-CHECKS A5).
    assert mk.renyi_rate(TWO_STATE, q) == pytest.approx(expect, abs=1e-9)


def test_renyi_rate_two_state_h2_nats():
    # REFERENCE-CHECKS B4: h_2 = -ln lambda_max([[.81,.01],[.16,.36]]) = 0.206375059561 nats.
    assert mk.renyi_rate(TWO_STATE, 2, base=None) == pytest.approx(0.206375059561, abs=1e-11)


@pytest.mark.parametrize("q,expect", [(1.0, 1.901215753), (2.0, 1.841698278), (3.0, 1.785079086)])
def test_renyi_rate_dna_chain(q, expect):
    # Rached, Alajaji & Campbell 2001; REFERENCE-CHECKS A5, DNA-like chain, k = 1/2 (D_q = h_q in bits).
    assert mk.renyi_rate(DNA_CHAIN, q) == pytest.approx(expect, abs=1e-9)
    # the same chain at k = 1/3: D_q = h_q(nats)/ln 3 (REFERENCE-CHECKS A5)
    k3 = {1.0: 1.199533587, 2.0: 1.161982241, 3.0: 1.126259508}[q]
    assert mk.renyi_rate(DNA_CHAIN, q, base=3) == pytest.approx(k3, abs=1e-9)


def test_renyi_rate_is_continuous_at_one():
    # The Rényi rate tends to the Shannon rate as q -> 1 (Rached, Alajaji & Campbell 2001).
    for P in (TWO_STATE, DNA_CHAIN):
        h = mk.entropy_rate(P)
        assert mk.renyi_rate(P, 1 - 1e-6) == pytest.approx(h, abs=1e-5)
        assert mk.renyi_rate(P, 1 + 1e-6) == pytest.approx(h, abs=1e-5)


def test_golden_mean_topological_and_renyi():
    # Lind & Marcus 1995, ch. 4 (from memory): h_top of the golden-mean shift = log phi = 0.481211825060 nats.
    assert mk.topological_rate([[1, 1], [1, 0]], base=None) == pytest.approx(0.481211825060, abs=1e-12)
    # Parry measure is monofractal: every D_q = log2 phi (REFERENCE-CHECKS A6).
    for q in (0.0, 0.5, 2.0, 3.0):
        assert mk.renyi_rate(mk.golden_mean_matrix(), q) == pytest.approx(0.694241913631, abs=1e-10)
    # Chain p = 1/2: D_2 = -log2((1 + sqrt 17)/8) = 0.642981363 (REFERENCE-CHECKS A6).
    assert mk.renyi_rate(mk.golden_mean_matrix(0.5), 2) == pytest.approx(0.642981363, abs=1e-9)


# -------------------------------------------------------------- block sums
def brute_block_sum(P, n, q, m, mu):
    """ln sum_w p(w)^q by listing every word (slow, obviously correct)."""
    A = P.shape[1]
    total = 0.0
    for w in itertools.product(range(A), repeat=n):
        if n <= m:
            ctxs = [sum(c * A ** (m - 1 - i) for i, c in enumerate(w + full)) for full in itertools.product(range(A), repeat=m - n)]
            p = sum(mu[c] for c in ctxs)
        else:
            ctx = sum(c * A ** (m - 1 - i) for i, c in enumerate(w[:m]))
            p = mu[ctx]
            for x in w[m:]:
                p *= P[ctx, x]
                ctx = (ctx * A + x) % A**m
        if p > 0:
            total += p**q if q != 0 else 1.0
    return math.log(total)


@pytest.mark.parametrize("q", [0.0, 0.5, 2.0, 3.0])
def test_log_block_sum_matches_enumeration(q):
    rng = np.random.default_rng(4)
    P2 = rng.dirichlet(np.ones(3), size=9)  # order-2 chain over 3 symbols
    P2[4] = [0.5, 0.5, 0.0]  # one forbidden continuation
    P2[4] /= P2[4].sum()
    for P, m in ((TWO_STATE, 1), (DNA_CHAIN, 1), (P2, 2)):
        mu = mk.stationary(P, m)
        mu_other = np.ones(mu.size) / mu.size
        for n in (1, 2, 3, 5):
            assert mk.log_block_sum(P, n, q, m) == pytest.approx(brute_block_sum(P, n, q, m, mu), abs=1e-10)
            assert mk.log_block_sum(P, n, q, m, mu_other) == pytest.approx(brute_block_sum(P, n, q, m, mu_other), abs=1e-10)


def test_exact_block_differences_converge_to_rates():
    # REFERENCE-CHECKS A5(i): H_2(41) - H_2(40) equals h_2 to 1e-6 (we pin 1e-10: the chain mixes fast);
    # a non-stationary start gives H_2(200)/200 = 0.20527 nats.
    h2n = mk.renyi_rate(TWO_STATE, 2, base=None)
    d = mk.block_entropy_exact(TWO_STATE, 41, 2, base=None) - mk.block_entropy_exact(TWO_STATE, 40, 2, base=None)
    assert d == pytest.approx(h2n, abs=1e-10)
    assert mk.block_entropy_exact(TWO_STATE, 200, 2, initial=[1.0, 0.0], base=None) / 200 == pytest.approx(0.20527, abs=5e-6)
    # Shannon, stationary start: H_{n+1} - H_n = h exactly for n >= m (chain rule, Cover & Thomas 2006, §4.2).
    for P in (TWO_STATE, DNA_CHAIN):
        for n in (1, 4, 30):
            d = mk.block_entropy_exact(P, n + 1) - mk.block_entropy_exact(P, n)
            assert d == pytest.approx(mk.entropy_rate(P), abs=1e-12)


def test_shannon_block_entropy_matches_enumeration():
    rng = np.random.default_rng(7)
    P = rng.dirichlet(np.ones(2), size=4)  # order-2 binary chain
    mu = np.array([0.1, 0.2, 0.3, 0.4])
    for n in (1, 2, 3, 6):
        probs = []
        for w in itertools.product(range(2), repeat=n):
            if n <= 2:
                p = sum(mu[(w + f)[0] * 2 + (w + f)[1]] for f in itertools.product(range(2), repeat=2 - n))
            else:
                ctx = w[0] * 2 + w[1]
                p = mu[ctx]
                for x in w[2:]:
                    p *= P[ctx, x]
                    ctx = (ctx * 2 + x) % 4
            probs.append(p)
        probs = np.array(probs)
        expect = -(probs * np.log2(probs)).sum()
        assert mk.block_entropy_exact(P, n, initial=mu) == pytest.approx(expect, abs=1e-12)


# --------------------------------------------------------------- simulators
def test_simulate_markov_is_deterministic_and_matches_the_chain():
    a = mk.simulate_markov(DNA_CHAIN, 200_000, seed=11)
    b = mk.simulate_markov(DNA_CHAIN, 200_000, seed=11)
    c = mk.simulate_markov(DNA_CHAIN, 200_000, seed=12)
    assert a.dtype == np.uint8 and a.shape == (200_000,)
    assert np.array_equal(a, b) and not np.array_equal(a, c)
    pairs = np.zeros((4, 4))
    np.add.at(pairs, (a[:-1], a[1:]), 1)
    est = pairs / pairs.sum(axis=1, keepdims=True)
    # binomial sd of a transition frequency is below 0.0025 here; 5 sd
    np.testing.assert_allclose(est, DNA_CHAIN, atol=0.0125)
    np.testing.assert_allclose(np.bincount(a, minlength=4) / a.size, mk.symbol_marginal(DNA_CHAIN), atol=0.01)


def test_simulate_order_two_chain_and_forbidden_transition():
    P = np.array([[0.7, 0.3], [0.2, 0.8], [0.5, 0.5], [1.0, 0.0]])  # context "11" is always followed by 0
    x = mk.simulate_markov(P, 100_000, seed=3)
    triples = x[:-2] * 4 + x[1:-1] * 2 + x[2:]
    cnt = np.bincount(triples, minlength=8).reshape(4, 2)
    assert cnt[3, 1] == 0  # "111" never occurs
    np.testing.assert_allclose(cnt / cnt.sum(axis=1, keepdims=True), P, atol=0.015)
    assert mk.entropy_rate(P) == pytest.approx(
        float(mk.stationary(P) @ np.array([h2(0.3), h2(0.2), h2(0.5), 0.0])), abs=1e-12
    )


def test_golden_mean_bernoulli_and_iid():
    g = mk.golden_mean(100_000, seed=1)
    assert not np.any((g[:-1] == 1) & (g[1:] == 1))
    # Parry measure: pi_1 = 0.276393202 (Lind & Marcus 1995, §13.3, from memory); 5 sd ~ 0.007 with correlation
    assert g.mean() == pytest.approx(0.276393202, abs=0.007)
    b = mk.bernoulli(100_000, 0.3, seed=2)
    assert b.mean() == pytest.approx(0.3, abs=0.0075)
    u = mk.iid(100_000, [0.1, 0.2, 0.3, 0.4], seed=2)
    np.testing.assert_allclose(np.bincount(u, minlength=4) / u.size, [0.1, 0.2, 0.3, 0.4], atol=0.0075)
    assert np.array_equal(mk.iid(1000, [0.5, 0.0, 0.5], seed=5) != 1, np.ones(1000, bool))


def test_logistic_symbols():
    # r = 3.83 is inside the period-3 window (starts at 1 + sqrt 8 = 3.828427125): the attracting
    # 3-cycle {0.156, 0.505, 0.957} gives symbols (011) repeated (Li & Yorke 1975; REFERENCE-CHECKS B7).
    s = mk.logistic_symbols(3000, 3.83, x0=0.3, burn=1000)
    period = s[:3]
    assert sorted(period.tolist()) == [0, 1, 1]
    assert np.array_equal(s, np.tile(period, 1000))
    # r = 4: P(symbol 1) = 1/2 (invariant density 1/(pi sqrt(x(1-x))); Ulam & von Neumann 1947, from memory)
    assert mk.logistic_symbols(200_000, 4.0).mean() == pytest.approx(0.5, abs=0.006)


def test_bad_input():
    with pytest.raises(ParameterError):
        mk.stationary(np.array([[0.5, 0.6], [0.5, 0.5]]))
    with pytest.raises(ParameterError):
        mk.chain_shape(np.ones((3, 2)) / 2)
    with pytest.raises(ParameterError):
        mk.logistic_symbols(10, 4.5)
    with pytest.raises(ParameterError):
        mk.golden_mean_matrix(1.5)
    with pytest.raises(ParameterError):
        mk.simulate_markov(TWO_STATE, 10, initial=[0.3, 0.3])

"""The geometry/information table: D_q log2(1/k) from box counting beside h_q from word statistics."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fractalseq import alphabet as al
from fractalseq.datasets import _markov as markov
from fractalseq.dimensions._consistency import (
    CONSISTENT,
    INCONSISTENT,
    NOT_APPLICABLE,
    TOO_LITTLE,
    conditional_rates,
    consistency_table,
    verdict,
)
from fractalseq.errors import InputError, ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.resampling import Resampling
from fractalseq.stream import from_codes

BIN = al.binary()
DNA = al.dna()
P2 = np.array([[0.9, 0.1], [0.4, 0.6]])


@pytest.fixture(scope="module")
def markov_table():
    arr = from_codes(BIN, markov.simulate_markov(P2, 100_000, seed=31))
    return arr, consistency_table(arr, qs=(0, 1, 2), offsets=4, resampling=Resampling(n_boot=60, seed=1))


def test_reusing_the_spectrum_pass_gives_the_same_table(markov_table):
    """The profile hands the table the spectrum's conditional rates and depth limit; nothing may change.

    Same blocks and seed, so the same replicates: the rows must equal those computed from scratch.
    """
    from fractalseq.dimensions._consistency import RateResult
    from fractalseq.dimensions._spectrum import dimension_spectrum

    arr, _ = markov_table
    spec = dimension_spectrum(arr, (0.0, 1.0, 2.0, 3.0), rates=True, resampling=Resampling(n_boot=60, seed=1))
    info = RateResult(tuple(r for r in spec.rates if r.q in (0.0, 1.0, 2.0)), spec.block, 60, 1, len(arr))
    reused = consistency_table(arr, qs=(0, 1, 2), offsets=0, information=info, levels=spec.data_limit,
                               resampling=Resampling(n_boot=60, seed=1, block_length=spec.block))
    fresh = consistency_table(arr, qs=(0, 1, 2), offsets=0, resampling=Resampling(n_boot=60, seed=1, block_length=spec.block))
    assert to_json([r.to_dict() for r in reused.rows]) == to_json([r.to_dict() for r in fresh.rows])
    with pytest.raises(ParameterError, match="another stream"):
        consistency_table(from_codes(BIN, arr.codes[: len(arr) // 2]), qs=(0, 1, 2), information=info,
                          resampling=Resampling.none())


def test_stationary_markov_chain_is_consistent(markov_table):
    """Theory: D_q log2(1/k) = h_q for non-overlapping maps; both sides agree for a stationary chain."""
    _, res = markov_table
    for row in res.rows:
        assert row.verdict == CONSISTENT, row
        assert row.geometry_bits == pytest.approx(row.dimension, abs=1e-12)  # k = 1/2: log2(1/k) = 1


def test_information_side_against_closed_forms(markov_table):
    """h_1 = [b H(a) + a H(b)]/(a + b) = 0.5693865938 bits (Cover & Thomas 2006, §4.2; REFERENCE-CHECKS B2);

    h_2 = -ln lambda_max([[.81, .01], [.16, .36]]) = 0.206375060 nats (Rached, Alajaji & Campbell 2001; B4).
    Tolerance: the interval widened by 3 bootstrap standard errors (a clear failure only); h_0 = 1 exactly.
    """
    _, res = markov_table
    truth = {0: 1.0, 1: 0.5693865938, 2: 0.206375059561 / math.log(2)}
    for q, value in truth.items():
        r = res.information.get(q)
        slack = 3 * (r.stderr or 0) + 1e-9  # 1e-9: exact counts give zero-width intervals, up to rounding
        assert r.low - slack <= value <= r.high + slack, (q, r)
        assert r.order is not None and r.order >= 1
    # geometry is box counting of the point cloud, information comes from word counts
    assert "box counting (aligned grid)" in res.geometry.dims[0].method
    assert res.information.rates[1].method.startswith("conditional form")
    # the shifted-grid column is reported beside it (lattice bias of 1-3% allowed: REFERENCE-CHECKS A1)
    for row in res.rows:
        assert row.shifted_bits == pytest.approx(row.information_bits, rel=0.03)
        assert row.shifted_bits == pytest.approx(truth[row.q], rel=0.03)


def test_grid_that_does_not_tile_the_cylinders_is_caught():
    """k = 0.4, two symbols: the maps do not overlap, but boxes of side 0.4^m anchored at 0 cut across the

    cylinders ((1-k)/k = 1.5 is not whole), so box counting is biased (REFERENCE-CHECKS A1: misaligned grids
    are off by 1-3% over a few levels) while h_1 = 1 bit exactly for fair coin flips.  The table must say so.
    """
    arr = from_codes(BIN, markov.bernoulli(100_000, 0.5, seed=2))
    res = consistency_table(arr, qs=(1, 2), ratio=0.4, offsets=0, resampling=Resampling(n_boot=60, seed=0))
    assert any("does not tile" in f for f in res.flags)
    assert res.get(1).verdict == INCONSISTENT
    assert res.get(1).information_low <= 1.0 <= res.get(1).information_high
    assert res.get(1).geometry_low > 1.0  # the misaligned grid reads the dimension high
    assert math.isnan(res.get(1).shifted_bits)  # offsets=0: no shifted column


def test_same_seed_same_table(markov_table):
    arr, res = markov_table
    again = consistency_table(arr, qs=(0, 1, 2), offsets=4, resampling=Resampling(n_boot=60, seed=1))
    assert to_json(res.to_dict()) == to_json(again.to_dict())


def test_golden_mean_rates_by_conditional_form():
    """Golden-mean chain [[1/2,1/2],[1,0]]: h_0 = log2 phi (Lind & Marcus 1995, ch. 4), h_1 = 2/3 bit

    (Cover & Thomas 2006, Problem 4.7: H(p)/(1+p) at p = 1/2), h_2 = 0.642981363 bits (REFERENCE-CHECKS A6).
    """
    arr = from_codes(BIN, markov.golden_mean(200_000, seed=9, p=0.5))
    res = conditional_rates(arr, qs=(0, 1, 2), resampling=Resampling(n_boot=60, seed=2))
    phi = (1 + math.sqrt(5)) / 2
    assert res.get(0).estimate == pytest.approx(math.log2(phi), abs=2e-3)
    assert res.get(1).estimate == pytest.approx(2 / 3, abs=0.01)
    assert res.get(2).estimate == pytest.approx(0.642981363, abs=0.015)
    # h_1 and h_2 intervals hold the closed forms within 3 bootstrap standard errors (a clear failure only);
    # h_0: exact counts, the interval is the finite-order bracket around log2 phi
    for r, value in zip(res.rates, (math.log2(phi), 2 / 3, 0.642981363)):
        slack = 3 * (r.stderr if math.isfinite(r.stderr) else 0.0) + 2e-3
        assert r.low - slack <= value <= r.high + slack, r


def test_overlapping_maps_are_not_applicable():
    arr = from_codes(BIN, markov.bernoulli(20_000, 0.5, seed=3))
    res = consistency_table(arr, qs=(0, 1), ratio=0.6, offsets=2, resampling=Resampling.none())
    assert all(r.verdict == NOT_APPLICABLE for r in res.rows)
    assert res.flags and "overlap" in res.flags[0]


def test_short_stream_is_too_little_data():
    arr = from_codes(BIN, markov.bernoulli(200, 0.5, seed=3))
    res = consistency_table(arr, qs=(1, 2), offsets=2, resampling=Resampling.none())
    assert all(r.verdict == TOO_LITTLE for r in res.rows)


def test_verdict_rule():
    assert verdict(0.1, 0.2, 0.15, 0.3) == CONSISTENT
    assert verdict(0.1, 0.2, 0.2 + 1e-12, 0.3) == CONSISTENT  # exact counts give zero-width intervals
    assert verdict(0.1, 0.2, 0.25, 0.3) == INCONSISTENT
    assert verdict(0.1, float("nan"), 0.25, 0.3) == TOO_LITTLE


def test_consistency_errors():
    with pytest.raises(InputError):
        consistency_table(from_codes(BIN, np.zeros(20, np.uint8)))
    with pytest.raises(ParameterError):
        consistency_table(from_codes(BIN, markov.bernoulli(5000, 0.5, seed=1)), ratio=0.0)


def test_one_home_for_the_renyi_rate():
    """h_2 by the dimensions' conditional form and by entropy.h_renyi are the same number at the same order.

    Both use the collision estimator sum c(c-1)/(N(N-1)) (unbiased for sum p^2; REFERENCE-CHECKS E4) and the
    one rate function entropy.renyi_rate_bits; the value is h_2 of the chain, 0.206375060 nats
    (Rached, Alajaji & Campbell 2001; REFERENCE-CHECKS B4).
    """
    from fractalseq.entropy import h_renyi
    from fractalseq.words._counts import count_words

    arr = from_codes(BIN, markov.simulate_markov(P2, 100_000, seed=31))
    wc = count_words(arr, 6)
    for n in (2, 4):
        a = conditional_rates(arr, qs=(2,), order=n, resampling=Resampling.none()).get(2)
        b = h_renyi(wc, 2, depth=n)
        assert a.order == b.depth == n
        # the collision sums themselves are computed by log-gamma (dimensions) and by products (entropy):
        # equal up to rounding
        assert a.estimate == pytest.approx(b.estimate, rel=1e-8)
        assert a.estimate == pytest.approx(0.206375059561 / math.log(2), abs=0.01)

"""The replicate count spectra equal the direct sums of weighted block tables.

Reference: the definition of the non-overlapping block bootstrap (Carlstein
1986, Ann. Statist. 14:1171): a replicate's table is the sum of the tables of
the blocks drawn, each as often as it was drawn.  The direct sum is written
here with numpy only (``np.bincount`` per block), independent of the kernels.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.resampling import _bootstrap as bs
from fractalseq.resampling import _replicates as rp
from fractalseq.dimensions import _spectrum as sp
from fractalseq.resampling import Resampling
from fractalseq.stream import from_codes


def direct_spectra(labels, span, ell, weights):
    """Replicate count spectra by summing weighted per-block bincounts (slow, obvious)."""
    T = labels.size
    m = int(labels.max()) + 1
    B = -(-T // ell)
    tabs = []
    for b in range(B):
        a, e = b * ell, min((b + 1) * ell, T)
        lab = labels[a : max(e - span + 1, a)]
        tabs.append(np.bincount(lab[lab >= 0], minlength=m))
    out = []
    for w in weights:
        tot = sum(int(w[b]) * tabs[b] for b in range(B))
        vals, mult = np.unique(tot[tot > 0], return_counts=True)
        out.append(dict(zip(vals.tolist(), mult.tolist())))
    return out


def as_dict(spec: rp.ReplicateSpectra, r: int) -> dict:
    v, m = spec.spectrum(r)
    d: dict = {}
    for a, b in zip(v.tolist(), m.tolist()):
        d[a] = d.get(a, 0) + b
    return d


@settings(max_examples=40, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    T=st.integers(30, 3000),
    depth=st.integers(1, 7),
    ell=st.integers(3, 400),
    cap=st.sampled_from([2, 5, 64, 1024]),
    order=st.integers(0, 3),
)
def test_spectra_equal_direct_sums(seed, T, depth, ell, cap, order):
    rng = np.random.default_rng(seed)
    # low-entropy streams too (order > 0 repeats a short motif) so that counts reach the cap
    codes = rng.integers(0, 4, T) if order == 0 else np.tile(rng.integers(0, 4, 3 + order), T)[:T]
    starts = sorted({0, *rng.integers(0, T, 2).tolist()})
    arr = from_codes(al.dna(), codes, starts=starts)
    labels, words = bs.word_labels(arr, depth)
    if words.size == 0:
        return
    plan = bs.make_plan(T, ell, 7, seed=seed)
    W = plan.block_weights()
    tables = rp.item_tables(labels, depth, plan.block_length, words.size)
    spec = rp.replicate_spectra(tables, W, cap=cap)
    want = direct_spectra(labels, depth, plan.block_length, W)
    for r in range(W.shape[0]):
        assert as_dict(spec, r) == want[r]


def test_item_tables_sum_to_the_counts_of_words_inside_blocks():
    rng = np.random.default_rng(5)
    arr = from_codes(al.dna(), rng.integers(0, 4, 5000), starts=[0, 999])
    labels, words = bs.word_labels(arr, 4)
    tabs = rp.item_tables(labels, 4, 250, words.size)
    ones = np.ones((1, tabs.n_blocks), dtype=np.int64)
    spec = rp.replicate_spectra(tabs, ones)
    assert as_dict(spec, 0) == direct_spectra(labels, 4, 250, ones)[0]
    per_item = np.add.reduceat(tabs.counts, tabs.row_ptr[:-1]) if tabs.counts.size else np.zeros(0)
    # every word occurrence lies inside some block except those straddling a block edge (at most 3 per edge)
    full = np.bincount(labels[labels >= 0], minlength=words.size)
    assert (per_item <= full).all() and full.sum() - per_item.sum() <= 3 * (tabs.n_blocks - 1)


def test_level_vectors_equal_level_stats_of_the_direct_tables():
    """The replicate level vectors equal :func:`level_stats` of each directly summed table."""
    rng = np.random.default_rng(11)
    arr = from_codes(al.dna(), rng.integers(0, 4, 20000))
    labels, words = bs.word_labels(arr, 6)
    plan = bs.make_plan(len(arr), 500, 12, seed=2)
    qs = np.array([-1.0, 0.0, 1.0, 2.0, 3.5])
    got = sp.replicate_vectors(labels, 6, words.size, plan, qs, True)
    W = plan.block_weights()
    B = W.shape[1]
    for r in range(W.shape[0]):
        tot = np.zeros(words.size, np.int64)
        for b in range(B):
            a, e = b * 500, min((b + 1) * 500, len(arr))
            lab = labels[a : e - 5]
            tot += W[r, b] * np.bincount(lab[lab >= 0], minlength=words.size)
        want = sp.level_stats(tot, None, qs, True).vector()
        assert np.allclose(got[r], want, rtol=1e-12, atol=1e-12, equal_nan=True)


def test_batch_replicate_rates_equal_one_replicate_at_a_time():
    """Vectorised replicate entropy rates equal :func:`rate_from_counts` on each replicate's spectrum.

    The per-replicate path is checked against scipy elsewhere (tests/test_entropy.py); here the two routes must agree.
    """
    from fractalseq.entropy import _estimators as E

    rng = np.random.default_rng(21)
    codes = rng.integers(0, 4, 30000)
    codes[10000:12000] = 1  # a run: large counts land in the "big" part of the spectra
    arr = from_codes(al.dna(), codes, starts=[0, 777])

    def stat(t):
        return [E.rate_from_counts(t[3], t[4], m) for m in E.METHODS]

    def batch(specs):
        return np.column_stack([E.replicate_rates(specs[3], specs[4], m) for m in E.METHODS])

    one = bs.block_bootstrap(arr, (3, 4), stat, spectra=True, resampling=Resampling(n_boot=30, seed=4, block_length=600))
    many = bs.block_bootstrap(arr, (3, 4), stat, spectra=True, batch_statistic=batch,
                              resampling=Resampling(n_boot=30, seed=4, block_length=600))
    assert np.allclose(one.replicates, many.replicates, rtol=1e-12, atol=1e-12)
    assert np.array_equal(one.estimate, many.estimate)
    spec = rp.replicate_spectra(rp.item_tables(*bs.word_labels(arr, 4)[:1], 4, 600), bs.make_plan(len(arr), 600, 5).block_weights(), cap=8)
    for r in range(5):
        v, m = spec.spectrum(r)
        assert E.replicate_entropies(spec, "plugin")[r] == pytest.approx(E.entropy_counts(rp.CountSpectrum(v, m), "plugin", None), rel=1e-12)

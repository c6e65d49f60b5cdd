"""Property tests of the predictor: mergeable fitting and probabilities that always sum to one."""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.words._pieces import count_piece, iter_pieces
from fractalseq.predict._online import online_code_length
from fractalseq.predict._params import baseline_orders
from fractalseq.predict._predictor import CellPredictor
from fractalseq.stream import from_codes

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def streams(draw):
    A = draw(st.sampled_from([2, 3, 4, 5]))
    n = draw(st.integers(1, 600))
    codes = np.array(draw(st.lists(st.integers(0, A - 1), min_size=n, max_size=n)), dtype=np.uint8)
    starts = sorted(set(draw(st.lists(st.integers(0, n - 1), max_size=5))) | {0})
    depths = tuple(sorted(set(draw(st.lists(st.integers(1, 9), min_size=1, max_size=4)))))
    alphabet = al.dna() if A == 4 and draw(st.booleans()) else al.from_symbols("abcde"[:A])
    return alphabet, codes, np.array(starts, dtype=np.int64), depths


def same_model(a: CellPredictor, b: CellPredictor) -> None:
    assert a.depths_ == b.depths_
    for n in a.depths_:
        assert np.array_equal(a.cells_[n], b.cells_[n])
        assert np.array_equal(a.counts_[n].dense(a.alphabet_.size), b.counts_[n].dense(b.alphabet_.size))
    assert a.n_symbols_ == b.n_symbols_
    assert a.baseline_order_ == b.baseline_order_
    assert a.concentration_ == b.concentration_ and a.discount_ == b.discount_


@SETTINGS
@given(streams(), st.data())
def test_fitting_segments_apart_and_merging_equals_fitting_the_whole(case, data):
    alphabet, codes, starts, depths = case
    whole = CellPredictor(depths=depths).fit(from_codes(alphabet, codes, starts))
    # split at a segment start: the two parts share no context
    cut = int(data.draw(st.sampled_from(starts.tolist() + [len(codes)])))
    parts = []
    for lo, hi in ((0, cut), (cut, len(codes))):
        if hi > lo:
            sub = starts[(starts > lo) & (starts < hi)] - lo
            parts.append(CellPredictor(depths=depths).fit(from_codes(alphabet, codes[lo:hi], sub)))
    merged = parts[0] if len(parts) == 1 else parts[0].merge(parts[1])
    same_model(merged, whole)


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(streams(), st.integers(60, 300))
def test_fitting_overlapping_chunks_and_merging_equals_fitting_the_whole(case, chunk):
    # arbitrary cut points: each chunk is counted with its lookahead (fractalseq.jobs._engines) so no word is lost
    alphabet, codes, starts, depths = case
    arr = from_codes(alphabet, codes, starts)
    whole = CellPredictor(depths=depths).fit(arr)
    depth = max(max(depths), baseline_orders(alphabet)) + 1
    merged = None
    for piece in iter_pieces(arr, chunk, depth - 1):
        part = CellPredictor(depths=depths).fit_counts(count_piece((piece, depth)))
        merged = part if merged is None else merged.merge(part)
    same_model(merged, whole)


@SETTINGS
@given(streams(), st.lists(st.lists(st.integers(0, 4), max_size=25), min_size=1, max_size=8))
def test_fitted_probabilities_sum_to_one(case, contexts):
    alphabet, codes, starts, depths = case
    model = CellPredictor(depths=depths).fit(from_codes(alphabet, codes, starts))
    ctx = [[c % alphabet.size for c in ctx] for ctx in contexts]
    p = model.predict_proba(ctx)
    assert p.shape == (len(ctx), alphabet.size)
    assert np.all(p > 0)
    assert np.allclose(p.sum(axis=1), 1.0, rtol=0, atol=1e-12)


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(streams())
def test_online_probabilities_sum_to_one(case):
    # the state before the last symbol does not depend on it: the A alternatives' probabilities add to one
    alphabet, codes, starts, depths = case
    total = 0.0
    for s in range(alphabet.size):
        y = codes.copy()
        y[-1] = s
        r = online_code_length(from_codes(alphabet, y, starts), depths=depths, keep_surprisal=True, max_cells=1 << 12)
        total += 2.0 ** -float(r.surprisal[-1])
    assert abs(total - 1.0) < 1e-5

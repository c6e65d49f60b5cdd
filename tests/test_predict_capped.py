"""The cell cap applied while the fitted tables are built keeps exactly the cells that pruning at the end keeps.

The reference is the plain rule of :func:`fractalseq.predict._cells.prune_cells` applied to the
whole uncut tables (rarest totals first, deepest depth first, hash order in the class cut), on
random DNA with planted repeats (so several total classes exist) and both strands or one.
"""

import numpy as np
import pytest

from fractalseq.alphabet import dna
from fractalseq.errors import ParameterError
from fractalseq.predict import CellPredictor
from fractalseq.predict._cells import capped_cell_tables, cell_tables, prune_cells
from fractalseq.stream import from_codes
from fractalseq.words._counts import count_words

DEPTHS = [0, 1, 2, 3, 4, 6, 8, 11]
K_B = 4


def _words(seed: int, length: int):
    rng = np.random.default_rng(seed)
    codes = rng.integers(0, 4, length)
    codes[length // 2 : length // 2 + 2000] = codes[:2000]  # a planted repeat: cells seen twice or more
    return count_words(from_codes(dna(), codes), 12)


@pytest.mark.parametrize("reverse", [False, True])
@pytest.mark.parametrize("seed", [1, 2])
def test_cap_while_building_equals_cap_at_the_end(seed, reverse):
    wc = _words(seed, 12_000)
    full = cell_tables(wc, DEPTHS, reverse)
    total = sum(t.size for t in full.values())
    fixed = sum(full[n].size for n in DEPTHS if n <= K_B)
    for cap in (total + 3, total, total - 1, total // 2, total // 4, fixed + 1, fixed):
        ref, ref_dropped = prune_cells(full, K_B, cap)
        built, dropped = capped_cell_tables(wc, DEPTHS, reverse, K_B, cap)
        got, more = prune_cells(built, K_B, cap)
        assert dropped + more == ref_dropped == max(0, total - cap)
        for n in DEPTHS:
            for field in ("cells", "ptr", "syms", "counts"):
                a, b = getattr(ref[n], field), getattr(got[n], field)
                assert a.dtype == b.dtype and np.array_equal(a, b), (cap, n, field)


def test_cap_below_the_baseline_cells_is_refused_alike():
    wc = _words(3, 6_000)
    fixed = sum(t.size for n, t in cell_tables(wc, DEPTHS, True).items() if n <= K_B)
    with pytest.raises(ParameterError, match="raise max_cells"):
        capped_cell_tables(wc, DEPTHS, True, K_B, fixed - 1)


def test_fit_with_a_binding_cap_stores_the_cap_and_scores():
    codes = np.random.default_rng(4).integers(0, 4, 20_000)
    src = from_codes(dna(), codes)
    whole = CellPredictor(max_depth=16).fit(src)
    cap = whole.n_cells_ - 30_000
    model = CellPredictor(max_depth=16, max_cells=cap).fit(src)
    assert whole.pruned_cells_ == 0 and model.n_cells_ == cap and model.pruned_cells_ == 30_000
    # log-loss of uniform random DNA under any proper model is at least the 2 bits/base of its source
    assert model.bits_per_symbol(from_codes(dna(), np.random.default_rng(5).integers(0, 4, 5_000))) > 1.9

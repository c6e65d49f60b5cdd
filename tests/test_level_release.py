"""The spectrum's own deep counts are dropped once read, with the same level statistics.

An invariance check of this code base (no outside fact): the levels' statistics, variances,
replicates and batch-means covariance are the same bits whether the deep word counts are kept
to the end or released (truncated to the levels read, then discarded) before the passes over
the stream.  The covariance itself is held against ``numpy.cov`` in ``tests/test_part_tally.py``.
"""

from __future__ import annotations

import numpy as np
import pytest

from fractalseq import alphabet as al
from fractalseq.dimensions import _spectrum as sp
from fractalseq.errors import ParameterError
from fractalseq.resampling import _bootstrap as bs
from fractalseq.stream import SymbolArray


def _stream(T: int, seed: int) -> SymbolArray:
    """An invented order-1 Markov stream over ACGT, three segments."""
    rng = np.random.default_rng(seed)
    P = np.array([[0.6, 0.2, 0.1, 0.1], [0.2, 0.5, 0.2, 0.1], [0.1, 0.2, 0.4, 0.3], [0.3, 0.3, 0.2, 0.2]])
    cum = P.cumsum(axis=1)
    u = rng.random(T)
    codes = np.empty(T, np.uint8)
    s = 0
    for t in range(T):
        s = min(int(np.searchsorted(cum[s], u[t])), 3)
        codes[t] = s
    return SymbolArray(al.dna(), codes, np.array([0, T // 3, T // 3 + 5], dtype=np.int64))


@pytest.mark.parametrize("n_boot", [0, 12])
def test_released_counts_give_the_same_levels(n_boot):
    arr = _stream(30_000, 3)
    qs = np.array([-1.0, 0.0, 1.0, 2.0])
    kept = sp._counts_for(arr, sp.STARVE, None, None)
    own = sp._counts_for(arr, sp.STARVE, None, None)
    probe = sp._word_level_data(kept, None, qs, 0.5, kept.depth, sp.STARVE, 0, 1, None, "nonoverlapping", True,
                                variances=False)
    top = probe.data_limit + 1
    assert 2 <= top < kept.depth  # the release truncates before it discards
    block = bs.resolve_block(arr, top, None, "nonoverlapping")
    args = (qs, 0.5, top, sp.STARVE, n_boot, 7, block, "nonoverlapping", True, block)
    a = sp._word_level_data(kept, arr, *args)
    b = sp._word_level_data(own, arr, *args, release=True)
    for name in ("x", "eps", "est", "reps", "distinct", "occurrences", "unseen", "var", "dvar", "cov"):
        va, vb = getattr(a, name), getattr(b, name)
        assert (va is None) == (vb is None), name
        if va is not None:
            assert va.dtype == vb.dtype and va.shape == vb.shape and va.tobytes() == vb.tobytes(), name
    assert a.cov is not None and (n_boot == 0) == (a.reps is None)
    kept.words(top)  # still usable
    with pytest.raises(ParameterError):
        own.words(1)  # released

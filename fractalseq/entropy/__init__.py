"""Entropy of a symbolic source: block entropies, entropy rates, Rényi and topological rates, LZ76, bounds,
permutation entropy of ordinal patterns.

Every estimate is an :class:`EntropyEstimate` in bits (per symbol for rates),
with an interval where one is computed and ``reliable=False`` plus a note when
the stream is too short for the depth asked.  The Rényi rate h_q has one home,
:func:`renyi_rate_bits` (``_renyi_rates``), which every h_q of the package uses.
"""

from fractalseq.entropy._compressors import h_compressors
from fractalseq.entropy._entropy_estimate import EntropyEstimate
from fractalseq.entropy._lz import h_lz76, lz76_complexity, lz76_phrases
from fractalseq.entropy._rate_estimators import bootstrap_rate, h_difference, h_ratio
from fractalseq.entropy._renyi_rates import RateEstimate, h_renyi, renyi_rate_bits, renyi_rate_from_counts
from fractalseq.entropy._shannon import block_entropies, block_entropy, entropy_table, grassberger_g, rate_from_counts
from fractalseq.entropy._topological import h_topological_growth, h_topological_koslicki

__all__ = [
    "EntropyEstimate", "RateEstimate", "block_entropies", "block_entropy", "bootstrap_rate", "entropy_table",
    "grassberger_g", "h_compressors", "h_difference", "h_lz76", "h_ratio", "h_renyi", "h_topological_growth",
    "h_topological_koslicki", "lz76_complexity", "lz76_phrases", "rate_from_counts", "renyi_rate_bits",
    "renyi_rate_from_counts",
]
from fractalseq.entropy._ordinal import (  # noqa: E402,F401
    OrdinalEntropy, ordinal_patterns, permutation_entropy, permutation_entropy_of_codes, permutation_entropy_orders,
)

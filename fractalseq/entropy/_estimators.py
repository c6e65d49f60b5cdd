"""The entropy estimators under one module name (each lives in the module of its job).

Shannon estimators and block entropies: :mod:`fractalseq.entropy._shannon`;
Rényi entropies and rates: :mod:`fractalseq.entropy._renyi_rates`; Shannon
entropy rates and their intervals: :mod:`fractalseq.entropy._rate_estimators`;
topological entropy: :mod:`fractalseq.entropy._topological`; compressor bound:
:mod:`fractalseq.entropy._compressors`; the result: :mod:`fractalseq.entropy._entropy_estimate`.
"""

from __future__ import annotations

from fractalseq.entropy._compressors import COMPRESS_MAX_LENGTH, h_compressors
from fractalseq.entropy._entropy_estimate import LN2, EntropyEstimate
from fractalseq.entropy._rate_estimators import bootstrap_rate, h_difference, h_ratio
from fractalseq.entropy._renyi_rates import (
    RateEstimate,
    h_renyi,
    log_power_sum,
    renyi_counts,
    renyi_rate_bits,
    renyi_rate_from_counts,
)
from fractalseq.entropy._shannon import (
    METHODS,
    SAMPLES_PER_WORD,
    as_spectrum,
    block_entropies,
    block_entropy,
    choose_depth,
    entropy_counts,
    entropy_table,
    grassberger_g,
    method_name,
    rate_from_counts,
    ratio_from_counts,
    replicate_entropies,
    replicate_rates,
)
from fractalseq.entropy._topological import (
    SAMPLES_PER_SEEN_WORD,
    distinct_words,
    h_topological_growth,
    h_topological_koslicki,
)

__all__ = [
    "COMPRESS_MAX_LENGTH", "EntropyEstimate", "LN2", "METHODS", "RateEstimate", "SAMPLES_PER_SEEN_WORD",
    "SAMPLES_PER_WORD", "as_spectrum", "block_entropies", "block_entropy", "bootstrap_rate", "choose_depth",
    "distinct_words", "entropy_counts", "entropy_table", "grassberger_g", "h_compressors", "h_difference",
    "h_ratio", "h_renyi", "h_topological_growth", "h_topological_koslicki", "log_power_sum", "method_name",
    "rate_from_counts", "ratio_from_counts", "renyi_counts", "renyi_rate_bits", "renyi_rate_from_counts",
    "replicate_entropies", "replicate_rates",
]

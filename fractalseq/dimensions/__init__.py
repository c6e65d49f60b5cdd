"""Generalized (Rényi) dimensions D_q of the encoded point cloud.

Two routes: the *word route* (:func:`dimension_spectrum`), exact for
non-overlapping maps, reads box masses off word counts; the *box route*
(:func:`geometric_spectrum`) counts boxes of any point cloud.  Both share the
per-level statistics (``_levels``), their count-based variances
(``_level_variance``), the scaling fit (``_scaling_fit``) and the results
(``_spectrum_results``).  The consistency table (:func:`consistency_table`)
checks D_q = h_q / ln(1/k) between them.
"""

from fractalseq.dimensions._consistency import (
    CONSISTENT,
    INCONSISTENT,
    NOT_APPLICABLE,
    TOO_LITTLE,
    ConsistencyResult,
    ConsistencyRow,
    RateResult,
    conditional_rates,
    consistency_table,
    verdict,
)
from fractalseq.dimensions._geometry import box_counts, default_scales, geometric_spectrum
from fractalseq.dimensions._level_variance import box_influence, word_level_variances
from fractalseq.dimensions._levels import LevelStats, level_stats
from fractalseq.dimensions._parameters import NEGATIVE_Q, OVERLAP
from fractalseq.dimensions._spectrum import binomial_dimension, dimension_spectrum
from fractalseq.dimensions._spectrum_results import DimensionEstimate, FAlphaPoint, SpectrumResult

__all__ = [
    "CONSISTENT", "ConsistencyResult", "ConsistencyRow", "DimensionEstimate", "FAlphaPoint", "INCONSISTENT",
    "LevelStats", "NEGATIVE_Q", "NOT_APPLICABLE", "OVERLAP", "RateResult", "SpectrumResult", "TOO_LITTLE",
    "binomial_dimension", "box_counts", "box_influence", "conditional_rates", "consistency_table", "default_scales",
    "dimension_spectrum", "geometric_spectrum", "level_stats", "verdict", "word_level_variances",
]

"""Block bootstrap of stream statistics without recounting.

Word counts add, so blocks are counted once and each replicate is a weighted
sum of block tables; symmetric statistics go further and use the count
spectra of all replicates at once (:mod:`fractalseq.resampling._replicates`).
"""

from fractalseq.resampling._bootstrap import (
    BlockLength,
    BootstrapResult,
    ResamplePlan,
    block_bootstrap,
    choose_block_length,
    make_plan,
    politis_white,
)
from fractalseq.resampling._replicates import CountSpectrum, ReplicateSpectra, replicate_spectra

__all__ = [
    "BlockLength", "BootstrapResult", "CountSpectrum", "ReplicateSpectra", "ResamplePlan", "block_bootstrap",
    "choose_block_length", "make_plan", "politis_white", "replicate_spectra",
]

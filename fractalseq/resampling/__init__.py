"""Block bootstrap of stream statistics without recounting.

Word counts add, so blocks are counted once and each replicate is a weighted
sum of block tables (``_word_labels``, ``_block_tables``); symmetric
statistics go further and use the count spectra of all replicates at once
(``_replicates``).  Which blocks a replicate draws is ``_plan``, how long
they are ``_block_length``, intervals ``_intervals``; ``_bootstrap`` runs it all.  The
settings of a bootstrap travel as one validated :class:`Resampling` (``_options``).
"""

from fractalseq.resampling._block_length import BlockLength, choose_block_length, politis_white
from fractalseq.resampling._bootstrap import BootstrapResult, block_bootstrap
from fractalseq.resampling._intervals import INTERVALS, interval_from
from fractalseq.resampling._options import Resampling
from fractalseq.resampling._plan import SCHEMES, ResamplePlan, make_plan
from fractalseq.resampling._replicates import CountSpectrum, ReplicateSpectra, replicate_spectra

__all__ = [
    "BlockLength", "BootstrapResult", "CountSpectrum", "INTERVALS", "ReplicateSpectra", "ResamplePlan", "Resampling", "SCHEMES",
    "block_bootstrap", "choose_block_length", "interval_from", "make_plan", "politis_white", "replicate_spectra",
]

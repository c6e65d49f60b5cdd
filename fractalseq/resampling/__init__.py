"""Block bootstrap of stream statistics without recounting.

Word counts add, so blocks are counted once and each replicate is a weighted
sum of block tables (``_word_labels``, ``_block_tables``); symmetric
statistics go further and use the count spectra of all replicates at once
(``_replicates``).  Which blocks a replicate draws is ``_plan``, how long
they are ``_block_length``, intervals ``_intervals``; ``_bootstrap`` runs it all.  The
settings of a bootstrap travel as one validated :class:`Resampling` (``_options``).
"""

from importlib import import_module
from typing import Any

#: Where each public name lives; loaded on first use (PEP 562), so that a module needing only
#: ``_options`` (every command's seed check) does not import numba kernels and scipy.
_WHERE = {
    "BlockLength": "_block_length", "choose_block_length": "_block_length", "politis_white": "_block_length",
    "BootstrapResult": "_bootstrap", "block_bootstrap": "_bootstrap",
    "INTERVALS": "_intervals", "interval_from": "_intervals",
    "Resampling": "_options",
    "SCHEMES": "_plan", "ResamplePlan": "_plan", "make_plan": "_plan",
    "CountSpectrum": "_replicates", "ReplicateSpectra": "_replicates", "replicate_spectra": "_replicates",
}


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        value = getattr(import_module(f"{__name__}.{_WHERE[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "BlockLength", "BootstrapResult", "CountSpectrum", "INTERVALS", "ReplicateSpectra", "ResamplePlan", "Resampling", "SCHEMES",
    "block_bootstrap", "choose_block_length", "interval_from", "make_plan", "politis_white", "replicate_spectra",
]

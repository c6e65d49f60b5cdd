"""fractalseq: complexity, comparison and prediction of long symbolic streams.

A stream of symbols is encoded by iterating contractive maps towards the
corners of a hypercube (the chaos-game / iterated-function-system encoding).
Occupied boxes of that encoding at scale k**n are the distinct n-words of the
stream, so box counts, Rényi partition sums, block entropies, drift tests and
the predictor's context counts are all read off one structure: exact word
counts for every depth (:class:`fractalseq.words.WordCounts`).

Use it through this façade::

    import fractalseq as fs

    stream = fs.open_source("genome.fna.gz")            # any supported input
    spec = fs.dimension_spectrum(stream, qs=[2.0])      # D_2 with a bootstrap interval
    boot = fs.Resampling(n_boot=400, seed=7)            # other bootstrap settings, checked once
    again = fs.dimension_spectrum(stream, qs=[2.0], resampling=boot)
    print(spec.dims[0].estimate, spec.dims[0].low, spec.dims[0].high)

The families behind it are subpackages with their own ``__all__``:
:mod:`fractalseq.sources` (readers), :mod:`fractalseq.words` (word counts),
:mod:`fractalseq.dimensions`, :mod:`fractalseq.entropy`,
:mod:`fractalseq.resampling`, :mod:`fractalseq.predict`,
:mod:`fractalseq.compare`, :mod:`fractalseq.jobs` (whole jobs over files),
:mod:`fractalseq.datasets` (known sources), :mod:`fractalseq.report`
(figures and pages) and :mod:`fractalseq.io` (files out, cache).

Names are loaded on first use, so ``import fractalseq`` stays quick (the
numerical kernels are compiled by numba and load only when needed).

Genomic output is for research, not for clinical decisions; drift reports on
logs are no security guarantee.
"""

from __future__ import annotations

# first, before any kernel imports numba: a read-only install still caches its kernels (see the module)
from fractalseq import _numba_cache  # noqa: F401
import importlib
from typing import Any

from fractalseq.alphabet import Alphabet
from fractalseq.errors import FractalseqError, InputError, ModelFileError, OutputError, ParameterError
from fractalseq.stream import Chunk, SymbolArray, SymbolStream

__version__ = "0.1.0"

#: Façade name -> the family (subpackage) that defines it.
_FACADE: dict[str, str] = {
    # readers
    "open_source": "fractalseq.sources",
    "detect_format": "fractalseq.sources",
    # word counts
    "count_words": "fractalseq.words",
    "count_words_split": "fractalseq.words",
    "WordCounts": "fractalseq.words",
    "absent_words": "fractalseq.words",
    # encoding
    "points": "fractalseq.encoding",
    "density_image": "fractalseq.encoding",
    # dimensions
    "dimension_spectrum": "fractalseq.dimensions",
    "geometric_spectrum": "fractalseq.dimensions",
    "consistency_table": "fractalseq.dimensions",
    # entropy
    "h_difference": "fractalseq.entropy",
    "h_renyi": "fractalseq.entropy",
    "h_topological_growth": "fractalseq.entropy",
    "h_lz76": "fractalseq.entropy",
    "h_compressors": "fractalseq.entropy",
    "block_entropies": "fractalseq.entropy",
    "bootstrap_rate": "fractalseq.entropy",
    # resampling
    "block_bootstrap": "fractalseq.resampling",
    "Resampling": "fractalseq.resampling",
    # prediction
    "CellPredictor": "fractalseq.predict",
    "online_code_length": "fractalseq.predict",
    "load_model": "fractalseq.predict",
    # comparison
    "drift_test": "fractalseq.compare",
    "DriftOptions": "fractalseq.compare",
    "scan_stream": "fractalseq.compare",
    "js_divergence": "fractalseq.compare",
    # whole jobs
    "profile_source": "fractalseq.jobs",
    "run_survey": "fractalseq.jobs",
    "SurveyOptions": "fractalseq.jobs",
    "make_engine": "fractalseq.jobs",
    "ReaderOptions": "fractalseq.jobs",
    "expand_inputs": "fractalseq.jobs",
    "survey_files": "fractalseq.jobs",
    "survey_cache": "fractalseq.jobs",
    "write_survey": "fractalseq.jobs",
    "drift_files": "fractalseq.jobs",
    "scan_file": "fractalseq.jobs",
    "count_files": "fractalseq.jobs",
    # known sources
    "simulate_markov": "fractalseq.datasets",
    "entropy_rate": "fractalseq.datasets",
    # files out
    "prepare_folder": "fractalseq.io",
    "write_json": "fractalseq.io",
    "write_text": "fractalseq.io",
    # readers (log lines)
    "line_template": "fractalseq.sources",
}

#: Façade name -> a module offered whole: the invented demo scenario (``fs.scenario.generate``, its ground truth).
_MODULES: dict[str, str] = {
    "scenario": "fractalseq.datasets._scenario",
}

__all__ = [
    "Alphabet",
    "Chunk",
    "FractalseqError",
    "InputError",
    "ModelFileError",
    "OutputError",
    "ParameterError",
    "SymbolArray",
    "SymbolStream",
    "__version__",
    "CellPredictor",
    "DriftOptions",
    "ReaderOptions",
    "Resampling",
    "SurveyOptions",
    "WordCounts",
    "absent_words",
    "block_bootstrap",
    "block_entropies",
    "bootstrap_rate",
    "consistency_table",
    "count_files",
    "count_words",
    "count_words_split",
    "density_image",
    "detect_format",
    "dimension_spectrum",
    "drift_files",
    "drift_test",
    "entropy_rate",
    "expand_inputs",
    "geometric_spectrum",
    "h_compressors",
    "h_difference",
    "h_lz76",
    "h_renyi",
    "h_topological_growth",
    "js_divergence",
    "line_template",
    "load_model",
    "make_engine",
    "online_code_length",
    "open_source",
    "points",
    "prepare_folder",
    "profile_source",
    "run_survey",
    "scan_file",
    "scan_stream",
    "simulate_markov",
    "survey_cache",
    "survey_files",
    "write_json",
    "write_survey",
    "write_text",
    "scenario",
]


def __getattr__(name: str) -> Any:
    """Load a façade name from its family on first use (PEP 562)."""
    if name in _MODULES:
        module = importlib.import_module(_MODULES[name])
        globals()[name] = module
        return module
    family = _FACADE.get(name)
    if family is None:
        raise AttributeError(f"module 'fractalseq' has no attribute {name!r}")
    value = getattr(importlib.import_module(family), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))

"""Whole jobs over files: one source's profile, a survey of many, drift and scans of files, and the engines.

Names load on first use, so the command line can build its reader options
without importing every estimator.
"""

from __future__ import annotations

import importlib
from typing import Any

_NAMES: dict[str, str] = {
    "CachePlan": "fractalseq.jobs._files",
    "DaskEngine": "fractalseq.jobs._engines",
    "DriftColumnsReport": "fractalseq.jobs._drift_columns",
    "DriftReport": "fractalseq.jobs._files",
    "ProcessEngine": "fractalseq.jobs._engines",
    "ProfileResult": "fractalseq.jobs._profile",
    "ReaderOptions": "fractalseq.jobs._inputs",
    "SourceSpec": "fractalseq.jobs._sources",
    "SurveyOptions": "fractalseq.jobs._survey",
    "SurveyResult": "fractalseq.jobs._survey",
    "batch_specs": "fractalseq.jobs._files",
    "check_seed": "fractalseq.jobs._inputs",
    "contract": "fractalseq.jobs._profile",
    "count_files": "fractalseq.jobs._files",
    "CountSummary": "fractalseq.jobs._files",
    "ProfileSettings": "fractalseq.jobs._profile",
    "batch_columns": "fractalseq.jobs._drift_columns",
    "drift_columns": "fractalseq.jobs._drift_columns",
    "drift_files": "fractalseq.jobs._files",
    "expand_inputs": "fractalseq.jobs._sources",
    "make_engine": "fractalseq.jobs._engines",
    "profile_source": "fractalseq.jobs._profile",
    "run_survey": "fractalseq.jobs._survey",
    "scan_file": "fractalseq.jobs._files",
    "survey_cache": "fractalseq.jobs._files",
    "survey_files": "fractalseq.jobs._files",
    "write_survey": "fractalseq.jobs._survey",
    "LearnReport": "fractalseq.jobs._learn_score",
    "ScoreReport": "fractalseq.jobs._learn_score",
    "SourceScore": "fractalseq.jobs._learn_score",
    "learn_files": "fractalseq.jobs._learn_score",
    "score_files": "fractalseq.jobs._learn_score",
}

__all__ = sorted(_NAMES)  # noqa: PLE0605 - the lazy names are the table above


def __getattr__(name: str) -> Any:
    """Load a public name from its module on first use (PEP 562)."""
    module = _NAMES.get(name)
    if module is None:
        raise AttributeError(f"module 'fractalseq.jobs' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), "write_outputs" if name == "write_survey" else name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))

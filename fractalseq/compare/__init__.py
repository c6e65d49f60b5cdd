"""Comparing sources and batches: distances, clustering, drift tests, windowed scans, change points."""

from importlib import import_module
from typing import Any

#: Where each public name lives; loaded on first use (PEP 562), so that a survey's distances do not
#: import scipy.stats (the drift and novelty tests need it) in the survey's parent and every worker.
_WHERE = {
    **dict.fromkeys(("Segmentation", "pelt", "segment_series"), "_changepoint"),
    **dict.fromkeys(("Clustering", "cluster", "joint_alphabet", "js_divergence", "js_matrix", "spectrum_matrix"), "_distances"),
    **dict.fromkeys(("DriftOptions", "DriftResult", "drift_test"), "_drift"),
    **dict.fromkeys(("adjust_pvalues", "g_statistic"), "_homogeneity"),
    **dict.fromkeys(("EventBatch", "NoveltyOptions", "NoveltyResult", "novelty_test"), "_novelty"),
    **dict.fromkeys(("ScanResult", "scan_stream"), "_scan"),
}


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        value = getattr(import_module(f"{__name__}.{_WHERE[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "Clustering", "DriftOptions", "DriftResult", "EventBatch", "NoveltyOptions", "NoveltyResult", "ScanResult", "Segmentation", "adjust_pvalues", "cluster",
    "drift_test", "g_statistic", "joint_alphabet", "js_divergence", "js_matrix", "novelty_test", "pelt", "scan_stream",
    "segment_series", "spectrum_matrix",
]

"""Comparing sources and batches: distances, clustering, drift tests, windowed scans, change points."""

from fractalseq.compare._changepoint import Segmentation, pelt, segment_series
from fractalseq.compare._distances import Clustering, cluster, joint_alphabet, js_divergence, js_matrix, spectrum_matrix
from fractalseq.compare._drift import DriftOptions, DriftResult, drift_test
from fractalseq.compare._homogeneity import adjust_pvalues, g_statistic
from fractalseq.compare._novelty import EventBatch, NoveltyOptions, NoveltyResult, novelty_test
from fractalseq.compare._scan import ScanResult, scan_stream

__all__ = [
    "Clustering", "DriftOptions", "DriftResult", "EventBatch", "NoveltyOptions", "NoveltyResult", "ScanResult", "Segmentation", "adjust_pvalues", "cluster",
    "drift_test", "g_statistic", "joint_alphabet", "js_divergence", "js_matrix", "novelty_test", "pelt", "scan_stream",
    "segment_series", "spectrum_matrix",
]

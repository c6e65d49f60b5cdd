"""Constants and parameter checks shared by both routes of the Rényi dimensions (word counts, box counting)."""

from __future__ import annotations

from typing import Sequence

import numpy as np

from fractalseq.errors import ParameterError


#: Deepest depth keeps distinct words <= occurrences / STARVE.
STARVE = 100


#: Linearity test: differences within Z_LINEAR count-based standard errors of the run's slope.
Z_LINEAR = 3.0


#: Differences smaller than this (dimension units) are not counted as curvature.
RESOLUTION = 1e-3


#: Automatic deepening of the word counts stops when addresses would exceed this many bits.
AUTO_ADDRESS_BITS = 32


#: A fit needs at least this many levels (depths or scales).
MIN_LEVELS = 3


#: Chao (1984) estimate of unseen boxes must stay below this for q <= 0.
UNSEEN_MAX = 0.1


#: Points dropped at the start of each segment before geometric box counting (REFERENCE-CHECKS rule 1).
TRANSIENT = 60


NEGATIVE_Q = "negative q: dominated by the rarest boxes, unreliable on finite data"


OVERLAP = "overlapping maps (ratio k too large for the corners): word counts are not box counts"


def check_qs(qs: Sequence[float] | float) -> np.ndarray:
    """Orders q as a float array (finite, at least one)."""
    arr = np.atleast_1d(np.asarray(qs, dtype=np.float64))
    if arr.size == 0 or arr.ndim != 1:
        raise ParameterError("Give at least one order q, e.g. qs=(0, 1, 2).", parameter="qs")
    if not np.all(np.isfinite(arr)):
        raise ParameterError("Orders q must be finite numbers.", parameter="qs")
    return arr


def method_name(q: float, corrected: bool) -> str:
    if q == 0:
        return "distinct words (occupied boxes)"
    if not corrected:
        return "plug-in partition sum"
    if q == 1:
        return "Shannon entropy, Miller-corrected"
    if q == 2:
        return "collision estimator sum c(c-1)/(N(N-1))"
    if q > 1:
        return "falling-factorial partition sum"
    return "plug-in partition sum"

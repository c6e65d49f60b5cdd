"""Constants and parameter checks shared by both routes of the Rényi dimensions (word counts, box counting)."""

from __future__ import annotations

from typing import Sequence

import numpy as np

from fractalseq.errors import ParameterError
from fractalseq.resampling import _bootstrap as bs


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


def check_boot(n_boot: int, level: float, interval: str, scheme: str) -> None:
    if not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise ParameterError(f"The number of bootstrap replicates must be 0 or more, not {n_boot!r}.", parameter="n_boot")
    if 0 < n_boot < 20:
        raise ParameterError(f"{n_boot} bootstrap replicates are too few for an interval; use 0 (none) or at least 20.", parameter="n_boot")
    if not 0.5 < level < 1:
        raise ParameterError(f"Confidence level {level} is outside (0.5, 1); use e.g. 0.95.", parameter="level")
    if interval not in bs.INTERVALS:
        raise ParameterError(f"Unknown interval method {interval!r}; use one of {', '.join(bs.INTERVALS)}.", parameter="interval")
    if scheme not in bs.SCHEMES:
        raise ParameterError(f"Unknown bootstrap scheme {scheme!r}; use one of {', '.join(bs.SCHEMES)}.", parameter="scheme")


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

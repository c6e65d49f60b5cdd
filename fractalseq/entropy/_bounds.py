"""Entropy-rate estimates held against the bounds computed on the same data, and the figure to use.

An entropy rate lies in ``[0, smallest upper bound]``.  The upper bounds a
profile has are

* the code lengths it measured (a compressor's, the online predictor's): a
  lossless code of the data cannot beat its information content, so a rate
  estimate above a code length is an estimate the data contradict;
* the largest rate the alphabet allows, ``log2 A``; for a stream of ordinal
  patterns of order ``m`` (delay 1) ``log2 m``, since a pattern has at most
  ``m`` successors (:func:`fractalseq.entropy._depth.ordinal_possible_words`).

The lower bound is 0 (a rate is not negative).  :func:`hold_to_bounds` says,
for each named estimate, whether it lies inside ``[lower, smallest upper
bound]`` (an upper bound is held against the alphabet's limit only), and picks
the figure to use: the preferred estimate when it is inside, 0 when it lies
below 0 (a bias-corrected estimator can overshoot on a nearly constant
stream), else the smallest upper bound, with a sentence saying so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

__all__ = ["RateChoice", "hold_to_bounds"]

#: Numerical slack of the comparisons (bits per symbol).
TOLERANCE = 1e-9


@dataclass(frozen=True)
class RateChoice:
    """Which entropy-rate figure to use, and each estimate's place against the bounds.

    Attributes
    ----------
    estimator:
        Name of the figure to use (a key of the profile's ``entropy_rate_bits``, or ``alphabet``).
    kind:
        ``estimate`` or ``upper bound``.
    estimate, low, high:
        Its value and interval (bits per symbol; the interval may be ``None``).
    lower_bound:
        The lower bound used (0).
    upper_bound, upper_bound_by:
        The smallest upper bound and which estimator (or ``alphabet``) gave it.
    within:
        Estimator name → whether it lies inside the bounds.
    reason:
        One sentence.
    """

    estimator: str
    kind: str
    estimate: float
    low: float | None
    high: float | None
    lower_bound: float
    upper_bound: float
    upper_bound_by: str
    within: dict[str, bool]
    reason: str

    def to_dict(self) -> dict[str, Any]:
        return {
            "estimator": self.estimator, "kind": self.kind, "estimate": self.estimate, "low": self.low,
            "high": self.high, "lower_bound": self.lower_bound, "upper_bound": self.upper_bound,
            "upper_bound_by": self.upper_bound_by, "reason": self.reason,
        }


def _finite(v: Any) -> bool:
    return v is not None and isinstance(v, (int, float)) and math.isfinite(float(v))


def hold_to_bounds(
    rates: Mapping[str, tuple[str, Any]], max_rate: float, max_rate_reason: str = "log2 of the alphabet size",
    preferred: str = "grassberger", labels: Mapping[str, str] | None = None,
) -> RateChoice:
    """Hold each estimate to ``[0, smallest upper bound]`` and choose the figure to use.

    Parameters
    ----------
    rates:
        Name → ``(kind, estimate)`` where kind is ``estimate`` or ``upper bound`` and the estimate has
        ``estimate``, ``low`` and ``high`` attributes (bits per symbol); ``None`` estimates are skipped.
    max_rate:
        The largest rate the alphabet allows (bits per symbol).
    max_rate_reason:
        Why (for the sentence).
    preferred:
        The estimate used when it lies inside the bounds.
    labels:
        Readable names for the sentence (default: the keys).

    Returns
    -------
    RateChoice
    """
    labels = dict(labels or {})
    bound, by = float(max_rate), "alphabet"
    for name, (kind, e) in rates.items():
        if e is not None and kind == "upper bound" and _finite(e.estimate) and float(e.estimate) < bound:
            bound, by = float(e.estimate), name
    within: dict[str, bool] = {}
    for name, (kind, e) in rates.items():
        if e is None:
            continue
        v = e.estimate
        top = float(max_rate) if kind == "upper bound" else bound
        within[name] = bool(_finite(v) and -TOLERANCE <= float(v) <= top + TOLERANCE)
    label = lambda k: labels.get(k, k)  # noqa: E731
    bound_text = f"{label(by)} ({bound:.4f} bits/symbol)" if by != "alphabet" else f"{max_rate_reason} ({bound:.4f} bits/symbol)"
    pick = rates.get(preferred)
    if pick is not None and pick[1] is not None and within.get(preferred, False):
        e = pick[1]
        return RateChoice(preferred, pick[0], float(e.estimate), e.low, e.high, 0.0, bound, by, within,
                          f"{label(preferred)} lies inside [0, {bound:.4f}], the smallest upper bound being {bound_text}")
    if pick is not None and pick[1] is not None and _finite(pick[1].estimate) and float(pick[1].estimate) < 0.0:
        # below the lower bound: a bias correction overshooting on a (nearly) constant stream; the figure is 0
        e = pick[1]
        clip = lambda v: None if v is None or not _finite(v) else min(max(float(v), 0.0), bound)  # noqa: E731
        return RateChoice(preferred, pick[0], 0.0, clip(e.low), clip(e.high), 0.0, bound, by, within,
                          f"{label(preferred)} = {float(e.estimate):.4f} bits/symbol lies below 0, the lower bound "
                          f"(a rate is never negative); use 0")
    if pick is None or pick[1] is None or not _finite(pick[1].estimate):
        why = f"{label(preferred)} was not computed"
    else:
        why = f"{label(preferred)} = {float(pick[1].estimate):.4f} bits/symbol exceeds {bound_text}"
    if by == "alphabet":
        return RateChoice("alphabet", "upper bound", bound, None, None, 0.0, bound, by, within,
                          f"{why}; use the bound {bound:.4f} bits/symbol")
    e = rates[by][1]
    return RateChoice(by, "upper bound", bound, e.low, e.high, 0.0, bound, by, within,
                      f"{why}; use the upper bound {bound:.4f} bits/symbol")

"""Exact binomial tails, their extension to non-integer (dispersion-scaled) counts, and multiplicity adjustments.

Used by the event novelty test (:mod:`fractalseq.compare._novelty`); each
function is checked against ``scipy.stats.binomtest`` or a hand-worked example
in ``tests/test_novelty.py``.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
from scipy import stats
from scipy.special import betainc

__all__ = [
    "benjamini_hochberg", "binomial_greater", "binomial_greater_scaled", "binomial_less_scaled", "binomial_two_sided",
    "binomial_two_sided_scaled", "holm",
]

#: Relative tolerance of "probability not above the observed one" (as scipy.stats.binomtest).
_RERR = 1.0 + 1e-7


def binomial_greater(k: int, n: int, p: float) -> float:
    """Exact upper tail ``P(K >= k)`` of ``K ~ Binomial(n, p)`` (1 when ``k <= 0``)."""
    if k <= 0:
        return 1.0
    if k > n:
        return 0.0
    return float(min(1.0, stats.binom.sf(k - 1, n, p)))


def binomial_two_sided(k: int, n: int, p: float) -> float:
    """Exact two-sided binomial p-value: the total probability of outcomes no more likely than ``k``.

    The rule of ``scipy.stats.binomtest(k, n, p).pvalue`` (outcomes whose
    probability is at most ``(1 + 1e-7)`` times that of ``k``), computed over
    the whole support ``0..n``.
    """
    if n == 0:
        return 1.0
    pmf = stats.binom.pmf(np.arange(n + 1), n, p)
    d = pmf[k]
    return float(min(1.0, pmf[pmf <= d * _RERR].sum()))


def holm(p: Sequence[float]) -> np.ndarray:
    """Holm step-down adjusted p-values: ``p~_(i) = max_{j <= i} min(1, (m - j + 1) p_(j))``."""
    p = np.asarray(p, dtype=float)
    if p.size == 0:
        return p
    order = np.argsort(p, kind="stable")
    adj = np.maximum.accumulate(np.minimum(1.0, (p.size - np.arange(p.size)) * p[order]))
    out = np.empty(p.size)
    out[order] = adj
    return out


def benjamini_hochberg(p: Sequence[float]) -> np.ndarray:
    """Benjamini–Hochberg adjusted p-values: ``q_(i) = min_{j >= i} min(1, m p_(j) / j)``."""
    p = np.asarray(p, dtype=float)
    if p.size == 0:
        return p
    order = np.argsort(p, kind="stable")
    ranked = p[order] * p.size / np.arange(1, p.size + 1)
    adj = np.minimum(1.0, np.minimum.accumulate(ranked[::-1])[::-1])
    out = np.empty(p.size)
    out[order] = adj
    return out


def binomial_greater_scaled(x: float, total: float, p: float) -> float:
    """``P(K >= x)`` for ``K ~ Binomial(total, p)`` extended to non-integer counts.

    Uses ``P(Binomial(N, p) >= k) = I_p(k, N - k + 1)``, the regularized
    incomplete beta function (Abramowitz & Stegun 26.5.24, from memory), which
    is defined for real ``k`` and ``N``; at whole numbers it is the exact tail.
    """
    if x <= 0:
        return 1.0
    if x > total:
        return 0.0
    return float(min(1.0, betainc(x, total - x + 1.0, p)))


def binomial_less_scaled(x: float, total: float, p: float) -> float:
    """``P(K <= x)`` for ``K ~ Binomial(total, p)`` extended to non-integer counts: ``I_{1-p}(total - x, x + 1)``."""
    if x >= total:
        return 1.0
    if x < 0:
        return 0.0
    return float(min(1.0, betainc(total - x, x + 1.0, 1.0 - p)))


def binomial_two_sided_scaled(x: float, total: float, p: float) -> float:
    """Two-sided p-value of a dispersion-scaled count: twice the smaller tail (at most 1)."""
    return float(min(1.0, 2.0 * min(binomial_greater_scaled(x, total, p), binomial_less_scaled(x, total, p))))

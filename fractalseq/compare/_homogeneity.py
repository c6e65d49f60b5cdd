"""Homogeneity statistics of two count tables, vectorised over permutation replicates.

The drift test (:mod:`fractalseq.compare._drift`) compares the word tables of
two batches; here are its statistics, each taking rows of tables (one row per
replicate) so that a batch of permutations costs a few array operations:

* :func:`g_statistic` — the likelihood-ratio (G) statistic of homogeneity of
  the 2 x W table, ``G = 2 sum O ln(O/E)``;
* :func:`conditional_g` — the sum over contexts of the 2 x A homogeneity G of
  the next symbol given the previous ``n - 1``;
* :class:`_Figures` — entropy rate and D_2 of many tables at once;
* :func:`adjust_pvalues` — Holm (1979, Scand. J. Statist. 6:65) or
  Benjamini–Hochberg (1995, JRSS B 57:289) adjustment across the figures.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from fractalseq.errors import ParameterError

ADJUSTMENTS: tuple[str, ...] = ("holm", "bh")


def adjust_pvalues(p: Sequence[float], method: str = "holm") -> np.ndarray:
    """Multiplicity-adjusted p-values (Holm step-down or Benjamini–Hochberg step-up).

    Holm: ``p~_(i) = max_{j <= i} min(1, (m - j + 1) p_(j))``.
    BH: ``p~_(i) = min_{j >= i} min(1, m p_(j) / j)``.
    """
    p = np.asarray(p, dtype=float)
    m = p.size
    if m == 0:
        return p
    if method not in ADJUSTMENTS:
        raise ParameterError(f"Adjustment {method!r} is not one of {', '.join(ADJUSTMENTS)}.", parameter="method")
    order = np.argsort(p, kind="stable")
    ps = p[order]
    if method == "holm":
        adj = np.maximum.accumulate(np.minimum(1.0, (m - np.arange(m)) * ps))
    else:
        adj = np.minimum.accumulate((m * ps / np.arange(1, m + 1))[::-1])[::-1]
        adj = np.minimum(adj, 1.0)
    out = np.empty(m)
    out[order] = adj
    return out


def _xlogx(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    out = np.zeros_like(x)
    pos = x > 0
    out[pos] = x[pos] * np.log(x[pos])
    return out


def g_statistic(ta: np.ndarray, tb: np.ndarray) -> np.ndarray:
    """G statistic of homogeneity of two count tables (rows of ``ta``, ``tb`` are replicates).

    ``G = 2 [sum O ln O - sum_b T_b ln T_b - sum_w C_w ln C_w + T ln T]``,
    the likelihood-ratio statistic of the 2 x W contingency table.
    """
    ta = np.atleast_2d(ta)
    tb = np.atleast_2d(tb)
    na, nb = ta.sum(1), tb.sum(1)
    c = ta + tb
    g = _xlogx(ta).sum(1) + _xlogx(tb).sum(1) - _xlogx(na) - _xlogx(nb) - _xlogx(c).sum(1) + _xlogx(na + nb)
    return np.maximum(2.0 * g, 0.0)


def _context_sums(tab: np.ndarray, context: np.ndarray, n_context: int) -> np.ndarray:
    """Per-row sums of the columns of each context (``context`` sorted, as for sorted word addresses)."""
    tab = np.atleast_2d(tab)
    if context.size == 0:
        return np.zeros((tab.shape[0], n_context))
    if np.all(context[1:] >= context[:-1]) and n_context == int(context[-1]) + 1:
        starts = np.flatnonzero(np.r_[True, context[1:] != context[:-1]])
        if starts.size == n_context:
            return np.add.reduceat(tab, starts, axis=1)
    out = np.zeros((tab.shape[0], n_context))
    for r in range(tab.shape[0]):
        out[r] = np.bincount(context, weights=tab[r], minlength=n_context)
    return out


def conditional_g(ta: np.ndarray, tb: np.ndarray, context: np.ndarray, n_context: int) -> np.ndarray:
    """Sum over contexts of the G statistic of the next-symbol distributions (rows are replicates)."""
    ta = np.atleast_2d(ta)
    tb = np.atleast_2d(tb)
    ca = _context_sums(ta, context, n_context)
    cb = _context_sums(tb, context, n_context)
    c = ta + tb
    cc = ca + cb
    g = _xlogx(ta).sum(1) + _xlogx(tb).sum(1) - _xlogx(ca).sum(1) - _xlogx(cb).sum(1) - _xlogx(c).sum(1) + _xlogx(cc).sum(1)
    return np.maximum(2.0 * g, 0.0)


class _Figures:
    """Entropy rate and D_2 of many count tables at once (rows), for the permutation replicates.

    Same estimators as :func:`fractalseq.entropy._estimators.rate_from_counts` (Grassberger,
    using its ``G(n)`` table) and :func:`fractalseq.entropy._estimators.renyi_rate_from_counts`
    with ``q = 2`` (unbiased collision sums), vectorised over rows; the tests
    check both against those functions.
    """

    def __init__(self, total: np.ndarray, context: np.ndarray, n_context: int, depth: int, ratio: float) -> None:
        from fractalseq.entropy._estimators import grassberger_g

        self.context, self.n_context, self.depth, self.ratio = context, n_context, depth, ratio
        self._g = grassberger_g

    def _h(self, tab: np.ndarray) -> np.ndarray:
        from scipy.special import digamma

        n = np.rint(tab)
        N = n.sum(1)
        vals, inv = np.unique(n, return_inverse=True)
        gv = np.zeros(vals.size)
        pos = vals >= 1
        gv[pos] = self._g(vals[pos])
        s = (n * gv[inv.reshape(n.shape)]).sum(1)
        with np.errstate(divide="ignore", invalid="ignore"):
            h = np.where(N > 0, digamma(np.maximum(N, 1)) - s / np.maximum(N, 1), np.nan)
        return h / math.log(2.0)

    def _log_s2(self, tab: np.ndarray) -> np.ndarray:
        N = tab.sum(1)
        num = (tab * np.clip(tab - 1.0, 0.0, None)).sum(1)
        with np.errstate(divide="ignore", invalid="ignore"):
            s = num / (N * (N - 1.0))
            return np.where((N >= 2) & (s > 0), np.log(np.where(s > 0, s, 1.0)), np.nan)

    def rate(self, tab: np.ndarray) -> np.ndarray:
        tab = np.atleast_2d(tab)
        h = self._h(tab)
        if self.depth > 1:
            h = h - self._h(_context_sums(tab, self.context, self.n_context))
        return h

    def d2(self, tab: np.ndarray) -> np.ndarray:
        tab = np.atleast_2d(tab)
        s1 = self._log_s2(tab)
        s0 = self._log_s2(_context_sums(tab, self.context, self.n_context)) if self.depth > 1 else 0.0
        return -(s1 - s0) / math.log(2.0) / math.log2(1.0 / self.ratio)

"""Rényi entropies of count vectors and the Rényi entropy rate h_q -- the one home of h_q.

``h_q = (H_q(n+1) - H_q(n)) / ln 2`` bits per symbol (conditional form) with
``H_q = ln(sum p^q) / (1 - q)``.  :func:`renyi_rate_bits` turns two block
entropies (and, when given, their bootstrap replicates) into the rate and its
interval; :func:`h_renyi`, :func:`renyi_rate_from_counts`, the rates of
:func:`fractalseq.dimensions._spectrum.dimension_spectrum` and
:func:`fractalseq.dimensions._consistency.conditional_rates` all go through it.
Exact values for a Markov chain: :func:`fractalseq.datasets._markov.renyi_rate`
(Rached, Alajaji & Campbell 2001).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import ClassVar, Mapping

import numpy as np

from fractalseq.entropy._entropy_estimate import LN2, EntropyEstimate
from fractalseq.entropy._shannon import _rate_depth, _wc_info, as_spectrum, entropy_counts, rate_from_counts
from fractalseq.errors import InputError, ParameterError
from fractalseq.results import Estimate


def log_power_sum(counts, q: float, unbiased: bool = True) -> float:
    """Estimate of ``ln sum_i p_i**q`` (nats) from counts.

    ``q = 0``: ``ln K`` (occupied bins).  Integer ``q >= 2`` with ``unbiased``:
    the factorial-moment estimator ``sum n_i(n_i-1)..(n_i-q+1) / (N(N-1)..(N-q+1))``,
    unbiased for ``sum p_i**q`` under multinomial sampling (for ``q = 2`` the
    collision estimator, REFERENCE-CHECKS E4).  Otherwise plug-in
    ``sum (n_i/N)**q``.  Returns ``-inf`` when the estimated sum is zero
    (e.g. no word seen twice for ``q = 2``).  ``q = 1`` is not a power sum:
    use :func:`entropy_counts`.
    """
    q = float(q)
    if q == 1.0:
        raise ParameterError("q = 1 is the Shannon limit; use entropy_counts for it.", parameter="q")
    v, m = as_spectrum(counts)
    N = float((v * m).sum())
    if N <= 0:
        raise InputError("A power sum needs at least one count; all counts are zero.")
    if q == 0.0:
        return math.log(float(m.sum()))
    if unbiased and q >= 2 and q == round(q) and N >= q:
        k = int(q)
        num = np.ones_like(v)
        den = 1.0
        for j in range(k):
            num = num * np.clip(v - j, 0.0, None)
            den *= N - j
        s = float((m * num).sum()) / den
    else:
        s = float((m * (v / N) ** q).sum())
    return math.log(s) if s > 0 else -math.inf


def renyi_counts(counts, q: float, base: float | None = 2.0, unbiased: bool = True) -> float:
    """Rényi entropy ``ln(sum p^q) / (1 - q)`` of a count vector (``q = 1``: Grassberger Shannon)."""
    q = float(q)
    if q == 1.0:
        return entropy_counts(counts, "grassberger", base)
    h = log_power_sum(counts, q, unbiased) / (1.0 - q)
    return h if base is None else h / math.log(base)


@dataclass(frozen=True, kw_only=True)
class RateEstimate(Estimate):
    """Rényi entropy rate h_q (bits per symbol) by the conditional form ``H_q(n+1) - H_q(n)`` at one order n.

    ``notes`` (JSON key ``flags`` too) say what limits it; ``reliable`` is False when the
    estimate is NaN or q < 0.
    """

    _aliases: ClassVar[Mapping[str, str]] = {"flags": "notes"}

    q: float
    stderr: float
    order: int | None
    method: str

    @property
    def flags(self) -> tuple[str, ...]:
        """The notes (older name)."""
        return self.notes


def renyi_rate_bits(
    h_n: float,
    h_n1: float,
    reps_n: np.ndarray | None = None,
    reps_n1: np.ndarray | None = None,
    level: float = 0.95,
    interval: str = "centered",
    deeper: np.ndarray | None = None,
) -> tuple[float, float, float, float]:
    """The Rényi entropy rate ``h_q = (H_q(n+1) - H_q(n)) / ln 2`` (bits) with its interval: ``(est, low, high, stderr)``.

    Parameters
    ----------
    h_n, h_n1:
        Rényi block entropies ``H_q(n)`` and ``H_q(n+1)`` in nats (``H_q(0) = 0``).
    reps_n, reps_n1:
        Their bootstrap replicates (same replicates, same order); the interval
        is :func:`fractalseq.resampling._bootstrap.interval_from` of the replicate
        differences (at least 10 finite ones), else NaN.
    level, interval:
        Confidence level and interval method.
    deeper:
        Further per-order differences in nats (exact counts, ``q <= 0``): the
        interval is widened to hold them and the estimate (the finite-order bracket).
    """
    est = (float(h_n1) - float(h_n)) / LN2
    lo = hi = se = math.nan
    if not math.isfinite(est):
        return math.nan, lo, hi, se
    if reps_n is not None and reps_n1 is not None:
        from fractalseq.resampling._bootstrap import interval_from

        d = (np.asarray(reps_n1, dtype=np.float64) - np.asarray(reps_n, dtype=np.float64)) / LN2
        d = d[np.isfinite(d)]
        if d.size >= 10:
            l_, h_ = interval_from(np.array([est]), d[:, None], level, interval)
            lo, hi, se = float(l_[0]), float(h_[0]), float(d.std(ddof=1))
    if deeper is not None:
        dv = np.asarray(deeper, dtype=np.float64) / LN2
        dv = dv[np.isfinite(dv)]
        if dv.size:
            lo = float(np.nanmin([lo, dv.min(), est]))
            hi = float(np.nanmax([hi, dv.max(), est]))
    return est, lo, hi, se


def renyi_rate_from_counts(counts_n, counts_n1, q: float, unbiased: bool = True) -> float:
    """Difference estimate of the Rényi entropy rate ``h_q`` (bits per symbol).

    ``(ln S_q(n+1) - ln S_q(n)) / (1 - q)`` with ``S_q = sum p^q`` from
    :func:`log_power_sum`; ``q = 1`` gives the Grassberger Shannon difference.
    ``counts_n = None`` means ``n = 0`` (``S_q = 1``).  NaN if a sum is zero.
    """
    q = float(q)
    if q == 1.0:
        return rate_from_counts(counts_n, counts_n1, "grassberger")
    s1 = log_power_sum(counts_n1, q, unbiased)
    s0 = 0.0 if counts_n is None else log_power_sum(counts_n, q, unbiased)
    if not (math.isfinite(s1) and math.isfinite(s0)):
        return math.nan
    return renyi_rate_bits(s0 / (1.0 - q), s1 / (1.0 - q))[0]


def h_renyi(wc, q: float, depth: int | None = None, unbiased: bool = True) -> EntropyEstimate:
    """Rényi entropy rate ``h_q`` by the difference of ``ln sum p^q`` (bits per symbol).

    ``h_q = (ln S_q(n+1) - ln S_q(n)) / (1 - q)``; integer ``q >= 2`` use the
    unbiased factorial-moment sums (``q = 2``: collision estimator), other
    ``q`` plug-in sums; ``q = 1`` is the Grassberger Shannon difference.
    Depth rule as in :func:`h_difference`.  For ``q < 1`` the sums are
    dominated by rare words, which short streams miss: read those with care.
    The exact value for a Markov chain is :func:`fractalseq.datasets._markov.renyi_rate`
    (Rached, Alajaji & Campbell 2001).
    """
    q = float(q)
    A, _, L = _wc_info(wc)
    n, ok, notes = _rate_depth(wc, depth, 1)
    c0 = None if n == 0 else wc.spectrum(n)
    h = renyi_rate_from_counts(c0, wc.spectrum(n + 1), q, unbiased)
    if not math.isfinite(h):
        ok = False
        notes.append("no word repeats often enough for this q")
    if q < 1:
        notes.append("q < 1 weights rare words; missing words bias it low")
    kind = "factorial-moment" if (unbiased and q >= 2 and q == round(q)) else ("grassberger" if q == 1 else "plugin")
    return EntropyEstimate(
        quantity="Renyi entropy rate", method=f"difference/{kind}", estimate=h, unit="bits/symbol",
        fraction_of_max=h / math.log2(A) if math.isfinite(h) else None, depth=n, reliable=ok,
        note="; ".join(notes), q=q, details={"rule": "largest n with A^(n+1) <= length/100", "length": L},
    )

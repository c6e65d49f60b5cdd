"""Count-based variances of the level statistics ``H_q`` and of their differences.

The scaling fit of D_q weights each level by ``1 / Var(H_q(level))`` and the
scaling-range rule compares the per-level differences with their standard
errors.  Both variances come from the counts themselves (first-order delta
method under multinomial sampling), never from bootstrap replicates, so the
point estimate and its range do not depend on ``n_boot`` or the seed.

For a functional ``T(p)`` of the box probabilities, the delta method gives
``Var(T(p_hat)) ~ (sum_b p_b g_b**2) / N`` with the influence value
``g_b = dT/dp_b - sum_c p_c dT/dp_c`` (e.g. Bishop, Fienberg & Holland 1975,
*Discrete Multivariate Analysis*, §14.6; for the Shannon entropy this is
Basharin 1959, Theory Probab. Appl. 4:333, ``Var = (sum p ln^2 p - H^2) / N``).
For the Rényi entropy ``H_q = ln S_q / (1 - q)`` with ``S_q = sum p**q``:

    g_b = q / (1 - q) * (p_b**(q - 1) / S_q - 1)

(``q = 1``: ``g_b = -ln p_b - H``; ``q = 0``: the box count is exact, ``g = 0``).

A difference of two nested levels ``H_q(n+1) - H_q(n)`` (every box of level
n+1 lies in one box of level n) has the influence value
``g_{n+1}(child) - g_n(parent)`` per box pair, so its variance is the
weighted variance of that over the pairs (for q = 1 this is the variance of
the conditional surprisal ``-ln p(a | w)`` divided by N).  The variances
ignore serial dependence; they set relative weights and a linearity
tolerance, while intervals come from the block bootstrap.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from fractalseq.words._counts import WordCounts


def box_influence(counts: np.ndarray, qs: np.ndarray) -> np.ndarray:
    """Centred influence values ``g_b`` of ``H_q`` per box, shape ``(boxes, Q)`` (nats).

    Parameters
    ----------
    counts:
        Occurrences per box (zeros allowed; they get ``g = 0``).
    qs:
        Orders q.
    """
    c = np.asarray(counts, dtype=np.float64)
    out = np.zeros((c.size, qs.size))
    N = float(c.sum())
    if N <= 0:
        return out
    hit = c > 0
    p = c[hit] / N
    lnp = np.log(p)
    for j, q in enumerate(qs):
        q = float(q)
        if q == 0.0:
            continue
        if q == 1.0:
            g = -lnp
        else:
            a = q * lnp
            ln_s = float(a.max() + math.log(np.exp(a - a.max()).sum()))
            g = q / (1.0 - q) * np.exp((q - 1.0) * lnp - ln_s)
        g = g - float(np.sum(p * g))
        out[hit, j] = g
    return out


def variance_from_influence(counts: np.ndarray, g: np.ndarray) -> np.ndarray:
    """``sum_b p_b g_b**2 / N`` per column of ``g`` (the delta-method variance)."""
    c = np.asarray(counts, dtype=np.float64)
    N = float(c.sum())
    if N <= 0:
        return np.full(g.shape[1], np.nan)
    mean = (c @ g) / N
    return np.maximum((c @ (g * g)) / N - mean * mean, 0.0) / N


def word_level_variances(wc: WordCounts, top: int, qs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Delta-method variances of ``H_q(n)``, n = 1..top, and of ``H_q(n+1) - H_q(n)``.

    Returns ``(var, dvar)`` of shapes ``(top, Q)`` and ``(top - 1, Q)``.  The parent of
    an (n+1)-word is its n-symbol prefix (the address shifted right by one symbol).
    """
    Q = qs.size
    var = np.full((top, Q), np.nan)
    dvar = np.full((max(top - 1, 0), Q), np.nan)
    prev_addr = prev_g = None
    shift = np.uint64(wc.bits)
    for i in range(top):
        addr, cnt = wc.words(i + 1)
        g = box_influence(cnt, qs)
        var[i] = variance_from_influence(cnt, g)
        if prev_addr is not None and prev_g is not None:
            parent = np.searchsorted(prev_addr, addr.astype(np.uint64) >> shift)
            parent = np.minimum(parent, prev_addr.size - 1)
            dvar[i - 1] = variance_from_influence(cnt, g - prev_g[parent])
        prev_addr, prev_g = addr.astype(np.uint64), g
    return var, dvar


@njit(cache=True)
def _pair_moments(lab_a, lab_b, ga, gb, out):
    """Sums over points kept at both levels of ``d = gb[lab_b] - ga[lab_a]``: out[0] = n, out[1] = sum d, out[2] = sum d^2."""
    Q = ga.shape[1]
    for t in range(lab_a.shape[0]):
        a = lab_a[t]
        b = lab_b[t]
        if a < 0 or b < 0:
            continue
        out[0, 0] += 1.0
        for j in range(Q):
            d = gb[b, j] - ga[a, j]
            out[1, j] += d
            out[2, j] += d * d


def point_difference_variance(lab_a: np.ndarray, lab_b: np.ndarray, ga: np.ndarray, gb: np.ndarray) -> np.ndarray:
    """Delta-method variance of ``H_q(b) - H_q(a)`` from every point's box at two scales (labels, -1 = skipped)."""
    Q = ga.shape[1]
    out = np.zeros((3, Q))
    _pair_moments(np.ascontiguousarray(lab_a), np.ascontiguousarray(lab_b), np.ascontiguousarray(ga),
                  np.ascontiguousarray(gb), out)
    n = out[0, 0]
    if n <= 0:
        return np.full(Q, np.nan)
    mean = out[1] / n
    return np.maximum(out[2] / n - mean * mean, 0.0) / n

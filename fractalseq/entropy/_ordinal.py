"""Permutation entropy of ordinal patterns: entropy of order m, its interval, the per-step form, forbidden patterns.

Ordinal patterns (Bandt & Pompe 2002, Phys. Rev. Lett. 88:174102): the
pattern of order ``m`` and delay ``tau`` at time ``t`` is the permutation
``pi`` that sorts ``x[t], x[t+tau], ..., x[t+(m-1)tau]``
(``x[t+pi[0]tau] <= x[t+pi[1]tau] <= ...``).  Codes are the lexicographic
ranks of ``pi`` among the ``m!`` permutations, the same codes as the numeric
reader's ``ordinal`` alphabet (:mod:`fractalseq.sources.numeric`).

Ties
----
``"time"`` (default): equal values are ordered by time, the earlier counting
as smaller (a stable sort; the numeric reader's rule).  ``"dither"``: equal
values are ordered by an independent uniform key per sample drawn from
``seed`` (equivalent to adding an infinitesimal random dither; common
practice for data recorded at a coarse resolution, where the time rule
favours the monotone patterns).

Quantities (bits)
-----------------
``bits``
    Permutation entropy ``H(m) = -sum p(pi) log2 p(pi)`` of the pattern
    frequencies (plug-in, as Bandt & Pompe define it); ``normalized`` is
    ``H(m) / log2(m!)``, 1 for i.i.d. noise with a continuous distribution.
``conditional_bits``
    Entropy of the next pattern given the current one,
    ``H(pi_t, pi_{t+tau}) - H(pi_t)`` (consecutive patterns with the same
    delay share ``m-1`` values, so a pattern has at most ``m`` successors and
    this is at most ``log2 m``); the conditional entropy of ordinal patterns
    of Unakafov & Keller (2014), Physica D 269:94 (citation from memory).
``by_order``
    ``H(k)`` and the increment ``H(k) - H(k-1)`` for ``k = 2..m`` (the
    order-k patterns are read off the first ``k`` positions of each order-m
    window); Bandt, Keller & Pompe (2002), Nonlinearity 15:1595 (from memory)
    show the increments converge to the Kolmogorov–Sinai entropy of
    piecewise monotone maps as ``k`` grows, slowly.
``forbidden``
    Patterns never seen, with the number expected to be missing by chance if
    all ``m!`` patterns were equally likely (``m! (1 - 1/m!)^N``): far more
    missing than that means the patterns are forbidden by the dynamics
    (Amigó, Zambrano & Sanjuán 2007, Europhys. Lett. 79:50001, from memory).

The interval of ``bits`` and ``normalized`` is a basic moving-block bootstrap
interval (Künsch 1989; Davison & Hinkley 1997) of the pattern codes, blocks of
``max(2m, ceil(N^(1/3)))`` codes (common practice: blocks longer than the
pattern overlap, growing like ``N^(1/3)``); same seed, same interval.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any

import numba as nb
import numpy as np

from fractalseq.errors import InputError, ParameterError

__all__ = [
    "MAX_ORDER", "TIE_RULES", "OrdinalEntropy", "ordinal_patterns", "pattern_names", "permutation_entropy",
    "permutation_entropy_of_codes", "permutation_entropy_orders", "sub_pattern_map",
]

#: Largest pattern order (8! = 40320 patterns).
MAX_ORDER = 8
#: Tie rules (see the module docstring).
TIE_RULES = ("time", "dither")
#: Forbidden patterns listed by name (the rest are counted).
FORBIDDEN_LISTED = 50


# ------------------------------------------------------------------ kernels
@nb.njit(cache=True)
def _codes_kernel(x, key, m, tau, fact, codes, valid):  # pragma: no cover - numba
    """Lexicographic rank of the sorting permutation of each delay window; ``valid`` 0 where a window holds a NaN."""
    n = x.shape[0]
    span = (m - 1) * tau
    idx = np.empty(m, dtype=np.int64)
    used = np.empty(m, dtype=np.uint8)
    for t in range(n - span):
        ok = True
        for j in range(m):
            if math.isnan(x[t + j * tau]):
                ok = False
                break
        if not ok:
            valid[t] = 0
            codes[t] = 0
            continue
        valid[t] = 1
        # insertion sort of the positions 0..m-1 by (value, key): stable and small
        for j in range(m):
            idx[j] = j
        for j in range(1, m):
            p = idx[j]
            vp = x[t + p * tau]
            kp = key[t + p * tau]
            i = j - 1
            while i >= 0:
                q = idx[i]
                vq = x[t + q * tau]
                if vq > vp or (vq == vp and key[t + q * tau] > kp):
                    idx[i + 1] = q
                    i -= 1
                else:
                    break
            idx[i + 1] = p
        # lexicographic rank of the permutation idx
        for j in range(m):
            used[j] = 0
        r = 0
        for j in range(m):
            smaller = 0
            for v in range(idx[j]):
                if used[v] == 0:
                    smaller += 1
            used[idx[j]] = 1
            r += smaller * fact[m - 1 - j]
        codes[t] = r


@nb.njit(cache=True)
def _block_counts(codes, A, starts, b, out):  # pragma: no cover - numba
    """Counts of the codes in the concatenated blocks ``codes[s:s+b]`` (one replicate)."""
    for j in range(A):
        out[j] = 0.0
    for s in starts:
        for t in range(s, s + b):
            out[codes[t]] += 1.0


# ------------------------------------------------------------------ patterns
def _check_order(order: int) -> int:
    if isinstance(order, bool) or not isinstance(order, (int, np.integer)) or not 2 <= int(order) <= MAX_ORDER:
        raise ParameterError(f"The ordinal-pattern order must be a whole number between 2 and {MAX_ORDER}; got {order!r}.", parameter="order")
    return int(order)


def _check_delay(delay: int) -> int:
    if isinstance(delay, bool) or not isinstance(delay, (int, np.integer)) or int(delay) < 1:
        raise ParameterError(f"The embedding delay must be a whole number of at least 1; got {delay!r}.", parameter="delay")
    return int(delay)


def pattern_names(m: int) -> tuple[str, ...]:
    """The ``m!`` patterns of order ``m`` in code order, as digit strings (``"012"`` is code 0)."""
    return tuple("".join(str(d) for d in p) for p in itertools.permutations(range(_check_order(m))))


def sub_pattern_map(m: int, k: int) -> np.ndarray:
    """Code of the order-``k`` pattern of the first ``k`` positions of each order-``m`` pattern (``k <= m``).

    Keeping the entries ``< k`` of a sorting permutation, in order, gives the
    sorting permutation of the first ``k`` values (ties keep their rule).
    """
    m = _check_order(m)
    if not 1 <= k <= m:
        raise ParameterError(f"A sub-pattern order must be between 1 and {m}; got {k}.", parameter="order")
    rank = {p: i for i, p in enumerate(itertools.permutations(range(k)))}
    return np.array([rank[tuple(d for d in p if d < k)] for p in itertools.permutations(range(m))], dtype=np.int64)


def ordinal_patterns(
    values: Any, order: int, delay: int = 1, ties: str = "time", seed: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Ordinal-pattern codes of a numeric series, NaN ending a segment.

    Parameters
    ----------
    values:
        1-d numbers; NaN (or ±inf) marks a missing value: windows holding one are skipped.
    order:
        Pattern order ``m`` (2..:data:`MAX_ORDER`).
    delay:
        Embedding delay ``tau`` (samples between the values of a window).
    ties:
        ``"time"`` or ``"dither"`` (see the module docstring).
    seed:
        Seed of the dither (unused with ``"time"``).

    Returns
    -------
    codes, starts:
        int64 codes of the complete windows, in time order, and the positions in
        ``codes`` where a new segment starts (a window skipped for a missing value
        starts a new segment).
    """
    m, tau = _check_order(order), _check_delay(delay)
    if ties not in TIE_RULES:
        raise ParameterError(f"Unknown tie rule {ties!r}; use 'time' or 'dither'.", parameter="ties")
    x = np.asarray(values, dtype=np.float64).ravel().copy()
    x[~np.isfinite(x)] = np.nan
    span = (m - 1) * tau
    if x.size <= span:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    if ties == "time":
        key = np.arange(x.size, dtype=np.float64)
    else:
        key = np.random.default_rng(seed).random(x.size)
    fact = np.array([math.factorial(i) for i in range(m + 1)], dtype=np.int64)
    codes = np.empty(x.size - span, dtype=np.int64)
    valid = np.empty(x.size - span, dtype=np.uint8)
    _codes_kernel(x, key, m, tau, fact, codes, valid)
    ok = valid.astype(bool)
    prev = np.concatenate([[False], ok[:-1]])
    # with a delay, the window after a gap may still be "valid" next to one that was not: a segment
    # starts at every valid window whose predecessor was skipped
    starts_at = np.flatnonzero(ok & ~prev)
    pos = np.cumsum(ok) - 1
    return codes[ok], pos[starts_at].astype(np.int64)


# ------------------------------------------------------------------ entropy
def _plugin_bits(counts: np.ndarray) -> float:
    c = np.asarray(counts, dtype=np.float64)
    c = c[c > 0]
    n = c.sum()
    if n <= 0:
        return float("nan")
    p = c / n
    return float(-(p * np.log2(p)).sum()) + 0.0  # + 0.0: never -0.0


@dataclass(frozen=True)
class OrdinalEntropy:
    """Permutation entropy of one pattern stream (see the module docstring for each quantity).

    ``to_dict()`` is the ``permutation_entropy`` object of the profile's JSON.
    """

    order: int
    delay: int
    ties: str
    patterns: int
    bits: float
    normalized: float
    low: float | None
    high: float | None
    normalized_low: float | None
    normalized_high: float | None
    conditional_bits: float
    conditional_max_bits: float
    by_order: tuple[dict, ...]
    distinct: int
    possible: int
    forbidden: dict
    interval: str
    notes: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict[str, Any]:
        return {
            "order": self.order, "delay": self.delay, "ties": self.ties, "patterns": self.patterns,
            "bits": self.bits, "normalized": self.normalized, "low": self.low, "high": self.high,
            "normalized_low": self.normalized_low, "normalized_high": self.normalized_high,
            "conditional_bits": self.conditional_bits, "conditional_max_bits": self.conditional_max_bits,
            "by_order": [dict(r) for r in self.by_order], "distinct": self.distinct, "possible": self.possible,
            "forbidden": dict(self.forbidden), "interval": self.interval, "notes": list(self.notes),
        }


def _bootstrap_interval(
    codes: np.ndarray, A: int, m: int, H: float, n_boot: int, seed: int, level: float
) -> tuple[float, float, str]:
    """Basic (reflected) moving-block bootstrap interval of the plug-in entropy, clipped to ``[0, log2 A]``.

    The plug-in entropy is biased low and so are its replicates; the basic interval
    ``[2H - q_hi, 2H - q_lo]`` (Davison & Hinkley 1997, Bootstrap Methods, sec. 5.2) carries
    that bias back to the side of the truth, where a percentile interval would not.
    """
    N = codes.size
    b = int(min(N, max(2 * m, math.ceil(N ** (1.0 / 3.0)))))
    k = int(math.ceil(N / b))
    rng = np.random.default_rng(seed)
    out = np.empty(A)
    vals = np.empty(n_boot)
    for r in range(n_boot):
        starts = rng.integers(0, N - b + 1, size=k).astype(np.int64)
        _block_counts(codes, A, starts, b, out)
        vals[r] = _plugin_bits(out)
    a = (1.0 - level) / 2.0
    q_lo, q_hi = np.quantile(vals, [a, 1.0 - a])
    top = math.log2(A)
    lo, hi = min(max(2.0 * H - q_hi, 0.0), top), min(max(2.0 * H - q_lo, 0.0), top)
    return float(lo), float(hi), f"{level:.0%} basic moving-block bootstrap, {n_boot} replicates, blocks of {b} patterns"


def permutation_entropy_of_codes(
    codes: Any, starts: Any, order: int, delay: int = 1, ties: str = "time",
    n_boot: int = 100, seed: int = 0, level: float = 0.95,
) -> OrdinalEntropy:
    """Permutation entropy of a stream of ordinal-pattern codes (order ``m``, codes ``0..m!-1``).

    Parameters
    ----------
    codes, starts:
        Pattern codes in time order and segment starts (as :func:`ordinal_patterns` gives,
        or a :class:`~fractalseq.stream.SymbolArray` over the reader's ``ordinal`` alphabet).
    order, delay, ties:
        How the patterns were made (``delay`` and ``ties`` are reported, not re-applied).
    n_boot:
        Bootstrap replicates of the interval (0: none; else at least 20).
    seed, level:
        Seed and confidence level of the interval.

    Returns
    -------
    OrdinalEntropy
    """
    m, tau = _check_order(order), _check_delay(delay)
    A = math.factorial(m)
    c = np.ascontiguousarray(np.asarray(codes, dtype=np.int64))
    N = int(c.size)
    if N < 2:
        raise InputError(f"Permutation entropy needs at least 2 patterns; the stream has {N}.")
    if c.min() < 0 or c.max() >= A:
        raise InputError(f"Pattern codes must lie in 0..{A - 1} for order {m}.")
    if n_boot and n_boot < 20:
        raise ParameterError(f"{n_boot} bootstrap replicates are too few for an interval; use 0 (none) or at least 20.", parameter="n_boot")
    counts = np.bincount(c, minlength=A).astype(np.float64)
    H = _plugin_bits(counts)
    hmax = math.log2(A)
    notes: list[str] = []
    low = high = nlow = nhigh = None
    how = "none"
    if n_boot:
        low, high, how = _bootstrap_interval(c, A, m, H, int(n_boot), int(seed), float(level))
        nlow, nhigh = low / hmax, high / hmax
    # consecutive patterns (with the delay, the successor of the pattern at t is the one at t + tau)
    st = np.asarray(starts, dtype=np.int64)
    seg_id = np.zeros(N, dtype=np.int64)
    if st.size:
        seg_id[st[st < N]] += 1
        seg_id = np.cumsum(seg_id)
    if N > tau:
        same = seg_id[tau:] == seg_id[:-tau]
        pairs = c[:-tau][same] * A + c[tau:][same]
    else:
        pairs = np.zeros(0, np.int64)
    if pairs.size:
        _, pc = np.unique(pairs, return_counts=True)
        first = np.bincount(pairs // A, minlength=A)
        cond = _plugin_bits(pc) - _plugin_bits(first)
    else:
        cond = float("nan")
        notes.append("no two consecutive patterns in one segment: no conditional entropy")
    rows = []
    prev_h = 0.0
    for k in range(2, m + 1):
        hk = _plugin_bits(np.bincount(sub_pattern_map(m, k)[c], minlength=math.factorial(k))) if k < m else H
        rows.append({"order": k, "bits": hk, "normalized": hk / math.log2(math.factorial(k)),
                     "increment_bits": hk - prev_h})
        prev_h = hk
    seen = np.flatnonzero(counts > 0)
    missing = np.flatnonzero(counts == 0)
    names = pattern_names(m)
    expected = A * (1.0 - 1.0 / A) ** N
    forbidden = {
        "count": int(missing.size),
        "expected_missing_if_uniform": float(expected),
        "patterns": [names[i] for i in missing[:FORBIDDEN_LISTED]],
        "listed": int(min(missing.size, FORBIDDEN_LISTED)),
    }
    if N < 10 * A:
        notes.append(f"{N} patterns for {A} possible: missing patterns may be unobserved rather than forbidden, "
                     f"and the plug-in entropy is biased low (want at least {10 * A} patterns)")
    return OrdinalEntropy(
        order=m, delay=tau, ties=ties, patterns=N, bits=H, normalized=H / hmax, low=low, high=high,
        normalized_low=nlow, normalized_high=nhigh, conditional_bits=float(cond), conditional_max_bits=math.log2(m),
        by_order=tuple(rows), distinct=int(seen.size), possible=A, forbidden=forbidden, interval=how,
        notes=tuple(notes),
    )


def permutation_entropy(
    values: Any, order: int, delay: int = 1, ties: str = "time", seed: int = 0, n_boot: int = 100, level: float = 0.95,
) -> OrdinalEntropy:
    """Permutation entropy of order ``m`` of a numeric series (NaN = missing, ending a segment).

    Parameters
    ----------
    values:
        1-d numbers.
    order, delay, ties:
        Pattern order ``m``, embedding delay ``tau`` and tie rule (``"time"`` or ``"dither"``).
    seed:
        Seed of the dither and of the bootstrap.
    n_boot, level:
        Bootstrap replicates of the interval (0: none) and its confidence level.

    Returns
    -------
    OrdinalEntropy

    Examples
    --------
    >>> import numpy as np
    >>> pe = permutation_entropy(np.random.default_rng(1).random(100_000), 3, n_boot=0)
    >>> round(pe.normalized, 3)
    1.0
    """
    codes, starts = ordinal_patterns(values, order, delay, ties, seed)
    if codes.size < 2:
        raise InputError(f"The series has fewer than 2 complete windows of order {order} and delay {delay}.")
    return permutation_entropy_of_codes(codes, starts, order, delay, ties, n_boot=n_boot, seed=seed, level=level)


def permutation_entropy_orders(
    values: Any, orders: Any = range(2, 8), delay: int = 1, ties: str = "time", seed: int = 0
) -> list[dict[str, Any]]:
    """Permutation entropy and its per-step form for several orders: how they converge as ``m`` grows.

    For each order ``m``: ``bits`` and ``normalized`` (single patterns), ``increment_bits``
    (``H(m) - H(m-1)``, 0 before the first order given), ``conditional_bits`` (next pattern given
    the current one) and ``distinct`` patterns.  For piecewise monotone maps both per-step forms
    approach the Kolmogorov–Sinai entropy as ``m`` grows (Bandt, Keller & Pompe 2002; Unakafov &
    Keller 2014; both from memory); the conditional form gets there much sooner.  No intervals
    (see :func:`permutation_entropy` for one order).
    """
    out: list[dict[str, Any]] = []
    prev: float | None = None
    for m in sorted({_check_order(int(k)) for k in orders}):
        pe = permutation_entropy(values, m, delay, ties, seed, n_boot=0)
        out.append({"order": m, "bits": pe.bits, "normalized": pe.normalized,
                    "increment_bits": None if prev is None else pe.bits - prev,
                    "conditional_bits": pe.conditional_bits, "distinct": pe.distinct, "patterns": pe.patterns})
        prev = pe.bits
    return out

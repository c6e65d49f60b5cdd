"""Shannon entropy of count vectors: plug-in, Miller–Madow and Grassberger estimators, block entropies, depth rules.

Every estimate is reported in bits (per block, or per symbol for rates) and
as a fraction of its maximum (``n log2 A`` per n-block, ``log2 A`` per
symbol), with a ``reliable`` flag and a ``note`` saying why not.

Estimators of the Shannon entropy of a count vector ``n_i``, ``N = sum n_i``,
``K`` = number of non-empty bins (natural logarithms; divided by ``ln 2`` for bits):

``plugin``
    ``H_ML = ln N - (1/N) sum n_i ln n_i``.
``miller-madow``
    ``H_MM = H_ML + (K - 1) / (2N)`` (Miller 1955, "Note on the bias of
    information estimates", in Quastler (ed.), *Information Theory in Psychology*).
``grassberger``
    ``H_G = psi(N) - (1/N) sum n_i G(n_i)``,
    ``G(n) = psi(n) + (1/2) (-1)^n [psi((n+1)/2) - psi(n/2)]``
    (Grassberger 2003, arXiv:physics/0307138).  **Variant:** we use ``psi(N)``
    as the leading term, not ``ln N``.  Under fixed-N (multinomial) sampling,
    which is what counting the words of a stream gives, the ``psi(N)`` form is
    nearly unbiased while the ``ln N`` form is biased upward by about
    ``1/(2N)`` (exact enumeration, REFERENCE-CHECKS E3).  ``G`` needs integer
    counts: non-integer counts (weighted bootstrap tables) are rounded to the
    nearest integer first (counts below 1/2 drop out).

Everything works from a plain count vector (float counts allowed) or from
a frequency-of-frequencies :class:`fractalseq.words._counts.Spectrum` (``value``,
``multiplicity``), so block entropies of every depth of a
:class:`fractalseq.words._counts.WordCounts` cost O(distinct count values).

Depth rules (REFERENCE-CHECKS rule 4): the difference estimator
``H_{n+1} - H_n`` uses the largest ``n`` with ``A**(n+1) <= length/100``; the
ratio ``H_n / n`` the largest ``n`` with ``A**n <= length/100``.  For
correlated sources prefer the difference: the ratio carries an ``O(1/n)``
bias (REFERENCE-CHECKS rule 3).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from scipy.special import digamma

from fractalseq.entropy._entropy_estimate import LN2, EntropyEstimate
from fractalseq.errors import InputError, ParameterError


#: Plug-in block entropies need at least this many occurrences per possible word (rule 4).
SAMPLES_PER_WORD = 100


METHODS = ("plugin", "miller-madow", "grassberger")


_ALIASES = {
    "plugin": "plugin", "plug-in": "plugin", "ml": "plugin", "mle": "plugin",
    "miller-madow": "miller-madow", "mm": "miller-madow", "millermadow": "miller-madow",
    "grassberger": "grassberger", "g03": "grassberger", "grassberger2003": "grassberger",
}


def method_name(method: str) -> str:
    """Canonical estimator name (``plugin``, ``miller-madow``, ``grassberger``)."""
    try:
        return _ALIASES[str(method).lower()]
    except KeyError:
        raise ParameterError(f"Entropy method {method!r} is not one of {', '.join(METHODS)}.", parameter="method") from None


def as_spectrum(counts) -> tuple[np.ndarray, np.ndarray]:
    """Non-zero counts as ``(values, multiplicities)`` float64 arrays.

    ``counts`` is a 1-D count vector (zeros allowed, floats allowed) or an
    object with ``value`` and ``multiplicity`` arrays (a
    :class:`fractalseq.words._counts.Spectrum`).
    """
    if hasattr(counts, "value") and hasattr(counts, "multiplicity"):
        v = np.asarray(counts.value, dtype=np.float64).ravel()
        m = np.asarray(counts.multiplicity, dtype=np.float64).ravel()
        if v.shape != m.shape:
            raise InputError("A count spectrum needs as many multiplicities as values.")
    else:
        v = np.asarray(counts, dtype=np.float64).ravel()
        m = np.ones_like(v)
    if not (np.all(np.isfinite(v)) and np.all(np.isfinite(m))):
        raise InputError("Counts must be finite numbers.")
    if np.any(v < 0) or np.any(m < 0):
        raise InputError("Counts must be non-negative.")
    keep = (v > 0) & (m > 0)
    return v[keep], m[keep]


def grassberger_g(n) -> np.ndarray:
    """Grassberger's ``G(n) = psi(n) + (1/2)(-1)^n [psi((n+1)/2) - psi(n/2)]`` for integers ``n >= 1``.

    Equivalently ``psi(n) + (-1)^n int_0^1 t^(n-1)/(1+t) dt`` (Grassberger 2003,
    arXiv:physics/0307138).  ``G(1) = -gamma - ln 2``, ``G(2n+1) = G(2n)``.
    """
    n = np.asarray(n, dtype=np.float64)
    if np.any(n < 1) or np.any(n != np.round(n)):
        raise ParameterError("Grassberger's G(n) is defined for whole numbers n >= 1.", parameter="n")
    sign = np.where(np.mod(n, 2) == 0, 1.0, -1.0)
    return digamma(n) + 0.5 * sign * (digamma((n + 1) / 2) - digamma(n / 2))


def _entropy_nats(v: np.ndarray, m: np.ndarray, method: str) -> float:
    """Entropy estimate in nats from (values, multiplicities) of non-zero counts."""
    if method == "grassberger":
        v = np.rint(v)
        keep = v > 0
        v, m = v[keep], m[keep]
    N = float((v * m).sum())
    if N <= 0:
        raise InputError("Entropy needs at least one count; all counts are zero.")
    if method == "plugin":
        return math.log(N) - float((m * v * np.log(v)).sum()) / N
    if method == "miller-madow":
        K = float(m.sum())
        return math.log(N) - float((m * v * np.log(v)).sum()) / N + (K - 1.0) / (2.0 * N)
    if method == "grassberger":
        return float(digamma(N)) - float((m * v * grassberger_g(v)).sum()) / N
    raise ParameterError(f"Entropy method {method!r} is not one of {', '.join(METHODS)}.", parameter="method")


def replicate_entropies(spectra, method: str = "grassberger") -> np.ndarray:
    """Shannon entropy estimates (nats) of every bootstrap replicate at once.

    ``spectra`` is a :class:`fractalseq.resampling._replicates.ReplicateSpectra`; the
    result equals :func:`entropy_counts` (in nats) of each replicate's
    spectrum, computed as matrix products over the dense small-count table.
    """
    method = method_name(method)
    D = np.asarray(spectra.dense, dtype=np.float64)
    B = np.asarray(spectra.big, dtype=np.float64)
    v = np.arange(D.shape[1], dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        vlogv = np.where(v > 0, v * np.log(np.where(v > 0, v, 1.0)), 0.0)
        blogb = np.where(B > 0, B * np.log(np.where(B > 0, B, 1.0)), 0.0)
    # plain numpy reductions, not BLAS: the same bits whatever the thread count (engines must agree)
    N = (D * v).sum(axis=1) + B.sum(axis=0)
    out = np.full(D.shape[0], np.nan)
    ok = N > 0
    if method in ("plugin", "miller-madow"):
        S = (D * vlogv).sum(axis=1) + blogb.sum(axis=0)
        out[ok] = np.log(N[ok]) - S[ok] / N[ok]
        if method == "miller-madow":
            K = D[:, 1:].sum(axis=1) + (B > 0).sum(axis=0)
            out[ok] += (K[ok] - 1.0) / (2.0 * N[ok])
        return out
    if method == "grassberger":
        vg = np.zeros_like(v)
        vg[1:] = v[1:] * grassberger_g(v[1:])
        bg = np.zeros_like(B)
        if B.size:
            pos = B > 0
            bg[pos] = B[pos] * grassberger_g(B[pos])
        S = (D * vg).sum(axis=1) + bg.sum(axis=0)
        out[ok] = digamma(N[ok]) - S[ok] / N[ok]
        return out
    raise ParameterError(f"Entropy method {method!r} is not one of {', '.join(METHODS)}.", parameter="method")


def replicate_rates(spectra_n, spectra_n1, method: str = "grassberger") -> np.ndarray:
    """:func:`rate_from_counts` (bits) of every replicate at once (``spectra_n = None``: ``n = 0``)."""
    h1 = replicate_entropies(spectra_n1, method)
    if spectra_n is None:
        return h1 / LN2
    return (h1 - replicate_entropies(spectra_n, method)) / LN2


def entropy_counts(counts, method: str = "plugin", base: float | None = 2.0) -> float:
    """Shannon entropy estimate of a count vector (or spectrum), like :func:`scipy.stats.entropy` on counts.

    Parameters
    ----------
    counts:
        Count vector (floats allowed) or a spectrum with ``value``/``multiplicity``.
    method:
        ``plugin``, ``miller-madow`` or ``grassberger`` (``psi(N)`` variant; see module docstring).
    base:
        Logarithm base (2 for bits); ``None`` for nats.
    """
    v, m = as_spectrum(counts)
    h = _entropy_nats(v, m, method_name(method))
    return h if base is None else h / math.log(base)


def choose_depth(length: int, alphabet_size: int, offset: int = 1, factor: float = SAMPLES_PER_WORD) -> tuple[int, bool]:
    """Largest ``n >= 0`` with ``A**(n + offset) <= length / factor``, and whether one exists.

    ``offset = 1`` is the rule for the difference ``H_{n+1} - H_n``,
    ``offset = 0`` for ``H_n`` itself (REFERENCE-CHECKS rule 4).  When no
    ``n`` qualifies, returns ``(0, False)`` for the difference rule and
    ``(1, False)`` for the block rule.
    """
    A = int(alphabet_size)
    if A < 2:
        raise ParameterError("Entropy estimates need an alphabet of at least 2 symbols.", parameter="alphabet_size")
    budget = float(length) / float(factor)
    n = -1
    while A ** (n + 1 + offset) <= budget:
        n += 1
    lowest = 0 if offset >= 1 else 1
    if n < lowest:
        return lowest, False
    return n, True


def _too_short(A: int, k: int, length: int, factor: float = SAMPLES_PER_WORD) -> str:
    return f"too short: A^{k} = {A**k} > length/{factor:g} = {length / factor:g}"


def _wc_info(wc) -> tuple[int, int, int]:
    """(alphabet size, counted depth, length) of a WordCounts."""
    return int(wc.alphabet.size), int(wc.depth), int(wc.length)


def _spec_or_total(wc, n: int):
    """Spectrum at depth n; depth 0 is the single empty word counted once per position."""
    if n == 0:
        return np.array([float(max(wc.length, 1))])
    return wc.spectrum(n)


def block_entropy(
    counts,
    method: str = "grassberger",
    depth: int = 1,
    alphabet_size: int | None = None,
) -> EntropyEstimate:
    """Block entropy ``H_n`` (bits) of one count vector or spectrum.

    Parameters
    ----------
    counts:
        Counts of the n-words (vector, floats allowed, or a spectrum).
    method:
        ``plugin``, ``miller-madow`` or ``grassberger``.
    depth:
        ``n``, used for ``fraction_of_max = H / (n log2 A)`` and the reliability rule.
    alphabet_size:
        ``A``.  Without it the number of bins of a plain count vector is taken
        as the number of possible words (``A**n``).

    Reliability: the number of possible words must be at most ``N / 100``.
    """
    method = method_name(method)
    v, m = as_spectrum(counts)
    N = float((v * m).sum())
    if alphabet_size is not None:
        possible = float(alphabet_size) ** depth
        maxbits = depth * math.log2(alphabet_size)
    else:
        possible = float(np.asarray(counts).size) if not hasattr(counts, "value") else float(m.sum())
        maxbits = math.log2(possible) if possible > 1 else 0.0
    h = _entropy_nats(v, m, method) / LN2
    reliable = possible <= N / SAMPLES_PER_WORD
    note = "" if reliable else f"too short: {possible:g} possible words > N/{SAMPLES_PER_WORD} = {N / SAMPLES_PER_WORD:g}"
    if method == "grassberger" and np.any(v != np.rint(v)):
        note = "; ".join(x for x in (note, "non-integer counts rounded for G(n)") if x)
    return EntropyEstimate(
        quantity="block entropy", method=method, estimate=h, unit="bits",
        fraction_of_max=(h / maxbits) if maxbits > 0 else None, depth=int(depth),
        reliable=bool(reliable), note=note, details={"occurrences": N, "distinct": float(m.sum())},
    )


def block_entropies(wc, method: str = "grassberger", max_depth: int | None = None) -> list[EntropyEstimate]:
    """Block entropies ``H_1 .. H_N`` of a :class:`~fractalseq.words._counts.WordCounts` (from its spectra)."""
    A, N, _ = _wc_info(wc)
    top = N if max_depth is None else min(int(max_depth), N)
    return [block_entropy(wc.spectrum(n), method, n, A) for n in range(1, top + 1)]


def rate_from_counts(counts_n, counts_n1, method: str = "grassberger") -> float:
    """Difference estimate ``H_{n+1} - H_n`` in bits per symbol from two count tables.

    Pure function for the bootstrap: ``counts_n`` and ``counts_n1`` are the
    n-word and (n+1)-word count vectors (or spectra), possibly weighted and
    non-integer.  ``counts_n = None`` means ``n = 0`` (``H_0 = 0``).
    """
    method = method_name(method)
    v1, m1 = as_spectrum(counts_n1)
    h1 = _entropy_nats(v1, m1, method)
    if counts_n is None:
        return h1 / LN2
    v0, m0 = as_spectrum(counts_n)
    return (h1 - _entropy_nats(v0, m0, method)) / LN2


def ratio_from_counts(counts_n, n: int, method: str = "grassberger") -> float:
    """Ratio estimate ``H_n / n`` in bits per symbol from the n-word counts."""
    if n < 1:
        raise ParameterError("The ratio estimate H_n/n needs n >= 1.", parameter="n")
    v, m = as_spectrum(counts_n)
    return _entropy_nats(v, m, method_name(method)) / LN2 / n


def _rate_depth(wc, depth: int | None, offset: int) -> tuple[int, bool, list[str]]:
    A, N, L = _wc_info(wc)
    notes: list[str] = []
    if depth is None:
        n, ok = choose_depth(L, A, offset=offset)
        limit = N - offset
        if n > limit:
            notes.append(f"depth limited to {limit} by the counted depth {N}")
            n = limit
    else:
        n = int(depth)
        if n < (1 - offset) or n + offset > N:
            raise ParameterError(f"Depth {n} needs words of length {n + offset}, but only 1..{N} were counted; count deeper.", parameter="depth")
    k = n + offset
    ok = A**k <= L / SAMPLES_PER_WORD
    if not ok:
        notes.insert(0, _too_short(A, k, L))
    return n, ok, notes


def entropy_table(wc, max_depth: int | None = None) -> list[dict[str, Any]]:
    """Per depth ``n``: distinct and possible words, ``H_n`` by each method, ``H_n/n`` and ``H_{n+1}-H_n``.

    All in bits; ``reliable`` applies rule 4 to the difference at that depth.
    """
    A, N, L = _wc_info(wc)
    top = N if max_depth is None else min(int(max_depth), N)
    H = {m: [0.0] for m in METHODS}
    for n in range(1, top + 1):
        s = wc.spectrum(n)
        v, mult = as_spectrum(s)
        for meth in METHODS:
            H[meth].append(_entropy_nats(v, mult, meth) / LN2)
    rows = []
    for n in range(1, top + 1):
        s = wc.spectrum(n)
        row: dict[str, Any] = {"depth": n, "distinct": s.distinct, "possible": float(A) ** n, "occurrences": s.total}
        for meth in METHODS:
            row[f"H_{meth}"] = H[meth][n]
            row[f"ratio_{meth}"] = H[meth][n] / n
            row[f"difference_{meth}"] = H[meth][n] - H[meth][n - 1]
        row["reliable"] = bool(A**n <= L / SAMPLES_PER_WORD)
        rows.append(row)
    return rows

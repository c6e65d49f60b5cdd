"""Block entropies, entropy rates, Rényi and topological entropy, compressor bounds.

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

import bz2
import dataclasses
import lzma
import math
import zlib
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy.special import digamma

from fractalseq.errors import InputError, ParameterError
from fractalseq.words._kernels import segment_word_addresses

if TYPE_CHECKING:  # for annotations only: the bootstrap module is imported where it is used
    from fractalseq.resampling._bootstrap import BlockLength

LN2 = math.log(2.0)
#: Plug-in block entropies need at least this many occurrences per possible word (rule 4).
SAMPLES_PER_WORD = 100
#: Growth estimates of the topological entropy want this many occurrences per observed word.
SAMPLES_PER_SEEN_WORD = 20
#: Default cap of the compressor bound (symbols compressed).
COMPRESS_MAX_LENGTH = 1 << 24

METHODS = ("plugin", "miller-madow", "grassberger")
_ALIASES = {
    "plugin": "plugin", "plug-in": "plugin", "ml": "plugin", "mle": "plugin",
    "miller-madow": "miller-madow", "mm": "miller-madow", "millermadow": "miller-madow",
    "grassberger": "grassberger", "g03": "grassberger", "grassberger2003": "grassberger",
}


# =================================================================== results
@dataclass(frozen=True)
class EntropyEstimate:
    """One entropy estimate with its unit, reliability and (optional) interval.

    Attributes
    ----------
    quantity:
        What is estimated: ``block entropy``, ``entropy rate``, ``Renyi entropy rate``,
        ``topological entropy``, ``entropy rate upper bound``.
    method:
        Estimator (``plugin``, ``miller-madow``, ``grassberger``, ``difference/grassberger``,
        ``lz76``, ``koslicki``, ``growth``, ``compressors`` ...).
    estimate:
        Value in bits (``unit`` says per block or per symbol).
    unit:
        ``bits`` (per block) or ``bits/symbol``.
    fraction_of_max:
        ``estimate`` divided by its maximum (``n log2 A`` or ``log2 A``); ``None`` when unknown.
    depth:
        Word length ``n`` the estimate is read at (``None`` when not depth-based).
    reliable:
        False when the data are too short for this estimate at this depth.
    note:
        Why it is unreliable, or what was done (cut to a prefix, counts rounded...).
    low, high:
        Interval in bits, when one was computed (see :meth:`with_interval`).
    q:
        Rényi order, for Rényi estimates.
    details:
        Extra numbers (counts, per-compressor sizes...).
    """

    quantity: str
    method: str
    estimate: float
    unit: str = "bits/symbol"
    fraction_of_max: float | None = None
    depth: int | None = None
    reliable: bool = True
    note: str = ""
    low: float | None = None
    high: float | None = None
    q: float | None = None
    details: dict = field(default_factory=dict, compare=False)

    @property
    def bits(self) -> float:
        """The estimate in bits (same as :attr:`estimate`)."""
        return self.estimate

    @property
    def nats(self) -> float:
        """The estimate in nats."""
        return self.estimate * LN2

    def with_interval(self, low: float, high: float, how: str = "") -> "EntropyEstimate":
        """A copy with the interval ``[low, high]`` (bits) attached; ``how`` is added to the note."""
        note = self.note if not how else (f"{self.note}; interval: {how}" if self.note else f"interval: {how}")
        return dataclasses.replace(self, low=float(low), high=float(high), note=note)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (NaN stays NaN; :func:`fractalseq.io._outputs.to_json` writes it as null)."""
        out = {
            "quantity": self.quantity,
            "method": self.method,
            "estimate": float(self.estimate),
            "unit": self.unit,
            "nats": float(self.nats),
            "fraction_of_max": None if self.fraction_of_max is None else float(self.fraction_of_max),
            "depth": self.depth,
            "reliable": bool(self.reliable),
            "note": self.note,
            "low": self.low,
            "high": self.high,
        }
        if self.q is not None:
            out["q"] = float(self.q)
        if self.details:
            out["details"] = dict(self.details)
        return out


# ============================================================ count vectors
def method_name(method: str) -> str:
    """Canonical estimator name (``plugin``, ``miller-madow``, ``grassberger``)."""
    try:
        return _ALIASES[str(method).lower()]
    except KeyError:
        raise ParameterError(f"Entropy method {method!r} is not one of {', '.join(METHODS)}.") from None


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
        raise ParameterError("Grassberger's G(n) is defined for whole numbers n >= 1.")
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
    raise ParameterError(f"Entropy method {method!r} is not one of {', '.join(METHODS)}.")


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
    raise ParameterError(f"Entropy method {method!r} is not one of {', '.join(METHODS)}.")


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
        raise ParameterError("q = 1 is the Shannon limit; use entropy_counts for it.")
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


# ================================================================ depth rule
def choose_depth(length: int, alphabet_size: int, offset: int = 1, factor: float = SAMPLES_PER_WORD) -> tuple[int, bool]:
    """Largest ``n >= 0`` with ``A**(n + offset) <= length / factor``, and whether one exists.

    ``offset = 1`` is the rule for the difference ``H_{n+1} - H_n``,
    ``offset = 0`` for ``H_n`` itself (REFERENCE-CHECKS rule 4).  When no
    ``n`` qualifies, returns ``(0, False)`` for the difference rule and
    ``(1, False)`` for the block rule.
    """
    A = int(alphabet_size)
    if A < 2:
        raise ParameterError("Entropy estimates need an alphabet of at least 2 symbols.")
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


# ============================================================= WordCounts helpers
def _wc_info(wc) -> tuple[int, int, int]:
    """(alphabet size, counted depth, length) of a WordCounts."""
    return int(wc.alphabet.size), int(wc.depth), int(wc.length)


def _spec_or_total(wc, n: int):
    """Spectrum at depth n; depth 0 is the single empty word counted once per position."""
    if n == 0:
        return np.array([float(max(wc.length, 1))])
    return wc.spectrum(n)


# ============================================================ block entropies
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


# =============================================================== rate kernels
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
        raise ParameterError("The ratio estimate H_n/n needs n >= 1.")
    v, m = as_spectrum(counts_n)
    return _entropy_nats(v, m, method_name(method)) / LN2 / n


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
    return (s1 - s0) / (1.0 - q) / LN2


# ============================================================ rate estimators
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
            raise ParameterError(f"Depth {n} needs words of length {n + offset}, but only 1..{N} were counted; count deeper.")
    k = n + offset
    ok = A**k <= L / SAMPLES_PER_WORD
    if not ok:
        notes.insert(0, _too_short(A, k, L))
    return n, ok, notes


def h_difference(wc, depth: int | None = None, method: str = "grassberger") -> EntropyEstimate:
    """Entropy rate by the difference ``H_{n+1} - H_n`` (bits per symbol).

    Parameters
    ----------
    wc:
        :class:`~fractalseq.words._counts.WordCounts` counted to depth ``>= n + 1``.
    depth:
        ``n``; by default the largest ``n >= 0`` with ``A**(n+1) <= length/100``
        (REFERENCE-CHECKS rule 4), limited by the counted depth.
    method:
        ``plugin``, ``miller-madow`` or ``grassberger`` (applied to both block entropies).
    """
    method = method_name(method)
    A, _, L = _wc_info(wc)
    n, ok, notes = _rate_depth(wc, depth, 1)
    c0 = None if n == 0 else wc.spectrum(n)
    h = rate_from_counts(c0, wc.spectrum(n + 1), method)
    return EntropyEstimate(
        quantity="entropy rate", method=f"difference/{method}", estimate=h, unit="bits/symbol",
        fraction_of_max=h / math.log2(A), depth=n, reliable=ok, note="; ".join(notes),
        details={"rule": "largest n with A^(n+1) <= length/100", "length": L},
    )


def h_ratio(wc, depth: int | None = None, method: str = "grassberger") -> EntropyEstimate:
    """Entropy rate by the ratio ``H_n / n`` (bits per symbol).

    Default depth: the largest ``n >= 1`` with ``A**n <= length/100``.  Biased
    upward by ``O(1/n)`` for correlated sources; prefer :func:`h_difference`.
    """
    method = method_name(method)
    A, _, L = _wc_info(wc)
    n, ok, notes = _rate_depth(wc, depth, 0)
    h = ratio_from_counts(wc.spectrum(n), n, method)
    notes.append("ratio H_n/n carries an O(1/n) bias on correlated sources; prefer the difference")
    return EntropyEstimate(
        quantity="entropy rate", method=f"ratio/{method}", estimate=h, unit="bits/symbol",
        fraction_of_max=h / math.log2(A), depth=n, reliable=ok, note="; ".join(notes),
        details={"rule": "largest n with A^n <= length/100", "length": L},
    )


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


def bootstrap_rate(
    est: EntropyEstimate,
    stream,
    n_boot: int = 200,
    seed: int = 0,
    level: float = 0.95,
    block_length: "int | BlockLength | None" = None,
    scheme: str = "nonoverlapping",
    interval: str = "centered",
) -> EntropyEstimate:
    """Attach a block-bootstrap interval to a rate from :func:`h_difference`, :func:`h_ratio` or :func:`h_renyi`.

    The same statistic (:func:`rate_from_counts`, :func:`ratio_from_counts`
    or :func:`renyi_rate_from_counts`) is recomputed on weighted block count
    tables by :func:`fractalseq.resampling._bootstrap.block_bootstrap` (no recounting);
    the block length is chosen from the data unless given.  The interval,
    its level, the bootstrap standard error and the block rule go into the
    result (``low``, ``high``, ``details``, ``note``).

    Parameters
    ----------
    est:
        An estimate made from the counts of ``stream``.
    stream:
        The :class:`~fractalseq.stream.SymbolArray` (or stream) the counts came from.
    n_boot, seed, level, block_length, scheme, interval:
        Passed to the bootstrap (``interval``: ``centered`` (default, as everywhere in the
        package; chosen by the calibration study), ``percentile``, ``basic`` or ``bc``).
    """
    from fractalseq.resampling import _bootstrap as bs

    if est.depth is None or est.quantity not in ("entropy rate", "Renyi entropy rate"):
        raise ParameterError(f"A bootstrap interval is available for depth-based entropy rates, not for {est.method}.")
    n = int(est.depth)
    kind, _, meth = est.method.partition("/")
    if est.quantity == "Renyi entropy rate":
        q = float(est.q)
        unbiased = meth == "factorial-moment"
        depths = (n + 1,) if n == 0 else (n, n + 1)

        def statistic(t):
            return renyi_rate_from_counts(t.get(n), t[n + 1], q, unbiased)

    elif kind == "difference":
        depths = (n + 1,) if n == 0 else (n, n + 1)

        def statistic(t):
            return rate_from_counts(t.get(n), t[n + 1], meth)

    elif kind == "ratio":
        depths = (n,)

        def statistic(t):
            return ratio_from_counts(t[n], n, meth)

    else:
        raise ParameterError(f"A bootstrap interval is not available for the {est.method} estimate.")
    res = bs.block_bootstrap(
        stream, depths, statistic, n_boot=n_boot, seed=seed, block_length=block_length, scheme=scheme, spectra=True
    )
    if not math.isclose(float(res.estimate[0]), est.estimate, rel_tol=1e-9, abs_tol=1e-12):
        raise InputError("The stream given to the bootstrap is not the one the counts came from; pass the same input.")
    lo, hi = res.interval(level, interval)
    how = f"{level:.0%} {interval} block bootstrap, {n_boot} replicates, block length {res.block_length}"
    out = est.with_interval(float(lo[0]), float(hi[0]), how)
    details = dict(out.details)
    details["bootstrap"] = {
        "stderr": float(res.stderr()[0]), "level": level, "interval": interval, "n_boot": int(n_boot),
        "seed": int(seed), "scheme": scheme, "block": res.block.to_dict(), "notes": list(res.notes),
    }
    reliable = out.reliable and not res.notes and math.isfinite(lo[0]) and math.isfinite(hi[0])
    return dataclasses.replace(out, details=details, reliable=reliable,
                               note="; ".join([out.note] + list(res.notes)) if res.notes else out.note)


# ========================================================= topological entropy
def h_topological_growth(wc, depth: int | None = None) -> EntropyEstimate:
    """Topological entropy from the growth of distinct words, ``log2(p(n+1) / p(n))`` bits per symbol.

    ``p(n)`` is the number of distinct n-words.  Default depth: the largest
    ``n`` with ``p(n+1) <= occurrences(n+1) / 20``, so that the observed
    words are seen 20 times on average (limited by the counted depth).  If
    allowed words are rarer than ``1/length`` they are missed and the
    estimate is low.  Converges geometrically for shifts of finite type
    (golden mean: ``log2 phi``; REFERENCE-CHECKS B1), unlike ``log p(n) / n``.
    """
    A, N, L = _wc_info(wc)
    if N < 2 and depth is None:
        raise ParameterError("The growth estimate needs words of length 2; count to depth 2 or more.")
    notes: list[str] = []
    if depth is None:
        n = 1
        ok = False
        for k in range(1, N):
            s = wc.spectrum(k + 1)
            if s.distinct * SAMPLES_PER_SEEN_WORD <= s.total:
                n, ok = k, True
        if not ok:
            notes.append(f"too short: even 2-words are seen fewer than {SAMPLES_PER_SEEN_WORD} times on average")
    else:
        n = int(depth)
        if n < 1 or n + 1 > N:
            raise ParameterError(f"Growth at depth {n} needs words of length {n + 1}; only 1..{N} were counted.")
        s = wc.spectrum(n + 1)
        ok = s.distinct * SAMPLES_PER_SEEN_WORD <= s.total
        if not ok:
            notes.append(f"too short: {s.distinct} distinct {n + 1}-words seen fewer than {SAMPLES_PER_SEEN_WORD} times on average")
    p0, p1 = wc.distinct(n), wc.distinct(n + 1)
    h = math.log2(p1 / p0) if p0 > 0 and p1 > 0 else math.nan
    return EntropyEstimate(
        quantity="topological entropy", method="growth", estimate=h, unit="bits/symbol",
        fraction_of_max=h / math.log2(A), depth=n, reliable=ok, note="; ".join(notes),
        details={"distinct_n": int(p0), "distinct_n1": int(p1),
                 "rule": "largest n with distinct(n+1) <= occurrences(n+1)/20"},
    )


#: Word spaces up to this size are marked in a byte table instead of sorting the words.
_DENSE_DISTINCT = 1 << 28


def distinct_words(codes: np.ndarray, starts: np.ndarray, n: int, A: int) -> int:
    """Number of distinct n-words of codes ``0..A-1`` not spanning a segment start (a byte table, or a sort)."""
    bits = max(1, (int(A) - 1).bit_length())
    words, _ = segment_word_addresses(codes, starts, n, bits)
    if bits * n < 63 and (1 << (bits * n)) <= _DENSE_DISTINCT:
        seen = np.zeros(1 << (bits * n), np.bool_)
        seen[words] = True
        return int(np.count_nonzero(seen))
    return int(np.unique(words).size)


def h_topological_koslicki(data, alphabet_size: int | None = None) -> EntropyEstimate:
    """Koslicki's finite-length topological entropy (Koslicki 2011, Bioinformatics 27:1061).

    Take the largest ``n`` with ``A**n + n - 1 <= length``, keep the prefix of
    length ``A**n + n - 1`` (just long enough to hold every n-word once) and
    return ``log_A p(n) / n`` as ``fraction_of_max`` (``log2 p(n) / n`` bits).
    The truncation rule is recalled from the paper (from memory; see
    REFERENCE-CHECKS E5).  Even an iid uniform stream scores below 1 (about
    0.945 at ``n = 6``), by design comparable across lengths.

    ``data`` is a :class:`~fractalseq.stream.SymbolArray` or a 1-D code array.
    """
    if hasattr(data, "codes") and hasattr(data, "starts"):
        codes = np.asarray(data.codes)
        starts = np.asarray(data.starts, np.int64)
        if alphabet_size is None:
            alphabet_size = data.alphabet.size
    else:
        codes = np.asarray(data)
        starts = np.zeros(1, np.int64)
    if codes.ndim != 1 or codes.size == 0:
        raise InputError("Topological entropy needs a non-empty 1-D stream of codes.")
    A = int(alphabet_size) if alphabet_size is not None else int(codes.max()) + 1
    if A < 2:
        raise ParameterError("Topological entropy needs an alphabet of at least 2 symbols.")
    L = int(codes.size)
    n = 0
    while A ** (n + 1) + n <= L:
        n += 1
    if n == 0:
        raise InputError(f"A stream of {L} symbols is too short for Koslicki's rule (needs A + 0 = {A} symbols).")
    if n * math.log2(A) > 62:
        raise InputError("The stream is too long for Koslicki's rule on this alphabet (A^n overflows 62 bits); give a prefix.")
    prefix = A**n + n - 1
    st = starts[(starts >= 0) & (starts < prefix)]
    st = np.unique(np.concatenate([[0], st])).astype(np.int64)
    p = distinct_words(np.ascontiguousarray(codes[:prefix]).astype(np.int64), st, n, A)
    frac = math.log(p) / math.log(A) / n if p > 0 else 0.0
    notes = [f"prefix of {prefix} symbols (A^n + n - 1) of {L}"]
    if st.size > 1:
        notes.append("prefix has segment breaks: words spanning them are not counted")
    return EntropyEstimate(
        quantity="topological entropy", method="koslicki", estimate=frac * math.log2(A), unit="bits/symbol",
        fraction_of_max=frac, depth=n, reliable=True, note="; ".join(notes),
        details={"distinct": int(p), "prefix": int(prefix), "rule": "largest n with A^n + n - 1 <= length"},
    )


# ============================================================ compressor bound
def _pack(codes: np.ndarray, bits: int) -> bytes:
    """Pack codes of ``bits`` bits each (1, 2 or 4) into bytes, first code in the high bits."""
    per = 8 // bits
    pad = (-codes.size) % per
    c = np.concatenate([codes.astype(np.uint8), np.zeros(pad, np.uint8)]).reshape(-1, per)
    out = np.zeros(c.shape[0], np.uint8)
    for j in range(per):
        out |= (c[:, j] << np.uint8(bits * (per - 1 - j))).astype(np.uint8)
    return out.tobytes()


def h_compressors(data, alphabet_size: int | None = None, max_length: int | None = COMPRESS_MAX_LENGTH) -> EntropyEstimate:
    """Outside upper bound on the entropy rate from general-purpose compressors (bits per symbol).

    The codes are written one byte per symbol (two or four bytes beyond 256
    symbols) and, for ``A <= 16``, also packed 1, 2 or 4 bits per symbol;
    each layout is compressed with ``lzma`` (raw LZMA2, preset 9 | EXTREME),
    ``bz2`` (level 9) and ``zlib`` (level 9) from the standard library.
    ``estimate`` is the smallest ``8 * compressed_bytes / symbols``;
    ``details`` lists every combination.  Segment breaks are ignored (the
    codes are concatenated).  Short streams are dominated by container
    overhead (tens of bytes), flagged below 10,000 symbols.
    """
    if hasattr(data, "codes"):
        codes = np.asarray(data.codes)
        if alphabet_size is None:
            alphabet_size = data.alphabet.size
    else:
        codes = np.asarray(data)
    if codes.ndim != 1 or codes.size == 0:
        raise InputError("The compressor bound needs a non-empty 1-D stream of codes.")
    A = int(alphabet_size) if alphabet_size is not None else int(codes.max()) + 1
    if A < 2:
        raise ParameterError("The compressor bound needs an alphabet of at least 2 symbols.")
    total = int(codes.size)
    notes: list[str] = []
    if max_length is not None and total > max_length:
        codes = codes[: int(max_length)]
        notes.append(f"compressed the first {int(max_length)} of {total} symbols (max_length)")
    n = int(codes.size)
    layouts: dict[str, bytes] = {}
    if A <= 256:
        layouts["byte"] = codes.astype(np.uint8).tobytes()
    elif A <= 65536:
        layouts["uint16"] = codes.astype("<u2").tobytes()
    else:
        layouts["uint32"] = codes.astype("<u4").tobytes()
    b = max(1, math.ceil(math.log2(A)))
    for pb in (1, 2, 4):
        if b <= pb:
            layouts[f"{pb}-bit"] = _pack(codes, pb)
            break
    sizes: dict[str, int] = {}
    for name, raw in layouts.items():
        # preset 9 extreme, with the dictionary no larger than the input (same output, far less set-up)
        dict_size = min(max(4096, len(raw)), 1 << 26)
        filters = [{"id": lzma.FILTER_LZMA2, "preset": 9 | lzma.PRESET_EXTREME, "dict_size": dict_size}]
        sizes[f"lzma/{name}"] = len(lzma.compress(raw, format=lzma.FORMAT_RAW, filters=filters))
        sizes[f"bz2/{name}"] = len(bz2.compress(raw, 9))
        sizes[f"zlib/{name}"] = len(zlib.compress(raw, 9))
    rates = {k: 8.0 * v / n for k, v in sizes.items()}
    best = min(rates, key=lambda k: (rates[k], k))
    reliable = n >= 10_000
    if not reliable:
        notes.append(f"too short: {n} < 10000 symbols, container overhead inflates the bound")
    notes.append(f"best: {best}")
    return EntropyEstimate(
        quantity="entropy rate upper bound", method="compressors", estimate=rates[best], unit="bits/symbol",
        fraction_of_max=rates[best] / math.log2(A), depth=None, reliable=reliable, note="; ".join(notes),
        details={"bits_per_symbol": rates, "compressed_bytes": sizes, "best": best, "symbols": n, "length": total},
    )


# ================================================================= summary table
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

"""Lempel–Ziv (1976) complexity and its entropy-rate estimate.

The *exhaustive history* of a string ``s`` (Lempel & Ziv 1976, IEEE Trans.
Inf. Theory IT-22:75–81) splits it into phrases: each phrase is the longest
prefix of the rest that already occurs starting at an earlier position
(overlapping copies allowed), extended by one new symbol; the last phrase may
end without a new symbol.  The complexity ``c(n)`` is the number of phrases.
Example (worked example as recalled from Kaspar & Schuster 1987 — from memory):
``0001101001000101 -> 0 · 001 · 10 · 100 · 1000 · 101``, ``c = 6``.

Two parsers give the same phrases:

:func:`lz76_complexity_ks`
    The Kaspar & Schuster (1987, Phys. Rev. A 36:842) scanning scheme:
    simple, ``O(n**2 / log n)`` for typical strings.  The reference.
:func:`lz76_complexity` (default)
    The same parse from the *longest previous factor* array (``LPF[i]`` =
    longest prefix of ``s[i:]`` that also starts before ``i``), computed from
    a suffix array (prefix doubling with counting sorts), the Kasai LCP array
    and one stack pass over the suffix array (Crochemore & Ilie 2008, Inf.
    Process. Lett. 106:75–80 — from memory).  ``O(n log n)``; about 1–2 s per
    million symbols on one busy core, 100 times faster than the scan at
    ``10**5`` symbols.  Tests check both parsers agree.

Entropy-rate estimate: ``h = c(n) log_A(n) / n`` in units of ``log A``
(Kaspar & Schuster 1987, ``C = c / b`` with ``b = n / log_A n``), i.e.
``c(n) log2(n) / n`` bits per symbol.  It converges slowly and from above:
for fair coin flips about 1.06 at ``n = 10**3``, 1.03 at ``10**4``,
1.02 at ``10**5`` (our simulations, REFERENCE-CHECKS D4).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from fractalseq.entropy._entropy_estimate import EntropyEstimate
from fractalseq.errors import InputError, ParameterError

#: Longest stream parsed by default; longer streams are cut to this prefix (stated in the result).
DEFAULT_MAX_LENGTH = 1 << 22
#: Below this length the LZ76 estimate is flagged unreliable (upward bias of a few per cent).
MIN_RELIABLE_LENGTH = 10_000


# ------------------------------------------------------------ KS scheme
@njit(cache=True)
def _ks(s, starts_out):
    """Kaspar–Schuster parse; writes phrase starts into ``starts_out``; returns c."""
    n = s.shape[0]
    if n == 0:
        return 0
    starts_out[0] = 0
    if n == 1:
        return 1
    c = 1
    l = 1
    i = 0
    k = 1
    k_max = 1
    starts_out[1] = 1
    while True:
        if s[i + k - 1] == s[l + k - 1]:
            k += 1
            if l + k > n:
                c += 1
                break
        else:
            if k > k_max:
                k_max = k
            i += 1
            if i == l:
                c += 1
                l += k_max
                if l + 1 > n:
                    break
                starts_out[c] = l
                i = 0
                k = 1
                k_max = 1
            else:
                k = 1
    return c


def _code_array(codes) -> np.ndarray:
    """``codes`` as an array, checked (one-dimensional, integer, non-negative) but not converted."""
    arr = np.asarray(codes)
    if arr.ndim != 1:
        raise InputError("LZ76 needs a one-dimensional array of symbol codes.")
    if arr.size and not np.issubdtype(arr.dtype, np.integer):
        raise InputError("LZ76 needs integer symbol codes; encode the symbols first.")
    if arr.size and arr.min() < 0:
        raise InputError("Symbol codes must be non-negative.")
    return arr


def _check_codes(codes) -> np.ndarray:
    arr = _code_array(codes)
    if arr.size >= (1 << 31) - 1:
        raise InputError("LZ76 parses at most 2**31 - 2 symbols at once; give a prefix (max_length).")
    return np.ascontiguousarray(arr.astype(np.int32))


def lz76_complexity_ks(codes) -> int:
    """LZ76 complexity ``c(n)`` by the Kaspar–Schuster scheme (reference implementation)."""
    s = _check_codes(codes)
    buf = np.zeros(max(s.size, 1) + 1, dtype=np.int64)
    return int(_ks(s, buf))


# ------------------------------------------------------- suffix-array parse
@njit(cache=True)
def _suffix_array(s, alphabet_size):
    """Suffix array by prefix doubling with two counting sorts per round.

    The end of the string sorts before every symbol.  The first round sorts
    by the first ``h0`` symbols at once (packed in base ``A + 1``, the end
    as digit 0, key range at most ``min(2**22, 2n)``), which saves several doubling
    rounds.  Returns (sa, rank) as int32 arrays, ranks 1..n.
    """
    n = s.shape[0]
    base = alphabet_size + 1
    h0 = 1
    limit = max(min(1 << 22, 2 * n), base)
    while base ** (h0 + 1) <= limit and h0 + 1 <= n:
        h0 += 1
    keyrange = base**h0
    sa = np.empty(n, np.int32)
    rank = np.empty(n, np.int32)
    tmp = np.empty(n, np.int32)
    newr = np.empty(n, np.int32)
    key = np.empty(n, np.int64)
    # packed keys of the first h0 symbols (digit 0 past the end)
    a = 0
    for i in range(h0):
        a = a * base + (s[i] + 1 if i < n else 0)
    for i in range(n):
        key[i] = a
        nxt = s[i + h0] + 1 if i + h0 < n else 0
        a = (a * base + nxt) % keyrange
    cnt = np.zeros(max(keyrange, n) + 2, np.int64)
    for i in range(n):
        cnt[key[i] + 1] += 1
    for r in range(1, keyrange + 1):
        cnt[r] += cnt[r - 1]
    for i in range(n):
        sa[cnt[key[i]]] = i
        cnt[key[i]] += 1
    k = 1
    newr[sa[0]] = 1
    for j in range(1, n):
        if key[sa[j]] != key[sa[j - 1]]:
            k += 1
        newr[sa[j]] = k
    for i in range(n):
        rank[i] = newr[i]
    h = h0
    while k < n:
        # order by second key rank[i + h] (0 past the end): suffixes past the end first
        # (all have key 0 and distinct first keys), then the others in the order of sa shifted by h.
        p = 0
        for i in range(max(n - h, 0), n):
            tmp[p] = i
            p += 1
        for j in range(n):
            if sa[j] >= h:
                tmp[p] = sa[j] - h
                p += 1
        # stable counting sort of tmp by first key rank[.]
        for r in range(k + 2):
            cnt[r] = 0
        for i in range(n):
            cnt[rank[i]] += 1
        for r in range(1, k + 2):
            cnt[r] += cnt[r - 1]
        for j in range(n - 1, -1, -1):
            i = tmp[j]
            cnt[rank[i]] -= 1
            sa[cnt[rank[i]]] = i
        # new ranks
        newr[sa[0]] = 1
        k = 1
        for j in range(1, n):
            a1 = sa[j - 1]
            b1 = sa[j]
            ra2 = rank[a1 + h] if a1 + h < n else 0
            rb2 = rank[b1 + h] if b1 + h < n else 0
            if rank[a1] != rank[b1] or ra2 != rb2:
                k += 1
            newr[b1] = k
        for i in range(n):
            rank[i] = newr[i]
        h *= 2
    return sa, rank


@njit(cache=True)
def _lcp(s, sa, rank):
    """Kasai LCP: ``lcp[j]`` = common prefix of suffixes ``sa[j-1]`` and ``sa[j]`` (``lcp[0] = 0``)."""
    n = s.shape[0]
    lcp = np.zeros(n, np.int32)
    h = 0
    for i in range(n):
        r = rank[i] - 1  # ranks are 1..n
        if r > 0:
            j = sa[r - 1]
            while i + h < n and j + h < n and s[i + h] == s[j + h]:
                h += 1
            lcp[r] = h
            if h > 0:
                h -= 1
        else:
            h = 0
    return lcp


@njit(cache=True)
def _lpf(sa, lcp):
    """Longest previous factor of every position from the suffix and LCP arrays.

    Scans the suffix array with a stack of ranks whose text positions
    increase; the nearest ranks on either side with a smaller position give
    the longest match that starts earlier.
    """
    n = sa.shape[0]
    lpf = np.zeros(n, np.int32)
    stack = np.empty(n + 1, np.int32)
    dmin = np.empty(n + 1, np.int32)  # lcp between stack[t-1] and stack[t]
    top = 0
    for j in range(n + 1):
        pos = sa[j] if j < n else -1
        m = lcp[j] if j < n else 0
        while top > 0 and sa[stack[top - 1]] > pos:
            e = stack[top - 1]
            # e's next smaller (in position) rank is j, with lcp m
            if m > lpf[sa[e]]:
                lpf[sa[e]] = m
            if dmin[top - 1] < m:
                m = dmin[top - 1]
            top -= 1
        if j < n:
            if top > 0 and m > lpf[pos]:
                lpf[pos] = m  # previous smaller rank
            stack[top] = j
            dmin[top] = m
            top += 1
    return lpf


@njit(cache=True)
def _parse_lpf(lpf, starts_out):
    n = lpf.shape[0]
    l = 0
    c = 0
    while l < n:
        starts_out[c] = l
        c += 1
        l += lpf[l] + 1
    return c


def _parse(s: np.ndarray) -> np.ndarray:
    """Phrase starts of the exhaustive history (suffix-array method)."""
    if s.size == 0:
        return np.zeros(0, np.int64)
    A = int(s.max()) + 1
    sa, rank = _suffix_array(s, A)
    lcp = _lcp(s, sa, rank)
    lpf = _lpf(sa, lcp)
    buf = np.empty(s.size, np.int64)
    c = _parse_lpf(lpf, buf)
    return buf[:c].copy()


def lz76_complexity(codes) -> int:
    """LZ76 complexity ``c(n)``: the number of phrases of the exhaustive history.

    Suffix-array method, ``O(n log n)``; equal to :func:`lz76_complexity_ks`.
    """
    s = _check_codes(codes)
    return int(_parse(s).size)


def lz76_phrases(codes, method: str = "suffix") -> list[tuple[int, int]]:
    """Phrases of the exhaustive history as ``(start, end)`` pairs (end exclusive).

    ``method`` is ``"suffix"`` (default, fast) or ``"ks"`` (Kaspar–Schuster scan).
    """
    s = _check_codes(codes)
    if method == "suffix":
        st = _parse(s)
    elif method == "ks":
        buf = np.zeros(max(s.size, 1) + 1, dtype=np.int64)
        st = buf[: _ks(s, buf)]
    else:
        raise ParameterError(f"LZ76 method {method!r} is not 'suffix' or 'ks'.", parameter="method")
    ends = np.append(st[1:], s.size)
    return [(int(a), int(b)) for a, b in zip(st, ends)]


# ---------------------------------------------------------------- estimate
def h_lz76(
    codes,
    alphabet_size: int | None = None,
    starts=None,
    max_length: int | None = DEFAULT_MAX_LENGTH,
):
    """Entropy-rate estimate from LZ76 complexity, ``c(n) log_A(n) / n`` (Kaspar & Schuster 1987).

    Parameters
    ----------
    codes:
        Symbol codes (1-D integers), or a :class:`fractalseq.stream.SymbolArray`
        (then ``alphabet_size`` and ``starts`` come from it).
    alphabet_size:
        ``A``; defaults to ``max(code) + 1``.
    starts:
        Segment starts.  Each segment is parsed on its own (no phrase copies
        across a break) and the estimate is ``sum_s c_s log2(n_s) / sum_s n_s``.
    max_length:
        Parse at most this many symbols (a prefix; ``None`` for no limit).
        The result says when the stream was cut.

    Returns
    -------
    EntropyEstimate
        ``estimate`` in bits per symbol, ``fraction_of_max`` in units of
        ``log2 A``; ``details`` holds ``complexity`` (total phrases),
        ``parsed`` symbols and ``segments``.  ``reliable`` is false below
        :data:`MIN_RELIABLE_LENGTH` symbols.
    """
    if hasattr(codes, "codes") and hasattr(codes, "starts"):
        if alphabet_size is None:
            alphabet_size = codes.alphabet.size
        starts = codes.starts if starts is None else starts
        codes = codes.codes
    raw = _code_array(codes)  # the whole stream is checked, only the parsed prefix converted
    total = raw.size
    if total == 0:
        raise InputError("LZ76 needs at least one symbol; the stream is empty.")
    top = int(raw.max())
    A = int(alphabet_size) if alphabet_size is not None else top + 1
    if A < 2:
        raise ParameterError("LZ76 entropy needs an alphabet of at least 2 symbols.", parameter="alphabet_size")
    if top >= A:
        raise InputError(f"Symbol codes reach {top}, beyond alphabet size {A}.")
    notes = []
    if max_length is not None and total > max_length:
        raw = raw[: int(max_length)]
        notes.append(f"parsed the first {int(max_length)} of {total} symbols (max_length)")
    s = _check_codes(raw)
    st = np.zeros(1, np.int64) if starts is None else np.asarray(starts, np.int64)
    st = np.unique(np.concatenate([[0], st[(st > 0) & (st < s.size)]]))
    ends = np.append(st[1:], s.size)
    c_total = 0
    weighted = 0.0
    for a, b in zip(st, ends):
        seg = s[a:b]
        if seg.size == 0:
            continue
        c = int(_parse(seg).size)
        c_total += c
        if seg.size > 1:
            weighted += c * math.log2(seg.size)
    n = int(s.size)
    bits = weighted / n
    reliable = n >= MIN_RELIABLE_LENGTH
    if not reliable:
        notes.append(f"too short: {n} < {MIN_RELIABLE_LENGTH} symbols (LZ76 estimate biased upward by several per cent)")
    if st.size > 1:
        notes.append(f"{st.size} segments parsed separately")
    return EntropyEstimate(
        quantity="entropy rate",
        method="lz76",
        estimate=bits,
        unit="bits/symbol",
        fraction_of_max=bits / math.log2(A),
        depth=None,
        reliable=reliable,
        note="; ".join(notes),
        details={"complexity": c_total, "parsed": n, "length": int(total), "segments": int(st.size), "alphabet_size": A},
    )

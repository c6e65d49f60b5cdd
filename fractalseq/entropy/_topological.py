"""Topological entropy: growth of the number of distinct words, and Koslicki's (2011) prefix estimate."""

from __future__ import annotations

import math

import numpy as np

from fractalseq.entropy._entropy_estimate import EntropyEstimate
from fractalseq.entropy._shannon import _wc_info
from fractalseq.errors import InputError, ParameterError
from fractalseq.words._kernels import segment_word_addresses


#: Growth estimates of the topological entropy want this many occurrences per observed word.
SAMPLES_PER_SEEN_WORD = 20


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
        raise ParameterError("The growth estimate needs words of length 2; count to depth 2 or more.", parameter="depth")
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
            raise ParameterError(f"Growth at depth {n} needs words of length {n + 1}; only 1..{N} were counted.", parameter="depth")
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


#: Positions per chunk of :func:`distinct_words` (word addresses live one chunk at a time).
DISTINCT_CHUNK = 1 << 22


def distinct_words(codes: np.ndarray, starts: np.ndarray, n: int, A: int, chunk: int | None = None) -> int:
    """Number of distinct n-words of codes ``0..A-1`` not spanning a segment start (a byte table, or a sort).

    The words are addressed ``chunk`` positions at a time (each chunk with its ``n - 1`` lookahead
    symbols, so every word is seen once), marked in the byte table or kept as each chunk's distinct
    words: memory of one chunk plus the table, not 16 bytes per position.
    """
    bits = max(1, (int(A) - 1).bit_length())
    T = int(codes.size)
    step = max(int(DISTINCT_CHUNK if chunk is None else chunk), 1)
    st_all = np.asarray(starts, dtype=np.int64)
    dense = bits * n < 63 and (1 << (bits * n)) <= _DENSE_DISTINCT
    seen = np.zeros(1 << (bits * n), np.bool_) if dense else None
    parts = []
    for a in range(0, T, step):
        e = min(a + step + n - 1, T)
        inner = st_all[(st_all > a) & (st_all < e)] - a
        words, _ = segment_word_addresses(codes[a:e], np.concatenate([[0], inner]).astype(np.int64), n, bits)
        if seen is not None:
            seen[words] = True
        else:
            parts.append(np.unique(words))
    if seen is not None:
        return int(np.count_nonzero(seen))
    return int(np.unique(np.concatenate(parts)).size) if parts else 0


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
        raise ParameterError("Topological entropy needs an alphabet of at least 2 symbols.", parameter="alphabet_size")
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
    p = distinct_words(codes[:prefix], st, n, A)
    frac = math.log(p) / math.log(A) / n if p > 0 else 0.0
    notes = [f"prefix of {prefix} symbols (A^n + n - 1) of {L}"]
    if st.size > 1:
        notes.append("prefix has segment breaks: words spanning them are not counted")
    return EntropyEstimate(
        quantity="topological entropy", method="koslicki", estimate=frac * math.log2(A), unit="bits/symbol",
        fraction_of_max=frac, depth=n, reliable=True, note="; ".join(notes),
        details={"distinct": int(p), "prefix": int(prefix), "rule": "largest n with A^n + n - 1 <= length"},
    )

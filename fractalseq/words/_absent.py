"""Absent and under-represented words against a low-order Markov model.

Fit an order-``m`` Markov model from the ``(m+1)``-word counts of a stream
and compare the observed count of every deeper ``n``-word with its
expected count

    ``E(w) = N_n * p(w_1 .. w_{m+1}) * prod_{i > m+1} p(w_i | w_{i-m} .. w_{i-1})``,

``N_n`` the number of n-word positions, ``p(u) = N(u) / N_{m+1}`` and
``p(x | c) = N(c x) / sum_y N(c y)`` (maximum likelihood).  ``m = 0`` is the
composition (independent symbols).

*Absent words* are words expected at least ``min_expected`` times that never
occur, ranked by expected count.  The chance of missing a word by luck uses
the Poisson-clumping approximation for word counts (Reinert, Schbath &
Waterman 2000, J. Comput. Biol. 7:1–46 — from memory): occurrences of a
self-overlapping word come in clumps, the number of clumps is roughly
Poisson with mean ``E (1 - a)``, ``a`` the probability that an occurrence
is followed by another one shifted by the word's principal period, so
``P(absent) ~ exp(-E (1 - a))``.  The plain Poisson value ``exp(-E)`` is
reported too.  The model is fitted on the same data, which these numbers
ignore; treat them as a ranking, not a test.

Only words with ``E >= min_expected`` are examined.  Because the model is a
probability measure on extensions, a word's prefixes are at least as
probable as the word, so a depth-first search that prunes prefixes below
the threshold visits at most ``n * A * N_n / min_expected`` nodes, at any
depth and for any alphabet.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError

#: Default threshold on the expected count of a listed word.
MIN_EXPECTED = 10.0
#: Largest (m+1)-word table the model may use (dense, base A).
MAX_MODEL_CELLS = 1 << 24
#: Model counts need this many occurrences per possible (m+1)-word (REFERENCE-CHECKS rule 4).
SAMPLES_PER_WORD = 100


# ==================================================================== results
@dataclass(frozen=True)
class WordRow:
    """One word compared with the model.

    Attributes
    ----------
    word:
        The word as text.
    address:
        Packed address (see :mod:`fractalseq.words._counts`).
    observed, expected:
        Observed count and expected count under the model.
    ratio:
        ``observed / expected``.
    z:
        ``(observed - expected) / sd`` with the clump-corrected variance
        ``E (1 + a) / (1 - a)`` (compound Poisson with geometric clumps).
    p_absent:
        Chance that the word is absent under the model, ``exp(-E (1 - a))``.
    p_absent_poisson:
        Plain Poisson value ``exp(-E)``.
    overlap:
        ``a``, the probability of a self-overlapping continuation at the principal period.
    period:
        Principal period of the word (its length when it does not overlap itself).
    minimal:
        For absent words: both (n-1)-subwords (prefix and suffix) occur,
        i.e. a *minimal* absent word.  ``None`` for words that occur.
    """

    word: str
    address: int
    observed: int
    expected: float
    ratio: float
    z: float
    p_absent: float
    p_absent_poisson: float
    overlap: float
    period: int
    minimal: bool | None

    def to_dict(self) -> dict[str, Any]:
        return {
            "word": self.word, "address": int(self.address), "observed": int(self.observed),
            "expected": float(self.expected), "ratio": float(self.ratio), "z": float(self.z),
            "p_absent": float(self.p_absent), "p_absent_poisson": float(self.p_absent_poisson),
            "overlap": float(self.overlap), "period": int(self.period), "minimal": self.minimal,
        }


@dataclass(frozen=True)
class WordReport:
    """Words at one depth compared with an order-m model.

    Attributes
    ----------
    kind:
        ``absent``, ``under-represented`` or ``over-represented``.
    depth, model_order, min_expected:
        Word length ``n``, model order ``m`` and the expected-count threshold.
    length, occurrences:
        Symbols in the stream and n-word positions ``N_n``.
    possible, distinct, absent_total:
        ``A**n``, observed distinct n-words, and ``A**n - distinct``.
    candidates:
        Words with expected count ``>= min_expected`` (the words examined).
    matching:
        Candidates of the requested kind (all absent candidates, or all
        candidates with ratio below / above 1).
    rows:
        The listed words, best first (at most ``max_list``).
    reliable, note:
        False when the model is fitted from too few counts (``A**(m+1) > length/100``)
        or no word reaches the threshold; the note says why.
    """

    kind: str
    depth: int
    model_order: int
    min_expected: float
    length: int
    occurrences: int
    possible: float
    distinct: int
    absent_total: float
    candidates: int
    matching: int
    rows: tuple[WordRow, ...]
    reliable: bool
    note: str
    details: dict = field(default_factory=dict, compare=False)

    def words(self) -> list[str]:
        """The listed words, in order."""
        return [r.word for r in self.rows]

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": self.kind, "depth": self.depth, "model_order": self.model_order,
            "min_expected": float(self.min_expected), "length": self.length, "occurrences": self.occurrences,
            "possible": float(self.possible), "distinct": self.distinct, "absent_total": float(self.absent_total),
            "candidates": self.candidates, "matching": self.matching, "reliable": bool(self.reliable),
            "note": self.note, "rows": [r.to_dict() for r in self.rows], **({"details": dict(self.details)} if self.details else {}),
        }


# ===================================================================== model
class MarkovModel:
    """Order-m maximum-likelihood Markov model fitted from the (m+1)-word counts of a WordCounts.

    Attributes
    ----------
    order, A, bits:
        Model order, alphabet size, bits per symbol in packed addresses.
    first:
        ``p(u)`` for every (m+1)-word ``u`` (base-A index, first symbol most significant).
    cond:
        ``p(x | c)`` as a flat table indexed like ``first`` (context ``c`` then ``x``);
        rows of contexts never followed by anything are zero.
    """

    def __init__(self, wc, order: int) -> None:
        A = int(wc.alphabet.size)
        order = int(order)
        if order < 0:
            raise ParameterError("The model order must be 0 or more.")
        if order + 1 > wc.depth:
            raise ParameterError(
                f"An order-{order} model needs words of length {order + 1}, but only 1..{wc.depth} were counted; count deeper."
            )
        if A ** (order + 1) > MAX_MODEL_CELLS:
            raise ParameterError(
                f"An order-{order} model over {A} symbols has {A ** (order + 1)} cells, too many; use a lower order."
            )
        self.order, self.A, self.bits = order, A, int(wc.bits)
        addr, cnt = wc.words(order + 1)
        idx = base_a_index(addr, order + 1, A, self.bits)
        table = np.zeros(A ** (order + 1), np.float64)
        np.add.at(table, idx, cnt.astype(np.float64))
        total = table.sum()
        self.first = table / total if total > 0 else table
        rows = table.reshape(-1, A)
        rs = rows.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            self.cond = np.where(rs > 0, rows / np.where(rs > 0, rs, 1.0), 0.0).ravel()

    def probability(self, codes) -> float:
        """Model probability of a word given by its codes (length ``>= order + 1``)."""
        c = [int(x) for x in codes]
        m, A = self.order, self.A
        if len(c) < m + 1:
            raise ParameterError(f"Words must have at least {m + 1} symbols for an order-{m} model.")
        u = 0
        for x in c[: m + 1]:
            u = u * A + x
        p = float(self.first[u])
        ctx_mod = A**m
        ctx = u % ctx_mod if m > 0 else 0
        for x in c[m + 1:]:
            p *= float(self.cond[ctx * A + x])
            ctx = (ctx * A + x) % ctx_mod if m > 0 else 0
        return p

    def continuation(self, history, extra) -> float:
        """Probability of the symbols ``extra`` following ``history`` (at least ``order`` symbols)."""
        m, A = self.order, self.A
        h = [int(x) for x in history]
        p = 1.0
        for x in extra:
            ctx = 0
            for y in h[len(h) - m:] if m > 0 else []:
                ctx = ctx * A + y
            p *= float(self.cond[ctx * A + int(x)])
            h.append(int(x))
        return p


def base_a_index(addr: np.ndarray, n: int, A: int, bits: int) -> np.ndarray:
    """Convert packed n-word addresses (``bits`` per symbol) to base-A indices."""
    addr = np.asarray(addr, dtype=np.uint64)
    mask = np.uint64((1 << bits) - 1)
    idx = np.zeros(addr.shape, np.int64)
    for j in range(n):
        d = (addr >> np.uint64(bits * (n - 1 - j))) & mask
        idx = idx * A + d.astype(np.int64)
    return idx


@njit(cache=True)
def _expected_words(first, cond, A, m, n, bits, N, threshold, capacity):
    """Depth-first search for n-words with ``N * p(w) >= threshold``.

    Returns packed addresses (uint64) and expected counts of those words.
    """
    out_addr = np.empty(capacity, np.uint64)
    out_e = np.empty(capacity, np.float64)
    k = 0
    size = n * A + A ** (m + 1) + 1
    st_addr = np.empty(size, np.uint64)
    st_ctx = np.empty(size, np.int64)
    st_p = np.empty(size, np.float64)
    st_len = np.empty(size, np.int64)
    top = 0
    cut = threshold / N
    ctx_mod = A**m
    b = np.uint64(bits)
    # seed with the (m+1)-words (pushed in reverse so that words come out in order)
    for u in range(A ** (m + 1) - 1, -1, -1):
        p = first[u]
        if p > 0 and p >= cut:
            a = np.uint64(0)
            v = u
            # packed address of u: digits of u in base A, first most significant
            mult = np.uint64(1)
            for _ in range(m + 1):
                d = np.uint64(v % A)
                a += d * mult
                mult = mult << b
                v //= A
            st_addr[top] = a
            st_ctx[top] = u % ctx_mod if m > 0 else 0
            st_p[top] = p
            st_len[top] = m + 1
            top += 1
    while top > 0:
        top -= 1
        a = st_addr[top]
        ctx = st_ctx[top]
        p = st_p[top]
        ln = st_len[top]
        if ln == n:
            if k < capacity:
                out_addr[k] = a
                out_e[k] = p * N
                k += 1
            continue
        for x in range(A - 1, -1, -1):
            q = p * cond[ctx * A + x]
            if q > 0 and q >= cut:
                st_addr[top] = (a << b) | np.uint64(x)
                st_ctx[top] = (ctx * A + x) % ctx_mod if m > 0 else 0
                st_p[top] = q
                st_len[top] = ln + 1
                top += 1
    return out_addr[:k], out_e[:k]


# ================================================================== helpers
def _principal_period(codes: list[int]) -> int:
    n = len(codes)
    for p in range(1, n):
        if all(codes[i] == codes[i + p] for i in range(n - p)):
            return p
    return n


def _default_order(wc, depth: int) -> int:
    A, L = int(wc.alphabet.size), int(wc.length)
    m = 0
    while A ** (m + 2) <= L / SAMPLES_PER_WORD and m + 1 <= depth - 2 and m + 2 <= wc.depth:
        m += 1
    return m


def _lookup(sorted_addr: np.ndarray, sorted_cnt: np.ndarray, query: np.ndarray) -> np.ndarray:
    if sorted_addr.size == 0:
        return np.zeros(query.shape, np.int64)
    sa = sorted_addr.astype(np.uint64)
    i = np.searchsorted(sa, query)
    i = np.minimum(i, sa.size - 1)
    hit = sa[i] == query
    return np.where(hit, sorted_cnt[i], 0).astype(np.int64)


def _row(wc, model: MarkovModel, n: int, address: int, observed: int, expected: float, sub: tuple | None) -> WordRow:
    from fractalseq.words._counts import decode_address

    codes = decode_address(int(address), n, wc.bits)
    period = _principal_period(codes)
    a = 0.0
    if period < n:
        a = model.continuation(codes, codes[n - period:])
    a = min(a, 1.0 - 1e-15)
    lam = expected * (1.0 - a)
    sd = math.sqrt(expected * (1.0 + a) / (1.0 - a)) if expected > 0 else math.nan
    minimal = None
    if observed == 0 and sub is not None:
        addr_s, cnt_s = sub
        pre = np.array([address >> wc.bits], np.uint64)
        suf = np.array([address & ((1 << (wc.bits * (n - 1))) - 1)], np.uint64)
        minimal = bool(_lookup(addr_s, cnt_s, pre)[0] > 0 and _lookup(addr_s, cnt_s, suf)[0] > 0)
    return WordRow(
        word=wc.alphabet.word(codes), address=int(address), observed=int(observed), expected=float(expected),
        ratio=float(observed / expected) if expected > 0 else math.nan,
        z=float((observed - expected) / sd) if sd and sd > 0 else math.nan,
        p_absent=math.exp(-lam), p_absent_poisson=math.exp(-expected), overlap=float(a), period=int(period),
        minimal=minimal,
    )


def _scan(wc, depth: int, model_order: int | None, min_expected: float):
    """Validate, fit the model, find the candidates; returns the pieces every report needs."""
    depth = int(depth)
    if depth < 2 or depth > wc.depth:
        raise ParameterError(f"Depth {depth} must lie in 2..{wc.depth} (the counted depth); count deeper or ask less.")
    m = _default_order(wc, depth) if model_order is None else int(model_order)
    if m > depth - 2:
        raise ParameterError(
            f"An order-{m} model predicts {depth}-words from their own counts; use a model order of at most {depth - 2}."
        )
    if not min_expected > 0:
        raise ParameterError("The expected-count threshold must be positive.")
    model = MarkovModel(wc, m)
    A, L = model.A, int(wc.length)
    obs_addr, obs_cnt = wc.words(depth)
    N = int(obs_cnt.sum())
    capacity = int(N / float(min_expected)) + 2
    addr, expct = _expected_words(model.first, model.cond, A, m, depth, wc.bits, float(N),
                                  float(min_expected) * (1 - 1e-12), capacity)
    observed = _lookup(obs_addr, obs_cnt, addr)
    notes = []
    reliable = True
    if A ** (m + 1) > L / SAMPLES_PER_WORD:
        reliable = False
        notes.append(f"too short for the model: A^{m + 1} = {A ** (m + 1)} > length/{SAMPLES_PER_WORD} = {L / SAMPLES_PER_WORD:g}")
    if addr.size == 0:
        reliable = False
        notes.append(f"too short: no {depth}-word is expected {min_expected:g} times under the model")
    info = {
        "depth": depth, "model_order": m, "min_expected": float(min_expected), "length": L, "occurrences": N,
        "possible": float(A) ** depth, "distinct": int(obs_addr.size),
        "absent_total": float(A) ** depth - int(obs_addr.size), "candidates": int(addr.size),
    }
    return model, addr, expct, observed, info, reliable, notes


# ================================================================ public API
def absent_words(
    wc,
    depth: int,
    model_order: int | None = None,
    min_expected: float = MIN_EXPECTED,
    max_list: int = 50,
) -> WordReport:
    """Words expected at least ``min_expected`` times under an order-m model that never occur.

    Parameters
    ----------
    wc:
        :class:`~fractalseq.words._counts.WordCounts` counted to at least ``depth``.
    depth:
        Word length ``n`` (at least 2).
    model_order:
        ``m`` (at most ``n - 2``); by default the largest ``m <= n - 2`` whose
        ``(m+1)``-word table satisfies ``A**(m+1) <= length/100``.
    min_expected:
        Only words with expected count at least this are examined (default 10).
    max_list:
        List at most this many words.

    Returns
    -------
    WordReport
        Rows ranked by expected count (largest first, ties by word), with
        ``p_absent`` the clump-corrected Poisson chance of missing the word.
    """
    model, addr, expct, observed, info, reliable, notes = _scan(wc, depth, model_order, min_expected)
    sel = np.flatnonzero(observed == 0)
    order = sel[np.lexsort((addr[sel], -expct[sel]))][: int(max_list)]
    n = info["depth"]
    sub = wc.words(n - 1) if n >= 2 else None
    rows = tuple(_row(wc, model, n, int(addr[i]), 0, float(expct[i]), sub) for i in order)
    notes.append("chance of absence: Poisson clumping approximation; the model is fitted on the same data")
    return WordReport(kind="absent", matching=int(sel.size), rows=rows, reliable=reliable, note="; ".join(notes), **info)


def word_deviations(
    wc,
    depth: int,
    model_order: int | None = None,
    min_expected: float = MIN_EXPECTED,
    max_list: int = 50,
    direction: str = "under",
) -> WordReport:
    """Most under- (or over-) represented words by observed/expected ratio under an order-m model.

    Same model and threshold as :func:`absent_words`; words expected fewer
    than ``min_expected`` times are not examined.  ``direction`` is
    ``"under"`` (smallest ratio first, absent words included) or ``"over"``
    (largest first).  Each row carries ``z`` with the clump-corrected variance.
    """
    if direction not in ("under", "over"):
        raise ParameterError(f"Direction {direction!r} is not 'under' or 'over'.")
    model, addr, expct, observed, info, reliable, notes = _scan(wc, depth, model_order, min_expected)
    ratio = observed / expct
    if direction == "under":
        sel = np.flatnonzero(ratio < 1)
        order = sel[np.lexsort((addr[sel], -expct[sel], ratio[sel]))]
    else:
        sel = np.flatnonzero(ratio > 1)
        order = sel[np.lexsort((addr[sel], -expct[sel], -ratio[sel]))]
    order = order[: int(max_list)]
    n = info["depth"]
    sub = wc.words(n - 1)
    rows = tuple(_row(wc, model, n, int(addr[i]), int(observed[i]), float(expct[i]), sub) for i in order)
    notes.append("ratios and z-scores against a model fitted on the same data")
    kind = "under-represented" if direction == "under" else "over-represented"
    return WordReport(kind=kind, matching=int(sel.size), rows=rows, reliable=reliable, note="; ".join(notes), **info)


def observed_expected(wc, word, model_order: int = 0) -> float:
    """Observed/expected count of one word under an order-m model (``m = 0``: composition).

    For a dinucleotide and ``m = 0`` this is the CpG-style ratio
    ``N_xy N_1**2 / (N_2 N_x N_y)`` (close to ``N_xy L / (N_x N_y)`` for one segment).
    """
    codes = wc.alphabet.encode(word) if isinstance(word, str) else np.asarray(list(word))
    n = len(codes)
    if n < model_order + 1 or n > wc.depth:
        raise ParameterError(f"A word of length {n} needs 1 <= model order + 1 <= {n} <= counted depth {wc.depth}.")
    model = MarkovModel(wc, model_order)
    e = wc.total(n) * model.probability(codes)
    return wc.count_of(codes) / e if e > 0 else math.nan

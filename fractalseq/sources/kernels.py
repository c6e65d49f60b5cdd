"""Numba kernels of the input readers.

Three kernels:

:func:`scan_symbols`
    one pass over a block of raw values (bytes, or indices into a small
    lookup table for decoded text) that follows the FASTA / FASTQ / plain
    layout, translates each value through a lookup table and applies the
    unknown-symbol policy.  It emits codes, segment starts, header events and
    per-value drop counts, and keeps its state in a small int64 array so the
    next block continues exactly where this one stopped (headers, lines and
    records may straddle block edges).

:func:`ordinal_codes`
    Bandt–Pompe ordinal patterns of order ``m`` over a float array, with
    NaN ending the segment; :func:`ordinal_codes_delay` is its general form
    (embedding delay, ties ordered by a key).

Lookup-table classes (see :mod:`fractalseq.alphabet`): ``code >= 0`` a symbol,
``-1`` unknown, ``-2`` ambiguous, ``-3`` layout (ignored silently).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

# layouts
PLAIN = 0
FASTA = 1
FASTQ = 2

# policies
BREAK = 0
SKIP = 1
ERROR = 2
POLICY_CODES = {"break": BREAK, "skip": SKIP, "error": ERROR}

# phases
P_SEQ = 0
P_HEADER = 1
P_EXPECT = 2  # FASTQ: waiting for '@'
P_PLUS = 3  # FASTQ: on the '+' line
P_QUAL = 4  # FASTQ: quality lines
P_COMMENT = 5  # FASTA: a line starting with ';'

# state slots
S_PHASE = 0
S_LINE_START = 1
S_PENDING = 2
S_LINE = 3
S_SEQ_LEN = 4
S_QUAL_LEN = 5
S_NCODES = 6
S_NSTARTS = 7
S_NEV = 8
S_ERR_KIND = 9
S_ERR_POS = 10
N_STATE = 11

# error kinds
E_NONE = 0
E_SYMBOL = 1
E_FASTQ_START = 2
E_FASTQ_QUAL = 3

# event kinds (events[k] = kind, raw position, codes emitted before it in this block)
EV_HEADER_START = 0
EV_HEADER_END = 1

_IGNORED = -3

_NL = 10
_GT = 62
_SEMI = 59
_AT = 64
_PLUS = 43
_CR = 13
_SP = 32
_TAB = 9


def new_state(layout: int) -> np.ndarray:
    """Initial scanner state for a stream (new segment pending, line 1)."""
    state = np.zeros(N_STATE, dtype=np.int64)
    state[S_PHASE] = P_EXPECT if layout == FASTQ else P_SEQ
    state[S_LINE_START] = 0 if layout == PLAIN else 1
    state[S_PENDING] = 1
    state[S_LINE] = 1
    return state


@njit(cache=True)
def scan_symbols(raw, lo, lut, layout, policy, nl, state, codes, starts, dropped, events):  # pragma: no cover - numba
    """Scan ``raw[lo:]``; return the position where scanning stopped.

    Parameters
    ----------
    raw : 1-D integer array
        Bytes (FASTA, FASTQ, plain) or indices into ``lut`` (plain only).
    lo : int
        First position to scan.
    lut : 1-D int16/int32 array
        Class of each raw value: code, or -1 unknown, -2 ambiguous, -3 ignored.
        For FASTA/FASTQ the line feed must be classed as ignored.
    layout : int
        ``PLAIN``, ``FASTA`` or ``FASTQ``.
    policy : int
        ``BREAK``, ``SKIP`` or ``ERROR``.
    nl : int
        Raw value of a line end (for line numbers), or -1; 10 for FASTA/FASTQ.
    state : int64 array
        Scanner state (see the ``S_*`` slots), updated in place.
    codes, starts : arrays
        Output codes and segment starts; ``state[S_NCODES]`` and
        ``state[S_NSTARTS]`` say how many are filled.
    dropped : int64 array, same length as ``lut``
        Incremented per dropped raw value.
    events : int64 array (K, 3)
        Header events; scanning stops early when it is full
        (``state[S_NEV] == K``) so the caller can empty it and continue.

    Returns
    -------
    int
        The position reached: ``len(raw)``, or earlier when ``events`` is
        full or an error was found (``state[S_ERR_KIND] != 0``).
    """
    n = raw.shape[0]
    cap = events.shape[0]
    phase = state[S_PHASE]
    ls = state[S_LINE_START]
    pend = state[S_PENDING]
    line = state[S_LINE]
    seq_len = state[S_SEQ_LEN]
    qual_len = state[S_QUAL_LEN]
    nc = state[S_NCODES]
    ns = state[S_NSTARTS]
    nev = state[S_NEV]
    err = 0
    i = lo
    while i < n:
        b = raw[i]
        c = lut[b]
        if phase != P_SEQ or ls != 0 or c < 0:
            # not a symbol inside a sequence line (that common case skips this block): the
            # layout consumes headers, comments, FASTQ quality lines and every FASTA/FASTQ
            # line end; what falls through is a symbol or an ignored/unknown/ambiguous value
            if nev == cap:
                break
            if layout != PLAIN:
                if phase == P_COMMENT:
                    if b == _NL:
                        line += 1
                        ls = 1
                        phase = P_SEQ
                    i += 1
                    continue
                if phase == P_HEADER:
                    if b == _NL:
                        events[nev, 0] = EV_HEADER_END
                        events[nev, 1] = i
                        events[nev, 2] = nc
                        nev += 1
                        line += 1
                        ls = 1
                        phase = P_SEQ
                    i += 1
                    continue
                if layout == FASTQ:
                    if phase == P_EXPECT:
                        if b == _NL:
                            line += 1
                            ls = 1
                        elif b == _AT:
                            phase = P_HEADER
                            events[nev, 0] = EV_HEADER_START
                            events[nev, 1] = i + 1
                            events[nev, 2] = nc
                            nev += 1
                            pend = 1
                            seq_len = 0
                            ls = 0
                        elif b != _CR and b != _SP and b != _TAB:
                            err = E_FASTQ_START
                            break
                        i += 1
                        continue
                    if phase == P_PLUS:
                        if b == _NL:
                            line += 1
                            ls = 1
                            qual_len = 0
                            phase = P_QUAL if seq_len > 0 else P_EXPECT
                        i += 1
                        continue
                    if phase == P_QUAL:
                        if b == _NL:
                            line += 1
                            ls = 1
                            if qual_len >= seq_len:
                                phase = P_EXPECT
                        elif b != _CR and b != _SP and b != _TAB:
                            qual_len += 1
                            if qual_len > seq_len:
                                err = E_FASTQ_QUAL
                                break
                        i += 1
                        continue
                    # P_SEQ of FASTQ
                    if b == _NL:
                        line += 1
                        ls = 1
                        i += 1
                        continue
                    if ls == 1 and b == _PLUS:
                        phase = P_PLUS
                        ls = 0
                        i += 1
                        continue
                    ls = 0
                else:
                    # P_SEQ of FASTA
                    if b == _NL:
                        line += 1
                        ls = 1
                        i += 1
                        continue
                    if ls == 1 and b == _GT:
                        phase = P_HEADER
                        events[nev, 0] = EV_HEADER_START
                        events[nev, 1] = i + 1
                        events[nev, 2] = nc
                        nev += 1
                        pend = 1
                        ls = 0
                        i += 1
                        continue
                    if ls == 1 and b == _SEMI:
                        phase = P_COMMENT
                        ls = 0
                        i += 1
                        continue
                    ls = 0
        if b == nl:
            line += 1
        # translate and apply the unknown-symbol policy
        if c >= 0:
            if pend == 1:
                starts[ns] = nc
                ns += 1
                pend = 0
            codes[nc] = c
            nc += 1
            seq_len += 1
        elif c != _IGNORED:
            if policy == ERROR:
                err = E_SYMBOL
                break
            dropped[b] += 1
            seq_len += 1
            if policy == BREAK:
                pend = 1
        i += 1
    state[S_PHASE] = phase
    state[S_LINE_START] = ls
    state[S_PENDING] = pend
    state[S_LINE] = line
    state[S_SEQ_LEN] = seq_len
    state[S_QUAL_LEN] = qual_len
    state[S_NCODES] = nc
    state[S_NSTARTS] = ns
    state[S_NEV] = nev
    state[S_ERR_KIND] = err
    state[S_ERR_POS] = i
    return i


@njit(cache=True)
def _lex_rank(window, m, fact):  # pragma: no cover - numba
    """Lexicographic rank of the stable argsort permutation of ``window``."""
    # stable insertion sort of indices by value (earlier index wins ties)
    perm = np.empty(m, dtype=np.int64)
    for a in range(m):
        perm[a] = a
    for a in range(1, m):
        k = perm[a]
        v = window[k]
        j = a - 1
        while j >= 0 and window[perm[j]] > v:
            perm[j + 1] = perm[j]
            j -= 1
        perm[j + 1] = k
    rank = 0
    for a in range(m):
        smaller = 0
        for j in range(a + 1, m):
            if perm[j] < perm[a]:
                smaller += 1
        rank += smaller * fact[m - 1 - a]
    return rank


@njit(cache=True)
def ordinal_codes(x, m, skip, in_seg, codes, starts, fact):  # pragma: no cover - numba
    """Ordinal-pattern codes of every length-``m`` NaN-free window of ``x``.

    Parameters
    ----------
    x : float64 array
        Values; the first ``skip`` are carried over from the previous chunk
        (windows ending inside them were already emitted).
    m : int
        Pattern order.
    skip : int
        Number of carried values at the front of ``x``.
    in_seg : int
        1 if the carried run already emitted symbols (the segment continues).
    codes, starts : output arrays
    fact : int64 array of factorials ``0! .. m!``

    Returns
    -------
    (n_codes, n_starts, in_seg, dropped_nan)
    """
    n = x.shape[0]
    run = 0
    nc = 0
    ns = 0
    nan_count = 0
    for t in range(n):
        v = x[t]
        if math.isnan(v):
            run = 0
            in_seg = 0
            if t >= skip:
                nan_count += 1
            continue
        run += 1
        if run >= m and t >= skip:
            code = _lex_rank(x[t - m + 1 : t + 1], m, fact)
            if in_seg == 0:
                starts[ns] = nc
                ns += 1
                in_seg = 1
            codes[nc] = code
            nc += 1
    return nc, ns, in_seg, nan_count


@njit(cache=True)
def ordinal_codes_delay(x, key, m, tau, skip, in_seg, codes, starts, fact):  # pragma: no cover - numba
    """Ordinal-pattern codes of every NaN-free window ``x[t-(m-1)tau], ..., x[t-tau], x[t]`` of ``x``.

    The general form of :func:`ordinal_codes`: an embedding delay ``tau`` and
    equal values ordered by ``key`` (the smaller key counts as smaller: the
    position for ties by time, a seeded uniform number for a dither).  A window
    is emitted at its last value ``t >= skip`` (the first ``skip`` values were
    carried over from the previous chunk, their windows already emitted); a
    segment starts at every emitted window whose predecessor (the window ending
    at ``t - 1``) was not emitted.  ``in_seg`` is 1 when the window ending just
    before ``x[skip]`` was emitted.  Returns ``(n_codes, n_starts, in_seg, nan_count)``
    with ``nan_count`` the NaN values at ``t >= skip``.
    """
    n = x.shape[0]
    span = (m - 1) * tau
    perm = np.empty(m, dtype=np.int64)
    nc = 0
    ns = 0
    nan_count = 0
    for t in range(skip, n):
        if math.isnan(x[t]):
            nan_count += 1
        ok = t >= span
        if ok:
            for j in range(m):
                if math.isnan(x[t - span + j * tau]):
                    ok = False
                    break
        if not ok:
            in_seg = 0
            continue
        first = t - span
        for a in range(m):
            perm[a] = a
        for a in range(1, m):  # insertion sort of the positions by (value, key)
            k = perm[a]
            v = x[first + k * tau]
            kv = key[first + k * tau]
            j = a - 1
            while j >= 0:
                q = perm[j]
                vq = x[first + q * tau]
                if vq > v or (vq == v and key[first + q * tau] > kv):
                    perm[j + 1] = q
                    j -= 1
                else:
                    break
            perm[j + 1] = k
        rank = 0
        for a in range(m):
            smaller = 0
            for j in range(a + 1, m):
                if perm[j] < perm[a]:
                    smaller += 1
            rank += smaller * fact[m - 1 - a]
        if in_seg == 0:
            starts[ns] = nc
            ns += 1
            in_seg = 1
        codes[nc] = rank
        nc += 1
    return nc, ns, in_seg, nan_count

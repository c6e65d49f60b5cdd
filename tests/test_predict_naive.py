"""Slow, obviously correct twins of the predictor's kernels, compared with them on random small inputs.

The twins are written from the docstrings of :mod:`fractalseq.predict._online_kernel`,
:mod:`fractalseq.predict._kernel_tools` and :mod:`fractalseq.predict._fitted_kernels`, one
symbol at a time in plain Python (dictionaries, lists, ``math``), with none of the kernels'
tricks (prefetch ring, packed rows, log tables, open-addressing index).  A bug in the one loop
both row layouts share, which ``packed == dense`` cannot see, shows up here; both layouts are
checked.

Checks: code length in nats to 1e-9 (relative), top-1/top-3 hits, evictions and insertions
exactly, the mixing weights to 1e-9; fitted: the cell counts exactly (word counting by hand,
both strands for DNA), the blended probabilities and the held-out code length to 1e-9.
"""

from __future__ import annotations

import math

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.predict._kernel_tools import (
    BUCKET, CALIB_BINS, LR_BOOST, LR_SCALE, MAX_LOGIT_GAP, ST_BRIER, ST_EVICT, ST_INSERT, ST_NATS, ST_TOP1, ST_TOP3,
)
from fractalseq.predict._online import OnlineCoder
from fractalseq.predict._predictor import CellPredictor
from fractalseq.stream import from_codes

M64 = (1 << 64) - 1
SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])


# ----------------------------------------------------------------- the twins
def cell_hash(address: int, depth: int) -> int:
    """The 64-bit mix of (address, depth) of ``_kernel_tools._cell_hash``, in Python integers."""
    z = ((address ^ ((depth * 0xC2B2AE3D27D4EB4F) & M64)) * 0x9E3779B97F4A7C15) & M64
    z ^= z >> 29
    z = (z * 0x94D049BB133111EB) & M64
    z ^= z >> 32
    return z


def pack(symbols, b: int) -> int:
    a = 0
    for s in symbols:
        a = (a << b) | int(s)
    return a


class NaiveOnline:
    """Predict, then update, one symbol at a time, with the table geometry of an :class:`OnlineCoder`."""

    def __init__(self, coder: OnlineCoder) -> None:
        c = coder.cfg
        self.A, self.b = c["A"], c["b"]
        self.depth = [int(d) for d in c["depth"]]
        self.direct = [bool(d) for d in c["direct"]]
        self.rbits = [int(r) for r in c["rbits"]]
        self.offset = [int(o) for o in c["offset"]]
        self.ir_on = [bool(v) for v in c["ir_on"]]
        self.comp = [int(v) for v in c["comp"]]
        self.alpha = [float(a) for a in coder.alpha]
        self.limit = [int(v) for v in coder.limit]
        self.lr = coder.lr
        self.weights = [[float(w) for w in row] for row in coder.weights]
        self.rows: dict[int, list] = {}  # row -> [tag, counts]
        self.nats = self.brier = 0.0
        self.top1 = self.top3 = self.evict = self.insert = 0
        self.calib = [[0, 0.0, 0] for _ in range(CALIB_BINS)]
        self.history: list[int] = []
        self.coded = 0

    def _slot(self, i: int, address: int) -> tuple[int, int]:
        """(first row, tag) of a cell: its own row in a direct region, else its bucket and 16-bit tag."""
        if self.direct[i]:
            return self.offset[i] + address, 0
        z = cell_hash(address, self.depth[i])
        tag = (z >> 20) & 0xFFFF
        return self.offset[i] + ((z >> (64 - self.rbits[i] + 2)) << 2), tag or 1

    def _find(self, i: int, address: int):
        base, tag = self._slot(i, address)
        if self.direct[i]:
            return base
        for k in range(BUCKET):
            if self.rows.get(base + k, [0])[0] == tag:
                return base + k
        return None

    def _update(self, i: int, address: int, y: int) -> None:
        row = self._find(i, address)
        if row is None:  # first empty row of the bucket, else the rarest (first of equals)
            base, tag = self._slot(i, address)
            best = None
            for k in range(BUCKET):
                r = self.rows.get(base + k)
                if r is None or (r[0] == 0 and sum(r[1]) == 0):
                    best = base + k
                    break
                if best is None or sum(r[1]) < sum(self.rows[best][1]):
                    best = base + k
            if best in self.rows and sum(self.rows[best][1]) > 0:
                self.evict += 1
            self.insert += 1
            self.rows[best] = [tag, [0] * self.A]
            row = best
        cell = self.rows.setdefault(row, [0, [0] * self.A])[1]
        if cell[y] >= self.limit[i]:  # halve every count (rounding up) before passing the limit
            cell[:] = [(c + 1) // 2 for c in cell]
        cell[y] += 1

    def code(self, x: int, segment_start: bool) -> None:
        if segment_start:
            self.history = []
        A, hist = self.A, self.history
        L = len(hist)
        # cells of the history: estimates (c_s + alpha) / (N + A alpha), mixed geometrically
        used = []
        for i, d in enumerate(self.depth):
            if L < d:
                continue
            row = self._find(i, pack(hist[L - d :], self.b))
            if row is None or sum(self.rows.get(row, [0, [0]])[1]) == 0:
                continue
            used.append((i, [math.log(c + self.alpha[i]) for c in self.rows[row][1]]))
        w = self.weights[used[-1][0] + 1 if used else 0]
        z = [sum(w[i] * lin[k] for i, lin in used) for k in range(A)]
        top = max(z)
        e = [math.exp(max(v - top, -MAX_LOGIT_GAP)) for v in z]
        p = [v / sum(e) for v in e]
        # bookkeeping of the coded symbol
        self.nats -= math.log(p[x])
        rank = sum(1 for k in range(A) if p[k] > p[x] or (p[k] == p[x] and k < x))
        self.top1 += rank == 0
        self.top3 += rank < 3
        self.brier += sum((p[k] - (k == x)) ** 2 for k in range(A))
        best = max(range(A), key=lambda k: (p[k], -k))
        cb = min(int(p[best] * CALIB_BINS), CALIB_BINS - 1)
        self.calib[cb][0] += 1
        self.calib[cb][1] += p[best]
        self.calib[cb][2] += best == x
        # gradient step of the weights, learning rate boosted early (a step per 1024 symbols)
        g = self.coded
        lr = self.lr * max(1.0, LR_BOOST / math.sqrt(1.0 + (g - g % 1024) / LR_SCALE))
        if lr > 0:
            for i, lin in used:
                w[i] += lr * (lin[x] - sum(p[k] * lin[k] for k in range(A)))
        # counts: the cells of the history, then the completed word read on the other strand
        for i, d in enumerate(self.depth):
            if L >= d:
                self._update(i, pack(hist[L - d :], self.b), x)
        word = hist + [x]
        for i, d in enumerate(self.depth):
            if self.ir_on[i] and L >= d:
                other = [self.comp[s] for s in reversed(word[-(d + 1) :])]
                self._update(i, pack(other[:d], self.b), other[d])
        hist.append(x)
        self.coded += 1


# ------------------------------------------------------------- online twin
@st.composite
def online_cases(draw):
    A = draw(st.sampled_from([2, 3, 4, 4, 5]))
    n = draw(st.integers(1, 500))
    if draw(st.booleans()):  # repetitive: counts reach the halving limit of deep cells
        period = draw(st.lists(st.integers(0, A - 1), min_size=1, max_size=6))
        codes = [period[t % len(period)] for t in range(n)]
        flips = draw(st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, A - 1)), max_size=10))
        for t, s in flips:
            codes[t] = s
    else:
        codes = draw(st.lists(st.integers(0, A - 1), min_size=n, max_size=n))
    starts = sorted(set(draw(st.lists(st.integers(0, n - 1), max_size=4))) | {0})
    depths = tuple(sorted(set(draw(st.lists(st.integers(0, 16), min_size=1, max_size=4)))))
    dna = A == 4 and draw(st.booleans())
    alphabet = al.dna() if dna else al.from_symbols("abcde"[:A])
    max_cells = draw(st.sampled_from([None, 1 << 10, 1 << 12]))
    dense = A <= 4 and draw(st.booleans())  # the dense layout also serves A <= 4
    lr = draw(st.sampled_from([0.0, 0.002, 0.05]))
    return alphabet, np.array(codes, np.uint8), np.array(starts, np.int64), depths, max_cells, dense, lr


@SETTINGS
@given(online_cases(), st.integers(1, 200))
def test_online_kernel_matches_the_naive_coder(case, chunk):
    alphabet, codes, starts, depths, max_cells, dense, lr = case
    if max_cells is not None and max_cells < len(depths) * BUCKET * 16:
        max_cells = None
    coder = OnlineCoder(alphabet, depths=depths, max_cells=max_cells, learning_rate=lr, length_hint=len(codes))
    if dense:
        coder.packed = False
        coder.rows = coder.dense_rows()
    naive = NaiveOnline(coder)
    starts_set = set(starts.tolist())
    for t, x in enumerate(codes.tolist()):
        naive.code(x, t in starts_set)
    for lo in range(0, len(codes), chunk):  # chunked feeding: the kernel carries its state across chunks
        st_ = starts[(starts >= lo) & (starts < lo + chunk)] - lo
        coder.feed(codes[lo : lo + chunk], st_)
    s = coder.stats
    assert math.isclose(s[ST_NATS], naive.nats, rel_tol=1e-9, abs_tol=1e-12)
    assert (s[ST_TOP1], s[ST_TOP3]) == (naive.top1, naive.top3)
    assert (s[ST_EVICT], s[ST_INSERT]) == (naive.evict, naive.insert)
    assert math.isclose(s[ST_BRIER], naive.brier, rel_tol=1e-9, abs_tol=1e-12)
    assert np.allclose(coder.weights, naive.weights, rtol=1e-9, atol=1e-12)
    assert [int(v) for v in coder.calib[:, 0]] == [c[0] for c in naive.calib]


# ------------------------------------------------------------- fitted twin
def naive_cells(codes, starts, alphabet, depth: int, reverse: bool) -> dict[int, list[int]]:
    """Counts of the symbol after every context of ``depth`` symbols, by hand (both strands when ``reverse``)."""
    A, b = alphabet.size, alphabet.bits
    bounds = sorted(set(starts.tolist()) | {0}) + [len(codes)]
    out: dict[int, list[int]] = {}
    for lo, hi in zip(bounds, bounds[1:]):
        seg = codes[lo:hi].tolist()
        for t in range(depth, len(seg)):
            words = [seg[t - depth : t + 1]]
            if reverse:
                words.append([3 - s for s in reversed(words[0])])  # ACGT: complement = 3 - code
            for w in words:
                out.setdefault(pack(w[:-1], b), [0] * A)[w[-1]] += 1
    return out


def naive_blend(model: CellPredictor, context: list[int]) -> list[float]:
    """p_n(s) = (max(c_s - d_n, 0) + (beta_n + d_n u) p_{n-1}(s)) / (N + beta_n), from uniform, coarse to fine."""
    A, b = model.alphabet_.size, model.alphabet_.bits
    p = [1.0 / A] * A
    for n in model.depths_:
        if len(context) < n:
            break
        table = dict(zip(model.cells_[n].tolist(), model.counts_[n].tolist()))
        c = table.get(pack(context[len(context) - n :], b))
        if c is None:
            continue
        beta, d = model.concentration_[n], model.discount_[n]
        u = sum(1 for v in c if v > 0)
        p = [(max(c[s] - d, 0.0) + (beta + d * u) * p[s]) / (sum(c) + beta) for s in range(A)]
    return p


@st.composite
def fitted_cases(draw):
    A = draw(st.sampled_from([2, 3, 4, 5]))
    n = draw(st.integers(1, 400))
    codes = np.array(draw(st.lists(st.integers(0, A - 1), min_size=n, max_size=n)), np.uint8)
    starts = np.array(sorted(set(draw(st.lists(st.integers(0, n - 1), max_size=4))) | {0}), np.int64)
    depths = tuple(sorted(set(draw(st.lists(st.integers(1, 8), min_size=1, max_size=3)))))
    alphabet = al.dna() if A == 4 and draw(st.booleans()) else al.from_symbols("abcde"[:A])
    test = np.array(draw(st.lists(st.integers(0, A - 1), min_size=1, max_size=120)), np.uint8)
    return alphabet, codes, starts, depths, test


@SETTINGS
@given(fitted_cases())
def test_fitted_counts_and_blend_match_the_naive_twins(case):
    alphabet, codes, starts, depths, test = case
    model = CellPredictor(depths=depths).fit(from_codes(alphabet, codes, starts))
    reverse = model.reverse_complement_
    for n in model.depths_:
        got = dict(zip(model.cells_[n].tolist(), model.counts_[n].tolist()))
        assert got == naive_cells(codes, starts, alphabet, n, reverse)
    contexts = [test[:t].tolist() for t in range(len(test))]
    p = model.predict_proba(contexts)
    want = np.array([naive_blend(model, c) for c in contexts])
    assert np.allclose(p, want, rtol=1e-9, atol=1e-15)
    bits = -sum(math.log2(naive_blend(model, contexts[t])[int(test[t])]) for t in range(len(test)))
    assert math.isclose(model.evaluate(from_codes(alphabet, test), baselines=False).total_bits, bits, rel_tol=1e-9)

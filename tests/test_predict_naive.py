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

Large alphabets: the top-k coder of :mod:`fractalseq.predict._online_sparse` has its own twin
(:class:`NaiveSparse`, full distributions over all symbols, regions grown by hand), and with
A = 3,000 both modes are checked against full distributions: probabilities sum to one, the code
length is the sum of -log2 p of the symbols that occurred, the candidate-based ranks and Brier
score equal the full ones, and no table grows with A times the cells.
"""

from __future__ import annotations

import math
import weakref

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.predict._kernel_tools import (
    BUCKET, CALIB_BINS, LR_BOOST, LR_SCALE, MAX_LOGIT_GAP, ST_BRIER, ST_EVICT, ST_INSERT, ST_NATS, ST_TOP1, ST_TOP3,
)
from fractalseq.predict import _online_sparse as S
from fractalseq.predict._online import OnlineCoder, online_code_length
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


# ---------------------------------------------------- top-k (large alphabet) twin
class NaiveSparse:
    """The top-k coder of :mod:`fractalseq.predict._online_sparse`, from its docstring, one symbol at a time.

    Regions are Python lists of rows (``None`` or ``[address, [[symbol, count] x TOPK]]``), grown by
    doubling exactly when the docstring says; each prediction is the full distribution over all ``A``
    symbols (numpy), from which the code length, ranks, Brier score and calibration are read directly.
    """

    def __init__(self, coder: OnlineCoder) -> None:
        c = coder.cfg
        self.A, self.b = c["A"], c["b"]
        self.depth = [int(d) for d in c["depth"]]
        self.rbits = [int(r) for r in c["rbits"]]
        self.max_bits = [int(r) for r in coder.max_bits]
        self.limit = [int(v) for v in coder.limit]
        self.beta = [float(v) for v in c["beta"]]
        self.disc = [float(v) for v in c["disc"]]
        self.alpha0 = float(c["alpha0"])
        self.regions = [[None] * (1 << r) for r in self.rbits]
        self.fill = [0] * len(self.depth)
        self.c0 = [0] * self.A
        self.hist: list[int] = []
        self.nats = self.brier = 0.0
        self.top1 = self.top3 = self.evict = self.insert = 0
        self.calib = [[0, 0.0, 0] for _ in range(CALIB_BINS)]
        self.sums: list[float] = []

    def _bucket(self, i: int, a: int) -> int:
        return (cell_hash(a, self.depth[i]) >> (64 - self.rbits[i] + 2)) << 2

    def _find(self, i: int, a: int):
        reg, base = self.regions[i], self._bucket(i, a)
        for k in range(BUCKET):
            row = reg[base + k]
            if row is not None and row[0] == a:
                return row
        return None

    def _grow_at(self, i: int) -> float:
        return (1 << self.rbits[i]) * S.GROW_LOAD if self.rbits[i] < self.max_bits[i] else math.inf

    def code(self, x: int, new_segment: bool) -> None:
        A = self.A
        if new_segment:
            self.hist = []
        L = len(self.hist)
        addrs = [pack(self.hist[-d:] if d else [], self.b) if L >= d else None for d in self.depth]
        found = [self._find(i, a) if a is not None else None for i, a in enumerate(addrs)]
        n0 = sum(self.c0)
        p = (np.array(self.c0, dtype=np.float64) + self.alpha0) / (n0 + A * self.alpha0)
        for i, row in enumerate(found):
            if row is None:
                continue
            slots = [(sym, cnt) for sym, cnt in row[1] if cnt > 0]
            tot, u = sum(cnt for _, cnt in slots), len(slots)
            p = (self.beta[i] + self.disc[i] * u) * p
            for sym, cnt in slots:
                p[sym] += max(cnt - self.disc[i], 0.0)
            p = p / (tot + self.beta[i])
        self.sums.append(float(p.sum()))
        px = float(p[x])
        self.nats -= math.log(px)
        rank = int(np.sum(p > px)) + int(np.sum(p[:x] == px))
        self.top1 += rank == 0
        self.top3 += rank < 3
        onehot = np.zeros(A)
        onehot[x] = 1.0
        self.brier += float(np.sum((p - onehot) ** 2))
        best = int(np.argmax(p))
        cb = min(int(p[best] * CALIB_BINS), CALIB_BINS - 1)
        self.calib[cb][0] += 1
        self.calib[cb][1] += float(p[best])
        self.calib[cb][2] += best == x
        for i, a in enumerate(addrs):
            if a is None:
                continue
            row = found[i]
            if row is None:
                reg, base = self.regions[i], self._bucket(i, a)
                empty = [k for k in range(BUCKET) if reg[base + k] is None]
                if empty:
                    k = empty[0]
                    self.fill[i] += 1
                else:
                    totals = [sum(c for _, c in reg[base + k][1]) for k in range(BUCKET)]
                    k = totals.index(min(totals))
                    self.evict += 1
                self.insert += 1
                row = reg[base + k] = [a, [[0, 0] for _ in range(S.TOPK)]]
            slots = row[1]
            have = [j for j, (sym, cnt) in enumerate(slots) if cnt > 0 and sym == x]
            if have:
                j = have[0]
                if slots[j][1] >= self.limit[i]:
                    for sl in slots:
                        sl[1] = (sl[1] + 1) // 2
                slots[j][1] += 1
            else:
                counts = [cnt for _, cnt in slots]
                j = counts.index(min(counts))
                slots[j] = [x, 1]
        self.c0[x] += 1
        self.hist.append(x)
        for i in range(len(self.depth)):
            if self.fill[i] >= self._grow_at(i):
                old = self.regions[i]
                self.rbits[i] += 1
                self.regions[i] = [None] * (1 << self.rbits[i])
                for row in old:
                    if row is not None:
                        base = self._bucket(i, row[0])
                        k = next(k for k in range(BUCKET) if self.regions[i][base + k] is None)
                        self.regions[i][base + k] = row


@st.composite
def sparse_cases(draw):
    A = draw(st.sampled_from([S.TOP0, 7, 300, 3000]))
    n = draw(st.integers(1, 400))
    period = draw(st.lists(st.integers(0, A - 1), min_size=1, max_size=12))
    noise = draw(st.sampled_from([0.0, 0.1, 0.5]))
    rng = np.random.default_rng(draw(st.integers(0, 1000)))
    codes = [period[t % len(period)] if rng.random() >= noise else int(rng.integers(0, A)) for t in range(n)]
    starts = sorted(set(draw(st.lists(st.integers(0, n - 1), max_size=3))) | {0})
    depths = tuple(sorted(set(draw(st.lists(st.integers(0, 3), min_size=1, max_size=3)))))
    return A, np.array(codes, np.uint32), np.array(starts, np.int64), depths


def sparse_coder(A: int, depths, max_cells=None) -> OnlineCoder:
    """A top-k coder over ``A`` invented symbols (the top-k layout whatever ``A``), starting from tiny regions."""
    alphabet = al.from_symbols([f"e{i}" for i in range(A)])
    coder = OnlineCoder(alphabet, depths=depths, max_cells=max_cells)
    if not coder.sparse:
        coder.sparse = True
        coder.row_bytes = S.ROW_BYTES
        coder._init_sparse(coder.cells_cap, 0.5)
    coder.max_bits = np.maximum(coder.max_bits, 4)
    coder._layout(np.full(len(depths), 3, dtype=np.int64))  # two buckets per region: evictions and growth early
    coder.rows = S.empty_rows(coder.n_rows)
    return coder


@SETTINGS
@given(sparse_cases(), st.integers(1, 150))
def test_topk_kernel_matches_the_naive_coder(case, chunk):
    A, codes, starts, depths = case
    coder = sparse_coder(A, depths)
    naive = NaiveSparse(coder)
    starts_set = set(starts.tolist())
    for t, x in enumerate(codes.tolist()):
        naive.code(x, t in starts_set)
    for lo in range(0, len(codes), chunk):  # chunked feeding: same result however the stream is cut
        st_ = starts[(starts >= lo) & (starts < lo + chunk)] - lo
        coder.feed(codes[lo : lo + chunk], st_)
    s = coder.stats
    assert max(abs(v - 1.0) for v in naive.sums) < 1e-12  # the twin's full distributions sum to one
    assert math.isclose(s[ST_NATS], naive.nats, rel_tol=1e-9, abs_tol=1e-12)
    assert (s[ST_TOP1], s[ST_TOP3]) == (naive.top1, naive.top3)
    assert (s[ST_EVICT], s[ST_INSERT]) == (naive.evict, naive.insert)
    assert math.isclose(s[ST_BRIER], naive.brier, rel_tol=1e-9, abs_tol=1e-9)
    assert [int(v) for v in coder.calib[:, 0]] == [c[0] for c in naive.calib]
    assert [int(v) for v in coder.calib[:, 2]] == [c[2] for c in naive.calib]
    assert list(coder.cfg["rbits"]) == naive.rbits


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


_CELLS: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()  # model -> {depth: cells}


def naive_cell_dicts(model: CellPredictor, n: int) -> dict[int, dict[int, int]]:
    """Cell address -> {symbol: count} of depth ``n``, read word by word from the model's table."""
    per = _CELLS.setdefault(model, {})
    if n not in per:
        b = model.alphabet_.bits
        t = model.counts_[n]
        cells: dict[int, dict[int, int]] = {}
        for w, c in zip(t.words(b).tolist(), t.counts.tolist()):
            cells.setdefault(w >> b, {})[w & ((1 << b) - 1)] = c
        per[n] = cells
    return per[n]


def naive_blend(model: CellPredictor, context: list[int]) -> list[float]:
    """p_n(s) = (max(c_s - d_n, 0) + (beta_n + d_n u) p_{n-1}(s)) / (N + beta_n), from uniform, coarse to fine."""
    A, b = model.alphabet_.size, model.alphabet_.bits
    p = [1.0 / A] * A
    for n in model.depths_:
        if len(context) < n:
            break
        c = naive_cell_dicts(model, n).get(pack(context[len(context) - n :], b))
        if c is None:
            continue
        beta, d = model.concentration_[n], model.discount_[n]
        u = len(c)
        tot = sum(c.values())
        p = [(max(c.get(s, 0) - d, 0.0) + (beta + d * u) * p[s]) / (tot + beta) for s in range(A)]
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
        got = dict(zip(model.cells_[n].tolist(), model.counts_[n].dense(alphabet.size).tolist()))
        assert got == naive_cells(codes, starts, alphabet, n, reverse)
    contexts = [test[:t].tolist() for t in range(len(test))]
    p = model.predict_proba(contexts)
    want = np.array([naive_blend(model, c) for c in contexts])
    assert np.allclose(p, want, rtol=1e-9, atol=1e-15)
    bits = -sum(math.log2(naive_blend(model, contexts[t])[int(test[t])]) for t in range(len(test)))
    assert math.isclose(model.evaluate(from_codes(alphabet, test), baselines=False).total_bits, bits, rel_tol=1e-9)


def _template_like_stream(A: int, n: int, seed: int) -> np.ndarray:
    """Invented "event log" codes: workflows of 3-8 events drawn by a Zipf law, 5% stray events."""
    rng = np.random.default_rng(seed)
    order = rng.permutation(A)
    flows = [order[i : i + int(rng.integers(3, 9))] for i in range(0, A, 8)]
    w = 1.0 / np.arange(1, len(flows) + 1) ** 0.8
    out: list[int] = []
    while len(out) < n:
        for s in flows[int(rng.choice(len(flows), p=w / w.sum()))]:
            out.append(int(s) if rng.random() > 0.05 else int(rng.integers(0, A)))
    return np.array(out[:n], np.uint32)


def test_large_alphabet_code_length_is_the_sum_of_the_naive_probabilities():
    # A = 3,000 symbols, 20,000 positions, the default (growing) tables: at every position the twin's full
    # distribution over all A symbols sums to one and the kernel's code length is the sum of -log2 p(x)
    A, n = 3000, 20_000
    codes = _template_like_stream(A, n, seed=5)
    alphabet = al.from_symbols([f"e{i}" for i in range(A)])
    coder = OnlineCoder(alphabet, depths=(1, 2, 3))
    assert coder.sparse
    naive = NaiveSparse(coder)
    for t, x in enumerate(codes.tolist()):
        naive.code(x, t == 0)
    res = online_code_length(from_codes(alphabet, codes), depths=(1, 2, 3), keep_surprisal=True)
    assert max(abs(v - 1.0) for v in naive.sums) < 1e-12
    assert math.isclose(res.total_bits, naive.nats / math.log(2), rel_tol=1e-9)
    assert math.isclose(float(res.surprisal.astype(np.float64).sum()), res.total_bits, rel_tol=1e-5)
    assert res.top1_accuracy * n == naive.top1 and res.top3_accuracy * n == naive.top3
    assert res.bits_per_symbol < 0.5 * math.log2(A)  # the workflows are learned (uniform would be log2 A)


def test_large_alphabet_tables_do_not_scale_with_the_alphabet():
    # the same stream coded over 3,000 and 30,000 symbols: the cell rows are the same arrays (TOPK slots a
    # row, never A), only the order-0 counts and the candidate scratch grow with A, by one entry a symbol
    codes = _template_like_stream(3000, 20_000, seed=6)
    coders = []
    for A in (3000, 30_000):
        coder = OnlineCoder(al.from_symbols([f"e{i}" for i in range(A)]), depths=(1, 2, 3))
        coder.feed(codes, np.array([0], np.int64))
        coders.append(coder)
    small, large = coders
    assert [r.shape for r in small.rows] == [r.shape for r in large.rows]
    assert all(r.shape[1:] in ((), (S.TOPK,)) for r in large.rows)
    assert large.rows[1].shape[0] < 8 * len(codes)  # rows follow the cells met (the regions double as they fill)
    assert large.table_bytes - small.table_bytes == 16 * (30_000 - 3000)
    assert (large.c0.shape, large.mark.shape) == ((30_000,), (30_000,))


def test_large_alphabet_fitted_model_is_sparse_and_scores_like_its_full_distribution():
    # A = 3,000: the fitted tables hold one entry per distinct (n+1)-word (never a row of A counts); the
    # held-out code length is the sum of -log2 p(x) of the twin's blend, and the top-1/top-3 hits and the
    # Brier score of the candidate-based kernel equal those read off the full distributions (predict_proba)
    A = 3000
    codes = _template_like_stream(A, 20_000, seed=8)
    alphabet = al.from_symbols([f"e{i}" for i in range(A)])
    model = CellPredictor(depths=(1, 2, 3)).fit(from_codes(alphabet, codes[:18_000]))
    for n in model.depths_:
        t = model.counts_[n]
        assert t.counts.ndim == t.syms.ndim == 1 and t.counts.size <= 18_000
        assert int(t.totals().sum()) == 18_000 - n
    test = codes[18_000:]
    contexts = [test[max(0, t - 3) : t].tolist() for t in range(len(test))]
    # the scored stream is one segment: contexts are its own history (at most 3 symbols matter)
    p = model.predict_proba(contexts)
    assert np.allclose(p.sum(axis=1), 1.0, rtol=0, atol=1e-12)
    rows = np.arange(len(test))
    px = p[rows, test.astype(np.int64)]
    twin = [naive_blend(model, contexts[t])[int(test[t])] for t in range(0, len(test), 97)]
    assert np.allclose(twin, px[::97], rtol=1e-9, atol=0)
    res = model.evaluate(from_codes(alphabet, test), baselines=False)
    assert math.isclose(res.total_bits, float(-np.log2(px).sum()), rel_tol=1e-9)
    rank = (p > px[:, None]).sum(axis=1) + np.array([(p[t, : test[t]] == px[t]).sum() for t in rows])
    assert res.top1_accuracy * len(test) == int((rank == 0).sum())
    assert res.top3_accuracy * len(test) == int((rank < 3).sum())
    onehot = np.zeros_like(p)
    onehot[rows, test.astype(np.int64)] = 1.0
    assert math.isclose(res.brier, float(((p - onehot) ** 2).sum(axis=1).mean()), rel_tol=1e-9)

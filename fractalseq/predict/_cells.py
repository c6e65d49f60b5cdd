"""Cell tables of the fitted predictor: contexts and their symbol counts from word counts, pruning, the blend's parameters."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.predict import _fitted_kernels as FK
from fractalseq.predict._params import BETA_STEPS, DISCOUNTS, GRID_CELLS


@dataclass(frozen=True)
class CellTable:
    """The cells of one depth and the symbols that followed them, stored sparsely (no row of ``A`` counts).

    Entry ``e`` says that symbol ``syms[e]`` followed the cell ``cells[i]`` (for ``ptr[i] <= e < ptr[i + 1]``)
    ``counts[e]`` times; within a cell the symbols are increasing, and only symbols seen are stored, so the
    table's size is the number of distinct words of length ``n + 1``, whatever the alphabet.

    Attributes
    ----------
    cells : uint64, sorted strictly increasing cell addresses
    ptr : int64 ``(cells + 1,)``, first entry of each cell
    syms : uint32, the symbols
    counts : uint32 (or uint64 before :func:`to_u32`), their counts, all positive
    """

    cells: np.ndarray
    ptr: np.ndarray
    syms: np.ndarray
    counts: np.ndarray

    @classmethod
    def from_words(cls, words: np.ndarray, counts: np.ndarray, b: int) -> "CellTable":
        """From sorted (n+1)-word addresses and their counts (zero counts dropped)."""
        words = np.ascontiguousarray(words, dtype=np.uint64)
        counts = np.asarray(counts)
        keep = counts > 0
        if not keep.all():
            words, counts = words[keep], counts[keep]
        ub = np.uint64(b)
        ctx = words >> ub
        first = np.ones(words.size, dtype=bool)
        first[1:] = ctx[1:] != ctx[:-1]
        starts = np.flatnonzero(first)
        ptr = np.append(starts, words.size).astype(np.int64)
        syms = (words & np.uint64((1 << b) - 1)).astype(np.uint32)
        return cls(ctx[starts], ptr, syms, np.ascontiguousarray(counts))

    @property
    def size(self) -> int:
        """Cells stored."""
        return int(self.cells.size)

    def totals(self) -> np.ndarray:
        """Total count of every cell (int64)."""
        c = np.concatenate([[0], np.cumsum(self.counts, dtype=np.int64)])
        return c[self.ptr[1:]] - c[self.ptr[:-1]]

    def distinct(self) -> np.ndarray:
        """Distinct symbols seen after every cell."""
        return np.diff(self.ptr)

    def words(self, b: int) -> np.ndarray:
        """The (n+1)-word address of every entry (sorted)."""
        rep = np.repeat(self.cells, self.distinct())
        return (rep << np.uint64(b)) | self.syms.astype(np.uint64)

    def select(self, keep: np.ndarray) -> "CellTable":
        """The cells where ``keep`` is true."""
        n = self.distinct()
        ek = np.repeat(keep, n)
        return CellTable(self.cells[keep], np.concatenate([[0], np.cumsum(n[keep])]).astype(np.int64), self.syms[ek],
                         self.counts[ek])

    def merge(self, other: "CellTable", b: int) -> "CellTable":
        """Counts of both tables added (uint64 counts; :func:`to_u32` checks overflow)."""
        w = np.concatenate([self.words(b), other.words(b)])
        c = np.concatenate([self.counts.astype(np.uint64), other.counts.astype(np.uint64)])
        uw, inv = np.unique(w, return_inverse=True)
        summed = np.zeros(uw.size, np.uint64)
        np.add.at(summed, inv, c)
        return CellTable.from_words(uw, summed, b)

    def dense(self, A: int) -> np.ndarray:
        """The ``(cells, A)`` count matrix (small alphabets and tests only)."""
        out = np.zeros((self.size, A), dtype=np.int64)
        out[np.repeat(np.arange(self.size), self.distinct()), self.syms.astype(np.int64)] = self.counts
        return out

    def nbytes(self) -> int:
        return int(self.cells.nbytes + self.ptr.nbytes + self.syms.nbytes + self.counts.nbytes)


def depth_table(wc, n: int, reverse: bool = False) -> CellTable:
    """The cells of depth ``n`` and the symbols that followed them (uint32 counts), from word counts.

    With ``reverse`` the reverse complement of every (n+1)-word is counted too: the
    reverse-complement addresses are sorted and merged with the forward words in one
    pass, straight into the table (no copy of both strands side by side).
    """
    b = wc.alphabet.bits
    words, counts = wc.words(n + 1)
    words = np.ascontiguousarray(words, dtype=np.uint64)
    if reverse:
        rw = FK.revcomp_addresses(words, n + 1, b)
        order = np.argsort(rw)  # addresses are unique: any sort gives the same order
        rw = rw[order]
        rc = counts[order]
        del order
    else:
        rw, rc = np.zeros(0, np.uint64), counts[:0]
    cells, ptr, syms, cnt, over = FK.strand_table(words, counts, rw, rc, b)
    if over:
        raise InputError("A cell was seen more than 4,294,967,295 times, beyond what a model stores; split the input.")
    return CellTable(cells, ptr, syms, cnt)


def cell_tables(wc, orders: Iterable[int], reverse: bool = False) -> dict[int, CellTable]:
    """Cells (contexts of depth n) and the symbols that followed them (a :class:`CellTable`) from word counts, for each n."""
    return {n: depth_table(wc, n, reverse) for n in orders}


def capped_cell_tables(wc, orders: Iterable[int], reverse: bool, K_b: int, cap: int) -> tuple[dict[int, CellTable], int]:
    """:func:`cell_tables` with each depth beyond ``K_b`` cut to ``cap`` as soon as it is built; also the cells dropped.

    :func:`prune_cells` drops cells in one global order (total class, deepest depth
    first, then hash), so the cells of one deep depth that survive the cap over all
    depths are a prefix of that depth's own order, no longer than what survives the
    cap over that depth and the baseline depths alone.  Cutting each deep depth that
    way as it is built, then applying :func:`prune_cells` over all depths, keeps
    exactly the cells pruning at the end keeps, while no more than ``cap`` deep
    cells of the depths already built are held at once.
    """
    tables: dict[int, CellTable] = {}
    dropped = 0
    for n in sorted(orders):
        t = depth_table(wc, n, reverse)
        if n > K_b:
            fixed = {k: v for k, v in tables.items() if k <= K_b}
            fixed[n] = t
            del t
            cut, gone = prune_cells(fixed, K_b, cap)
            t = cut[n]
            dropped += gone
            del fixed, cut
        tables[n] = t
    return tables, dropped


def to_u32(table: CellTable) -> CellTable:
    """The table with uint32 counts (refused beyond 2**32 - 1)."""
    counts = table.counts
    if counts.size and int(counts.max()) > np.iinfo(np.uint32).max:
        raise InputError("A cell was seen more than 4,294,967,295 times, beyond what a model stores; split the input.")
    return CellTable(table.cells, table.ptr, table.syms, counts.astype(np.uint32))


def blended_at(depths, tables: dict, params: dict, addr: np.ndarray, syms: np.ndarray, upto: int, A: int, b: int) -> np.ndarray:
    """Blended probability of ``syms`` after contexts ``addr`` through the depths before ``upto`` (coarse to fine).

    As in :func:`fit_blend`: a depth whose cell is absent restarts from the uniform ``1/A``.
    """
    p = np.full(addr.size, 1.0 / A)
    for m in depths:
        if m >= upto:
            break
        beta, d = params[m]
        t = tables[m]
        key = addr & np.uint64((1 << (b * m)) - 1)
        i = np.minimum(np.searchsorted(t.cells, key), max(t.size - 1, 0))
        found = (t.cells[i] == key) if t.size else np.zeros(addr.size, bool)
        w = t.words(b)
        wk = (key << np.uint64(b)) | syms.astype(np.uint64)
        j = np.minimum(np.searchsorted(w, wk), max(w.size - 1, 0))
        c = np.where((w[j] == wk) if w.size else False, t.counts[j] if w.size else 0, 0).astype(np.float64)
        tot = t.totals()[i].astype(np.float64) if t.size else np.zeros(addr.size)
        u = t.distinct()[i].astype(np.float64) if t.size else np.zeros(addr.size)
        q = (np.maximum(c - d, 0.0) + (beta + d * u) * p) / (tot + beta)
        p = np.where(found, q, 1.0 / A)
    return p


def fit_blend(depths, tables: dict, alphabet: Alphabet, alpha: float, discount) -> tuple[dict, dict]:
    """Concentration and discount of every depth, chosen by leave-one-out likelihood of the training counts.

    Depth by depth from the coarsest, each observation is predicted from its
    cell with itself removed, blended with the parent's full estimate; the
    pair ``(beta, d)`` with the highest total log-likelihood wins (ties: the
    smaller).  A pure function of the counts, so merged models get exactly
    the parameters of a model fitted on everything.  Only the symbols seen
    in a cell contribute, so the work is linear in the stored entries.
    """
    A, b = alphabet.size, alphabet.bits
    betas: dict[int, float] = {}
    discs: dict[int, float] = {}
    # A alpha 2**k, k = 0..17; a large alphabet (A alpha > 64) also tries concentrations down to about 1/2,
    # since its cells see far fewer observations than A alpha
    low = int(math.floor(math.log2(A * alpha / 0.5))) if A * alpha > 64 else 0
    grid_b = [A * alpha * 2.0**k for k in range(-low, BETA_STEPS)]
    grid_d = list(DISCOUNTS) if discount == "auto" else [float(discount)]
    done: dict[int, tuple[float, float]] = {}
    for n in depths:
        t = tables[n]
        C = t.size
        step = max(1, -(-C // GRID_CELLS))
        sub = t.select(np.arange(C) % step == 0) if step > 1 else t
        nper = sub.distinct()
        addr = np.repeat(sub.cells, nper)
        cs = sub.counts.astype(np.float64)
        ps = blended_at(sorted(done), tables, done, addr, sub.syms, n, A, b) if done else np.full(cs.size, 1.0 / A)
        N = np.repeat(sub.totals(), nper).astype(np.float64)
        u = np.repeat(nper, nper).astype(np.float64)
        cl = cs - 1.0
        ul = u - (cs == 1)
        best = (-np.inf, grid_b[0], grid_d[0])
        for d in grid_d:
            kept = np.maximum(cl - d, 0.0)
            for beta in grid_b:
                with np.errstate(divide="ignore"):
                    q = (kept + (beta + d * ul) * ps) / (N - 1.0 + beta)
                    ll = float(np.sum(cs * np.log(q)))
                if ll > best[0]:
                    best = (ll, beta, d)
        _, beta, d = best
        betas[n], discs[n] = float(beta), float(d)
        if C:
            done[n] = (float(beta), float(d))
    return betas, discs


def prune_cells(tables: dict, K_b: int, cap: int) -> tuple[dict, int]:
    """Drop the rarest cells of the deepest depths (beyond the baseline orders) until exactly ``cap`` remain.

    Cells with a total of at most 1 go first, deepest depth first, then at most
    2, 4, 8...; within the last class cut, cells are dropped in the order of a
    hash of their address.  A cell never outlives its coarser parent (whose
    total is at least as large).
    """
    total = sum(t.size for t in tables.values())
    if total <= cap:
        return tables, 0
    keep_fixed = sum(tables[n].size for n in tables if n <= K_b)
    if keep_fixed > cap:
        raise ParameterError(
            f"The cells up to depth {K_b} alone number {keep_fixed}; raise max_cells to at least {keep_fixed}.",
            parameter="max_cells",
        )
    deep = sorted((n for n in tables if n > K_b), reverse=True)
    tables = dict(tables)
    dropped = 0
    threshold = 1
    while total > cap:
        for n in deep:
            table = tables[n]
            cells = table.cells
            tot = table.totals()
            keep = tot > threshold
            gone = int(cells.size - keep.sum())
            if gone > total - cap:
                # the last class is cut in hash order (deterministic, no bias toward any address)
                rare = np.flatnonzero(~keep)
                order = np.argsort(FK.hash_cells(cells[rare], n), kind="stable")
                keep[rare[order[: gone - (total - cap)]]] = True
                gone = total - cap
            if gone:
                tables[n] = table.select(keep)
                total -= gone
                dropped += gone
            if total <= cap:
                break
        threshold = threshold * 2 if threshold < (1 << 40) else threshold
        if all(tables[n].size == 0 for n in deep):
            break
    return tables, dropped

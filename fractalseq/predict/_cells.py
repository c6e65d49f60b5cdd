"""Cell tables of the fitted predictor: contexts and their symbol counts from word counts, pruning, the blend's parameters."""

from __future__ import annotations

from typing import Iterable

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.predict import _fitted_kernels as FK
from fractalseq.predict._params import BETA_STEPS, DISCOUNTS, GRID_CELLS


def cell_tables(wc, orders: Iterable[int], reverse: bool = False) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Cells (contexts of depth n) and their (cells, A) symbol counts from word counts, for each n."""
    a = wc.alphabet
    out = {}
    for n in orders:
        words, counts = wc.words(n + 1)
        words = np.ascontiguousarray(words, dtype=np.uint64)
        counts = np.ascontiguousarray(counts, dtype=np.int64)
        cells, cc = FK.group_cells(words, counts, a.bits, a.size)
        if reverse:
            rw = FK.revcomp_addresses(words, n + 1, a.bits)
            order = np.argsort(rw, kind="stable")
            rcells, rcc = FK.group_cells(rw[order], counts[order], a.bits, a.size)
            cells, merged = FK.merge_cells(cells, cc, rcells, rcc)
            cc = to_u32(merged)
        out[n] = (cells, cc)
    return out


def to_u32(counts: np.ndarray) -> np.ndarray:
    if counts.size and int(counts.max()) > np.iinfo(np.uint32).max:
        raise InputError("A cell was seen more than 4,294,967,295 times, beyond what a model stores; split the input.")
    return counts.astype(np.uint32)

def fit_blend(depths, cells, counts, alphabet: Alphabet, alpha: float, discount) -> tuple[dict, dict]:
    """Concentration and discount of every depth, chosen by leave-one-out likelihood of the training counts.

    Depth by depth from the coarsest, each observation is predicted from its
    cell with itself removed, blended with the parent's full estimate; the
    pair ``(beta, d)`` with the highest total log-likelihood wins (ties: the
    smaller).  A pure function of the counts, so merged models get exactly
    the parameters of a model fitted on everything.
    """
    A, b = alphabet.size, alphabet.bits
    betas: dict[int, float] = {}
    discs: dict[int, float] = {}
    grid_b = [A * alpha * 2.0**k for k in range(BETA_STEPS)]
    grid_d = list(DISCOUNTS) if discount == "auto" else [float(discount)]
    prev_cells = prev_p = None
    prev_depth = 0
    for n in depths:
        c = counts[n].astype(np.float64)
        C = c.shape[0]
        if prev_cells is None or C == 0:
            pp = np.full(c.shape, 1.0 / A, dtype=np.float64)
        else:
            par = cells[n] & np.uint64((1 << (b * prev_depth)) - 1)
            rows = np.minimum(np.searchsorted(prev_cells, par), max(prev_cells.size - 1, 0))
            found = prev_cells[rows] == par
            pp = prev_p[rows].astype(np.float64)
            pp[~found] = 1.0 / A
        step = max(1, -(-C // GRID_CELLS))
        cs, ps = c[::step], pp[::step]
        N = cs.sum(axis=1, keepdims=True)
        u = (cs > 0).sum(axis=1, keepdims=True)
        seen = cs > 0
        cl = np.where(seen, cs - 1.0, 0.0)
        ul = u - (cs == 1)
        best = (-np.inf, grid_b[0], grid_d[0])
        for d in grid_d:
            kept = np.maximum(cl - d, 0.0)
            for beta in grid_b:
                with np.errstate(divide="ignore"):
                    q = (kept + (beta + d * ul) * ps) / (N - 1.0 + beta)
                    ll = float(np.sum(cs[seen] * np.log(q[seen])))
                if ll > best[0]:
                    best = (ll, beta, d)
        _, beta, d = best
        betas[n], discs[n] = float(beta), float(d)
        if C:
            Nf = c.sum(axis=1, keepdims=True)
            uf = (c > 0).sum(axis=1, keepdims=True)
            prev_p = ((np.maximum(c - d, 0.0) + (beta + d * uf) * pp) / (Nf + beta)).astype(np.float32)
            prev_cells = cells[n]
            prev_depth = n
    return betas, discs


def prune_cells(tables: dict, K_b: int, cap: int) -> tuple[dict, int]:
    """Drop the rarest cells of the deepest depths (beyond the baseline orders) until exactly ``cap`` remain.

    Cells with a total of at most 1 go first, deepest depth first, then at most
    2, 4, 8...; within the last class cut, cells are dropped in the order of a
    hash of their address.  A cell never outlives its coarser parent (whose
    total is at least as large).
    """
    total = sum(t[0].size for t in tables.values())
    if total <= cap:
        return tables, 0
    keep_fixed = sum(tables[n][0].size for n in tables if n <= K_b)
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
            cells, counts = tables[n]
            tot = counts.sum(axis=1, dtype=np.int64)
            keep = tot > threshold
            gone = int(cells.size - keep.sum())
            if gone > total - cap:
                # the last class is cut in hash order (deterministic, no bias toward any address)
                rare = np.flatnonzero(~keep)
                order = np.argsort(FK.hash_cells(cells[rare], n), kind="stable")
                keep[rare[order[: gone - (total - cap)]]] = True
                gone = total - cap
            if gone:
                tables[n] = (cells[keep], counts[keep])
                total -= gone
                dropped += gone
            if total <= cap:
                break
        threshold = threshold * 2 if threshold < (1 << 40) else threshold
        if all(tables[n][0].size == 0 for n in deep):
            break
    return tables, dropped

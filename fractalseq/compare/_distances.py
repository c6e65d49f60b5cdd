"""Distances between sources and their hierarchical clustering.

Two distances are offered:

Jensen–Shannon divergence of depth-n word distributions
    ``JSD(P, Q) = H(M) - (H(P) + H(Q)) / 2`` with ``M = (P + Q) / 2``, in
    bits, so ``0 <= JSD <= 1`` (Lin 1991, IEEE Trans. Inf. Theory 37:145).
    Its square root is a metric (Endres & Schindelin 2003, IEEE Trans. Inf.
    Theory 49:1858), the *Jensen–Shannon distance*, which is what
    :func:`scipy.spatial.distance.jensenshannon` returns.
Spectrum distance
    Root mean square difference of two D_q spectra over the orders ``q``
    both were estimated at: ``sqrt(mean_q (D_q(a) - D_q(b))**2)``.

Clustering is agglomerative (:func:`scipy.cluster.hierarchy.linkage`,
average linkage by default) on the Jensen–Shannon *distance* (the square
root of the divergence, a metric).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterator, Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError

LINKAGES: tuple[str, ...] = ("average", "complete", "single", "weighted")


def _entropy_bits(p: np.ndarray) -> float:
    p = p[p > 0]
    return float(-(p * np.log2(p)).sum())


def js_divergence(counts_a: np.ndarray, counts_b: np.ndarray) -> float:
    """Jensen–Shannon divergence (bits) of two aligned count (or probability) vectors.

    Each vector is normalised to sum 1 first.  Returns a value in ``[0, 1]``.
    """
    a = np.asarray(counts_a, dtype=float)
    b = np.asarray(counts_b, dtype=float)
    if a.shape != b.shape:
        raise ParameterError("The two count vectors must be aligned (same words, same order).")
    sa, sb = a.sum(), b.sum()
    if sa <= 0 or sb <= 0:
        raise InputError("A Jensen-Shannon divergence needs at least one word in each source; a source is too short.")
    p, q = a / sa, b / sb
    m = 0.5 * (p + q)
    d = _entropy_bits(m) - 0.5 * (_entropy_bits(p) + _entropy_bits(q))
    return float(min(max(d, 0.0), 1.0))


def remap_words(addresses: np.ndarray, n: int, source: Alphabet, target: Alphabet) -> np.ndarray:
    """Addresses of n-words re-encoded from one alphabet into another holding all its symbols.

    Vectorised: each address is split into its n codes, every code is
    translated through a lookup table, and the word is packed again.
    """
    index = {s: i for i, s in enumerate(target.symbols)}
    try:
        lut = np.array([index[s] for s in source.symbols], dtype=np.uint64)
    except KeyError as exc:
        raise ParameterError(f"Symbol {exc.args[0]!r} is missing from the joint alphabet.") from None
    a = np.asarray(addresses, dtype=np.uint64)
    bs, bt = np.uint64(source.bits), np.uint64(target.bits)
    mask = np.uint64((1 << source.bits) - 1)
    out = np.zeros_like(a)
    for i in range(n):
        code = (a >> (bs * np.uint64(n - 1 - i))) & mask
        out = (out << bt) | lut[code]
    return out


def joint_alphabet(alphabets: Sequence[Alphabet]) -> Alphabet:
    """One alphabet holding every symbol of ``alphabets`` (first alphabet's order, then new symbols in order met)."""
    if not alphabets:
        raise ParameterError("A joint alphabet needs at least one alphabet.")
    first = alphabets[0]
    if all(a.same_symbols(first) for a in alphabets[1:]):
        return first
    symbols: list[str] = []
    seen: set[str] = set()
    for a in alphabets:
        for s in a.symbols:
            if s not in seen:
                seen.add(s)
                symbols.append(s)
    return Alphabet(f"joint-{first.name}", tuple(symbols), first.case_insensitive, first.ambiguous)


def word_matrix(tables: Sequence[tuple[np.ndarray, np.ndarray]]) -> tuple[np.ndarray, np.ndarray]:
    """Align sparse word tables: the union of words and a ``(sources, words)`` count matrix.

    Parameters
    ----------
    tables:
        Per source, ``(addresses, counts)`` over one shared alphabet and depth.
    """
    if not tables:
        raise ParameterError("No word tables to align.")
    words = np.unique(np.concatenate([np.asarray(w, dtype=np.uint64) for w, _ in tables]))
    mat = np.zeros((len(tables), words.size), dtype=np.int64)
    for i, (w, c) in enumerate(tables):
        idx = np.searchsorted(words, np.asarray(w, dtype=np.uint64))
        np.add.at(mat[i], idx, np.asarray(c, dtype=np.int64))
    return words, mat


#: Elements of the largest temporary array of a blocked pairwise computation (float64: 32 MiB).
BLOCK_ELEMENTS = 1 << 22


def _row_blocks(n: int, width: int) -> Iterator[tuple[int, int]]:
    """Blocks of rows ``[lo, hi)`` such that ``(hi - lo) x (n - lo) x width`` stays within :data:`BLOCK_ELEMENTS`.

    The blocks depend only on ``n`` and ``width``, so every run splits the same way.
    """
    lo = 0
    while lo < n:
        b = max(1, BLOCK_ELEMENTS // max(1, (n - lo) * max(1, width)))
        yield lo, min(n, lo + b)
        lo += b


def mirror_upper(out: np.ndarray) -> None:
    """Copy the strict upper triangle of a square matrix onto its lower triangle, in place.

    Done a block of rows at a time (at most :data:`BLOCK_ELEMENTS` cells copied per step), so no
    second ``n x n`` array is made; the copy is exact, so the result is symmetric bit for bit.
    """
    n = out.shape[0]
    step = max(1, BLOCK_ELEMENTS // max(1, n))
    for lo in range(0, n, step):
        hi = min(n, lo + step)
        out[lo:hi, :lo] = out[:lo, lo:hi].T
        block = out[lo:hi, lo:hi]
        low = np.tril_indices(hi - lo, -1)
        block[low] = block.T[low]


def condensed_upper(matrix: np.ndarray, transform=None) -> np.ndarray:
    """The strict upper triangle of a square matrix row by row (scipy's condensed form), optionally transformed.

    Equal to ``scipy.spatial.distance.squareform(matrix)`` for a symmetric matrix with a zero diagonal,
    built one row at a time so that no ``n x n`` temporary is made; ``transform`` (e.g. ``np.sqrt``)
    is applied in place to the condensed vector.
    """
    n = matrix.shape[0]
    out = np.empty(n * (n - 1) // 2, dtype=float)
    at = 0
    for i in range(n - 1):
        row = matrix[i, i + 1 :]
        out[at : at + row.size] = row
        at += row.size
    if transform is not None:
        transform(out, out=out)
    return out


def _plogp_sum(x: np.ndarray) -> np.ndarray:
    """``sum(-x log2 x)`` over the last axis, with ``0 log 0 = 0``."""
    logs = np.zeros_like(x)
    np.log2(x, out=logs, where=x > 0)
    return -(x * logs).sum(axis=-1)


def js_matrix(counts: np.ndarray) -> np.ndarray:
    """Symmetric matrix of pairwise Jensen–Shannon divergences (bits) of the rows of a count matrix.

    Computed in blocks of rows against the rows after them (:func:`_row_blocks`), so memory is
    ``O(sources x words)`` plus a fixed-size temporary, never ``sources^2 x words``.  Each entry is
    ``H((p + q) / 2) - (H(p) + H(q)) / 2`` clipped to ``[0, 1]``, as :func:`js_divergence`.
    """
    counts = np.asarray(counts, dtype=float)
    s = counts.shape[0]
    out = np.zeros((s, s), dtype=float)
    if s < 2:
        return out
    sums = counts.sum(axis=1)
    if (sums <= 0).any():
        raise InputError("A Jensen-Shannon divergence needs at least one word in each source; a source is too short.")
    p = counts / sums[:, None]
    h = _plogp_sum(p)
    for lo, hi in _row_blocks(s, p.shape[1]):
        m = 0.5 * (p[lo:hi, None, :] + p[None, lo:, :])
        d = _plogp_sum(m) - 0.5 * (h[lo:hi, None] + h[None, lo:])
        np.clip(d, 0.0, 1.0, out=d)
        for r in range(hi - lo):
            i = lo + r
            out[i, i + 1 :] = d[r, r + 1 :]
    mirror_upper(out)
    return out


def spectrum_distance(qa: Sequence[float], da: Sequence[float], qb: Sequence[float], db: Sequence[float]) -> float:
    """RMS difference of two D_q spectra over their common, finite orders q (NaN if none)."""
    a = {float(q): float(d) for q, d in zip(qa, da) if d is not None and math.isfinite(float(d))}
    b = {float(q): float(d) for q, d in zip(qb, db) if d is not None and math.isfinite(float(d))}
    common = sorted(set(a) & set(b))
    if not common:
        return math.nan
    diff = np.array([a[q] - b[q] for q in common])
    return float(np.sqrt(np.mean(diff**2)))


def spectrum_matrix(spectra: Sequence[tuple[Sequence[float], Sequence[float]]]) -> np.ndarray:
    """Pairwise :func:`spectrum_distance` of ``(q values, D_q values)`` per source (blocked, vectorised).

    Each pair's RMS runs over the orders q that both sources estimated (finite values); a pair
    with none in common gets NaN.
    """
    s = len(spectra)
    table: list[dict[float, float]] = []
    for qs, ds in spectra:
        table.append({float(q): float(d) for q, d in zip(qs, ds) if d is not None and math.isfinite(float(d))})
    orders = sorted({q for row in table for q in row})
    values = np.full((s, len(orders)), np.nan)
    col = {q: k for k, q in enumerate(orders)}
    for i, row in enumerate(table):
        for q, d in row.items():
            values[i, col[q]] = d
    out = np.zeros((s, s), dtype=float)
    if s < 2:
        return out
    have = np.isfinite(values)
    filled = np.where(have, values, 0.0)
    for lo, hi in _row_blocks(s, len(orders)):
        both = have[lo:hi, None, :] & have[None, lo:, :]
        diff = np.where(both, filled[lo:hi, None, :] - filled[None, lo:, :], 0.0)
        n_common = both.sum(axis=-1)
        with np.errstate(invalid="ignore", divide="ignore"):
            d = np.sqrt((diff**2).sum(axis=-1) / n_common)
        d[n_common == 0] = np.nan
        for r in range(hi - lo):
            i = lo + r
            out[i, i + 1 :] = d[r, r + 1 :]
    mirror_upper(out)
    return out


@dataclass(frozen=True)
class Clustering:
    """Hierarchical clustering of sources.

    Attributes
    ----------
    method:
        Linkage rule (``average`` ...).
    metric:
        What was clustered (text).
    linkage:
        scipy linkage matrix ``(S-1, 4)``: merged clusters, height, size.
    order:
        Leaf order of the dendrogram (source indices).
    leaf_order:
        How ``order`` was chosen: ``"optimal"`` (scipy's optimal leaf ordering, neighbours in the
        order as similar as the tree allows) or ``"linkage"`` (the tree's own order, for more than
        :data:`OPTIMAL_ORDER_MAX` sources).
    """

    method: str
    metric: str
    linkage: np.ndarray
    order: list[int]
    leaf_order: str = "optimal"

    def top_split(self) -> tuple[list[int], list[int]]:
        """The two groups of source indices joined last (the root's children)."""
        s = self.linkage.shape[0] + 1
        if s < 2:
            return list(range(s)), []

        def members(node: int) -> list[int]:
            if node < s:
                return [node]
            row = self.linkage[node - s]
            return members(int(row[0])) + members(int(row[1]))

        root = self.linkage[-1]
        return sorted(members(int(root[0]))), sorted(members(int(root[1])))

    def top_groups(self, tolerance: float = 1e-9) -> list[list[int]]:
        """The groups joined at the root's height: two, or more when several merges tie at the top.

        Sources that share nothing (logs with no common template are at the
        largest possible distance) are joined at one height; the order in which
        tied merges happen is arbitrary, so they are reported together.
        """
        from scipy.cluster.hierarchy import fcluster

        s = self.linkage.shape[0] + 1
        if s < 2:
            return [list(range(s))]
        top = float(self.linkage[-1][2])
        labels = fcluster(self.linkage, t=top - tolerance, criterion="distance")
        groups: dict[int, list[int]] = {}
        for i, lab in enumerate(labels):
            groups.setdefault(int(lab), []).append(i)
        return sorted(groups.values(), key=lambda g: g[0])

    def to_dict(self) -> dict:
        return {
            "method": self.method,
            "metric": self.metric,
            "linkage": [[int(r[0]), int(r[1]), float(r[2]), int(r[3])] for r in self.linkage],
            "order": list(self.order),
            "leaf_order": self.leaf_order,
        }


#: Most sources whose dendrogram leaves get scipy's optimal leaf ordering; its time grows steeply with
#: the number of sources (measured here: 0.2 s at 500, 1.2 s at 1,000, 15 s at 2,000 sources), so larger
#: surveys keep the linkage's own leaf order (``Clustering.leaf_order`` says which).
OPTIMAL_ORDER_MAX = 1000


def cluster(distance: np.ndarray, method: str = "average", metric: str = "distance") -> Clustering:
    """Agglomerative clustering of distances (scipy linkage).

    Parameters
    ----------
    distance:
        A symmetric ``n x n`` distance matrix, or its condensed upper triangle (scipy's form,
        :func:`condensed_upper`), which large surveys pass to avoid ``n x n`` temporaries.
    method:
        Linkage rule (:data:`LINKAGES`).
    metric:
        What the distances are (text kept in the result).

    Needs at least two sources; a single source gives an empty linkage.  Up to
    :data:`OPTIMAL_ORDER_MAX` sources the leaves are put in optimal order.
    """
    from scipy.cluster.hierarchy import leaves_list, linkage, optimal_leaf_ordering
    from scipy.spatial.distance import squareform

    if method not in LINKAGES:
        raise ParameterError(f"Linkage {method!r} is not one of {', '.join(LINKAGES)}.")
    d = np.asarray(distance, dtype=float)
    if d.ndim == 1:
        condensed = d
        s = int(round((1 + math.sqrt(1 + 8 * d.size)) / 2)) if d.size else 1
    else:
        s = d.shape[0]
        condensed = squareform(0.5 * (d + d.T), checks=False) if s >= 2 else d
    if s < 2:
        return Clustering(method, metric, np.zeros((0, 4)), list(range(s)))
    if not np.all(np.isfinite(condensed)):
        raise InputError("A distance is undefined (a source too short for the depth); use a smaller depth.")
    z = linkage(condensed, method=method)
    optimal = s <= OPTIMAL_ORDER_MAX
    if s > 2 and optimal:
        z = optimal_leaf_ordering(z, condensed)
    return Clustering(method, metric, z, [int(i) for i in leaves_list(z)], "optimal" if optimal else "linkage")

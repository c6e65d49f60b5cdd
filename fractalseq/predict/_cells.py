"""Cell tables of the fitted predictor: contexts and their symbol counts from word counts, pruning, the blend's parameters."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Iterable, Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.predict import _fitted_kernels as FK
from fractalseq.predict._params import BETA_STEPS, DISCOUNTS, GRID_CELLS
from fractalseq.words._kernels import merge_sorted_counts, prefix_counts


@dataclass(frozen=True)
class CellTable:
    """The cells of one depth and the symbols that followed them, stored sparsely (no row of ``A`` counts).

    Entry ``e`` says that symbol ``syms[e]`` followed the cell ``cells[i]`` (for ``ptr[i] <= e < ptr[i + 1]``)
    ``counts[e]`` times; within a cell the symbols are increasing, and only symbols seen are stored, so the
    table's size is the number of distinct words of length ``n + 1``, whatever the alphabet.

    Attributes
    ----------
    cells : sorted strictly increasing cell addresses: uint32 when the depth's words fit 32 bits
        (``b * (n + 1) <= 32``, :func:`cell_type`), else uint64
    ptr : ``(cells + 1,)``, first entry of each cell: uint32 while the entries number less than 2**32, else int64
    syms : the symbols in the narrowest unsigned type of the alphabet's codes (uint8 up to 8 bits a symbol,
        uint16 up to 16, else uint32; :func:`sym_type`)
    counts : uint32 (or uint64 before :func:`to_u32`), their counts, all positive

    The narrow types (for DNA 5 bytes an entry instead of 8, and 8 bytes a cell up to depth 15, else
    12, instead of 16) are what :func:`narrow` makes; every table this module builds and every table
    a fitted model holds is narrowed, so the same table always has the same types.
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
        ptr = np.append(starts, words.size).astype(ptr_type(words.size))
        syms = (words & np.uint64((1 << b) - 1)).astype(sym_type(b))
        return cls(ctx[starts], ptr, syms, np.ascontiguousarray(counts))

    @property
    def size(self) -> int:
        """Cells stored."""
        return int(self.cells.size)

    def totals(self) -> np.ndarray:
        """Total count of every cell (int64)."""
        return FK.cell_totals(self.ptr, self.counts)

    def distinct(self) -> np.ndarray:
        """Distinct symbols seen after every cell."""
        return np.diff(self.ptr)

    def words(self, b: int) -> np.ndarray:
        """The (n+1)-word address of every entry (sorted), built in one array."""
        return FK.cell_words(self.cells, self.ptr, self.syms, b)

    def word_pieces(self, b: int, entries: int = 1 << 20) -> Iterator[np.ndarray]:
        """:meth:`words` in consecutive pieces of whole cells, about ``entries`` entries each (concatenated, they are it)."""
        C = self.size
        step = max(1, int(entries * C // max(int(self.ptr[-1]), 1)))
        for i0 in range(0, C, step):
            i1 = min(C, i0 + step)
            yield FK.cell_words(self.cells[i0:i1], self.ptr[i0 : i1 + 1], self.syms[int(self.ptr[i0]) : int(self.ptr[i1])], b)

    def select(self, keep: np.ndarray) -> "CellTable":
        """The cells where ``keep`` is true."""
        n = self.distinct()
        ek = np.repeat(keep, n)
        return CellTable(self.cells[keep], np.concatenate([[0], np.cumsum(n[keep])]).astype(ptr_type(int(ek.sum()))),
                         self.syms[ek], self.counts[ek])

    def take(self, rows: np.ndarray) -> "CellTable":
        """The cells at the increasing positions ``rows`` (as :meth:`select` of a mask true there, with arrays as long as the rows taken only)."""
        rows = np.asarray(rows, dtype=np.int64)
        lo = self.ptr[rows].astype(np.int64)
        n = self.ptr[rows + 1].astype(np.int64) - lo
        ptr = np.zeros(rows.size + 1, np.int64)
        np.cumsum(n, out=ptr[1:])
        at = np.repeat(lo - ptr[:-1], n) + np.arange(int(ptr[-1]), dtype=np.int64)
        return CellTable(self.cells[rows], ptr.astype(ptr_type(int(ptr[-1]))), self.syms[at], self.counts[at])

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


def sym_type(b: int) -> np.dtype:
    """The type a table keeps its symbols in: the narrowest unsigned integer of ``b``-bit codes."""
    return np.dtype(np.uint8 if b <= 8 else np.uint16 if b <= 16 else np.uint32)


def ptr_type(entries: int) -> np.dtype:
    """The type of a table's entry pointers: uint32 while ``entries < 2**32``, else int64."""
    return np.dtype(np.uint32 if entries < 1 << 32 else np.int64)


def cell_type(n: int, b: int) -> np.dtype:
    """The type of the cell addresses of depth ``n``: uint32 when its ``(n + 1)``-words fit 32 bits, else uint64."""
    return np.dtype(np.uint32 if b * (n + 1) <= 32 else np.uint64)


def narrow(t: CellTable, b: int, n: int) -> CellTable:
    """``t`` (depth ``n``) in the table types (:func:`cell_type`, :func:`ptr_type`, :func:`sym_type`); the same table if it is."""
    cells = t.cells.astype(cell_type(n, b), copy=False)
    ptr = t.ptr.astype(ptr_type(int(t.ptr[-1]) if t.ptr.size else 0), copy=False)
    syms = t.syms.astype(sym_type(b), copy=False)
    return t if cells is t.cells and ptr is t.ptr and syms is t.syms else CellTable(cells, ptr, syms, t.counts)


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
    return narrow(CellTable(cells, ptr, syms, cnt), b, n)


def cell_tables(wc, orders: Iterable[int], reverse: bool = False) -> dict[int, CellTable]:
    """Cells (contexts of depth n) and the symbols that followed them (a :class:`CellTable`) from word counts, for each n."""
    return {n: depth_table(wc, n, reverse) for n in orders}


#: Address parts a deep depth is built in: at least 16, more (up to 256) so that a part holds about this many leaves.
PART_LEAVES = 1 << 18


def _part_tables(wc, n: int, reverse: bool):
    """The table of depth ``n`` in pieces of increasing address (see :func:`depth_table`); concatenated they are it.

    Nothing as large as the word counts is built: each part's (n+1)-words are the prefixes of
    a slice of the leaf table (:meth:`~fractalseq.words._counts.WordCounts.prefix_source`), its
    reverse complements are collected part by part (:class:`~fractalseq.predict._fitted_kernels.RevcompParts`),
    and the few segment tails are merged into each part.
    """
    b = wc.alphabet.bits
    width = b * (n + 1)
    leaf, lc, shift, tw, tc = wc.prefix_source(n + 1)
    # the parts only bound the memory: the tables concatenated are the same for any number of them
    pbits = 0 if width - 4 < b else min(width - b, 8, max(4, math.ceil(math.log2(max(leaf.size, 1) / PART_LEAVES))))
    parts = 1 << pbits
    dt = lc.dtype
    tc = tc.astype(dt)
    rev = FK.RevcompParts(leaf, lc, shift, n + 1, b, pbits) if reverse else None
    pshift = width - pbits
    for p in range(parts):
        lo = p << pshift if parts > 1 else 0
        hi = (p + 1) << pshift if p + 1 < parts else None
        i0 = int(np.searchsorted(leaf, np.uint64(lo << shift)))
        i1 = leaf.size if hi is None else int(np.searchsorted(leaf, np.uint64(hi << shift)))
        j0 = int(np.searchsorted(tw, np.uint64(lo)))
        j1 = tw.size if hi is None else int(np.searchsorted(tw, np.uint64(hi)))
        fw, fc = leaf[i0:i1], lc[i0:i1]
        if shift:
            fw, fc = prefix_counts(fw, fc, shift)
            fc = fc.astype(dt, copy=False)
        if j1 > j0:
            fw, fc = merge_sorted_counts(fw, fc, tw[j0:j1], tc[j0:j1], dt)
        if rev is not None:
            rw, rc = rev.part(p)
            if tw.size:
                tr, trc = FK.revcomp_in_range(tw, tc, n + 1, b, lo, hi)
                if tr.size:
                    rw, rc = merge_sorted_counts(rw, rc, tr, trc, dt)
        else:
            rw, rc = np.zeros(0, np.uint64), lc[:0]
        cells, ptr, syms, cnt, over = FK.strand_table(fw, fc, rw, rc, b)
        del rw, rc, fw, fc
        if over:
            raise InputError("A cell was seen more than 4,294,967,295 times, beyond what a model stores; split the input.")
        yield CellTable(cells, ptr, syms, cnt)


def _total_class(tot: np.ndarray) -> np.ndarray:
    """The round of :func:`prune_cells` that drops a cell of total ``t``: the smallest ``r`` with ``2**r >= t``."""
    return np.frexp(np.maximum(tot - 1, 0).astype(np.float64))[1].astype(np.int64)


@dataclass(frozen=True)
class _Packed:
    """A part of a table held small while more parts are built: cell lengths and symbols in the narrowest integers."""

    cells: np.ndarray
    lens: np.ndarray
    syms: np.ndarray
    counts: np.ndarray


@dataclass(frozen=True)
class _Spilled:
    """Where a packed part lies in a part store's temporary file: its offset, cells, entries and field types."""

    offset: int
    cells: int
    entries: int
    lens: np.dtype
    syms: np.dtype
    counts: np.dtype


def _small_uint(top: int):
    """The narrowest unsigned dtype holding ``0..top``."""
    return np.uint8 if top < 1 << 8 else np.uint16 if top < 1 << 16 else np.uint32 if top < 1 << 32 else np.uint64


def _pack(t: CellTable, A: int, b: int, n: int) -> _Packed:
    """``t`` (depth ``n``) with one small integer a cell (its number of symbols, at most ``A``) instead of a pointer, small symbols and cells."""
    return _Packed(t.cells.astype(cell_type(n, b), copy=False), np.diff(t.ptr).astype(_small_uint(A)),
                   t.syms.astype(sym_type(b)), t.counts)


#: Bytes of packed parts a :class:`_PartStore` holds in memory; beyond, its parts go to a temporary file.
SPILL_BYTES = 4 << 20


def _trim_heap() -> None:
    """Hand the C heap's free pages back to the system (glibc's ``malloc_trim``; elsewhere nothing happens).

    Called where a large set of arrays was just released (the word counts): the small blocks the
    counting and the parts left in the heap are otherwise kept by the process (about 20 MiB at 10 Mbase).
    """
    import ctypes
    import ctypes.util

    try:
        ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6").malloc_trim(ctypes.c_size_t(0))
    except (OSError, AttributeError, TypeError):
        pass


def _read_into(f, a: np.ndarray) -> None:
    """Fill the contiguous array ``a`` from the file's position."""
    view = memoryview(a).cast("B")
    got = 0
    while got < view.nbytes:
        k = f.readinto(view[got:])
        if not k:
            raise OSError("a temporary file of the cell tables ended early")
        got += k


class _PartStore:
    """The parts of the deep depths' tables, kept (packed) while the word counts are still held, then joined.

    The parts are held in memory up to ``spill_bytes``; once they pass it, all of them go to an
    unnamed temporary file (``tempfile.TemporaryFile``: the system removes it when it is closed or
    the process ends), so the cells kept are not held beside the word counts they are built from.
    :meth:`join`, called once the counts are dropped, reads a depth's parts straight into the
    whole table's arrays (no second copy of the table).  The tables are the same either way (also
    when no temporary file can be made: the parts then stay in memory).
    """

    def __init__(self, A: int, b: int, spill_bytes: int | None = None) -> None:
        self.A, self.b = A, b
        self.limit = SPILL_BYTES if spill_bytes is None else spill_bytes
        self.parts: dict[int, list] = {}
        self.held = 0
        self.file = None

    def add(self, n: int, t: CellTable) -> None:
        """Keep ``t``, the next part (increasing addresses) of depth ``n``."""
        p = _pack(t, self.A, self.b, n)
        size = sum(int(a.nbytes) for a in (p.cells, p.lens, p.syms, p.counts))
        if self.file is None and self.held + size > self.limit:
            import tempfile

            try:
                self.file = tempfile.TemporaryFile(prefix="fractalseq-cells-")
            except OSError:  # no writable temporary folder: the parts stay in memory (the same tables)
                self.limit = 1 << 62
            else:
                for kept in self.parts.values():
                    for i, q in enumerate(kept):
                        kept[i] = self._write(q)
                self.held = 0
        if self.file is None:
            self.held += size
            self.parts.setdefault(n, []).append(p)
        else:
            self.parts.setdefault(n, []).append(self._write(p))

    def _write(self, p: _Packed) -> _Spilled:
        f = self.file
        f.seek(0, 2)
        at = f.tell()
        for a in (p.cells, p.lens, p.syms, p.counts):
            f.write(np.ascontiguousarray(a).data)
        return _Spilled(at, int(p.cells.size), int(p.syms.size), p.lens.dtype, p.syms.dtype, p.counts.dtype)

    def join(self, n: int) -> CellTable:
        """The parts of depth ``n`` as one table (narrow types, :func:`narrow`); they leave the store."""
        parts = self.parts.pop(n, [])
        C = sum(q.cells if isinstance(q, _Spilled) else int(q.cells.size) for q in parts)
        E = sum(q.entries if isinstance(q, _Spilled) else int(q.syms.size) for q in parts)
        cdt = parts[0].counts if parts and isinstance(parts[0], _Spilled) else parts[0].counts.dtype if parts else np.uint32
        cells, ptr = np.empty(C, cell_type(n, self.b)), np.zeros(C + 1, ptr_type(E))
        syms, counts = np.empty(E, sym_type(self.b)), np.empty(E, cdt)
        c0 = e0 = 0
        for i, q in enumerate(parts):
            parts[i] = None  # released once copied
            if isinstance(q, _Spilled):
                k, m = q.cells, q.entries
                self.file.seek(q.offset)
                _read_into(self.file, cells[c0 : c0 + k])
                lens = np.empty(k, q.lens)
                _read_into(self.file, lens)
                _read_into(self.file, syms[e0 : e0 + m])
                _read_into(self.file, counts[e0 : e0 + m])
            else:
                k, m = int(q.cells.size), int(q.syms.size)
                cells[c0 : c0 + k] = q.cells
                lens = q.lens
                syms[e0 : e0 + m] = q.syms
                counts[e0 : e0 + m] = q.counts
            ptr[c0 + 1 : c0 + 1 + k] = np.cumsum(lens, dtype=np.int64) + e0
            del q, lens
            c0, e0 = c0 + k, e0 + m
        return CellTable(cells, ptr, syms, counts)

    def close(self) -> None:
        """Forget every part (and remove the temporary file)."""
        self.parts.clear()
        self.held = 0
        if self.file is not None:
            self.file.close()
            self.file = None


#: Deepest words (``b * (n + 1)`` bits) whose whole table a baseline depth is built from; beyond, it is built in parts.
WHOLE_TABLE_BITS = 18


def _kth_smallest(pieces: Callable[[], Iterable[np.ndarray]], total: int, k: int) -> tuple[np.uint64, int]:
    """The ``k``-th smallest (1-based) of ``total`` uint64 hashes given in pieces, and how many are smaller than it.

    The hashes are about uniform, so the ``k``-th lies near ``k / total`` of the range: one pass
    keeps only those in a window around that point (six standard deviations of the order
    statistic wide, a few thousandths of them) and counts those below it.  Should the ``k``-th
    fall outside the window, a second pass holds them all.  Exact either way.
    """
    q = (k - 0.5) / total
    half = 6.0 * math.sqrt(q * (1.0 - q) / total) + 1e-6
    lo = int(max(0.0, q - half) * 2.0**64)
    hi = int(min(1.0, q + half) * 2.0**64)
    lo_u = np.uint64(min(lo, (1 << 64) - 1))
    below, inside = 0, []
    for h in pieces():
        under = h < lo_u
        below += int(np.count_nonzero(under))
        h = h[~under]
        inside.append(h if hi >= 1 << 64 else h[h < np.uint64(hi)])
    win = np.concatenate(inside) if inside else np.zeros(0, np.uint64)
    del inside
    if not below < k <= below + win.size:
        below, win = 0, np.concatenate(list(pieces()))
    at = k - 1 - below
    h_cut = np.partition(win, at)[at]
    return h_cut, below + int(np.count_nonzero(win < h_cut))


def capped_cell_tables(wc, orders: Iterable[int], reverse: bool, K_b: int, cap: int,
                       release: Callable[[], None] | None = None) -> tuple[dict[int, CellTable], int]:
    """:func:`cell_tables` cut to ``cap`` cells as :func:`prune_cells` cuts them, without holding the uncut tables; also the cells dropped.

    :func:`prune_cells` drops the cells of the depths beyond ``K_b`` in one order:
    by total class (totals of at most 1, 2, 4, ...), within a class the deepest
    depth first, within the class and depth where the cut falls the largest cell
    hashes first (ties: the later address).  The deep depths are built in address
    parts (:func:`_part_tables`) and never held whole: a first pass counts the
    cells of every class and depth (the parts are kept while all cells fit under
    the cap), a second collects the hashes of the one class cut, a third keeps the
    cells before the cut.  The tables are exactly those of pruning at the end.

    ``release`` (e.g. the word counts' ``discard``) is called once the word counts are read
    for the last time, before the kept parts are joined into whole tables, so the counts and
    the joined tables are never held together; until then the kept parts (and those of the
    baseline depths of words longer than ``WHOLE_TABLE_BITS``) wait in a :class:`_PartStore`,
    on disk beyond ``SPILL_BYTES``.  The tables are narrow (:func:`narrow`).
    """
    tables: dict[int, CellTable] = {}
    deep = sorted(n for n in set(orders) if n > K_b)
    A, b = wc.alphabet.size, wc.alphabet.bits
    _trim_heap()  # what counting left in the heap
    # the baseline depths of long words are built in parts too, kept like the deep parts below and joined
    # with them, so they are not held whole beside the word counts during the deep passes
    base = _PartStore(A, b)
    # the deep parts kept are held packed (one byte a cell and a byte a symbol for DNA), on disk once they
    # pass SPILL_BYTES, until the word counts are dropped and they are joined
    store = _PartStore(A, b)
    try:
        nfixed = 0
        for n in sorted(set(orders)):
            if n > K_b:
                continue
            if b * (n + 1) <= WHOLE_TABLE_BITS:
                tables[n] = depth_table(wc, n, reverse)
                nfixed += tables[n].size
            else:
                for t in _part_tables(wc, n, reverse):
                    base.add(n, t)
                    nfixed += t.size
        if nfixed > cap and deep:
            _refuse_fixed(K_b, nfixed)
        base_deep = [n for n in sorted(set(orders)) if n <= K_b and n not in tables]
        hist = {n: np.zeros(64, np.int64) for n in deep}
        fits = True
        total = nfixed
        for n in deep:
            for t in _part_tables(wc, n, reverse):
                total += t.size
                hist[n] += np.bincount(_total_class(t.totals()), minlength=64)[:64]
                if fits and total <= cap:
                    store.add(n, t)
                elif fits:
                    fits = False
                    store.close()
        if fits:
            if release is not None:
                release()
                _trim_heap()
            tables.update({n: base.join(n) for n in base_deep})
            tables.update({n: store.join(n) for n in deep})
            return {n: tables[n] for n in sorted(tables)}, 0
        drop = total - cap
        # the class (total round r, depth n) where the drops reach ``drop``: rounds in order, deepest depth first
        acc = 0
        r_cut, n_cut, keep_in_class = 63, deep[0], 0
        for r in range(64):
            for n in reversed(deep):
                if acc + hist[n][r] >= drop:
                    r_cut, n_cut, keep_in_class = r, n, int(acc + hist[n][r] - drop)
                    break
                acc += int(hist[n][r])
            else:
                continue
            break
        h_cut, ties = np.uint64(0), 0
        if keep_in_class:
            def class_hashes():
                for t in _part_tables(wc, n_cut, reverse):
                    yield FK.hash_cells(t.cells[_total_class(t.totals()) == r_cut], n_cut)

            h_cut, below = _kth_smallest(class_hashes, int(hist[n_cut][r_cut]), keep_in_class)
            ties = keep_in_class - below
        for n in deep:
            seen = 0
            for t in _part_tables(wc, n, reverse):
                r = _total_class(t.totals())
                keep = (r > r_cut) | ((r == r_cut) & (n < n_cut))
                if n == n_cut and keep_in_class:
                    at = np.flatnonzero(r == r_cut)
                    h = FK.hash_cells(t.cells[at], n)
                    tie = np.flatnonzero(h == h_cut)
                    ok = h < h_cut
                    ok[tie[: max(0, ties - seen)]] = True
                    seen += tie.size
                    keep[at[ok]] = True
                store.add(n, t.select(keep))
                del t
        if release is not None:
            release()
            _trim_heap()
        tables.update({n: base.join(n) for n in base_deep})
        for n in deep:
            tables[n] = store.join(n)
        return {n: tables[n] for n in sorted(tables)}, int(drop)
    finally:
        base.close()
        store.close()


def to_u32(table: CellTable) -> CellTable:
    """The table with uint32 counts (refused beyond 2**32 - 1)."""
    counts = table.counts
    if counts.size and int(counts.max()) > np.iinfo(np.uint32).max:
        raise InputError("A cell was seen more than 4,294,967,295 times, beyond what a model stores; split the input.")
    return CellTable(table.cells, table.ptr, table.syms, counts.astype(np.uint32))


def blended_at(depths, tables: dict, params: dict, addr: np.ndarray, syms: np.ndarray, upto: int, A: int, b: int) -> np.ndarray:
    """Blended probability of ``syms`` after contexts ``addr`` through the depths before ``upto`` (coarse to fine).

    As in :func:`fit_blend`: a depth whose cell is absent restarts from the uniform ``1/A``.
    Each pair's probability depends on that pair alone, so the pairs are taken ``BLEND_PIECE``
    at a time (the temporaries of one piece only).
    """
    out = np.empty(addr.size)
    for i in range(0, addr.size, BLEND_PIECE):
        a, s = addr[i : i + BLEND_PIECE], syms[i : i + BLEND_PIECE]
        p = np.full(a.size, 1.0 / A)
        for m in depths:
            if m >= upto:
                break
            beta, d = params[m]
            t = tables[m]
            key = a & np.uint64((1 << (b * m)) - 1)
            found, c, tot, u = FK.cell_lookup(t.cells, t.ptr, t.syms, t.counts, key, s)
            q = (np.maximum(c - d, 0.0) + (beta + d * u) * p) / (tot + beta)
            p = np.where(found, q, 1.0 / A)
        out[i : i + a.size] = p
    return out


#: Pairs :func:`blended_at` blends at a time.
BLEND_PIECE = 1 << 15


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
        if step > 1:
            sub = t.take(np.arange(0, C, step))  # every step-th cell (no array as long as the table)
        else:
            sub = t
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


def _refuse_fixed(K_b: int, keep_fixed: int) -> None:
    """The refusal of a cap below the cells of the baseline depths (which are never pruned)."""
    raise ParameterError(
        f"The cells up to depth {K_b} alone number {keep_fixed}; raise max_cells to at least {keep_fixed}.",
        parameter="max_cells",
    )


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
        _refuse_fixed(K_b, keep_fixed)
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
                order = np.argsort(FK.hash_cells(cells[rare].astype(np.uint64), n), kind="stable")
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

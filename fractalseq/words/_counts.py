"""Exact counts of every n-word, n = 1..N, built in one pass and mergeable.

Occupied boxes of the contractive encoding at scale ``k**n`` (non-overlapping
maps) are exactly the distinct n-words of the stream, and box masses are
n-word frequencies.  :class:`WordCounts` stores the counts of the deepest
words (the *leaf* table) plus the short words at the end of each closed
segment (the *tails*); every shallower depth is read off the leaf table by
prefixes, because the packed address of a word keeps its first symbol in
the most significant bits (see :mod:`fractalseq.words._kernels`).

Storage is dense (a table of ``2**(b N)`` counters, memory independent of
the input length) when ``b N <= DENSE_MAX_BITS`` and sparse (sorted unique
addresses plus counts, memory proportional to the distinct N-words) beyond.
Counts built chunk by chunk equal counts of the whole stream: the last
``N - 1`` symbols of an open segment are carried to the next chunk, and no
word spans a segment break.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Iterator

import numpy as np

from fractalseq.words import _kernels as kernels
from fractalseq.words._addresses import absent_prefixes, decode_address, encode_address, reduce_tails
from fractalseq.words._part_tally import parts_for, tally_in_parts
from fractalseq.words._threaded_runs import sorted_runs_threaded as _sorted_runs_threaded
from fractalseq.alphabet import Alphabet
from fractalseq.errors import FractalseqError, InputError, ModelFileError, ParameterError
from fractalseq.io._npz import DEFAULT_MAX_BYTES, read_container, write_container
from fractalseq.stream import Chunk, SymbolArray, SymbolStream

#: Dense tables are used up to this many address bits (4**12 cells for DNA).
DENSE_MAX_BITS = 24
#: Largest count a ``uint32`` holds (compact counting widens to ``int64`` before the length reaches it).
U32_MAX = (1 << 32) - 1
#: Counts below this value are tallied in a direct table by :meth:`WordCounts.spectra`.
SPECTRUM_CAP = 4096
FILE_FORMAT = "fractalseq-words"
FILE_VERSION = 1


def check_depth(alphabet: Alphabet, depth: int) -> int:
    """Validate a word depth against the 64-bit address width; return it as int."""
    if not isinstance(depth, (int, np.integer)) or depth < 1:
        raise ParameterError(f"Depth must be a positive whole number, not {depth!r}.")
    if depth > alphabet.max_depth:
        raise ParameterError(
            f"Depth {depth} exceeds the address width for {alphabet.size} symbols "
            f"({alphabet.bits} bits each, at most {alphabet.max_depth}); use --depth {alphabet.max_depth} or less."
        )
    return int(depth)


def _key_dtype(bits: int, depth: int) -> np.dtype:
    return np.dtype(np.uint32) if bits * depth <= 32 else np.dtype(np.uint64)


@dataclass(frozen=True)
class Spectrum:
    """Frequency-of-frequencies of the n-words: ``multiplicity[i]`` words occur ``value[i]`` times."""

    depth: int
    value: np.ndarray
    multiplicity: np.ndarray

    @property
    def distinct(self) -> int:
        return int(self.multiplicity.sum())

    @property
    def total(self) -> int:
        return int((self.value * self.multiplicity).sum())

    def expand(self) -> np.ndarray:
        """The count vector (sorted), e.g. for estimators that want one count per word."""
        return np.repeat(self.value, self.multiplicity)


@dataclass(eq=False)
class WordCounts:
    """Exact counts of all words of length 1..``depth`` of a stream.

    Build with :func:`count_words` (or :class:`WordCounter` for streamed
    chunks), combine with ``+``, save with :meth:`save` and load with
    :meth:`load`.

    Attributes
    ----------
    alphabet, depth:
        Alphabet and deepest word length N.
    length, segments:
        Symbols and segments counted.
    dense:
        ``int64`` table of ``2**(b N)`` counts (dense storage) or ``None``.
    leaf_words, leaf_counts:
        Sorted unique N-word addresses and their counts (sparse storage) or ``None``.
    tail_len, tail_addr, tail_count:
        Words of length ``m < N`` ending a closed segment, sorted by (m, address).
    """

    alphabet: Alphabet
    depth: int
    length: int
    segments: int
    dense: np.ndarray | None
    leaf_words: np.ndarray | None
    leaf_counts: np.ndarray | None
    tail_len: np.ndarray
    tail_addr: np.ndarray
    tail_count: np.ndarray
    _cache: dict = field(default_factory=dict, repr=False)

    # ------------------------------------------------------------- basics
    @property
    def bits(self) -> int:
        return self.alphabet.bits

    @property
    def storage(self) -> str:
        """``"dense"`` or ``"sparse"``."""
        return "dense" if self.dense is not None else "sparse"

    def _check_n(self, n: int) -> int:
        if self._cache.get("discarded"):
            raise ParameterError("These word counts were discarded after a fit used them; count the input again.")
        if not 1 <= n <= self.depth:
            raise ParameterError(f"Word length {n} is outside 1..{self.depth} counted; count deeper or ask less.")
        return int(n)

    def leaf(self) -> tuple[np.ndarray, np.ndarray]:
        """Sorted unique N-word addresses and counts (from either storage)."""
        self._check_n(self.depth)
        if self.dense is not None:
            idx = np.flatnonzero(self.dense)
            return idx.astype(_key_dtype(self.bits, self.depth)), self.dense[idx]
        assert self.leaf_words is not None and self.leaf_counts is not None
        return self.leaf_words, self.leaf_counts

    def _tail_prefixes(self, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Sorted unique n-word prefixes of the tails long enough, with counts."""
        sel = self.tail_len >= n
        if not sel.any():
            return np.zeros(0, np.uint64), np.zeros(0, np.int64)
        m = self.tail_len[sel].astype(np.uint64)
        pref = self.tail_addr[sel] >> (np.uint64(self.bits) * (m - np.uint64(n)))
        cnt = self.tail_count[sel]
        order = np.argsort(pref, kind="stable")
        pref, cnt = pref[order], cnt[order]
        uniq, start = np.unique(pref, return_index=True)
        return uniq.astype(np.uint64), np.add.reduceat(cnt, start).astype(np.int64)

    def words(self, n: int) -> tuple[np.ndarray, np.ndarray]:
        """Addresses (sorted, ``uint64``) and counts (``int64``) of the distinct n-words."""
        n = self._check_n(n)
        if self.dense is not None:
            cells = 1 << (self.bits * (self.depth - n))
            table = self.dense.reshape(-1, cells).sum(axis=1) if cells > 1 else self.dense
            idx = np.flatnonzero(table)
            lw, lc = idx.astype(np.uint64), table[idx].astype(np.int64)
        else:
            shift = self.bits * (self.depth - n)
            lw, lc = kernels.prefix_counts(self.leaf_words, self.leaf_counts, shift)
        tw, tc = self._tail_prefixes(n)
        if tw.size:
            lw, lc = kernels.merge_sorted_counts(lw, lc, tw, tc)
        return lw, lc

    def prefix_source(self, n: int) -> tuple[np.ndarray, np.ndarray, int, np.ndarray, np.ndarray]:
        """The n-words unbuilt, ``(leaves, counts, shift, tail words, tail counts)``: prefixes ``leaves >> shift``
        of the leaf table itself (no copy; equal prefixes are neighbours) plus the n-prefixes of the segment
        tails, not yet added.  Dense storage gives the n-word table with shift 0.  Leaf counts as stored.
        """
        n = self._check_n(n)
        if self.dense is not None:
            lw, lc = self.words(n)
            return lw, lc, 0, np.zeros(0, np.uint64), np.zeros(0, np.int64)
        tw, tc = self._tail_prefixes(n)
        lw = np.ascontiguousarray(self.leaf_words, dtype=np.uint64)
        return lw, self.leaf_counts, self.bits * (self.depth - n), tw, tc

    def discard(self) -> None:
        """Drop the tables (for a caller that handed these counts over and needs the memory); any later use raises."""
        self.dense = self.leaf_words = self.leaf_counts = None
        self._cache.clear()
        self._cache["discarded"] = True

    def counts(self, n: int) -> np.ndarray:
        """Counts of the distinct n-words, in address (lexicographic) order."""
        return self.words(n)[1]

    def frequencies(self, n: int) -> np.ndarray:
        """Relative frequencies of the distinct n-words (sum to 1)."""
        c = self.counts(n)
        return c / c.sum() if c.size else c.astype(float)

    def total(self, n: int) -> int:
        """Number of n-word occurrences (``length - n + 1`` per segment long enough)."""
        n = self._check_n(n)
        if "leaf_total" not in self._cache:  # summed once: a ladder asks for every depth
            self._cache["leaf_total"] = int(self.dense.sum()) if self.dense is not None else int(np.asarray(self.leaf_counts).sum())
        return self._cache["leaf_total"] + int(self.tail_count[self.tail_len >= n].sum())

    def distinct(self, n: int) -> int:
        """Number of distinct n-words (occupied boxes at scale ``k**n``)."""
        return int(self.distinct_all()[self._check_n(n)])

    def distinct_all(self) -> np.ndarray:
        """Distinct n-words for every depth (index n; index 0 is 1), from one pass over the leaves.

        Consecutive sorted leaves sharing exactly ``l`` leading symbols start a
        new n-word for every ``n > l``, so a histogram of shared prefixes gives
        every depth's box count at once; tail words absent from the leaf
        prefixes are added.
        """
        if "distinct" in self._cache:
            return self._cache["distinct"]
        N, b = self.depth, self.bits
        out = np.zeros(N + 1, dtype=np.int64)
        out[0] = 1
        lw, _ = self.leaf() if self.dense is None else (None, None)
        if self.dense is not None:
            table = self.dense
            for n in range(N, 0, -1):
                out[n] = np.count_nonzero(table)
                table = table.reshape(-1, 1 << b).sum(axis=1)
            lw = np.flatnonzero(self.dense).astype(_key_dtype(b, N))
        elif lw.size:
            if "lcp" not in self._cache:
                self._cache["lcp"] = kernels.lcp_histogram(lw, N, b, 8 * lw.dtype.itemsize)
            out[1:] = 1 + np.cumsum(self._cache["lcp"])[:N]
        for n in range(1, N + 1):
            tw, _ = self._tail_prefixes(n)
            if tw.size:
                out[n] += absent_prefixes(lw, tw, b * (N - n), b * N)
        self._cache["distinct"] = out
        return out

    def count_of(self, word: str | Iterable[int]) -> int:
        """Occurrences of one word given as text or codes."""
        codes = self.alphabet.encode(word) if isinstance(word, str) else np.asarray(list(word))
        n = self._check_n(len(codes))
        addr = encode_address(codes, self.bits)
        w, c = self.words(n)
        i = np.searchsorted(w, np.uint64(addr))
        return int(c[i]) if i < w.size and w[i] == addr else 0

    def decode(self, address: int, n: int) -> str:
        """Text of the n-word with the given address."""
        return self.alphabet.word(decode_address(int(address), n, self.bits))

    def top(self, n: int, limit: int = 10) -> list[tuple[str, int]]:
        """The ``limit`` most frequent n-words as (text, count), ties by address."""
        w, c = self.words(n)
        order = np.lexsort((w, -c))[:limit]
        return [(self.decode(w[i], n), int(c[i])) for i in order]

    # ---------------------------------------------------------- spectra
    def spectra(self) -> list[Spectrum]:
        """Frequency-of-frequencies for every depth (index 0 unused), in one pass."""
        if "spectra" not in self._cache:
            lw, lc = self.leaf()
            key_bits = 8 * lw.dtype.itemsize
            # the (few) padded tails, sorted, are merged into the sorted leaves by the kernel itself
            # (each after the leaves equal to it): no merged copy of the leaf table
            pad = (np.uint64(self.depth) - self.tail_len.astype(np.uint64)) * np.uint64(self.bits)
            padded = (self.tail_addr.astype(np.uint64) << pad).astype(lw.dtype)
            order = np.argsort(padded, kind="stable")
            total = int(lc.sum()) + int(self.tail_count.sum())
            hist, bd, bc = kernels.count_spectra(
                lw, lc, padded[order], self.tail_count[order], self.tail_len[order].astype(np.int64),
                self.depth, self.bits, key_bits, SPECTRUM_CAP, self.depth * (total // SPECTRUM_CAP + 1),
            )
            hist = hist.reshape(self.depth + 1, SPECTRUM_CAP)
            hist[:, 0] = 0  # bookkeeping entries for depths a tail did not reach
            out: list[Spectrum] = [Spectrum(0, np.zeros(0, np.int64), np.zeros(0, np.int64))]
            for d in range(1, self.depth + 1):
                vals = np.flatnonzero(hist[d])
                mult = hist[d, vals]
                big = bc[bd == d]
                if big.size:
                    bv, bm = np.unique(big, return_counts=True)
                    vals = np.concatenate([vals, bv])
                    mult = np.concatenate([mult, bm])
                out.append(Spectrum(d, vals.astype(np.int64), mult.astype(np.int64)))
            self._cache["spectra"] = out
        return self._cache["spectra"]

    def spectrum(self, n: int) -> Spectrum:
        """Frequency-of-frequencies of the n-words."""
        return self.spectra()[self._check_n(n)]

    def ladder(self) -> list[dict]:
        """Per depth: distinct words, occurrences, possible words ``A**n`` (a small table)."""
        d = self.distinct_all()
        return [
            {"depth": n, "distinct": int(d[n]), "occurrences": self.total(n), "possible": float(self.alphabet.size) ** n}
            for n in range(1, self.depth + 1)
        ]

    # ------------------------------------------------------------ merging
    def compatible(self, other: "WordCounts") -> None:
        """Raise unless ``other`` has the same alphabet and depth."""
        if not self.alphabet.same_symbols(other.alphabet):
            raise InputError(
                f"Cannot merge counts over different alphabets ({self.alphabet.name} vs {other.alphabet.name}); "
                "read every input with the same --alphabet."
            )
        if self.depth != other.depth:
            raise InputError(f"Cannot merge counts of depth {self.depth} and {other.depth}; count both at one depth.")

    def __add__(self, other: "WordCounts") -> "WordCounts":
        self.compatible(other)
        if self.dense is not None and other.dense is not None:
            dense, lw, lc = self.dense + other.dense, None, None
        else:
            aw, ac = self.leaf()
            bw, bc = other.leaf()
            lw, lc = kernels.merge_sorted_counts(aw, ac, bw.astype(aw.dtype), bc)
            dense = None
        tl, ta, tc = reduce_tails(
            [self.tail_len, other.tail_len], [self.tail_addr, other.tail_addr], [self.tail_count, other.tail_count]
        )
        return WordCounts(
            self.alphabet, self.depth, self.length + other.length, self.segments + other.segments,
            dense, lw, lc, tl, ta, tc,
        )

    def truncate(self, depth: int) -> "WordCounts":
        """Counts limited to words of length 1..``depth`` (exact, no recounting).

        The new leaves are all ``depth``-words (:meth:`words`); the new tails are
        the old tails shorter than ``depth``.
        """
        depth = self._check_n(depth)
        if depth == self.depth:
            return self
        w, c = self.words(depth)
        keep = self.tail_len < depth
        tl, ta, tc = self.tail_len[keep], self.tail_addr[keep], self.tail_count[keep]
        if self.bits * depth <= DENSE_MAX_BITS:
            dense = np.zeros(1 << (self.bits * depth), dtype=np.int64)
            dense[w.astype(np.int64)] = c
            return WordCounts(self.alphabet, depth, self.length, self.segments, dense, None, None, tl, ta, tc)
        lw = w.astype(_key_dtype(self.bits, depth))
        return WordCounts(self.alphabet, depth, self.length, self.segments, None, lw, c, tl, ta, tc)

    # ------------------------------------------------------- persistence
    def to_arrays(self) -> tuple[dict, dict[str, np.ndarray]]:
        """JSON header and plain arrays describing the counts (see :meth:`save`)."""
        arrays: dict[str, np.ndarray] = {
            "tail_len": self.tail_len,
            "tail_addr": self.tail_addr,
            "tail_count": self.tail_count,
        }
        if self.dense is not None:
            arrays["dense"] = self.dense
        else:
            arrays["leaf_words"] = np.asarray(self.leaf_words)
            arrays["leaf_counts"] = np.asarray(self.leaf_counts)
        header = {
            "format": FILE_FORMAT,
            "version": FILE_VERSION,
            "alphabet": self.alphabet.to_dict(),
            "depth": self.depth,
            "length": self.length,
            "segments": self.segments,
            "storage": self.storage,
            "sha256": {k: hashlib.sha256(np.ascontiguousarray(v).tobytes()).hexdigest() for k, v in arrays.items()},
        }
        return header, arrays

    def save(self, path: str | Path, force: bool = False) -> Path:
        """Write an ``.npz`` file: plain arrays plus a JSON header with checksums (:mod:`fractalseq.io._npz`).

        The file loads without pickle; :meth:`load` verifies format, version, declared sizes and checksums.
        """
        header, arrays = self.to_arrays()
        return write_container(path, header, arrays, force=force)

    @classmethod
    def load(cls, path: str | Path, max_bytes: int = DEFAULT_MAX_BYTES) -> "WordCounts":
        """Load counts written by :meth:`save`; the file is treated as hostile and checked before use.

        Parameters
        ----------
        path:
            The count file.
        max_bytes:
            Cap on the arrays' total declared size; a file declaring more is refused
            before anything is decompressed.
        """
        header, data = read_container(path, FILE_FORMAT, max_bytes=max_bytes, expected_version=FILE_VERSION,
                                      remedy="count the input again")
        return cls._from_header(header, data, str(path))

    @classmethod
    def from_arrays(cls, data: dict[str, np.ndarray], where: str = "counts") -> "WordCounts":
        """Rebuild from the arrays of :meth:`to_arrays` (with an encoded ``header`` array)."""
        try:
            header = json.loads(bytes(np.asarray(data["header"], np.uint8)).decode())
        except (KeyError, ValueError, UnicodeDecodeError):
            raise ModelFileError(f"{where} has no valid header; it is not a fractalseq count file.") from None
        return cls._from_header(header, data, where)

    @classmethod
    def _from_header(cls, header: dict, data: dict[str, np.ndarray], where: str) -> "WordCounts":
        """Rebuild from a decoded header and its arrays, checking every value before it is trusted."""
        if header.get("format") != FILE_FORMAT:
            raise ModelFileError(f"{where} is a {header.get('format')!r} file, not word counts.")
        if header.get("version") != FILE_VERSION:
            raise ModelFileError(f"{where} has count-file version {header.get('version')}; this fractalseq reads {FILE_VERSION}.")
        for key, digest in header.get("sha256", {}).items():
            if key not in data or hashlib.sha256(np.ascontiguousarray(data[key]).tobytes()).hexdigest() != digest:
                raise ModelFileError(f"{where} is damaged (array {key!r} fails its checksum); recount the input.")
        try:
            alphabet = Alphabet.from_dict(header["alphabet"])
            depth, length, segments = (int(header[k]) for k in ("depth", "length", "segments"))
            storage = header["storage"]
        except (KeyError, TypeError, ValueError, FractalseqError):
            raise ModelFileError(f"{where} has an incomplete or invalid header; recount the input.") from None
        bits = alphabet.bits
        if not (1 <= depth and depth * bits <= 64 and length >= 0 and 0 <= segments <= max(length, 1)):
            raise ModelFileError(f"{where} declares impossible sizes (depth {depth}, length {length}); recount the input.")
        need = ("dense",) if storage == "dense" else ("leaf_words", "leaf_counts") if storage == "sparse" else None
        if need is None or any(k not in data for k in (*need, "tail_len", "tail_addr", "tail_count")):
            raise ModelFileError(f"{where} lacks arrays its header needs; recount the input.")
        if storage == "dense" and data["dense"].shape != (1 << (depth * bits),):
            raise ModelFileError(f"{where} has a dense table of the wrong size for its depth; recount the input.")
        dense = data.get("dense") if storage == "dense" else None
        return cls(
            alphabet, depth, length, segments,
            dense, data.get("leaf_words"), data.get("leaf_counts"),
            data["tail_len"], data["tail_addr"], data["tail_count"],
        )


class WordCounter:
    """Builds :class:`WordCounts` from chunks (words across chunk edges counted once).

    Parameters
    ----------
    alphabet, depth:
        Alphabet and deepest word length N (at most ``alphabet.max_depth``).
    parallel:
        Sort large chunks on two threads (words grouped by first symbol, each group sorted apart).
    dense:
        Force dense (True) or sparse (False) storage; default: dense when ``b N <= 24``.
    compact:
        Sparse counts as ``uint32`` (12 bytes a distinct word, not 16) while the symbols counted stay
        below ``2**32`` (no word occurs more often); beyond, they widen to ``int64``.  Same counts.
    window:
        ``(first, last)``: count only the words whose address, padded to ``N`` symbols with zero codes,
        lies in ``first..last`` (one slice of a count split by address, :mod:`fractalseq.words._slices`);
        ``length`` and ``segments`` still count the whole stream.  ``None`` counts every word.
    """

    def __init__(self, alphabet: Alphabet, depth: int, parallel: bool = False, dense: bool | None = None,
                 compact: bool = False, window: tuple[int, int] | None = None) -> None:
        self.alphabet = alphabet
        self.depth = check_depth(alphabet, depth)
        self.bits = alphabet.bits
        self.parallel = parallel
        self.use_dense = (self.bits * self.depth <= DENSE_MAX_BITS) if dense is None else bool(dense)
        if self.use_dense and self.bits * self.depth > 34:
            raise ParameterError(f"A dense table of depth {depth} would need 2**{self.bits * self.depth} cells; use sparse storage.")
        self.key_dtype = _key_dtype(self.bits, self.depth)
        self._template = np.zeros(0, dtype=self.key_dtype)
        self._cells = 1 << (self.bits * self.depth) if self.use_dense else 0
        self._dense: np.ndarray | None = None  # allocated once the sparse runs outgrow cells / 8
        self._runs: list[tuple[np.ndarray, np.ndarray]] = []
        self._count_dtype = np.dtype(np.uint32 if compact else np.int64)
        self.window = None if window is None else (int(window[0]), int(window[1]))
        self._pending: list[np.ndarray] = []  # a windowed counter's keys not yet sorted into a run
        self._pending_size = 0
        if self.window is not None and not 0 <= self.window[0] <= self.window[1] < (1 << (self.bits * self.depth)):
            raise ParameterError(f"The address window {window} is outside the {self.bits * self.depth}-bit addresses.")
        self._lcp: np.ndarray | None = None
        self._tails: tuple[list, list, list] = ([], [], [])
        self._carry = np.zeros(0, dtype=alphabet.code_dtype)
        self._open = False  # is a segment open (carry belongs to it)?
        self.length = 0
        self.segments = 0

    def add(self, codes: np.ndarray, starts: np.ndarray, final: bool = False) -> None:
        """Add one chunk of codes with its segment starts (see :class:`fractalseq.stream.Chunk`)."""
        codes = np.ascontiguousarray(codes, dtype=self.alphabet.code_dtype)
        starts = np.asarray(starts, dtype=np.int64)
        if self._count_dtype == np.uint32 and self.length + codes.size > U32_MAX:
            self._widen()
        self.length += codes.size
        inside = np.unique(starts[(starts >= 0) & (starts < codes.size)])
        if codes.size:
            fresh = inside.size and inside[0] == 0
            self.segments += int(inside.size) + (0 if (fresh or self._open) else 1)
        # virtual stream = carried symbols of the open segment + this chunk
        vcodes = np.concatenate([self._carry, codes]) if self._carry.size else codes
        vstarts = np.unique(np.concatenate([[0], inside + self._carry.size])).astype(np.int64)
        if vcodes.size == 0:
            self._open = self._open and not final
            return
        threaded = self.parallel and self._dense is None and not self.use_dense and vcodes.size > (1 << 18) and self.window is None
        # the threaded and windowed paths write the addresses themselves: here only tails and carry
        keys, tl, ta, carry_from = kernels.full_words(
            vcodes, vstarts, self.depth, self.bits, bool(final), self._template, not threaded and self.window is None
        )
        if self.window is not None:
            keys, tl, ta = self._in_window(vcodes, vstarts, tl, ta)
        if tl.size:
            self._tails[0].append(tl)
            self._tails[1].append(ta)
            self._tails[2].append(np.ones(tl.size, np.int64))
        if threaded:
            n_full = self._full_words(vcodes, vstarts)
            if n_full:
                keys = np.empty(n_full, dtype=self.key_dtype)
                n_low = kernels.low_half_words(vcodes, vstarts, self.depth, self.bits)
                uniq, cnt, lcp = _sorted_runs_threaded(vcodes, vstarts, self.depth, self.bits, keys, n_low)
                del keys
                self._push_run(uniq, cnt.astype(self._count_dtype, copy=False), lcp)
        elif self.window is not None:  # a slice's keys are a fraction of each chunk's: gathered into runs of WINDOW_RUN
            if keys.size:
                self._pending.append(keys)
                self._pending_size += keys.size
            if self._pending_size >= WINDOW_RUN:
                self._flush_pending()
        elif keys.size:
            self._absorb(keys)
        self._carry = vcodes[carry_from:].copy() if not final else vcodes[:0].copy()
        self._open = not final

    def _flush_pending(self) -> None:
        """Count the gathered keys of a windowed counter as one run."""
        if self._pending:
            keys = self._pending[0] if len(self._pending) == 1 else np.concatenate(self._pending)
            self._pending, self._pending_size = [], 0
            self._absorb(keys)

    def _absorb(self, keys: np.ndarray) -> None:
        """Add full-word addresses (``keys`` is consumed): into the dense table, or as one more sorted run."""
        if self._dense is not None:
            kernels.dense_add(self._dense, keys)
        elif self.use_dense and keys.size > self._cells // 8:
            self._dense = np.zeros(self._cells, dtype=np.int64)
            for w, c in self._runs:
                np.add.at(self._dense, w.astype(np.int64), c)
            self._runs = []
            kernels.dense_add(self._dense, keys)
        else:
            kernels.sort_keys(keys, self.bits * self.depth)  # in place
            uniq, cnt, lcp = kernels.runs_with_lcp(keys, self.depth, self.bits, 8 * keys.dtype.itemsize)
            del keys
            self._push_run(uniq, cnt.astype(self._count_dtype, copy=False), lcp)

    def _full_words(self, vcodes: np.ndarray, vstarts: np.ndarray) -> int:
        """How many full ``N``-words the segments starting at ``vstarts`` hold."""
        seg_len = np.diff(np.append(vstarts, vcodes.size))
        return int(np.maximum(seg_len - self.depth + 1, 0).sum())

    def _in_window(self, vcodes: np.ndarray, vstarts: np.ndarray, tl: np.ndarray, ta: np.ndarray):
        """The full words and the tails of a chunk that lie in :attr:`window` (tails compared padded to ``N`` symbols)."""
        first, last = self.window
        keys = np.empty(self._full_words(vcodes, vstarts), dtype=self.key_dtype)
        m = kernels.window_words(vcodes, vstarts, self.depth, self.bits, np.uint64(first), np.uint64(last), keys)
        keys = keys[:m]  # a view: the gathered keys are copied into one run
        if tl.size:
            padded = ta << ((np.uint64(self.depth) - tl.astype(np.uint64)) * np.uint64(self.bits))
            keep = (padded >= np.uint64(first)) & (padded <= np.uint64(last))
            tl, ta = tl[keep], ta[keep]
        return keys, tl, ta

    def _push_run(self, words: np.ndarray, counts: np.ndarray, lcp: np.ndarray | None = None) -> None:
        self._lcp = lcp if not self._runs else None  # the prefix histogram is valid for a single run only
        self._runs.append((words, counts))
        if self.use_dense and sum(w.size for w, _ in self._runs) > self._cells // 8:
            self._dense = np.zeros(self._cells, dtype=np.int64)
            for w, c in self._runs:
                np.add.at(self._dense, w.astype(np.int64), c)
            self._runs = []
            return
        while len(self._runs) >= 2 and self._runs[-2][0].size <= 2 * self._runs[-1][0].size:
            bw, bc = self._runs.pop()
            aw, ac = self._runs.pop()
            self._runs.append(kernels.merge_into_first(aw, ac, bw, bc, self._count_dtype))

    def _widen(self) -> None:
        """Counts from here on as ``int64`` (the symbols counted reach ``2**32``)."""
        self._count_dtype = np.dtype(np.int64)
        self._runs = [(w, c.astype(np.int64)) for w, c in self._runs]

    def finish(self) -> WordCounts:
        """Close the open segment and return the counts."""
        if self._carry.size:
            self.add(np.zeros(0, self.alphabet.code_dtype), np.zeros(0, np.int64), final=True)
        self._flush_pending()
        tl, ta, tc = reduce_tails(*self._tails)
        if self._dense is not None:
            if np.count_nonzero(self._dense) > self._cells // 8:
                return WordCounts(self.alphabet, self.depth, self.length, self.segments, self._dense, None, None, tl, ta, tc)
            idx = np.flatnonzero(self._dense)
            self._runs = [(idx.astype(self.key_dtype), self._dense[idx])]
        while len(self._runs) >= 2:
            bw, bc = self._runs.pop()
            aw, ac = self._runs.pop()
            self._runs.append(kernels.merge_into_first(aw, ac, bw, bc, self._count_dtype))
        if self._runs:
            lw, lc = self._runs[0]
        else:
            lw, lc = np.zeros(0, self.key_dtype), np.zeros(0, self._count_dtype)
        wc = WordCounts(self.alphabet, self.depth, self.length, self.segments, None, lw, lc, tl, ta, tc)
        if self._lcp is not None and len(self._runs) == 1:
            wc._cache["lcp"] = self._lcp
        return wc


def _count_in_parts(source: SymbolArray, depth: int, dense: bool | None, compact: bool) -> WordCounts | None:
    """Sparse counts of a long in-memory stream by the parted direct table (:mod:`fractalseq.words._part_tally`),
    equal to :class:`WordCounter`'s; ``None`` when the sorted runs suit it better (short stream, deep words)."""
    alphabet, T = source.alphabet, len(source)
    depth, bits = check_depth(alphabet, depth), alphabet.bits
    sparse = bits * depth > DENSE_MAX_BITS if dense is None else not dense
    if not sparse or T < ARRAY_PIECE or not parts_for(T, bits, depth):
        return None
    st = np.asarray(source.starts, dtype=np.int64)
    inside = np.unique(st[(st >= 0) & (st < T)])
    starts = np.unique(np.concatenate([[0], inside])).astype(np.int64)
    codes = np.ascontiguousarray(source.codes, dtype=alphabet.code_dtype)
    key_dtype = _key_dtype(bits, depth)
    lw, lc = tally_in_parts(codes, starts, depth, bits, key_dtype, np.dtype(np.uint32 if compact and T <= U32_MAX else np.int64))
    _, tl, ta, _ = kernels.full_words(codes, starts, depth, bits, True, np.zeros(0, key_dtype), False)
    tl, ta, tc = reduce_tails([tl], [ta], [np.ones(tl.size, np.int64)])
    segments = int(inside.size) + (0 if inside.size and inside[0] == 0 else 1)
    return WordCounts(alphabet, depth, T, segments, None, lw, lc, tl, ta, tc)


#: A windowed counter (one address slice) sorts its keys in runs of at least this many: the size of
#: the runs a whole chunk gives an unwindowed counter.
WINDOW_RUN = 1 << 22
#: A :class:`SymbolArray` is counted in pieces of this many symbols (the same counts as one piece).
ARRAY_PIECE = 1 << 22


def count_words(
    source: SymbolStream | SymbolArray | Iterable[Chunk],
    depth: int,
    alphabet: Alphabet | None = None,
    parallel: bool = False,
    dense: bool | None = None,
    compact: bool = False,
) -> WordCounts:
    """Exact counts of all words of length 1..``depth`` of a stream.

    Parameters
    ----------
    source:
        A :class:`SymbolStream` (read chunk by chunk), a :class:`SymbolArray`
        (counted in one piece), or an iterable of chunks (then ``alphabet`` is required).
    depth:
        Deepest word length N; at most ``alphabet.max_depth`` (32 for DNA).
    parallel:
        Use the threaded sort (buckets split by first symbol).
    dense:
        Force dense or sparse storage (default: dense when ``bits * depth <= 24``).
    compact:
        ``uint32`` counts while they fit (see :class:`WordCounter`).

    Returns
    -------
    WordCounts
    """
    if isinstance(source, SymbolArray):  # in pieces of ARRAY_PIECE symbols: temporaries of one piece
        parted = _count_in_parts(source, depth, dense, compact)
        if parted is not None:
            return parted
        counter = WordCounter(source.alphabet, depth, parallel=parallel, dense=dense, compact=compact)
        T, st = len(source), source.starts
        for a in range(0, max(T, 1), ARRAY_PIECE):
            b = min(a + ARRAY_PIECE, T)
            counter.add(source.codes[a:b], st[(st >= a) & (st < b)] - a, final=b >= T)
        return counter.finish()
    if isinstance(source, SymbolStream):
        alphabet = source.alphabet
        chunks: Iterator[Chunk] = source.chunks()
    else:
        if alphabet is None:
            raise ParameterError("count_words needs the alphabet when given bare chunks.")
        chunks = iter(source)
    counter = WordCounter(alphabet, depth, parallel=parallel, dense=dense, compact=compact)
    for chunk in chunks:
        counter.add(chunk.codes, chunk.starts)
    return counter.finish()

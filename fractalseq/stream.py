"""Symbol streams: an alphabet plus chunks of integer codes with segment breaks.

A *segment* is a stretch of symbols with no gap inside: words never span a
segment break.  Records (FASTA records, files) always start a new segment;
runs of ambiguous symbols (``N``) also break the segment under the default
policy.

:class:`SymbolStream` is re-iterable and lazy: ``chunks()`` calls the reader
again, so a file is never held in memory whole unless a caller asks for
:meth:`SymbolStream.to_array`.  :class:`SymbolArray` is the in-memory form.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable, Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError

#: Default number of symbols per chunk handed out by readers (4 Mi symbols).
DEFAULT_CHUNK = 1 << 22

#: Codes first set aside by :meth:`SymbolStream.to_array` when the reader gives no length hint.
TO_ARRAY_FIRST = 1 << 24


@dataclass(frozen=True)
class Chunk:
    """A piece of a stream.

    Attributes
    ----------
    codes:
        1-D array of codes (``alphabet.code_dtype``).
    starts:
        Sorted int64 positions ``i`` in ``[0, len(codes)]`` where a new segment
        begins before ``codes[i]``.  ``0`` is present when the chunk does not
        continue the previous chunk's segment.
    """

    codes: np.ndarray
    starts: np.ndarray

    @staticmethod
    def continuing(codes: np.ndarray) -> "Chunk":
        """A chunk that continues the current segment."""
        return Chunk(codes, np.zeros(0, dtype=np.int64))

    @staticmethod
    def fresh(codes: np.ndarray) -> "Chunk":
        """A chunk that starts a new segment."""
        return Chunk(codes, np.zeros(1, dtype=np.int64))


@dataclass(frozen=True)
class Record:
    """A named part of a stream (a FASTA record, an input file)."""

    name: str
    start: int
    length: int

    def to_dict(self) -> dict:
        return {"name": self.name, "start": self.start, "length": self.length}


@dataclass(frozen=True)
class Positions:
    """Where each symbol of a line-oriented input sits in the file: symbol index -> coordinate.

    Attributes
    ----------
    unit:
        ``"line"`` (event logs: the 1-based line number of the symbol's line, as an editor
        shows it, blank and skipped lines counted) or ``"row"`` (numeric columns: the
        1-based file line number of the row the symbol comes from; for ordinal patterns,
        the row of the pattern's last value).
    values:
        One coordinate per symbol (int64, increasing).
    time_column, times:
        Numeric inputs with a time column: its name and its text in each symbol's row.
    """

    unit: str
    values: np.ndarray
    time_column: str | None = None
    times: tuple[str, ...] | None = None

    def __len__(self) -> int:
        return int(self.values.size)

    def at(self, index: int) -> int:
        """Coordinate of the symbol at ``index`` (clipped to the stream)."""
        return int(self.values[min(max(int(index), 0), self.values.size - 1)])

    def time_at(self, index: int) -> str | None:
        """Time-column text of the symbol at ``index`` (``None`` without a time column)."""
        if self.times is None or not self.times:
            return None
        return self.times[min(max(int(index), 0), len(self.times) - 1)]

    def span(self, start: int, end: int) -> dict:
        """JSON-ready coordinates of symbols ``start:end`` (end exclusive): first and last ``unit``, times."""
        out: dict = {f"first_{self.unit}": self.at(start), f"last_{self.unit}": self.at(max(start, end - 1))}
        if self.times is not None:
            out["first_time"] = self.time_at(start)
            out["last_time"] = self.time_at(max(start, end - 1))
        return out


@dataclass
class ReadReport:
    """What a reader kept and dropped, filled while the stream is read.

    ``dropped`` maps a reason (``"ambiguous 'N'"``, ``"unknown 'J'"``...) to a count.
    """

    symbols: int = 0
    segments: int = 0
    dropped: dict[str, int] = field(default_factory=dict)
    records: list[Record] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    extra: dict = field(default_factory=dict)
    #: line-oriented inputs: where each symbol sits in the file (not in the JSON form)
    positions: Positions | None = None

    def drop(self, reason: str, count: int) -> None:
        """Add ``count`` dropped symbols under ``reason``."""
        if count:
            self.dropped[reason] = self.dropped.get(reason, 0) + int(count)

    @property
    def dropped_total(self) -> int:
        return int(sum(self.dropped.values()))

    def summary_notes(self, top: int = 5) -> list[str]:
        """The reader's notes plus one sentence on dropped symbols (the ``top`` reasons): what a table shows."""
        return read_summary(self.notes, self.dropped, top)

    def to_dict(self) -> dict:
        return {
            "symbols": self.symbols,
            "segments": self.segments,
            "dropped": dict(sorted(self.dropped.items())),
            "dropped_total": self.dropped_total,
            "records": [r.to_dict() for r in self.records],
            "notes": list(self.notes),
            **self.extra,
        }


def read_summary(notes, dropped: dict | None, top: int = 5) -> list[str]:
    """A read report's ``notes`` plus one sentence on the ``dropped`` symbols by reason (the ``top`` reasons)."""
    out = [str(n) for n in notes or ()]
    if dropped:
        items = sorted(dropped.items(), key=lambda kv: (-kv[1], kv[0]))
        shown = ", ".join(f"{k} x{v:,}" for k, v in items[:top])
        more = f" and {len(items) - top} more reasons" if len(items) > top else ""
        out.append(f"{sum(dropped.values()):,} symbols left out: {shown}{more}")
    return out


class SymbolStream:
    """A re-iterable stream of symbol codes in chunks.

    Parameters
    ----------
    alphabet:
        The alphabet the codes refer to.
    factory:
        Called with a fresh :class:`ReadReport` each time the stream is
        iterated; returns an iterator of :class:`Chunk` and fills the report.
    name:
        Name of the source (file name, ``-`` for standard input).
    length_hint:
        An upper bound on the symbols a pass yields when the reader knows one (an event log's lines,
        counted by its first pass), else ``None``; consumers may size tables by it.
    """

    def __init__(
        self,
        alphabet: Alphabet,
        factory: Callable[[ReadReport], Iterator[Chunk]],
        name: str = "stream",
        length_hint: int | None = None,
    ) -> None:
        self.alphabet = alphabet
        self.name = name
        self.length_hint = None if length_hint is None else int(length_hint)
        self._factory = factory
        self.report = ReadReport()
        #: what one symbol is: ``"symbol"``, or ``"line"`` (event logs) / ``"row"`` (numeric columns) when the
        #: reader maps symbols to file lines (:attr:`ReadReport.positions`)
        self.unit = "symbol"
        #: a description of the file that lets worker processes read byte ranges of it themselves
        #: (:class:`fractalseq.sources.ranges.ByteReader`), or ``None`` when the input cannot be read that way
        self.byte_reader: object | None = None
        #: how to read the same symbols again (``(path, open_source options)``), or ``None`` (standard input,
        #: streams built in memory); worker processes of one profile read a file themselves from it
        self.reread: tuple | None = None

    def chunks(self) -> Iterator[Chunk]:
        """Iterate over the chunks; :attr:`report` describes the last full pass."""
        report = ReadReport()
        for chunk in self._factory(report):
            yield chunk
        self.report = report

    def to_array(self) -> "SymbolArray":
        """Read the whole stream into memory.

        Each chunk is copied into one growing array as it is read and then released, so the codes
        are held once: the array grows in place by an eighth (``ndarray.resize``, a ``realloc``
        that the C library serves by remapping pages, not copying them, for large blocks) and is
        cut to the length read at the end.  Collecting the chunks and joining them would hold every
        symbol twice, and the freed chunks stay in the process's heap.  Same codes and starts as
        concatenating the chunks.
        """
        dtype = np.dtype(self.alphabet.code_dtype)
        codes = np.empty(max(self.length_hint or 0, 0) or TO_ARRAY_FIRST, dtype=dtype)
        starts: list[np.ndarray] = []
        at = 0
        for chunk in self.chunks():
            n = len(chunk.codes)
            if n == 0 and len(chunk.starts) == 0:
                continue
            starts.append(chunk.starts + at)
            if at + n > codes.size:
                codes.resize(max(at + n, codes.size + codes.size // 8), refcheck=False)
            codes[at : at + n] = chunk.codes
            at += n
        codes.resize(at, refcheck=False)
        st = np.concatenate(starts) if starts else np.zeros(0, dtype=np.int64)
        return SymbolArray(self.alphabet, codes, st, self.name, self.report, reread=getattr(self, "reread", None))


def normalise_starts(starts: np.ndarray, length: int) -> np.ndarray:
    """Sorted unique segment starts within ``[0, length)`` with 0 always present (if length > 0)."""
    s = np.asarray(starts, dtype=np.int64)
    s = s[(s >= 0) & (s < length)] if length else s[:0]
    if length:
        s = np.concatenate([np.zeros(1, dtype=np.int64), s])
    return np.unique(s)


@dataclass
class SymbolArray:
    """A whole stream in memory: codes plus segment starts.

    Attributes
    ----------
    alphabet, codes, starts, name, report:
        ``starts`` holds every segment start (0 included when non-empty).
    reread:
        How to read these symbols again (:attr:`SymbolStream.reread`, set by
        :meth:`SymbolStream.to_array`), or ``None``; a slice or a copy never carries it.
    """

    alphabet: Alphabet
    codes: np.ndarray
    starts: np.ndarray
    name: str = "stream"
    report: ReadReport = field(default_factory=ReadReport)
    reread: tuple | None = field(default=None, compare=False, repr=False)

    def __post_init__(self) -> None:
        self.codes = np.ascontiguousarray(self.codes, dtype=self.alphabet.code_dtype)
        self.starts = normalise_starts(self.starts, len(self.codes))

    def __len__(self) -> int:
        return int(len(self.codes))

    @property
    def segment_bounds(self) -> np.ndarray:
        """``(S, 2)`` int64 array of ``[start, end)`` per segment."""
        ends = np.append(self.starts[1:], len(self.codes))
        return np.stack([self.starts, ends], axis=1) if len(self.starts) else np.zeros((0, 2), np.int64)

    def segments(self) -> Iterator[np.ndarray]:
        """Iterate over segments as views of :attr:`codes`."""
        for a, b in self.segment_bounds:
            yield self.codes[a:b]

    def chunks(self, size: int = DEFAULT_CHUNK) -> Iterator[Chunk]:
        """Split into chunks of at most ``size`` symbols (segment starts preserved)."""
        n = len(self.codes)
        for lo in range(0, n, size):
            hi = min(n, lo + size)
            sel = self.starts[(self.starts >= lo) & (self.starts < hi)] - lo
            yield Chunk(self.codes[lo:hi], sel.astype(np.int64))

    def as_stream(self, chunk_size: int = DEFAULT_CHUNK) -> SymbolStream:
        """Wrap as a :class:`SymbolStream` (no copy)."""

        def factory(report: ReadReport) -> Iterator[Chunk]:
            report.symbols = len(self.codes)
            report.segments = len(self.starts)
            report.records = list(self.report.records)
            report.dropped = dict(self.report.dropped)
            yield from self.chunks(chunk_size)

        s = SymbolStream(self.alphabet, factory, self.name, length_hint=len(self.codes))
        s.report = self.report
        return s

    def slice(self, lo: int, hi: int) -> "SymbolArray":
        """Symbols ``lo:hi`` with their segment starts (a view of the codes)."""
        lo = max(0, lo)
        hi = min(len(self.codes), hi)
        sel = self.starts[(self.starts > lo) & (self.starts < hi)] - lo
        return SymbolArray(self.alphabet, self.codes[lo:hi], sel, self.name)

    def require_length(self, minimum: int, what: str) -> None:
        """Raise :class:`InputError` if fewer than ``minimum`` symbols are present."""
        if len(self.codes) < minimum:
            raise InputError(
                f"{self.name} has {len(self.codes)} symbols but {what} needs at least {minimum}; "
                "use a longer input or a smaller depth."
            )


def from_codes(
    alphabet: Alphabet,
    codes: np.ndarray,
    starts: np.ndarray | None = None,
    name: str = "stream",
) -> SymbolArray:
    """Build a :class:`SymbolArray` from codes (checked against the alphabet size)."""
    arr = np.asarray(codes)
    if arr.ndim != 1:
        raise InputError("Codes must be a one-dimensional array.")
    if arr.size and (arr.min() < 0 or arr.max() >= alphabet.size):
        raise InputError(
            f"Codes must lie in 0..{alphabet.size - 1} for the {alphabet.name} alphabet; found {int(arr.min())}..{int(arr.max())}."
        )
    st = np.zeros(0, np.int64) if starts is None else np.asarray(starts, np.int64)
    return SymbolArray(alphabet, arr.astype(alphabet.code_dtype), st, name)

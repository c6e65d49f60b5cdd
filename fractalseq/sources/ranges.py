"""Byte ranges of one uncompressed file, read by worker processes themselves.

A large FASTA or plain-text input split for workers need not pass through the
parent: the parent cuts the file into byte ranges (:func:`plan_ranges`, which
only seeks and reads a few bytes near each cut) and hands each worker a
:class:`ByteRange`, plain data naming the file, the range, the reader options
and the number of lookahead symbols wanted.  The worker reads its range with
the same scanner as the one-pass reader (:func:`fractalseq.sources.kernels.scan_symbols`)
and returns what it read in a :class:`RangePart`; :func:`range_report` adds
the parts up to the read report a one-pass read writes (symbols, segments,
drops by reason, records with their stream positions, notes).

Where a range begins
--------------------
A cut is placed just after a line end when one lies within
:data:`CUT_SEARCH` bytes after the even cut point, otherwise at the even cut
point itself (inside a long line: unwrapped sequence, or a long header).  A
worker finds the scanner's state at its first byte by reading backwards:

* the kind of the line it starts in (FASTA: a header ``>``, a comment ``;``
  or sequence, from the line's first byte; a range that starts inside a
  header line reads no symbol until that line ends, and the header belongs
  to the range where its ``>`` is);
* whether a segment starts at its first symbol: it does unless the last
  deciding byte before the range is a symbol; a header, or an ambiguous or
  unknown byte under the ``break`` policy, decide for a new segment, as does
  the start of the file.

A range counts the symbols, drops and headers in its own bytes, then reads on
past its end (line breaks, headers and all) until it holds ``overlap`` more
symbols or the file ends; those lookahead symbols belong to the next range.

Inputs read this way: regular files, uncompressed or BGZF (block gzip, whose
blocks are listed from their headers and decompressed one by one:
:mod:`fractalseq.sources.bgzf`), read as FASTA, or as plain text through a
byte lookup table, under the ``break`` or ``skip`` policy (:func:`reader_for`
returns ``None`` otherwise: the parent then reads the input and ships pieces
of symbols as before).  Offsets are in decompressed bytes.  A leading UTF-8
byte-order mark is skipped as the one-pass reader skips it.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import BinaryIO, Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.sources import kernels as K
from fractalseq.sources.base import MAX_RECORDS, RecordLog, note_heavy_drops, require_symbols
from fractalseq.sources.bgzf import BlockView, block_index
from fractalseq.sources.rawio import Origin
from fractalseq.sources.sequence import LAYOUTS, fill_report, layout_table
from fractalseq.stream import Chunk, ReadReport

__all__ = ["ByteRange", "ByteReader", "RangePart", "RangeScan", "plan_ranges", "range_report", "reader_for"]

#: A cut moves forward to the next line start when one lies within this many bytes.
CUT_SEARCH = 1 << 16
#: Bytes read per block inside a range (each core chunk holds at most this many symbols).
RANGE_BLOCK = 1 << 22
#: First backward window when a worker looks for the state at its first byte (grows by 4x).
_BACK_WINDOW = 1 << 14
#: Header bytes kept for a record's name (as :class:`~fractalseq.sources.base.RecordLog` keeps).
_NAME_BYTES = 512
_EVENTS = 4096
_BOM = b"\xef\xbb\xbf"


@dataclass(frozen=True)
class ByteReader:
    """How a file's bytes become symbols: everything a worker needs besides its range.

    Attributes
    ----------
    path:
        Absolute path of the file (a worker may run in another folder).
    name:
        The input's display name (records of plain text are named by it).
    layout:
        ``"fasta"`` or ``"plain"``.
    alphabet, policy:
        The alphabet and the unknown-symbol policy (``break`` or ``skip``).
    fmt:
        The format the report names (``fasta`` or ``text``).
    skip:
        Bytes at the start that are not data (a UTF-8 byte-order mark).
    size:
        Bytes of data (decompressed), the byte-order mark included.
    file_size, mtime_ns:
        The file's size and modification time when it was opened; a worker
        refuses a file that has changed since.
    notes:
        The reader's notes at the start of a pass (the format detection).
    blocks:
        BGZF files: (file offset, decompressed offset) of every block and of
        the end (:func:`fractalseq.sources.bgzf.block_index`); ``None`` for an
        uncompressed file.
    """

    path: str
    name: str
    layout: str
    alphabet: Alphabet
    policy: str
    fmt: str
    skip: int
    size: int
    file_size: int
    mtime_ns: int
    notes: tuple[str, ...] = ()
    blocks: np.ndarray | None = field(default=None, repr=False, compare=False)

    @property
    def compression(self) -> str:
        """What the report names: ``gzip`` for a BGZF file, else ``none``."""
        return "none" if self.blocks is None else "gzip"


@dataclass(frozen=True)
class ByteRange:
    """One range of a file for a map task (plain data).

    Attributes
    ----------
    reader:
        The file and how to read it.
    start, end:
        The range ``[start, end)`` in file bytes.
    index:
        Range number within its file.
    overlap:
        Lookahead symbols to read past ``end`` (``N - 1`` for words up to ``N``).
    """

    reader: ByteReader
    start: int
    end: int
    index: int
    overlap: int

    @property
    def final(self) -> bool:
        """True for the range that ends where the file ends."""
        return self.end >= self.reader.size


@dataclass
class RangePart:
    """What a worker read in its range (its own bytes, not the lookahead).

    Attributes
    ----------
    index:
        The range's number.
    symbols, segments:
        Symbols kept in the range and segments starting in it.
    dropped:
        Per byte value, bytes dropped (256 counts).
    headers:
        Per FASTA header line starting in the range: the number of symbols
        kept in the range before it and up to 512 bytes of the header.
    """

    index: int
    symbols: int = 0
    segments: int = 0
    dropped: np.ndarray = field(default_factory=lambda: np.zeros(256, np.int64))
    headers: list[tuple[int, bytes]] = field(default_factory=list)


def reader_for(origin: Origin, layout: str, alphabet: Alphabet, policy: str, fmt: str) -> ByteReader | None:
    """The byte-range description of an input, or ``None`` when workers cannot read it apart.

    Only regular files, uncompressed or BGZF, read as FASTA or as plain bytes,
    under the ``break`` or ``skip`` policy, qualify (standard input, pipes,
    other compressed files, FASTQ and the ``error`` policy are read by the parent).
    The blocks of a BGZF file are listed here, from their headers.
    """
    if layout not in ("fasta", "plain") or policy not in ("break", "skip"):
        return None
    if origin.path is None or origin.pipe is not None or origin.data is not None or origin.compression not in (None, "gzip"):
        return None
    import stat

    try:
        st = os.stat(origin.path)
        if not stat.S_ISREG(st.st_mode):
            return None
        with open(origin.path, "rb") as fh:
            blocks = block_index(fh, int(st.st_size)) if origin.compression == "gzip" else None
            if origin.compression == "gzip" and blocks is None:
                return None  # plain gzip: one stream, read from its start
            view = _view(fh, blocks, origin.name)
            skip = len(_BOM) if view.read_at(0, len(_BOM)) == _BOM else 0
    except (OSError, InputError):
        return None  # the one-pass read says what is wrong
    return ByteReader(
        str(os.path.abspath(origin.path)), origin.name, layout, alphabet, policy, fmt, skip, view.size, int(st.st_size),
        int(st.st_mtime_ns), tuple(origin.notes), blocks,
    )


class _FileView:
    """Bytes of an uncompressed file at any offset."""

    def __init__(self, fh: BinaryIO, size: int) -> None:
        self.fh = fh
        self.size = size

    def read_at(self, pos: int, n: int) -> bytes:
        self.fh.seek(pos)
        return self.fh.read(max(0, n))


def _view(fh: BinaryIO, blocks: np.ndarray | None, name: str):
    if blocks is None:
        fh.seek(0, os.SEEK_END)
        return _FileView(fh, fh.tell())
    return BlockView(fh, blocks, name)


def plan_ranges(reader: ByteReader, size: int, overlap: int) -> list[ByteRange]:
    """Cut a file into ranges of about ``size`` bytes each carrying ``overlap`` lookahead symbols.

    FASTA cuts move to the next line start within :data:`CUT_SEARCH` bytes
    (none is needed: a worker starting mid-line finds its state itself).
    A file with no data byte gives no range.
    """
    if isinstance(size, bool) or size < 1 or overlap < 0:
        raise ParameterError("The piece size must be positive and the overlap non-negative.", parameter="piece")
    begin, total = reader.skip, reader.size
    cuts = [begin]
    with _open_checked(reader) as fh:
        view = _view(fh, reader.blocks, reader.name)
        at = begin + size
        while at < total:
            cut = at
            if reader.layout == "fasta":
                near = view.read_at(at - 1, CUT_SEARCH + 1)
                hit = near.find(b"\n")
                if hit >= 0:
                    cut = at + hit
            if cut >= total:
                break
            if cut > cuts[-1]:
                cuts.append(cut)
            at = max(cut, at) + size
    if total <= begin:
        return []
    bounds = cuts + [total]
    return [ByteRange(reader, a, b, i, int(overlap)) for i, (a, b) in enumerate(zip(bounds[:-1], bounds[1:]))]


def _open_checked(reader: ByteReader) -> BinaryIO:
    """Open the file, refusing it when it changed since it was opened for planning."""
    try:
        st = os.stat(reader.path)
        fh = open(reader.path, "rb")
    except OSError as exc:
        raise InputError(f"{reader.name} cannot be read by a worker ({exc.strerror or exc}); check the path on every machine.") from None
    if int(st.st_size) != reader.file_size or int(st.st_mtime_ns) != reader.mtime_ns:
        fh.close()
        raise InputError(f"{reader.name} changed while it was being read; count it again once it is complete.")
    return fh


class RangeScan:
    """Reads one :class:`ByteRange`: its own symbols in chunks, then the lookahead.

    Use as a context manager; iterate :meth:`core` to the end before calling
    :meth:`lookahead`.  :attr:`part` holds the range's report.
    """

    def __init__(self, task: ByteRange, block: int = RANGE_BLOCK) -> None:
        self.task = task
        r = task.reader
        self.block = int(block)
        self.mode = LAYOUTS[r.layout]
        self.pol = K.POLICY_CODES[r.policy]
        self.lut = layout_table(r.layout, r.alphabet.byte_table())
        self.dtype = r.alphabet.code_dtype
        self.events = np.zeros((_EVENTS, 3), dtype=np.int64)
        self.part = RangePart(task.index)
        self._fh: BinaryIO | None = None
        self._view = None
        self._open_header = False  # a header of this range whose line has not ended yet
        #: ``(byte, symbols)`` after each block of :meth:`core`: the range's symbols before that byte
        self.marks: list[tuple[int, int]] = []

    def __enter__(self) -> "RangeScan":
        self._fh = _open_checked(self.task.reader)
        self._view = _view(self._fh, self.task.reader.blocks, self.task.reader.name)
        return self

    def __exit__(self, *exc: object) -> None:
        if self._fh is not None:
            self._fh.close()
            self._fh = None

    # ------------------------------------------------------------ reading
    def core(self) -> Iterator[Chunk]:
        """The range's own symbols in chunks (chunk-relative segment starts, 0 included when one starts there)."""
        view = self._view
        assert view is not None, "use RangeScan as a context manager"
        t = self.task
        self.state = _state_at(view, t.start, t.reader, self.lut, self.pol)
        at = t.start
        part = self.part
        while at < t.end:
            data = view.read_at(at, min(self.block, t.end - at))
            if not data:
                raise InputError(f"{t.reader.name} ended early while a worker read it; count it again once it is complete.")
            at += len(data)
            codes, starts = self._scan(data, part.dropped, own=True)
            part.symbols += codes.size
            part.segments += starts.size
            self.marks.append((at, part.symbols))
            if codes.size:
                yield Chunk(codes, starts)

    def lookahead(self) -> Chunk:
        """Up to ``overlap`` symbols after the range (segment starts relative to them), reading on as needed."""
        view = self._view
        assert view is not None, "use RangeScan as a context manager"
        want = self.task.overlap
        parts: list[np.ndarray] = []
        starts: list[np.ndarray] = []
        got = 0
        scratch = np.zeros(256, np.int64)
        size = max(1 << 12, 4 * want)
        at = self.task.end
        while got < want or self._open_header:
            data = view.read_at(at, size)
            if not data:
                break
            at += len(data)
            codes, st = self._scan(data, scratch, own=False)
            parts.append(codes)
            starts.append(st + got)
            got += codes.size
            size = min(2 * size, self.block)
        codes = np.concatenate(parts)[:want] if parts else np.zeros(0, self.dtype)
        st = np.concatenate(starts) if starts else np.zeros(0, np.int64)
        return Chunk(codes.astype(self.dtype, copy=False), st[st < codes.size])

    def _scan(self, data: bytes, dropped: np.ndarray, own: bool) -> tuple[np.ndarray, np.ndarray]:
        """Scan one block; header events of this range's own bytes (``own``) go into :attr:`part`."""
        raw = np.frombuffer(data, dtype=np.uint8)
        n = raw.shape[0]
        codes = np.empty(n, dtype=self.dtype)
        starts = np.empty(n + 1, dtype=np.int64)
        state, events = self.state, self.events
        state[K.S_NCODES] = 0
        state[K.S_NSTARTS] = 0
        pos = 0
        head_from = 0
        before_block = self.part.symbols if own else 0
        while True:
            state[K.S_NEV] = 0
            pos = K.scan_symbols(raw, pos, self.lut, self.mode, self.pol, 10, state, codes, starts, dropped, events)
            for k in range(int(state[K.S_NEV])):
                kind, at, before = (int(v) for v in events[k])
                if kind == K.EV_HEADER_START:
                    if own:
                        self.part.headers.append((before_block + before, b""))
                        self._open_header = True
                    else:
                        self._open_header = False  # the next range's header
                    head_from = at
                else:
                    self._header_bytes(data[head_from:at])
                    self._open_header = False
                    head_from = n
            if state[K.S_ERR_KIND] != K.E_NONE:  # pragma: no cover - ranges are read under break or skip only
                raise RuntimeError("the scanner reported an error under a policy that has none")
            if pos >= n:
                break
        if state[K.S_PHASE] == K.P_HEADER:
            self._header_bytes(data[head_from:])
        return codes[: int(state[K.S_NCODES])], starts[: int(state[K.S_NSTARTS])].copy()

    def _header_bytes(self, data: bytes) -> None:
        if self._open_header and data:
            at, kept = self.part.headers[-1]
            if len(kept) < _NAME_BYTES:
                self.part.headers[-1] = (at, kept + data[: _NAME_BYTES - len(kept)])


# ------------------------------------------------------------ state at a cut
def _state_at(view: "_FileView | BlockView", pos: int, reader: ByteReader, lut: np.ndarray, pol: int) -> np.ndarray:
    """The scanner state at byte ``pos``: the line's kind, line start flag, and whether a segment is pending."""
    mode = LAYOUTS[reader.layout]
    state = K.new_state(mode)
    if pos <= reader.skip:
        return state  # the start of the data: a new segment, at a line start
    brk = pol == K.BREAK
    if mode == K.PLAIN:
        state[K.S_LINE_START] = 0
        state[K.S_PENDING] = _pending_in_line(view, reader.skip, pos, lut, brk, stop_at_line=False)
        return state
    if view.read_at(pos - 1, 1) == b"\n":
        line = pos
        state[K.S_PHASE], state[K.S_LINE_START] = K.P_SEQ, 1
    else:
        line = _line_start(view, reader.skip, pos)
        first = view.read_at(line, 1)
        state[K.S_LINE_START] = 0
        if first == b">":  # inside a header line: its symbols-to-be start a new segment
            state[K.S_PHASE], state[K.S_PENDING] = K.P_HEADER, 1
            return state
        if first == b";":
            state[K.S_PHASE] = K.P_COMMENT
        else:
            state[K.S_PHASE] = K.P_SEQ
            found = _pending_in_line(view, line, pos, lut, brk, stop_at_line=True)
            if found >= 0:
                state[K.S_PENDING] = found
                return state
    state[K.S_PENDING] = _pending_before_line(view, reader.skip, line, lut, brk)
    return state


def _line_start(view: "_FileView | BlockView", begin: int, pos: int) -> int:
    """Start of the line holding byte ``pos - 1`` (searching backwards in growing windows)."""
    hi = pos
    width = _BACK_WINDOW
    while hi > begin:
        lo = max(begin, hi - width)
        at = view.read_at(lo, hi - lo).rfind(b"\n")
        if at >= 0:
            return lo + at + 1
        hi = lo
        width *= 4
    return begin


def _decides(cls: np.ndarray, brk: bool) -> np.ndarray:
    """Bytes that settle whether a segment is pending: a symbol, or under ``break`` an unknown/ambiguous byte."""
    return (cls >= 0) | ((cls == -1) | (cls == -2)) if brk else cls >= 0


def _pending_in_line(view: "_FileView | BlockView", lo_limit: int, pos: int, lut: np.ndarray, brk: bool, stop_at_line: bool) -> int:
    """Pending flag from the last deciding byte in ``[lo_limit, pos)`` (one line, or plain bytes).

    Returns 1 or 0, or -1 when no byte in the stretch decides (with ``stop_at_line``;
    otherwise the start of the data decides: 1).
    """
    hi = pos
    width = _BACK_WINDOW
    while hi > lo_limit:
        lo = max(lo_limit, hi - width)
        cls = lut[np.frombuffer(view.read_at(lo, hi - lo), dtype=np.uint8)]
        hit = np.flatnonzero(_decides(cls, brk))
        if hit.size:
            return 0 if cls[hit[-1]] >= 0 else 1
        hi = lo
        width *= 4
    return -1 if stop_at_line else 1


def _pending_before_line(view: "_FileView | BlockView", begin: int, line: int, lut: np.ndarray, brk: bool) -> int:
    """Pending flag at the start of the line at ``line``, from the lines before it (FASTA)."""
    hi = line
    width = _BACK_WINDOW
    while hi > begin:
        lo = max(begin, hi - width)
        data = np.frombuffer(view.read_at(lo, line - lo), dtype=np.uint8)  # whole lines from the first line start in it
        heads = np.flatnonzero(data[:-1] == 10) + 1 if data.size else np.zeros(0, np.int64)
        if lo == begin:
            heads = np.concatenate([[0], heads]).astype(np.int64)
        if heads.size:
            first = data[heads]
            mark = np.zeros(data.size, dtype=np.int64)
            mark[heads] = 1
            line_of = np.cumsum(mark) - 1  # index into heads (-1: before the first line start)
            known = line_of >= 0
            kind = np.where(known, first[np.maximum(line_of, 0)], 0)
            cls = lut[data]
            seq = known & (kind != ord(">")) & (kind != ord(";"))
            header_mark = np.zeros(data.size, dtype=bool)
            header_mark[heads[first == ord(">")]] = True
            deciding = np.flatnonzero((seq & _decides(cls, brk)) | header_mark)
            if deciding.size:
                j = deciding[-1]
                return 1 if header_mark[j] or cls[j] < 0 else 0
            if lo == begin:
                return 1
        hi = lo
        width *= 4
    return 1


# ------------------------------------------------------------ the report
def range_report(reader: ByteReader, parts: list[RangePart]) -> ReadReport:
    """The read report of a whole file from its ranges' parts (in range order): what a one-pass read writes."""
    report = ReadReport()
    report.notes.extend(reader.notes)
    report.extra["format"] = reader.fmt
    report.extra["compression"] = reader.compression
    lut = layout_table(reader.layout, reader.alphabet.byte_table())
    recs = RecordLog(MAX_RECORDS)
    total = segments = 0
    dropped = np.zeros(256, np.int64)
    for part in sorted(parts, key=lambda p: p.index):
        for at, head in part.headers:
            recs.start(total + at)
            recs.header_bytes(head)
            recs.end_header()
        total += part.symbols
        segments += part.segments
        dropped += part.dropped
    fill_report(report, reader.name, reader.layout, lut, reader.alphabet, total, segments, dropped, recs)
    require_symbols(report, reader.name, reader.alphabet)
    note_heavy_drops(report, reader.alphabet)
    return report

"""Where the jobs that split one large source get their pieces (one place, so the cutting can change here).

Fitted scoring and windowed scans cut a source into pieces of a fixed number
of *symbols* at fixed *global* positions (piece ``k`` starts at symbol
``k * chunk``; a scan's windows and a score's windows are at global
positions; the piece size is part of the result).  Two routes give the same
pieces:

* shipped: the parent reads the source and sends each piece's symbols to the
  workers (:func:`fractalseq.words._pieces.iter_pieces`); any input.
* ranged: when the input is a file the workers can read apart (uncompressed
  or BGZF, :attr:`SymbolStream.byte_reader <fractalseq.stream.SymbolStream>`),
  an offset pass first counts the symbols of every byte range on the workers
  (:func:`measure_range`: the reading of a count without the counting, with a
  mark ``(byte, symbols before it)`` after every block of
  :data:`MARK_BLOCK` bytes); the parent adds the counts up to global offsets
  (:func:`plan_spans`) and sends each worker a :class:`SymbolSpan`, a few
  numbers naming the symbols ``[offset, offset + length)``: the worker reads
  from the last mark at or before them and drops the symbols in between
  (at most one block's worth).  The parent never reads the stream; the read
  report comes from the offset pass
  (:func:`~fractalseq.sources.ranges.range_report`).

:func:`span_piece` turns either kind into the :class:`~fractalseq.words._pieces.Piece`
the shipped route would have sent: the same codes, segment starts, core,
offset, final flag and index, so every result is the same bytes.
"""

from __future__ import annotations

import bisect
from dataclasses import dataclass
from typing import Iterator

import numpy as np

from fractalseq.runner import Engine
from fractalseq.sources.ranges import ByteRange, ByteReader, RangePart, RangeScan, plan_ranges, range_report
from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.words._pieces import RANGE_MAX, RANGE_MIN, Piece, iter_pieces

__all__ = ["MARK_BLOCK", "SymbolSpan", "measure_range", "plan_spans", "ranged_reader", "span_piece", "worker_pieces"]

#: Bytes between two marks of the offset pass: a span reads at most about this many bytes before its first symbol.
MARK_BLOCK = 1 << 20


@dataclass(frozen=True)
class SymbolSpan:
    """Symbols ``[offset, offset + length)`` of a file, named for a worker that reads them itself (plain data).

    Attributes
    ----------
    reader:
        The file and how to read it.
    byte:
        Where the worker starts reading (a mark of the offset pass).
    skip:
        Symbols between ``byte`` and the span's first symbol (read and dropped).
    length:
        Symbols of the span: its ``core`` followed by its lookahead.
    core, offset, final, index:
        As in :class:`~fractalseq.words._pieces.Piece`.
    """

    reader: ByteReader
    byte: int
    skip: int
    length: int
    core: int
    offset: int
    final: bool
    index: int


def ranged_reader(source: object) -> ByteReader | None:
    """The byte reader of a source the workers can read apart, else ``None``."""
    return getattr(source, "byte_reader", None)


def measure_range(rng: ByteRange) -> tuple[RangePart, list[tuple[int, int]]]:
    """The offset pass over one range: what its reader kept and dropped, and its marks ``(byte, symbols before it)``."""
    with RangeScan(rng, block=MARK_BLOCK) as scan:
        for _ in scan.core():
            pass
        scan.lookahead()  # no symbol (overlap 0), but the rest of a header line that began in the range: its name
    return scan.part, scan.marks


def plan_spans(
    reader: ByteReader, measured: list[tuple[RangePart, list[tuple[int, int]]]], ranges: list[ByteRange], chunk: int, overlap: int,
) -> list[SymbolSpan]:
    """The spans of :func:`~fractalseq.words._pieces.iter_pieces` (``chunk`` symbols plus ``overlap``) from the offset pass.

    ``measured`` holds :func:`measure_range` of every range in ``ranges``, in order.
    """
    byte_at: list[int] = []
    before: list[int] = []
    total = 0
    for rng, (part, marks) in zip(ranges, measured):
        byte_at.append(rng.start)
        before.append(total)
        for at, sym in marks:
            byte_at.append(at)
            before.append(total + sym)
        total += part.symbols
    spans: list[SymbolSpan] = []
    offset = index = 0
    while offset < total:
        final = total - offset < chunk + overlap + 1  # the rule of iter_pieces: the last piece takes what is left
        length = total - offset if final else chunk + overlap
        core = length if final else chunk
        # the last mark at or before the span's first symbol (the latest byte among equal counts)
        k = bisect.bisect_right(before, offset) - 1
        spans.append(SymbolSpan(reader, byte_at[k], offset - before[k], length, core, offset, final, index))
        offset += chunk
        index += 1
        if final:
            break
    return spans


def span_piece(item: Piece | SymbolSpan) -> Piece:
    """The :class:`~fractalseq.words._pieces.Piece` of a shipped piece (itself) or of a span (read from the file here)."""
    if isinstance(item, Piece):
        return item
    r = item.reader
    want = item.skip + item.length
    codes: list[np.ndarray] = []
    starts: list[np.ndarray] = []
    got = 0
    rng = ByteRange(r, item.byte, r.size, item.index, 0)
    with RangeScan(rng, block=MARK_BLOCK) as scan:
        for ch in scan.core():
            codes.append(ch.codes)
            starts.append(ch.starts + got)
            got += ch.codes.size
            if got >= want:
                break
    dtype = r.alphabet.code_dtype
    arr = np.concatenate(codes)[item.skip:want].astype(dtype, copy=False) if codes else np.zeros(0, dtype)
    if arr.size != item.length:
        from fractalseq.errors import InputError

        raise InputError(f"{r.name} holds fewer symbols than when it was first read; score it again once it is complete.")
    st = np.concatenate(starts).astype(np.int64) - item.skip if starts else np.zeros(0, np.int64)
    st = st[(st >= 0) & (st < item.length)]
    if item.offset == 0:
        st = np.union1d(st, [0]).astype(np.int64)  # the source's first symbol starts a segment (as iter_pieces has it)
    return Piece(r.alphabet, np.ascontiguousarray(arr), st, item.core, item.offset, item.final, item.index)


def offset_pass(source: SymbolStream | SymbolArray, reader: ByteReader, engine: Engine, chunk: int, overlap: int) -> list[SymbolSpan]:
    """Run the offset pass on ``engine`` and plan the spans.

    A stream's ``source.report`` is set from the pass (the parent never reads the stream); an
    in-memory array keeps the report of its own read (the same).

    The ranges of the pass are one per worker (about :data:`~fractalseq.words._pieces.RANGE_MIN`
    to :data:`~fractalseq.words._pieces.RANGE_MAX` bytes each).
    """
    data = max(1, reader.size - reader.skip)
    per = int(min(max(-(-data // max(1, int(engine.workers))), RANGE_MIN), RANGE_MAX))
    ranges = plan_ranges(reader, per, 0)
    measured = engine.map(measure_range, ranges) if ranges else []
    report = range_report(reader, [m[0] for m in measured])  # raises as the one-pass reader does when no symbol was kept
    if not isinstance(source, SymbolArray):
        source.report = report
    return plan_spans(reader, measured, ranges, chunk, overlap)


def worker_pieces(
    source: SymbolStream | SymbolArray, chunk: int, overlap: int, engine: Engine | None = None, reader: ByteReader | None = None,
) -> Iterator[Piece | SymbolSpan]:
    """Pieces of ``chunk`` symbols, each followed by up to ``overlap`` symbols of the next (see :func:`iter_pieces`).

    With an ``engine`` and a byte ``reader`` (``ranged_reader(source)``, or the reader of the
    file an in-memory array was read from) the pieces are :class:`SymbolSpan` descriptions
    planned by the offset pass on the engine, which runs here, before the first piece is
    handed out; otherwise the parent's :class:`Piece` objects.  Read either kind in the task
    with :func:`span_piece`.
    """
    if engine is not None and reader is not None:
        if chunk < 1 or overlap < 0:
            from fractalseq.errors import ParameterError

            raise ParameterError("The piece size must be positive and the overlap non-negative.")
        return iter(offset_pass(source, reader, engine, chunk, overlap))
    return iter_pieces(source, chunk, overlap)

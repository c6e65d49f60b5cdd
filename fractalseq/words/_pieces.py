"""One large source split into pieces that overlap by ``N - 1`` symbols.

Each piece counts exactly the words that *start* inside it, so no word is
lost at a piece edge and none is counted twice; the pieces' counts add up to
the counts of the whole source (:func:`count_words_split`).  Pieces are plain
data, so any engine (:mod:`fractalseq.runner`) can count them.

Two kinds of piece travel to workers (:func:`source_pieces`): a
:class:`Piece` holds symbols the parent read, a
:class:`~fractalseq.sources.ranges.ByteRange` names a stretch of an
uncompressed or BGZF file that the worker reads itself, so the file never passes
through the parent or a scheduler.  :func:`read_piece` turns either into a
:class:`Piece` inside a task.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.runner import Engine, OnDone, SerialEngine, pause_point
from fractalseq.sources.ranges import ByteRange, RangePart, RangeScan, plan_ranges, range_report
from fractalseq.stream import Chunk, SymbolArray, SymbolStream
from fractalseq.words._counts import DENSE_MAX_BITS, WordCounter, WordCounts, check_depth, count_words
from fractalseq.words._worker_stream import stream_for_workers  # noqa: F401  (its former home)

#: Default piece size for splitting one large source (symbols).
DEFAULT_PIECE = 1 << 24
#: Byte ranges chosen automatically: one per worker, at least this many bytes...
RANGE_MIN = 1 << 20
#: ... and at most this many: a worker's memory stays bounded (0.8 GB measured for a range of 64 MiB
#: of DNA at depth 16, the sparse table of its words), and a task lost with a worker is redone in bounded time.
RANGE_MAX = 1 << 26


@dataclass(frozen=True)
class Piece:
    """A piece of one source for a map task.

    Attributes
    ----------
    alphabet:
        Alphabet of the codes.
    codes:
        The piece's own ``core`` symbols followed by up to ``overlap``
        lookahead symbols of the next piece.
    starts:
        Real segment starts inside ``codes`` (relative positions, sorted);
        position 0 is listed only if a segment really starts there.
    core:
        Symbols that belong to this piece (words starting at ``0..core-1``).
    offset:
        Position of ``codes[0]`` in the source; ``-1`` for a piece read from a
        byte range (the symbols of the earlier ranges are not known to it).
    final:
        True when ``codes`` ends where the source ends.
    index:
        Piece number within its source.
    """

    alphabet: Alphabet
    codes: np.ndarray
    starts: np.ndarray
    core: int
    offset: int
    final: bool
    index: int


def iter_pieces(source: SymbolStream | SymbolArray, chunk: int, overlap: int) -> Iterator[Piece]:
    """Split a source into pieces of ``chunk`` symbols plus ``overlap`` lookahead symbols.

    Memory is bounded by about ``chunk + overlap`` symbols plus one reader
    chunk; the source is read once.  A source with no symbol yields nothing.
    """
    if chunk < 1 or overlap < 0:
        raise ParameterError("The piece size must be positive and the overlap non-negative.")
    alphabet = source.alphabet
    if isinstance(source, SymbolArray):
        chunks: Iterable[Chunk] = [Chunk(source.codes, source.starts)]
    else:
        chunks = source.chunks()
    buf = np.zeros(0, dtype=alphabet.code_dtype)
    bstarts: list[np.ndarray] = []
    offset = 0  # source position of buf[0]
    index = 0
    first = True
    for ch in chunks:
        codes = np.asarray(ch.codes, dtype=alphabet.code_dtype)
        st = np.asarray(ch.starts, dtype=np.int64)
        if first and codes.size:
            st = np.union1d(st, [0])
        if codes.size == 0:
            continue
        first = False
        bstarts.append(st[(st >= 0) & (st < codes.size)] + (offset + buf.size))
        buf = np.concatenate([buf, codes]) if buf.size else codes
        while buf.size >= chunk + overlap + 1:  # keep >= 1 symbol so the last piece is non-empty
            allst = np.concatenate(bstarts) if bstarts else np.zeros(0, np.int64)
            end = chunk + overlap
            rel = allst - offset
            sel = rel[(rel >= 0) & (rel < end)]
            yield Piece(alphabet, buf[:end].copy(), sel, chunk, offset, False, index)
            index += 1
            buf = buf[chunk:]
            offset += chunk
            bstarts = [allst[allst >= offset]]
    if buf.size:
        allst = np.concatenate(bstarts) if bstarts else np.zeros(0, np.int64)
        rel = allst - offset
        yield Piece(alphabet, buf.copy(), rel[(rel >= 0) & (rel < buf.size)], int(buf.size), offset, True, index)


#: Pieces counted in this process (the pause point ``count.piece:N`` counts them).
_PIECES_RUN = [0]


def count_piece(task: tuple[Piece, int]) -> WordCounts:
    """Counts of the words (lengths ``1..depth``) that *start* in a piece's core.

    Summing the results of :func:`iter_pieces` pieces (overlap ``depth - 1``)
    gives exactly :func:`fractalseq.words._counts.count_words` of the whole source.

    The piece is counted with its lookahead (so words crossing the core's end
    are complete); the words starting in the lookahead are exactly those of
    the lookahead counted alone (fewer than ``depth`` symbols: tails only),
    and they are subtracted.
    """
    piece, depth = task
    _PIECES_RUN[0] += 1
    pause_point("count.piece", _PIECES_RUN[0])  # test hook: a worker stopped inside its n-th piece
    alphabet = piece.alphabet
    whole = count_words(SymbolArray(alphabet, piece.codes, piece.starts, "piece"), depth)
    tl, ta, tc = whole.tail_len, whole.tail_addr, whole.tail_count
    if piece.core < piece.codes.size:
        look_starts = piece.starts[piece.starts >= piece.core] - piece.core
        look = count_words(SymbolArray(alphabet, piece.codes[piece.core:], look_starts, "lookahead"), depth)
        if look.leaf()[0].size:  # pragma: no cover - a lookahead shorter than depth has no full word
            raise RuntimeError("lookahead longer than the word depth")
        tl, ta, tc = _subtract_tails((tl, ta, tc), (look.tail_len, look.tail_addr, look.tail_count))
    segments = int(np.count_nonzero(piece.starts < piece.core))
    return WordCounts(
        alphabet, whole.depth, int(piece.core), segments,
        whole.dense, whole.leaf_words, whole.leaf_counts, tl, ta, tc,
    )


def _subtract_tails(a, b):
    """Tails ``a - b`` (``b`` is contained in ``a``); entries sorted by (length, address)."""
    al, aa, ac = a
    ac = ac.copy()
    bl, ba, bc = b
    for l, addr, c in zip(bl.tolist(), ba.tolist(), bc.tolist()):
        hit = np.flatnonzero((al == l) & (aa == np.uint64(addr)))
        if hit.size != 1 or ac[hit[0]] < c:  # pragma: no cover - would be a counting bug
            raise RuntimeError("lookahead tail missing from the piece counts")
        ac[hit[0]] -= c
    keep = ac > 0
    return al[keep], aa[keep], ac[keep]


def _add_counts(a: WordCounts, b: WordCounts) -> WordCounts:
    return a + b


def settle_storage(wc: WordCounts) -> WordCounts:
    """The same counts in the table kind a one-pass count picks (:class:`~fractalseq.words._counts.WordCounter`).

    A one-pass count keeps a dense table when ``b N <= 24`` and more than an
    eighth of its cells are occupied, else sorted words; sums of pieces may
    come out in the other kind, which would change ``storage`` in a document.
    """
    cells = 1 << (wc.bits * wc.depth) if wc.bits * wc.depth <= DENSE_MAX_BITS else 0
    words, counts = wc.leaf()
    want_dense = bool(cells) and int(np.count_nonzero(counts)) > cells // 8
    if want_dense == (wc.dense is not None):
        return wc
    if want_dense:
        dense = np.zeros(cells, dtype=np.int64)
        dense[words.astype(np.int64)] = counts
        return WordCounts(wc.alphabet, wc.depth, wc.length, wc.segments, dense, None, None, wc.tail_len, wc.tail_addr, wc.tail_count)
    keep = counts > 0
    return WordCounts(wc.alphabet, wc.depth, wc.length, wc.segments, None, words[keep], counts[keep], wc.tail_len, wc.tail_addr, wc.tail_count)


def source_pieces(source: SymbolStream | SymbolArray, chunk: int, overlap: int) -> Iterator[Piece | ByteRange]:
    """Pieces of a source for workers, overlapping by ``overlap`` symbols.

    When the source is a file the workers can read apart (uncompressed or BGZF)
    (:attr:`SymbolStream.byte_reader <fractalseq.stream.SymbolStream>`), the
    pieces are :class:`~fractalseq.sources.ranges.ByteRange` descriptions of
    about ``chunk`` bytes each and the parent reads only a few bytes near each
    cut; otherwise the parent reads the source and yields :class:`Piece`
    objects of ``chunk`` symbols (:func:`iter_pieces`).  Turn either into
    symbols with :func:`read_piece` inside the task; give the byte ranges'
    :class:`~fractalseq.sources.ranges.RangePart` results to
    :func:`~fractalseq.sources.ranges.range_report` for the read report.
    """
    reader = getattr(source, "byte_reader", None)
    if reader is not None:
        return iter(plan_ranges(reader, chunk, overlap))
    return iter_pieces(source, chunk, overlap)


def read_piece(item: Piece | ByteRange) -> tuple[Piece, RangePart | None]:
    """The symbols of a piece of either kind as a :class:`Piece`, and for a byte range what its reader kept and dropped.

    A piece read from a byte range has ``offset == -1`` (see :class:`Piece`).
    """
    if isinstance(item, Piece):
        return item, None
    dtype = item.reader.alphabet.code_dtype
    codes: list[np.ndarray] = []
    starts: list[np.ndarray] = []
    size = 0
    with RangeScan(item) as scan:
        for ch in scan.core():
            codes.append(ch.codes)
            starts.append(ch.starts + size)
            size += ch.codes.size
        look = scan.lookahead()
    codes.append(look.codes)
    starts.append(look.starts + size)
    arr = np.concatenate(codes).astype(dtype, copy=False) if codes else np.zeros(0, dtype)
    st = np.concatenate(starts).astype(np.int64) if starts else np.zeros(0, np.int64)
    final = item.final and look.codes.size == 0
    return Piece(item.reader.alphabet, arr, st, size, -1, final, item.index), scan.part


def count_range(task: tuple[ByteRange, int]) -> tuple[WordCounts, list[RangePart]]:
    """Counts of the words (lengths ``1..depth``) that start in a byte range, and what its reader read.

    The worker reads the range itself, streamed in blocks (memory: one block and
    the counts), with ``depth - 1`` lookahead symbols after it; as in
    :func:`count_piece` the lookahead's own words (tails only) are subtracted,
    so the ranges' counts add up to those of the whole file.
    """
    rng, depth = task
    _PIECES_RUN[0] += 1
    pause_point("count.piece", _PIECES_RUN[0])  # test hook: a worker stopped inside its n-th piece
    alphabet = rng.reader.alphabet
    # one thread (the workers are the parallelism); uint32 counts while they fit: a third less to send back
    counter = WordCounter(alphabet, depth, compact=True)
    with RangeScan(rng) as scan:
        for ch in scan.core():
            counter.add(ch.codes, ch.starts)
        look = scan.lookahead()
    counter.add(look.codes, look.starts, final=True)
    whole = counter.finish()
    tl, ta, tc = whole.tail_len, whole.tail_addr, whole.tail_count
    if look.codes.size:
        alone = count_words(SymbolArray(alphabet, look.codes, look.starts, "lookahead"), depth)
        tl, ta, tc = _subtract_tails((tl, ta, tc), (alone.tail_len, alone.tail_addr, alone.tail_count))
    part = scan.part
    wc = WordCounts(alphabet, whole.depth, part.symbols, part.segments, whole.dense, whole.leaf_words, whole.leaf_counts, tl, ta, tc)
    return wc, [part]


def _add_ranges(a: tuple[WordCounts, list[RangePart]], b: tuple[WordCounts, list[RangePart]]):
    return a[0] + b[0], a[1] + b[1]


def _wide_counts(wc: WordCounts) -> WordCounts:
    """The same counts with ``int64`` sparse counts, as a one-pass count holds them (a saved file is the same)."""
    if wc.leaf_counts is None or wc.leaf_counts.dtype == np.int64:
        return wc
    return WordCounts(wc.alphabet, wc.depth, wc.length, wc.segments, wc.dense, wc.leaf_words, wc.leaf_counts.astype(np.int64),
                      wc.tail_len, wc.tail_addr, wc.tail_count)


def range_size(source: SymbolStream | SymbolArray, engine: Engine) -> int | None:
    """Bytes per range when a source is split automatically: one range per worker, within [RANGE_MIN, RANGE_MAX].

    ``None`` when the source is not read in byte ranges.
    """
    reader = getattr(source, "byte_reader", None)
    if reader is None:
        return None
    data = max(1, reader.size - reader.skip)
    per = -(-data // max(1, int(engine.workers)))
    return int(min(max(per, RANGE_MIN), RANGE_MAX))


def count_words_split(
    source: SymbolStream | SymbolArray,
    depth: int,
    engine: Engine | None = None,
    chunk: int = DEFAULT_PIECE,
    on_done: OnDone | None = None,
) -> WordCounts:
    """Exact word counts of one (large) source, counted piece by piece on an engine.

    Parameters
    ----------
    source:
        The stream to count.
    depth:
        Deepest word length N; pieces overlap by ``N - 1`` symbols.
    engine:
        Where pieces are counted (default: serially).
    chunk:
        Symbols per piece; bytes per range when the workers read byte ranges of
        the file themselves (:func:`source_pieces`).

    Returns
    -------
    WordCounts
        Equal to ``count_words(source, depth)`` in every count.  When the
        workers read byte ranges, the parent never reads the stream, and
        ``source.report`` is set to the read report the ranges add up to (the
        one a one-pass read writes).
    """
    depth = check_depth(source.alphabet, depth)
    engine = engine or SerialEngine()
    reader = getattr(source, "byte_reader", None)
    if reader is not None:
        ranges = plan_ranges(reader, chunk, depth - 1)
        if not ranges:  # no data byte: the one-pass reader's sentence
            source.report = range_report(reader, [])
        done = None if on_done is None else (lambda i, res: on_done(i, res[0]))
        wc, parts = engine.map_reduce(count_range, ((r, depth) for r in ranges), _add_ranges, done)
        source.report = range_report(reader, parts)  # raises as the one-pass reader does when no symbol was kept
        return settle_storage(_wide_counts(wc))
    tasks = ((p, depth) for p in iter_pieces(source, chunk, depth - 1))
    try:
        return settle_storage(engine.map_reduce(count_piece, tasks, _add_counts, on_done))
    except InputError:
        raise InputError(f"{source.name} holds no symbols to count; give a file with data.") from None

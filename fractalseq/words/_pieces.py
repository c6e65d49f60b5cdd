"""One large source split into pieces that overlap by ``N - 1`` symbols.

Each piece counts exactly the words that *start* inside it, so no word is
lost at a piece edge and none is counted twice; the pieces' counts add up to
the counts of the whole source (:func:`count_words_split`).  Pieces are plain
data, so any engine (:mod:`fractalseq.runner`) can count them.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.runner import Engine, OnDone, SerialEngine, pause_point
from fractalseq.stream import Chunk, SymbolArray, SymbolStream
from fractalseq.words._counts import DENSE_MAX_BITS, WordCounts, check_depth, count_words

#: Default piece size for splitting one large source (symbols).
DEFAULT_PIECE = 1 << 24


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
        Position of ``codes[0]`` in the source.
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


def stream_for_workers(arr: SymbolArray) -> SymbolArray:
    """The in-memory stream as map tasks get it: codes, segment starts, alphabet and name.

    The one place where a whole stream is handed to workers (shipped with each task); the reader's
    report (which may list millions of records) stays in the parent, and no task result depends
    on it.
    """
    return SymbolArray(arr.alphabet, arr.codes, arr.starts, arr.name)


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
        Symbols per piece.

    Returns
    -------
    WordCounts
        Equal to ``count_words(source, depth)`` in every count.
    """
    depth = check_depth(source.alphabet, depth)
    engine = engine or SerialEngine()
    tasks = ((p, depth) for p in iter_pieces(source, chunk, depth - 1))
    try:
        return settle_storage(engine.map_reduce(count_piece, tasks, _add_counts, on_done))
    except InputError:
        raise InputError(f"{source.name} holds no symbols to count; give a file with data.") from None

"""Window counts of a scan computed in pieces of whole windows, on any engine, with the same bytes on every engine.

A piece holds the symbols of ``m`` consecutive windows (``m = max(1, piece // step)``):
its core is the ``m * step`` symbols where they start, and it carries the
``window - step`` symbols the last of them reaches into the next piece
(:func:`fractalseq.words._piece_source.worker_pieces`).  The window kernel
(:func:`fractalseq.compare._window_kernel.window_counts`) runs on each piece from empty
tables and the per-window arrays are joined in piece order.  The word and
context counts are exact integers in any case; the running sums ``sum c ln c``
are taken from each piece's first window on, so the serial path runs the same
pieces and every engine gives the same bits for the same piece size.

The surprise figure comes from the online predictor run once along the whole
stream, which cannot be cut: it is one task of its own, running beside the
pieces.

When the input is a file the workers can read apart (uncompressed or BGZF,
its :class:`~fractalseq.sources.ranges.ByteReader` given as ``reader``) and
the engine is not the serial one, the pieces are
:class:`~fractalseq.words._piece_source.SymbolSpan` descriptions planned by an
offset pass on the workers, and the predictor's task reads the whole stream
from the file itself: the parent, which holds the stream for the figures that
follow, sends no symbol to a worker.
"""

from __future__ import annotations

import numpy as np

from fractalseq.compare._window_kernel import window_counts
from fractalseq.runner import Engine, SerialEngine
from fractalseq.sources.ranges import ByteReader
from fractalseq.stream import SymbolArray
from fractalseq.words._piece_source import SymbolSpan, span_piece, worker_pieces
from fractalseq.words._pieces import DEFAULT_PIECE


def window_piece(task: tuple) -> tuple[np.ndarray, ...]:
    """``(N, Kw, Kc, Sw, Sc)`` of the windows that start in one piece's core: ``(piece, depth, bits, window, step)``."""
    piece, depth, bits, window, step = task
    piece = span_piece(piece)  # a span of the file is read here
    size = int(piece.codes.size)
    n = (int(piece.core) // step) if not piece.final else (size - window) // step + 1 if size >= window else 0
    if n <= 0:
        return tuple(np.zeros(0, dtype=t) for t in (np.int64, np.int64, np.int64, np.float64, np.float64))
    # words start at the piece's first symbol whether or not a segment does (the words before it are another piece's)
    starts = np.union1d(np.asarray(piece.starts, dtype=np.int64), np.zeros(1, np.int64))
    return window_counts(piece.codes, starts, int(depth), int(bits), int(window), int(step), int(n))


def _join(acc, part):
    acc = acc if isinstance(acc, list) else [acc]
    acc.append(part)
    return acc


def ranged(engine: Engine | None, reader: ByteReader | None) -> ByteReader | None:
    """The reader the workers read the file with, or ``None`` when the parent sends the symbols (or runs everything)."""
    return reader if engine is not None and engine.name != "serial" else None


def split_window_counts(
    arr: SymbolArray, depth: int, window: int, step: int, engine: Engine | None = None, piece: int | None = None,
    reader: ByteReader | None = None,
) -> tuple[np.ndarray, ...]:
    """``(N, Kw, Kc, Sw, Sc)`` of every full window of ``arr``, computed piece by piece on ``engine``.

    ``reader``: the file ``arr`` was read from, when the workers can read it apart (see the module).
    """
    engine = engine or SerialEngine()
    per = max(1, int(DEFAULT_PIECE if piece is None else piece) // int(step))
    bits = int(arr.alphabet.bits)
    reader = ranged(engine, reader)
    pieces = worker_pieces(arr, per * int(step), int(window) - int(step), engine if reader is not None else None, reader)
    tasks = ((p, int(depth), bits, int(window), int(step)) for p in pieces)
    parts = engine.map_reduce(window_piece, tasks, _join)
    parts = parts if isinstance(parts, list) else [parts]
    return tuple(np.concatenate([p[i] for p in parts]) for i in range(5))


def surprise_task(arr: SymbolArray | SymbolSpan):
    """The per-symbol code lengths of the online predictor along ``arr`` (a task of an engine; a span is read here)."""
    if isinstance(arr, SymbolSpan):
        p = span_piece(arr)
        arr = SymbolArray(p.alphabet, p.codes, p.starts, arr.reader.name)
    return surprise_series(arr)


def surprise_item(arr: SymbolArray, engine: Engine | None, reader: ByteReader | None) -> SymbolArray | SymbolSpan:
    """What the predictor's task gets: the whole stream as one span of the file when the workers read it, else ``arr``."""
    reader = ranged(engine, reader)
    if reader is None:
        return arr
    n = len(arr)
    return SymbolSpan(reader, reader.skip, 0, n, n, 0, True, 0)


def surprise_series(arr: SymbolArray) -> np.ndarray | None:
    """Per-symbol code length (bits) of the online predictor run once along the stream.

    Uses :func:`fractalseq.predict._predictor.online_code_length` with ``keep_surprisal``;
    ``None`` when the predictor is not available.
    """
    try:
        from fractalseq.predict._predictor import online_code_length
    except ImportError:
        return None
    res = online_code_length(arr, keep_surprisal=True)
    v = getattr(res, "surprisal", None)
    if v is None or np.ndim(v) != 1 or len(v) != len(arr):
        return None
    return np.asarray(v, dtype=np.float64)

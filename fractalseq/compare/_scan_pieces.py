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
"""

from __future__ import annotations

import numpy as np

from fractalseq.compare._window_kernel import window_counts
from fractalseq.runner import Engine, SerialEngine
from fractalseq.stream import SymbolArray
from fractalseq.words._piece_source import worker_pieces
from fractalseq.words._pieces import DEFAULT_PIECE


def window_piece(task: tuple) -> tuple[np.ndarray, ...]:
    """``(N, Kw, Kc, Sw, Sc)`` of the windows that start in one piece's core: ``(piece, depth, bits, window, step)``."""
    piece, depth, bits, window, step = task
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


def split_window_counts(
    arr: SymbolArray, depth: int, window: int, step: int, engine: Engine | None = None, piece: int | None = None,
) -> tuple[np.ndarray, ...]:
    """``(N, Kw, Kc, Sw, Sc)`` of every full window of ``arr``, computed piece by piece on ``engine``."""
    engine = engine or SerialEngine()
    per = max(1, int(DEFAULT_PIECE if piece is None else piece) // int(step))
    bits = int(arr.alphabet.bits)
    tasks = ((p, int(depth), bits, int(window), int(step)) for p in worker_pieces(arr, per * int(step), int(window) - int(step)))
    parts = engine.map_reduce(window_piece, tasks, _join)
    parts = parts if isinstance(parts, list) else [parts]
    return tuple(np.concatenate([p[i] for p in parts]) for i in range(5))


def surprise_task(arr: SymbolArray):
    """The per-symbol code lengths of the online predictor along ``arr`` (a task of an engine)."""
    return surprise_series(arr)


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

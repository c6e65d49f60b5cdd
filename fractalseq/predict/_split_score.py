"""Fitted scoring of one source piece by piece, on any engine, with the same bytes on every engine.

The source is cut by :func:`fractalseq.words._pieces.iter_pieces` into pieces
that overlap by ``ov = max(D, K)`` symbols (``D`` the model's deepest cell,
``K`` the order of its Markov baseline).  Piece ``k > 0`` first runs the
kernel over its first ``ov`` symbols (the end of the previous piece) with
throw-away totals: the history and its length since the segment start are
then exactly what a single pass would have at that position, because the
kernel looks at no more than the last ``D`` symbols of a segment.  It then
scores the rest of the piece; piece 0 scores all of it.  The scored stretches
tile the source with no gap and no overlap.

Each piece returns its running totals, its per-window and per-segment code
lengths (a stretch that continues the previous piece's last window or
segment is flagged) and, for the Markov baseline, the counts of the words
starting in its core.  The parent adds them up in piece order
(:meth:`fractalseq.runner.Engine.map_reduce`), so every floating-point sum is
taken in the same order whatever the engine; the serial path runs the same
pieces, so ``--workers 2`` prints the bytes of a serial run with the same
piece size.  The compressor baselines are fed in the parent, piece by piece
as the pieces are cut (they are sequential by nature).

Workers load a model file once (keyed by its path, size and modification
time) instead of receiving the tables with every piece.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from fractalseq.errors import InputError
from fractalseq.predict import _fitted_kernels as FK
from fractalseq.predict import _kernel_tools as K
from fractalseq.predict._results import DEFAULT_TOP_WINDOWS, DEFAULT_WINDOW, FittedMemory, PredictionResult, prediction_result
from fractalseq.predict._tally import record_scores
from fractalseq.runner import Engine, OnDone, SerialEngine
from fractalseq.words._piece_source import ranged_reader, span_piece, worker_pieces
from fractalseq.words._pieces import DEFAULT_PIECE, Piece, count_piece, settle_storage

if TYPE_CHECKING:
    from fractalseq.predict._predictor import CellPredictor


# ------------------------------------------------------------------ the model on the workers
@dataclass
class ModelHandle:
    """A fitted model as a task argument: its file (workers load it once) or, without a file, the model itself.

    ``key`` is ``(path, size, modification time in ns)`` of the file when it was loaded in the parent;
    ``kind`` the model's class (its ``load`` reads the file).
    """

    path: str | None
    key: tuple | None
    model: Any = field(default=None, repr=False)
    kind: Any = None

    def __getstate__(self) -> dict:
        # with a file, the tables are not pickled: each worker loads the file once
        return {"path": self.path, "key": self.key, "model": None if self.path is not None else self.model, "kind": self.kind}

    def __setstate__(self, state: dict) -> None:
        self.__dict__.update(state)


def file_key(path: str | os.PathLike) -> tuple:
    """``(absolute path, size, modification time in ns)`` of a model file."""
    p = os.path.abspath(os.fspath(path))
    st = os.stat(p)
    return (p, int(st.st_size), int(st.st_mtime_ns))


#: The model file last loaded in this process (one entry: a worker scores one model at a time).
_LOADED: dict[tuple, Any] = {}


def handle_model(handle: ModelHandle) -> "CellPredictor":
    """The model of a handle: the object itself, else the file (loaded once per process and checked unchanged)."""
    if handle.model is not None:
        return handle.model
    got = _LOADED.get(handle.key)
    if got is None:
        got = handle.kind.load(handle.path)
        if file_key(handle.path) != handle.key:
            raise InputError(f"The model file {handle.path} changed while it was being scored; score again.")
        got._ensure_index()
        _LOADED.clear()
        _LOADED[handle.key] = got
    return got


# ------------------------------------------------------------------ one piece
@dataclass
class ScorePart:
    """What one piece (or several merged in order) contributes to a fitted score.

    ``windows``/``seg_bits`` are the code lengths (bits) of the stretches between window
    boundaries and segment starts; ``win_open``/``seg_open`` say that the first of them
    continues the previous part's last one.
    """

    stats: np.ndarray
    calib: np.ndarray
    windows: list
    win_open: bool
    seg_starts: list
    seg_bits: list
    seg_open: bool
    counts: Any = None
    surprisal: list | None = None


def _stretch_sums(sur: np.ndarray, cuts: np.ndarray) -> list[float]:
    if sur.size == 0:
        return []
    return np.add.reduceat(sur, cuts, dtype=np.float64).tolist()


def score_piece(task: tuple) -> ScorePart:
    """Score one piece: ``(handle, piece, overlap, window, keep_surprisal, markov_order)``; ``markov_order < 0``: no counts."""
    handle, piece, ov, window, keep, order = task
    piece = span_piece(piece)  # a span of the file is read here
    model = handle_model(handle)
    model._ensure_index()
    a = model.alphabet_
    codes = np.ascontiguousarray(piece.codes)
    starts = np.asarray(piece.starts, dtype=np.int64)
    warm = 0 if piece.offset == 0 else min(int(ov), codes.size)
    hist = np.zeros(2, np.uint64)
    seg = np.zeros(1, np.int64)
    stats = np.zeros(K.ST_SIZE)
    calib = np.zeros((K.CALIB_BINS, 3))
    if warm:  # the history at the first scored position: run over the previous piece's end, totals thrown away
        FK.fitted_score(codes[:warm], starts[starts < warm], a.size, a.bits, model._model, model._top0, model._sq0,
                        np.zeros(a.size, np.int64), hist, seg, np.zeros(K.ST_SIZE), np.zeros((K.CALIB_BINS, 3)), np.zeros(0, np.float32))
    body = codes[warm:]
    bst = starts[starts >= warm] - warm
    sur = np.empty(body.size, dtype=np.float32)
    FK.fitted_score(body, bst, a.size, a.bits, model._model, model._top0, model._sq0, np.zeros(a.size, np.int64),
                    hist, seg, stats, calib, sur)
    g = int(piece.offset) + warm  # source position of the first scored symbol
    w = int(window)
    first = (-g) % w
    wcuts = np.unique(np.concatenate([[0], np.arange(first, body.size, w)])).astype(np.int64)
    scuts = np.unique(np.concatenate([[0], bst])).astype(np.int64)
    counts = None
    if order >= 0:
        k = int(order)
        end = min(codes.size, int(piece.core) + k)
        core = Piece(piece.alphabet, codes[:end], starts[starts < end], piece.core, piece.offset, piece.final, piece.index)
        counts = count_piece((core, k + 1))
    return ScorePart(
        stats=stats, calib=calib,
        windows=_stretch_sums(sur, wcuts), win_open=g % w != 0,
        seg_starts=(scuts + g).tolist(), seg_bits=_stretch_sums(sur, scuts), seg_open=not (bst.size and bst[0] == 0),
        counts=counts, surprisal=[sur] if keep else None,
    )


def _merge(acc: ScorePart, part: ScorePart) -> ScorePart:
    """``part`` appended to ``acc`` (the earlier parts), in place."""
    acc.stats = acc.stats + part.stats
    acc.calib = acc.calib + part.calib
    wins = list(part.windows)
    if part.win_open and wins and acc.windows:
        acc.windows[-1] += wins.pop(0)
    acc.windows.extend(wins)
    starts, bits = list(part.seg_starts), list(part.seg_bits)
    if part.seg_open and bits and acc.seg_bits:
        acc.seg_bits[-1] += bits.pop(0)
        starts.pop(0)
    acc.seg_starts.extend(starts)
    acc.seg_bits.extend(bits)
    if part.counts is not None:
        acc.counts = part.counts if acc.counts is None else acc.counts + part.counts
    if acc.surprisal is not None and part.surprisal is not None:
        acc.surprisal.extend(part.surprisal)
    return acc


def _empty(keep: bool) -> ScorePart:
    return ScorePart(np.zeros(K.ST_SIZE), np.zeros((K.CALIB_BINS, 3)), [], False, [], [], False, None, [] if keep else None)


# ------------------------------------------------------------------ the whole source
def evaluate_pieces(
    model: "CellPredictor",
    source,
    *,
    window: int | None = DEFAULT_WINDOW,
    keep_surprisal: bool = False,
    want_markov: bool = True,
    want_compressors: bool = False,
    top_windows: int = DEFAULT_TOP_WINDOWS,
    engine: Engine | None = None,
    piece: int | None = None,
    model_path: str | os.PathLike | None = None,
    on_done: OnDone | None = None,
) -> PredictionResult:
    """Fitted score of a source cut into pieces of ``piece`` symbols, scored on ``engine`` and added up in order.

    The result is the same bytes on every engine for the same ``piece``
    (default :data:`~fractalseq.words._pieces.DEFAULT_PIECE`).  With
    ``model_path`` (the file ``model`` was loaded from) workers load the file
    once instead of receiving the tables with every piece.
    """
    from fractalseq.predict._baselines import CompressorMeter

    engine = engine or SerialEngine()
    chunk = DEFAULT_PIECE if piece is None else int(piece)
    model._ensure_index()
    a = model.alphabet_
    name = getattr(source, "name", "stream")
    w = int(window or DEFAULT_WINDOW)
    order = int(model.baseline_order_) if want_markov else -1
    ov = max(max(model.depths_, default=0), order, 1)
    # workers (local processes or a Dask cluster, which shares the input paths anyway) read the model file once
    # instead of receiving its tables with every piece; in this process the model itself is used
    if model_path is not None and engine.name != "serial":
        handle = ModelHandle(str(model_path), file_key(model_path), kind=type(model))
    else:
        handle = ModelHandle(None, None, model)
    meter = CompressorMeter(a) if want_compressors else None
    cut = [0]
    # workers read their own spans of the file when they can; the compressors need the symbols in the parent
    reader = ranged_reader(source) if engine.name != "serial" and meter is None else None

    def tasks(pieces):
        for p in pieces:
            if meter is not None:
                meter.feed(p.codes[: p.core])
            cut[0] += 1
            yield (handle, p, ov, w, keep_surprisal, order)

    def merge(acc, part):
        return _merge(acc, part)

    try:
        pieces = worker_pieces(source, chunk, ov, engine, reader)  # with a reader: the offset pass runs here
        acc = engine.map_reduce(score_piece, tasks(pieces), merge, on_done)
    except InputError:
        if cut[0]:
            raise
        acc = _empty(keep_surprisal)  # a source with no symbol
    n = int(acc.stats[K.ST_COUNT])
    recs = []
    if window or keep_surprisal:  # (as the per-window detail: a caller asking for neither wants the total only)
        recs = record_scores(np.asarray(acc.seg_starts, np.int64), np.asarray(acc.seg_bits, np.float64), source.report.records)
    sur = None
    if keep_surprisal:
        sur = np.concatenate(acc.surprisal) if acc.surprisal else np.zeros(0, np.float32)
    res = prediction_result(
        "fitted", name, acc.stats, acc.calib, depths=model.depths_,
        memory=FittedMemory(model.max_cells_, model.n_cells_, model.pruned_cells_, int(model._index_bytes)),
        reverse_complement=model.reverse_complement_, params={**model.get_params(), "depths": list(model.ladder_)},
        records=recs, window=w, window_bits=np.asarray(acc.windows, np.float64) if window else None, surprisal=sur,
        top_windows=top_windows,
    )
    found = {}
    if acc.counts is not None and n:
        found["markov"] = fitted_markov(model, settle_storage(acc.counts), n)
    if meter is not None and n:
        found["compressors"] = meter.result()
    return replace(res, baselines=found) if found else res


def fitted_markov(model: "CellPredictor", wc, n: int) -> dict:
    """The fixed-order KT baseline of a scored stream (its word counts ``wc``, ``n`` symbols scored), as a dict."""
    from fractalseq.predict._baselines import MarkovBaseline, kt_bits_after_training
    from fractalseq.predict._cells import cell_tables
    from fractalseq.predict._online import markov_online_baseline

    a = model.alphabet_
    k = model.baseline_order_
    bits = kt_bits_after_training(model.counts_[k], cell_tables(wc, [k])[k], n, a.size, a.bits)
    hind = markov_online_baseline(wc) if wc.depth - 1 >= 0 else None
    mb = MarkovBaseline(
        k, bits / n, "model training data", dict(model.baseline_bits_),
        None if hind is None else hind.order, None if hind is None else hind.bits_per_symbol,
    )
    return mb.to_dict()

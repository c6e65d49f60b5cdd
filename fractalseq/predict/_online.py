"""Online mode: predict, then update, over one stream (:class:`OnlineCoder`, :func:`online_code_length`, :func:`evaluate_online`)."""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import ParameterError
from fractalseq.predict import _kernel_tools as K
from fractalseq.predict._baselines import (
    CompressorMeter,
    MarkovBaseline,
    kt_bits_by_order,
)
from fractalseq.predict._cells import cell_tables
from fractalseq.predict import _online_sparse as S
from fractalseq.predict._online_kernel import online_chunk
from fractalseq.predict._params import (
    ALPHA_DIV,
    COUNT_LIMITS,
    DEFAULT_ONLINE_CELLS,
    DEFAULT_TABLE_BYTES,
    DENSE_MAX_SYMBOLS,
    SPARSE_START_BITS,
    IR_MIN_DEPTH,
    Source,
    as_source,
    baseline_orders,
    check_depths,
    complement_map,
    default_depths,
    depth_class,
    known_length,
    source_chunks,
    use_reverse,
)
from fractalseq.predict._results import (
    DEFAULT_TOP_WINDOWS,
    DEFAULT_WINDOW,
    OnlineMemory,
    PredictionResult,
    prediction_result,
)
from fractalseq.predict._tally import Tally


def _aligned_zeros(n: int, dtype) -> np.ndarray:
    """Zeros whose first element sits on a 64-byte boundary, so a hashed bucket never straddles two cache lines."""
    item = np.dtype(dtype).itemsize
    raw = np.zeros(n + 64 // item, dtype=dtype)
    off = (-raw.ctypes.data % 64) // item
    return raw[off : off + n]


# ------------------------------------------------------------- online coder
class OnlineCoder:
    """Predict-then-update state over one stream, fed chunk by chunk.

    Parameters
    ----------
    alphabet:
        Alphabet of the stream.
    depths, max_depth, smoothing, max_cells, learning_rate, reverse_complement:
        See :class:`~fractalseq.predict._predictor.CellPredictor`.
    length_hint:
        Length of the stream when known: hashed tables are then sized to about four
        rows per word they can receive (never above the cap), so short inputs stay small.

    Attributes
    ----------
    rows:
        The row store of :func:`~fractalseq.predict._online_kernel.online_chunk`: ``(table,)`` packed
        (``A <= 4``) or ``(counts, flat counts, tags, totals)`` dense (:meth:`dense_rows`; any alphabet).
    n_rows, table_bytes:
        Rows of all regions together and their memory.
    """

    def __init__(
        self,
        alphabet: Alphabet,
        depths: Sequence[int] | None = None,
        max_depth: int | None = None,
        smoothing: float = 0.5,
        max_cells: int | None = None,
        learning_rate: float = 0.002,
        reverse_complement: bool | str = "auto",
        length_hint: int | None = None,
    ) -> None:
        self.alphabet = alphabet
        A = alphabet.size
        if not (isinstance(smoothing, (int, float)) and smoothing > 0 and math.isfinite(smoothing)):
            raise ParameterError(f"The smoothing must be a positive number (e.g. 0.5), not {smoothing!r}.", parameter="smoothing")
        if not (isinstance(learning_rate, (int, float)) and 0 <= learning_rate < 1):
            raise ParameterError(f"The learning rate must lie in [0, 1), not {learning_rate!r}.", parameter="learning_rate")
        self.reverse = use_reverse(alphabet, reverse_complement)
        ds = check_depths(depths if depths is not None else default_depths(alphabet, max_depth), alphabet, self.reverse)
        if self.reverse and ds[-1] > 31:
            raise ParameterError("Reverse-complement counting works up to depth 31; use smaller depths or turn it off.", parameter="depths")
        self.depths = ds
        M = len(ds)
        self.packed = A <= 4
        self.sparse = A > DENSE_MAX_SYMBOLS
        row_bytes = 8 if self.packed else (S.ROW_BYTES if self.sparse else 2 * A + 6)
        if max_cells is None:
            cap = min(DEFAULT_ONLINE_CELLS, max(DEFAULT_TABLE_BYTES // row_bytes, 1 << 12))
        else:
            cap = int(max_cells)
            if cap < M * K.BUCKET * 16:
                raise ParameterError(f"max_cells {cap} is too small for {M} depths; allow at least {M * K.BUCKET * 16}.", parameter="max_cells")
        self.cells_cap = cap
        self.row_bytes = row_bytes
        classes = [depth_class(alphabet, d) for d in ds]
        self.alpha = np.array([smoothing / ALPHA_DIV[c] for c in classes], dtype=np.float64)
        self.limit = np.array([COUNT_LIMITS[c] for c in classes], dtype=np.int64)
        self.lr = float(learning_rate)
        self.params = {
            "depths": list(ds),
            "smoothing": float(smoothing),
            "max_cells": cap,
            "learning_rate": self.lr,
            "reverse_complement": self.reverse,
        }
        if self.sparse:
            self._init_sparse(cap, float(smoothing))
        else:
            self._init_rows(cap, length_hint)
        self.weights = np.full((M + 1, M), min(1.0, 2.0 / M), dtype=np.float64)
        self.hist = np.zeros(2, dtype=np.uint64)
        self.seg = np.zeros(1, dtype=np.int64)
        self.stats = np.zeros(K.ST_SIZE, dtype=np.float64)
        self.calib = np.zeros((K.CALIB_BINS, 3), dtype=np.float64)

    def _init_rows(self, cap: int, length_hint: int | None) -> None:
        """Tables of the packed and dense layouts: fixed regions, direct where they fit."""
        alphabet, ds = self.alphabet, self.depths
        A, b, M = alphabet.size, alphabet.bits, len(ds)
        share = cap / M
        direct = np.array([b * d <= math.floor(math.log2(share)) for d in ds])
        direct_rows = sum(1 << (b * d) for d, dr in zip(ds, direct) if dr)
        nh = int((~direct).sum())
        rbits = []
        if nh:
            per = max((cap - direct_rows) // nh, K.BUCKET * 16)
            if length_hint is not None:  # a short input needs no more than ~4 rows per word it can insert
                per = min(per, max(K.BUCKET * 16, 4 * (2 if self.reverse else 1) * int(length_hint)))
            hb = int(math.floor(math.log2(per)))
        for d, dr in zip(ds, direct):
            rbits.append(b * d if dr else hb)
        rows = np.array([1 << r for r in rbits], dtype=np.int64)
        self.n_rows = int(rows.sum())
        self.table_bytes = self.n_rows * self.row_bytes
        self.cfg = {
            "A": A,
            "b": b,
            "depth": np.array(ds, dtype=np.int64),
            "direct": direct.astype(np.bool_),
            "rbits": np.array(rbits, dtype=np.int64),
            "offset": np.concatenate([[0], np.cumsum(rows)[:-1]]).astype(np.int64),
            "masks": np.array([(1 << (b * d)) - 1 for d in ds], dtype=np.uint64),
            "ir_on": np.array([self.reverse and d >= IR_MIN_DEPTH for d in ds], dtype=np.bool_),
            "comp": complement_map(alphabet) if self.reverse else np.zeros(0, dtype=np.int64),
        }
        self.logt = np.log(np.arange(K.LOG_TABLE, dtype=np.float64)[None, :] + self.alpha[:, None])
        self.rows = self.dense_rows() if not self.packed else (_aligned_zeros(self.n_rows, np.uint64),)

    def _init_sparse(self, cap: int, alpha0: float) -> None:
        """Top-k tables (:mod:`fractalseq.predict._online_sparse`): every region starts small and doubles as it fills."""
        alphabet, ds = self.alphabet, self.depths
        A, b, M = alphabet.size, alphabet.bits, len(ds)
        # a region never needs more rows than its depth has cells (A**n), nor more than its share of the cap
        self.max_bits = np.array(
            [max(3, min(int(math.floor(math.log2(cap / M))), math.ceil(d * math.log2(A)) + 1)) for d in ds], dtype=np.int64
        )
        rbits = np.minimum(self.max_bits, SPARSE_START_BITS)
        self.cfg = {
            "A": A,
            "b": b,
            "depth": np.array(ds, dtype=np.int64),
            "masks": np.array([(1 << (b * d)) - 1 for d in ds], dtype=np.uint64),
            "beta": np.full(M, S.SPARSE_BETA, dtype=np.float64),
            "disc": np.full(M, S.SPARSE_DISCOUNT, dtype=np.float64),
            "alpha0": alpha0,
        }
        self._layout(rbits)
        self.rows = tuple(S.empty_rows(self.n_rows))
        self.fill = np.zeros(M, np.int64)
        self.c0 = np.zeros(A, np.float64)
        self.top0 = np.arange(S.TOP0, dtype=np.int64)
        self.base = np.array([0.0, A * alpha0 * alpha0], dtype=np.float64)
        self.mark = np.zeros(A, np.int64)

    def _layout(self, rbits: np.ndarray) -> None:
        rows = np.int64(1) << rbits
        self.cfg["rbits"] = rbits.astype(np.int64)
        self.cfg["offset"] = np.concatenate([[0], np.cumsum(rows)[:-1]]).astype(np.int64)
        self.cfg["grow_at"] = np.where(rbits < self.max_bits, (rows * S.GROW_LOAD).astype(np.int64), np.int64(1) << 62)
        self.n_rows = int(rows.sum())
        self.table_bytes = self.n_rows * self.row_bytes + 16 * self.alphabet.size

    def _grow(self) -> None:
        """Double every region filled past its growth mark and move the stored cells over."""
        c = self.cfg
        old_rbits, old_offset = c["rbits"], c["offset"]
        rbits = np.where(self.fill >= c["grow_at"], np.minimum(old_rbits + 1, self.max_bits), old_rbits)
        self._layout(rbits)
        self.rows = S.rehash(c["depth"], old_rbits, old_offset, *self.rows, c["rbits"], c["offset"], self.n_rows)

    def _feed_sparse(self, codes: np.ndarray, starts: np.ndarray, sur: np.ndarray) -> None:
        c = self.cfg
        pos = 0
        n = codes.size
        while True:
            part = codes[pos:]
            st = starts[starts >= pos] - pos
            out = sur[pos:] if sur.size else sur
            done = S.sparse_chunk(
                part, st, c["A"], c["b"], c["depth"], c["rbits"], c["offset"], self.limit, c["masks"], c["beta"], c["disc"],
                c["alpha0"], *self.rows, self.fill, c["grow_at"], self.c0, self.top0, self.base, self.mark, self.hist,
                self.seg, self.stats, self.calib, out,
            )
            pos += done
            if pos >= n and not np.any(self.fill >= c["grow_at"]):
                return
            self._grow()
            if pos >= n:
                return

    def feed(self, codes: np.ndarray, starts: np.ndarray, surprisal: bool = False) -> np.ndarray | None:
        """Code one chunk (``starts``: segment starts inside it); returns its surprisals in bits if asked."""
        codes = np.ascontiguousarray(codes)
        if codes.dtype not in (np.uint8, np.uint32):
            codes = codes.astype(self.alphabet.code_dtype)
        starts = np.ascontiguousarray(starts, dtype=np.int64)
        sur = np.empty(codes.size if surprisal else 0, dtype=np.float32)
        if self.sparse:
            self._feed_sparse(codes, starts, sur)
            return sur if surprisal else None
        c = self.cfg
        online_chunk(
            codes, starts, c["A"], c["b"], c["depth"], c["direct"], c["rbits"], c["offset"], self.limit, self.alpha,
            c["ir_on"], c["masks"], c["comp"], self.logt, self.lr, self.rows, self.weights, self.hist, self.seg,
            self.stats, self.calib, sur,
        )
        return sur if surprisal else None

    def dense_rows(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Empty dense row store ``(counts, flat counts, tags, totals)`` of this coder's size (any alphabet)."""
        A = self.alphabet.size
        flat = _aligned_zeros(self.n_rows * A, np.uint16)
        return flat.reshape(self.n_rows, A), flat, np.zeros(self.n_rows, np.uint16), np.zeros(self.n_rows, np.uint32)

    def cells_stored(self) -> int:
        """Rows holding a cell now."""
        return int(np.count_nonzero(self.rows[0] if self.packed else self.rows[3]))  # sparse rows: totals are rows[3] too

    @property
    def length(self) -> int:
        return int(self.stats[K.ST_COUNT])

    def result(self, name: str, records=(), window: int = DEFAULT_WINDOW, window_bits=None, surprisal=None,
               top_windows: int = DEFAULT_TOP_WINDOWS) -> PredictionResult:
        """Summary of everything fed so far."""
        memory = OnlineMemory(self.cells_cap, self.cells_stored(), int(self.stats[K.ST_EVICT]), self.table_bytes)
        return prediction_result(
            "online", name, self.stats, self.calib, depths=self.depths, memory=memory, reverse_complement=self.reverse,
            params=self.params, records=records, window=window, window_bits=window_bits, surprisal=surprisal,
            top_windows=top_windows,
        )


def markov_online_baseline(wc) -> MarkovBaseline:
    """Best fixed-order adaptive KT model on a stream, order chosen in hindsight on the stream itself."""
    a = wc.alphabet
    K_b = min(baseline_orders(a), wc.depth - 1)
    tables = cell_tables(wc, range(K_b + 1))
    bits = kt_bits_by_order(tables, wc.length, a.size)
    n = max(wc.length, 1)
    per = {k: v / n for k, v in bits.items()}
    best = min(per, key=lambda k: (per[k], k))
    return MarkovBaseline(best, per[best], "the scored stream itself (best order in hindsight)", per, best, per[best])


def online_code_length(
    source: Source,
    *,
    keep_surprisal: bool = False,
    window: int | None = None,
    top_windows: int = DEFAULT_TOP_WINDOWS,
    **params,
) -> PredictionResult:
    """Online (predict-then-update) code length of a stream: the predictor's "bits per symbol".

    Parameters
    ----------
    source:
        A :class:`~fractalseq.stream.SymbolArray` or :class:`~fractalseq.stream.SymbolStream` (read chunk by chunk).
    keep_surprisal:
        Also return the surprisal (bits) of every position as ``result.surprisal`` (float32, 4 bytes a symbol).
    window:
        Also sum the code length per window of this many symbols and per record (``None``: skip, fastest).
    top_windows:
        How many of the most surprising windows the result lists (with ``window``).
    **params:
        ``depths``, ``max_depth``, ``smoothing``, ``max_cells``, ``learning_rate``,
        ``reverse_complement`` (see :class:`CellPredictor`).

    Returns
    -------
    PredictionResult
        ``total_bits`` is an upper bound on the information content of the stream
        (an arithmetic coder driven by these probabilities needs at most 2 bits more).

    Examples
    --------
    >>> from fractalseq.alphabet import dna
    >>> from fractalseq.stream import from_codes
    >>> import numpy as np
    >>> arr = from_codes(dna(), np.tile([0, 1, 2, 3], 5000))
    >>> online_code_length(arr).bits_per_symbol < 0.05
    True
    """
    src = as_source(source)
    coder = OnlineCoder(src.alphabet, length_hint=known_length(src), **params)
    if window is not None and (isinstance(window, bool) or int(window) < 1):
        raise ParameterError(f"The window must be a positive number of symbols, not {window!r}.", parameter="window")
    tally = Tally(window or DEFAULT_WINDOW, keep_surprisal) if (window or keep_surprisal) else None
    for chunk in source_chunks(src):
        sur = coder.feed(chunk.codes, chunk.starts, surprisal=tally is not None)
        if tally is not None:
            tally.add(sur, chunk.starts)
    name = getattr(src, "name", "stream")
    if tally is None:
        return coder.result(name, window=window or DEFAULT_WINDOW)
    wins, sur, recs = tally.finish(src.report.records)
    return coder.result(
        name, records=recs, window=window or DEFAULT_WINDOW, window_bits=wins if window else None, surprisal=sur,
        top_windows=top_windows,
    )


def evaluate_online(
    source: Source,
    *,
    window: int = DEFAULT_WINDOW,
    keep_surprisal: bool = False,
    baselines: bool = True,
    top_windows: int = DEFAULT_TOP_WINDOWS,
    **params,
) -> PredictionResult:
    """Online code length with per-window/per-record detail and both baselines from the same pass.

    Parameters are those of :func:`online_code_length`; ``baselines=False`` skips the baselines.

    The Markov baseline is the adaptive KT model of the best order on the
    stream itself (chosen in hindsight, orders ``0..K`` of :func:`baseline_orders`);
    the compressors see the same symbols (:class:`~fractalseq.predict._baselines.CompressorMeter`).
    """
    from fractalseq.words._counts import WordCounter

    src = as_source(source)
    coder = OnlineCoder(src.alphabet, length_hint=known_length(src), **params)
    if isinstance(window, bool) or int(window) < 1:
        raise ParameterError(f"The window must be a positive number of symbols, not {window!r}.", parameter="window")
    tally = Tally(int(window), keep_surprisal)
    counter = WordCounter(src.alphabet, baseline_orders(src.alphabet) + 1) if baselines else None
    meter = CompressorMeter(src.alphabet) if baselines else None
    for chunk in source_chunks(src):
        sur = coder.feed(chunk.codes, chunk.starts, surprisal=True)
        tally.add(sur, chunk.starts)
        if counter is not None:
            counter.add(chunk.codes, chunk.starts)
            meter.feed(chunk.codes)
    wins, sur, recs = tally.finish(src.report.records)
    res = coder.result(getattr(src, "name", "stream"), records=recs, window=int(window), window_bits=wins, surprisal=sur,
                       top_windows=top_windows)
    if counter is not None and coder.length:
        wc = counter.finish()
        res = replace(res, baselines={"markov": markov_online_baseline(wc).to_dict(), "compressors": meter.result()})
    return res

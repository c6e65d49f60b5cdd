"""A count-based next-symbol predictor on the cells of the contractive encoding.

A history falls, at every depth ``n``, in the cell of all histories sharing
its last ``n`` symbols (in the encoding with ratio ``k <= 1/2``, the box of
side ``k**n`` its point lies in).  Each cell keeps the counts of the symbols
that followed it; a prediction blends the counts of the cells a history falls
in, from coarse to fine.

Two modes
---------
*online* (:func:`online_code_length`, :meth:`CellPredictor.score_online`)
    Predict, then update, over one stream.  Cells of several depths live in
    tables of bounded size (direct for shallow depths, hashed buckets with
    pruning of the rarest cell for deep ones); their estimates
    ``(c_s + alpha) / (N + A alpha)`` are mixed geometrically with weights
    learned online (see :mod:`fractalseq.predict._kernels`).  For DNA the deep
    cells are also updated with the reverse complement of each word, so a
    repeat read on the other strand is recognised.  The total code length is
    an upper bound on the information content of the stream (it is the length
    an arithmetic coder driven by these probabilities would need, within 2 bits).
*fitted* (:meth:`CellPredictor.fit`, :meth:`~CellPredictor.score`, :meth:`~CellPredictor.predict_proba`)
    Exact counts of the training data (mergeable: counts of two parts add up
    to the counts of the whole), blended from coarse to fine by interpolated
    absolute discounting,
    ``p_n(s) = (max(c_s - d_n, 0) + (beta_n + d_n u) p_{n-1}(s)) / (N + beta_n)``,
    starting from the uniform distribution (``u`` = distinct symbols of the
    cell).  The concentration ``beta_n`` and discount ``d_n`` of each depth
    are chosen by leave-one-out likelihood of the training counts (a pure
    function of the counts).  Scoring held-out data does not change the model.

Evaluation beside every score: log-loss in bits per symbol, top-1 and top-3
accuracy, expected calibration error, and two baselines computed in the same
run (:mod:`fractalseq.predict._baselines`).

Genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import inspect
import math
from dataclasses import dataclass, field, replace
from typing import Iterable, Iterator, Sequence

import numpy as np

from fractalseq.predict import _fitted_kernels as FK
from fractalseq.predict import _kernel_tools as K
from fractalseq.predict._online_kernel import online_chunk
from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ModelFileError, ParameterError
from fractalseq.predict._modelfile import ModelState, read_state, write_state
from fractalseq.predict._baselines import CompressorMeter, MarkovBaseline, kt_bits_after_training, kt_bits_by_order
from fractalseq.stream import Chunk, SymbolArray, SymbolStream

#: Cell depths used for DNA-like alphabets (four symbols) when nothing else is asked.
DNA_DEPTHS = (3, 6, 10, 14, 20)
#: Fractions of the maximum depth forming the default ladder of depths.
_LADDER = (0.15, 0.3, 0.45, 0.6, 0.8, 1.0)
#: Default budget of table memory (bytes) when ``max_cells`` is not given.
DEFAULT_TABLE_BYTES = 1 << 28
#: Default cap on the rows of the online tables.
DEFAULT_ONLINE_CELLS = 1 << 24
#: Default cap on the cells a fitted model keeps.
DEFAULT_FITTED_CELLS = 1 << 23
#: Counts limits by depth class (shallow, middle, deep) and the divisors of the smoothing.
_LIMITS = (4095, 255, 31)
_ALPHA_DIV = (1.0, 4.0, 16.0)
#: Depth classes: cells are shallow while A**n <= 2**20, middle while <= 2**26.
_CLASS_BITS = (20.0, 26.0)
#: Baseline orders 0..K with b (K + 1) <= this many bits.
_BASELINE_BITS = 22
#: Fitted blend: concentrations A alpha 2**k (k = 0..17) and discounts tried by leave-one-out likelihood.
_BETA_STEPS = 18
_DISCOUNTS = (0.0, 0.25, 0.5, 0.75)
#: Cells per depth used to choose the blend parameters (a regular subsample beyond).
_GRID_CELLS = 100_000
#: Online mode: shallower cells are estimated well from one strand and get no reverse-complement updates.
IR_MIN_DEPTH = 5
#: Private arrays of a fitted model's cell index (rebuilt by every fit).
_INDEX_ATTRS = ("_dstart", "_addr", "_counts", "_depth_arr", "_beta", "_disc", "_masks", "_index")
#: Default window (symbols) of the per-window report.
DEFAULT_WINDOW = 10_000

Source = SymbolStream | SymbolArray


# ------------------------------------------------------------------ params
def default_max_depth(alphabet: Alphabet) -> int:
    """Deepest cell by default: about 40 bits of context (20 for DNA), within the address width."""
    return int(max(1, min(alphabet.max_depth - 1, round(40 / alphabet.bits))))


def default_depths(alphabet: Alphabet, max_depth: int | None = None) -> tuple[int, ...]:
    """The ladder of cell depths used when none are given.

    DNA-like alphabets (4 symbols) use :data:`DNA_DEPTHS` up to ``max_depth``;
    otherwise the depths are 1 and the fractions 0.15, 0.3, 0.45, 0.6, 0.8 and
    1 of ``max_depth`` (rounded, at least 1), plus depth 2 when the next depth
    after 1 is deeper than 3.
    """
    D = default_max_depth(alphabet) if max_depth is None else int(max_depth)
    if alphabet.size == 4 and max_depth is None:
        return DNA_DEPTHS
    if alphabet.size == 4 and D >= 3:
        ladder = sorted({d for d in DNA_DEPTHS if d <= D} | {D})
        return tuple(ladder)
    ladder = {max(1, int(round(D * f))) for f in _LADDER} | {1}
    if sorted(ladder)[1:2] and sorted(ladder)[1] > 3:
        ladder |= {2}
    return tuple(sorted(ladder))


def _check_depths(depths: Sequence[int], alphabet: Alphabet, reverse: bool) -> tuple[int, ...]:
    try:
        ds = tuple(sorted({int(d) for d in depths}))
    except (TypeError, ValueError):
        raise ParameterError(f"Cell depths must be whole numbers, not {depths!r}.") from None
    if not ds:
        raise ParameterError("At least one cell depth is needed; give e.g. --depths 2,4,8.")
    limit = alphabet.max_depth - 1
    if ds[0] < 0 or ds[-1] > limit:
        raise ParameterError(
            f"Cell depths must lie in 0..{limit} for the {alphabet.name} alphabet ({alphabet.bits} bits a symbol); "
            f"got {ds[0]}..{ds[-1]}."
        )
    return ds


def complement_map(alphabet: Alphabet) -> np.ndarray | None:
    """Code of each symbol's complement for DNA/RNA (A-T/U, C-G), else ``None``."""
    syms = tuple(s.upper() for s in alphabet.symbols)
    if syms in (("A", "C", "G", "T"), ("A", "C", "G", "U")):
        return np.array([3, 2, 1, 0], dtype=np.int64)
    return None


def _use_reverse(alphabet: Alphabet, setting: bool | str) -> bool:
    if setting == "auto":
        return complement_map(alphabet) is not None
    if setting in (True, "on", "yes"):
        if complement_map(alphabet) is None:
            raise ParameterError(
                f"Reverse-complement counting needs a DNA or RNA alphabet (ACGT/ACGU), not {alphabet.name}; "
                "turn it off."
            )
        return True
    if setting in (False, "off", "no"):
        return False
    raise ParameterError(f"reverse_complement must be 'auto', True or False, not {setting!r}.")


def _depth_class(alphabet: Alphabet, depth: int) -> int:
    volume = depth * math.log2(max(alphabet.size, 2))
    if volume <= _CLASS_BITS[0]:
        return 0
    return 1 if volume <= _CLASS_BITS[1] else 2


def _as_source(source) -> Source:
    if isinstance(source, (SymbolStream, SymbolArray)):
        return source
    raise ParameterError(
        f"Expected a SymbolStream or SymbolArray (see fractalseq.sources.open_source), not {type(source).__name__}."
    )


def _known_length(source: Source) -> int | None:
    """Symbols of an in-memory source (``None`` for a stream read lazily)."""
    return len(source) if isinstance(source, SymbolArray) else None


def _chunks(source: Source) -> Iterator[Chunk]:
    """Chunks of either kind of source (a SymbolArray yields pieces of DEFAULT_CHUNK symbols)."""
    return source.chunks()


# ------------------------------------------------------------------ result
@dataclass(frozen=True)
class PredictionResult:
    """Code length and evaluation of a predictor on one stream.

    Attributes
    ----------
    mode:
        ``"online"`` (predict-then-update) or ``"fitted"`` (a trained model, unchanged while scoring).
    name:
        Name of the scored source.
    length:
        Symbols coded.
    total_bits:
        Code length in bits (online: an upper bound on the stream's information content).
    bits_per_symbol:
        ``total_bits / length``.
    top1, top3:
        Fraction of symbols that were the most likely / among the three most likely predictions.
    calibration_error:
        Expected calibration error of the top-1 confidence over :data:`~fractalseq.predict._kernels.CALIB_BINS`
        equal-width bins (mean absolute gap between confidence and accuracy, weighted by bin size).
    brier:
        Mean Brier score (squared error of the probability vector).
    calibration:
        Per bin: lower and upper confidence, symbols, mean confidence, accuracy.
    depths:
        Cell depths used.
    cells_cap:
        Cap on stored cells (online: table rows; fitted: cells kept).
    cells_stored:
        Cells in use at the end (online: distinct rows ever filled, at most the cap).
    evictions:
        Online: cells replaced in full hashed buckets (the rarest of a bucket goes first); fitted: cells pruned at fit time.
    table_bytes:
        Memory of the count tables.
    reverse_complement:
        Whether reverse-complement words were counted too.
    params:
        Parameters of the predictor.
    records:
        Per record (e.g. FASTA record): name, start, length, bits per symbol.
    window, window_bits:
        Window size (symbols) and the code length (bits) of each window (last one may be shorter).
    surprisal:
        Bits of every position when asked for (``keep_surprisal=True``), else ``None``.
    baselines:
        Set by :func:`evaluate_online` / :meth:`CellPredictor.evaluate`: ``markov`` (a
        :class:`~fractalseq.predict._baselines.MarkovBaseline` as a dict) and ``compressors``
        (bits per symbol of lzma/bz2/zlib on the symbols as text and packed).
    """

    mode: str
    name: str
    length: int
    total_bits: float
    bits_per_symbol: float
    top1: float
    top3: float
    calibration_error: float
    brier: float
    calibration: tuple
    depths: tuple
    cells_cap: int
    cells_stored: int
    evictions: int
    table_bytes: int
    reverse_complement: bool
    params: dict
    records: tuple = ()
    window: int = DEFAULT_WINDOW
    window_bits: np.ndarray | None = None
    surprisal: np.ndarray | None = field(default=None, repr=False)
    baselines: dict = field(default_factory=dict)

    def surprising_windows(self, top: int = 5) -> list[dict]:
        """The ``top`` windows with the highest bits per symbol (full windows preferred), best first."""
        if self.window_bits is None or self.window_bits.size == 0:
            return []
        wb = np.asarray(self.window_bits, dtype=np.float64)
        lens = np.full(wb.size, self.window, dtype=np.int64)
        lens[-1] = self.length - self.window * (wb.size - 1)
        rate = wb / np.maximum(lens, 1)
        full = lens >= min(self.window, self.length)
        order = np.lexsort((np.arange(wb.size), -rate, ~full))
        out = []
        for i in order[:top]:
            out.append(
                {
                    "start": int(i * self.window),
                    "end": int(i * self.window + lens[i]),
                    "bits_per_symbol": float(rate[i]),
                    "record": self._record_at(int(i * self.window)),
                }
            )
        return out

    def _record_at(self, pos: int) -> str | None:
        for r in self.records:
            if r["start"] <= pos < r["start"] + r["length"]:
                return r["name"]
        return None

    def to_dict(self, windows: int = 5, include_surprisal: bool = False) -> dict:
        """JSON-ready dictionary (the ``--json`` of ``score`` adds its envelope around it)."""
        d = {
            "mode": self.mode,
            "name": self.name,
            "length": self.length,
            "total_bits": self.total_bits,
            "bits_per_symbol": self.bits_per_symbol,
            "top1_accuracy": self.top1,
            "top3_accuracy": self.top3,
            "expected_calibration_error": self.calibration_error,
            "brier": self.brier,
            "calibration": [
                {"low": lo, "high": hi, "symbols": n, "mean_confidence": c, "accuracy": a}
                for lo, hi, n, c, a in self.calibration
            ],
            "depths": list(self.depths),
            "memory": {
                "cells_cap": self.cells_cap,
                "cells_stored": self.cells_stored,
                "evictions" if self.mode == "online" else "cells_pruned": self.evictions,
                "table_bytes": self.table_bytes,
            },
            "reverse_complement": self.reverse_complement,
            "params": dict(self.params),
            "records": [dict(r) for r in self.records],
            "window": self.window,
            "most_surprising_windows": self.surprising_windows(windows),
            "baselines": dict(self.baselines),
        }
        if include_surprisal and self.surprisal is not None:
            d["surprisal"] = self.surprisal
        return d


def _calibration_rows(calib: np.ndarray) -> tuple:
    rows = []
    B = calib.shape[0]
    for k in range(B):
        n, c, h = calib[k]
        rows.append((k / B, (k + 1) / B, int(n), float(c / n) if n else None, float(h / n) if n else None))
    return tuple(rows)


def _ece(calib: np.ndarray) -> float:
    total = calib[:, 0].sum()
    if total == 0:
        return float("nan")
    gap = np.abs(calib[:, 2] - calib[:, 1])  # |hits - summed confidence| per bin = n |acc - conf|
    return float(gap.sum() / total)


class _Tally:
    """Per-window and per-segment code lengths from chunk surprisals (memory: one float per window and segment)."""

    def __init__(self, window: int, keep: bool) -> None:
        self.window = int(window)
        self.keep = keep
        self.pos = 0
        self.windows: list[float] = []
        self._partial = 0.0
        self._parts: list[np.ndarray] = []
        self.seg_starts: list[int] = []
        self.seg_bits: list[float] = []

    def add(self, sur: np.ndarray, starts: np.ndarray) -> None:
        s = sur.astype(np.float64)
        n = s.size
        if n == 0:
            return
        if self.keep:
            self._parts.append(sur.copy())
        i = 0
        if self.pos % self.window:
            need = self.window - self.pos % self.window
            take = min(need, n)
            self._partial += float(s[:take].sum())
            i = take
            if take == need:
                self.windows.append(self._partial)
                self._partial = 0.0
        whole = (n - i) // self.window
        if whole:
            self.windows.extend(s[i : i + whole * self.window].reshape(whole, self.window).sum(axis=1).tolist())
            i += whole * self.window
        if i < n:
            self._partial += float(s[i:].sum())
        st = np.asarray(starts, dtype=np.int64)
        st = st[(st >= 0) & (st < n)]
        cuts = np.unique(np.concatenate([np.zeros(1, np.int64), st]))
        sums = np.add.reduceat(s, cuts)
        for c, v in zip(cuts.tolist(), sums.tolist()):
            if c == 0 and (st.size == 0 or st[0] != 0) and self.seg_bits:
                self.seg_bits[-1] += v
            else:
                self.seg_starts.append(self.pos + c)
                self.seg_bits.append(v)
        self.pos += n

    def finish(self, records) -> tuple[np.ndarray, np.ndarray | None, list[dict]]:
        wins = list(self.windows)
        if self.pos % self.window:
            wins.append(self._partial)
        sur = np.concatenate(self._parts) if self.keep and self._parts else None
        starts = np.asarray(self.seg_starts, dtype=np.int64)
        bits = np.asarray(self.seg_bits, dtype=np.float64)
        rows = []
        for r in records:
            lo, ln = int(r.start), int(r.length)
            sel = (starts >= lo) & (starts < lo + ln)
            total = float(bits[sel].sum())
            rows.append({"name": r.name, "start": lo, "length": ln, "total_bits": total,
                         "bits_per_symbol": total / ln if ln else None})
        return np.asarray(wins, dtype=np.float64), sur, rows


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
        See :class:`CellPredictor`.
    length_hint:
        Length of the stream when known: hashed tables are then sized to about four
        rows per word they can receive (never above the cap), so short inputs stay small.
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
        A, b = alphabet.size, alphabet.bits
        if not (isinstance(smoothing, (int, float)) and smoothing > 0 and math.isfinite(smoothing)):
            raise ParameterError(f"The smoothing must be a positive number (e.g. 0.5), not {smoothing!r}.")
        if not (isinstance(learning_rate, (int, float)) and 0 <= learning_rate < 1):
            raise ParameterError(f"The learning rate must lie in [0, 1), not {learning_rate!r}.")
        self.reverse = _use_reverse(alphabet, reverse_complement)
        ds = _check_depths(depths if depths is not None else default_depths(alphabet, max_depth), alphabet, self.reverse)
        if self.reverse and ds[-1] > 31:
            raise ParameterError("Reverse-complement counting works up to depth 31; use smaller depths or turn it off.")
        self.depths = ds
        M = len(ds)
        self.packed = A <= 4
        row_bytes = 8 if self.packed else 2 * A + 6
        if max_cells is None:
            cap = min(DEFAULT_ONLINE_CELLS, max(DEFAULT_TABLE_BYTES // row_bytes, 1 << 12))
        else:
            cap = int(max_cells)
            if cap < M * K.BUCKET * 16:
                raise ParameterError(f"max_cells {cap} is too small for {M} depths; allow at least {M * K.BUCKET * 16}.")
        self.cells_cap = cap
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
        self.table_bytes = self.n_rows * row_bytes
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
        classes = [_depth_class(alphabet, d) for d in ds]
        self.alpha = np.array([smoothing / _ALPHA_DIV[c] for c in classes], dtype=np.float64)
        self.limit = np.array([_LIMITS[c] for c in classes], dtype=np.int64)
        self.logt = np.log(np.arange(K.LOG_TABLE, dtype=np.float64)[None, :] + self.alpha[:, None])
        self.lr = float(learning_rate)
        self.params = {
            "depths": list(ds),
            "smoothing": float(smoothing),
            "max_cells": cap,
            "learning_rate": self.lr,
            "reverse_complement": self.reverse,
        }
        self.rows = self.dense_rows() if not self.packed else (_aligned_zeros(self.n_rows, np.uint64),)
        self.weights = np.full((M + 1, M), min(1.0, 2.0 / M), dtype=np.float64)
        self.hist = np.zeros(2, dtype=np.uint64)
        self.seg = np.zeros(1, dtype=np.int64)
        self.stats = np.zeros(K.ST_SIZE, dtype=np.float64)
        self.calib = np.zeros((K.CALIB_BINS, 3), dtype=np.float64)

    def feed(self, codes: np.ndarray, starts: np.ndarray, surprisal: bool = False) -> np.ndarray | None:
        """Code one chunk (``starts``: segment starts inside it); returns its surprisals in bits if asked."""
        codes = np.ascontiguousarray(codes)
        if codes.dtype not in (np.uint8, np.uint32):
            codes = codes.astype(self.alphabet.code_dtype)
        starts = np.ascontiguousarray(starts, dtype=np.int64)
        sur = np.empty(codes.size if surprisal else 0, dtype=np.float32)
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
        return int(np.count_nonzero(self.rows[0] if self.packed else self.rows[3]))

    @property
    def length(self) -> int:
        return int(self.stats[K.ST_COUNT])

    def result(self, name: str, records=(), window: int = DEFAULT_WINDOW, window_bits=None, surprisal=None) -> PredictionResult:
        """Summary of everything fed so far."""
        n = self.length
        total = float(self.stats[K.ST_NATS] / math.log(2.0))
        return PredictionResult(
            mode="online",
            name=name,
            length=n,
            total_bits=total,
            bits_per_symbol=total / n if n else float("nan"),
            top1=float(self.stats[K.ST_TOP1] / n) if n else float("nan"),
            top3=float(self.stats[K.ST_TOP3] / n) if n else float("nan"),
            calibration_error=_ece(self.calib),
            brier=float(self.stats[K.ST_BRIER] / n) if n else float("nan"),
            calibration=_calibration_rows(self.calib),
            depths=self.depths,
            cells_cap=self.cells_cap,
            cells_stored=self.cells_stored(),
            evictions=int(self.stats[K.ST_EVICT]),
            table_bytes=self.table_bytes,
            reverse_complement=self.reverse,
            params=dict(self.params),
            records=tuple(records),
            window=window,
            window_bits=window_bits,
            surprisal=surprisal,
        )


# ------------------------------------------------------------ online mode
def baseline_orders(alphabet: Alphabet) -> int:
    """Largest order K of the Markov baseline (orders 0..K): ``b (K + 1) <= 22`` bits, at most 12."""
    return int(max(0, min(12, _BASELINE_BITS // alphabet.bits - 1, alphabet.max_depth - 1)))


def _cell_tables(wc, orders: Iterable[int], reverse: bool = False) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Cells (contexts of depth n) and their (cells, A) symbol counts from word counts, for each n."""
    a = wc.alphabet
    out = {}
    for n in orders:
        words, counts = wc.words(n + 1)
        words = np.ascontiguousarray(words, dtype=np.uint64)
        counts = np.ascontiguousarray(counts, dtype=np.int64)
        cells, cc = FK.group_cells(words, counts, a.bits, a.size)
        if reverse:
            rw = FK.revcomp_addresses(words, n + 1, a.bits)
            order = np.argsort(rw, kind="stable")
            rcells, rcc = FK.group_cells(rw[order], counts[order], a.bits, a.size)
            cells, merged = FK.merge_cells(cells, cc, rcells, rcc)
            cc = _to_u32(merged)
        out[n] = (cells, cc)
    return out


def _to_u32(counts: np.ndarray) -> np.ndarray:
    if counts.size and int(counts.max()) > np.iinfo(np.uint32).max:
        raise InputError("A cell was seen more than 4,294,967,295 times, beyond what a model stores; split the input.")
    return counts.astype(np.uint32)


def markov_online_baseline(wc) -> MarkovBaseline:
    """Best fixed-order adaptive KT model on a stream, order chosen in hindsight on the stream itself."""
    a = wc.alphabet
    K_b = min(baseline_orders(a), wc.depth - 1)
    tables = _cell_tables(wc, range(K_b + 1))
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
    src = _as_source(source)
    coder = OnlineCoder(src.alphabet, length_hint=_known_length(src), **params)
    if window is not None and (isinstance(window, bool) or int(window) < 1):
        raise ParameterError(f"The window must be a positive number of symbols, not {window!r}.")
    tally = _Tally(window or DEFAULT_WINDOW, keep_surprisal) if (window or keep_surprisal) else None
    for chunk in _chunks(src):
        sur = coder.feed(chunk.codes, chunk.starts, surprisal=tally is not None)
        if tally is not None:
            tally.add(sur, chunk.starts)
    name = getattr(src, "name", "stream")
    if tally is None:
        return coder.result(name, window=window or DEFAULT_WINDOW)
    wins, sur, recs = tally.finish(src.report.records)
    return coder.result(
        name, records=recs, window=window or DEFAULT_WINDOW, window_bits=wins if window else None, surprisal=sur
    )


def evaluate_online(
    source: Source,
    *,
    window: int = DEFAULT_WINDOW,
    keep_surprisal: bool = False,
    baselines: bool = True,
    **params,
) -> PredictionResult:
    """Online code length with per-window/per-record detail and both baselines from the same pass.

    The Markov baseline is the adaptive KT model of the best order on the
    stream itself (chosen in hindsight, orders ``0..K`` of :func:`baseline_orders`);
    the compressors see the same symbols (:class:`~fractalseq.predict._baselines.CompressorMeter`).
    """
    from fractalseq.words._counts import WordCounter

    src = _as_source(source)
    coder = OnlineCoder(src.alphabet, length_hint=_known_length(src), **params)
    if isinstance(window, bool) or int(window) < 1:
        raise ParameterError(f"The window must be a positive number of symbols, not {window!r}.")
    tally = _Tally(int(window), keep_surprisal)
    counter = WordCounter(src.alphabet, baseline_orders(src.alphabet) + 1) if baselines else None
    meter = CompressorMeter(src.alphabet) if baselines else None
    for chunk in _chunks(src):
        sur = coder.feed(chunk.codes, chunk.starts, surprisal=True)
        tally.add(sur, chunk.starts)
        if counter is not None:
            counter.add(chunk.codes, chunk.starts)
            meter.feed(chunk.codes)
    wins, sur, recs = tally.finish(src.report.records)
    res = coder.result(getattr(src, "name", "stream"), records=recs, window=int(window), window_bits=wins, surprisal=sur)
    if counter is not None and coder.length:
        wc = counter.finish()
        res = replace(res, baselines={"markov": markov_online_baseline(wc).to_dict(), "compressors": meter.result()})
    return res


# ------------------------------------------------------------- fitted mode
def _check_fitted(model: "CellPredictor") -> None:
    if not hasattr(model, "cells_"):
        raise ParameterError("This predictor is not fitted yet; call fit() or load a model file first.")


class CellPredictor:
    """Count-based next-symbol predictor on the cells of the encoding (scikit-learn style).

    Parameters
    ----------
    depths:
        Cell depths (symbols of context) to use; default: a ladder up to
        ``max_depth`` (:func:`default_depths`; 3, 6, 10, 14, 20 for DNA).
    max_depth:
        Deepest cell when ``depths`` is not given (default: about 40 bits of context, 20 for DNA).
    smoothing:
        Additive constant ``alpha`` of each cell's estimate ``(c_s + alpha) / (N + A alpha)``
        (0.5 = Krichevsky–Trofimov).  Online, cells deeper than ``A**n > 2**20`` use
        ``alpha / 4`` and beyond ``2**26`` ``alpha / 16``; fitted, ``A alpha`` is the
        smallest concentration ``beta_n`` tried (the grid is ``A alpha 2**k``, k = 0..17).
    discount:
        Fitted mode: absolute discount ``d`` of every count in the coarse-to-fine blend,
        ``"auto"`` (chosen per depth among 0, 0.25, 0.5, 0.75) or a number in [0, 1).
    max_cells:
        Memory cap.  Online: rows of the count tables (default 2**24, less for large
        alphabets so the tables stay under 256 MiB); fitted: cells kept after counting
        (default 2**23), the rarest cells of the deepest depths are pruned first.
    learning_rate:
        Online mode: step of the mixing-weight update.
    reverse_complement:
        ``"auto"`` (on for DNA/RNA), ``True`` or ``False``: also count each word read on the other strand
        (online: for cells of depth 5 and more, :data:`IR_MIN_DEPTH`; fitted: every depth).

    Attributes
    ----------
    alphabet_ : Alphabet
    depths_ : tuple of int
        Depths of the fitted cells (0 .. K for the Markov baseline, then the ladder).
    cells_ : dict of int to ndarray
        Sorted cell addresses per depth.
    counts_ : dict of int to ndarray
        ``(cells, A)`` symbol counts per depth.
    n_symbols_, n_segments_ : int
        Training symbols and segments.
    pruned_cells_ : int
        Cells dropped to respect ``max_cells``.
    reverse_complement_ : bool
    baseline_order_ : int
        Order of the fixed-order KT baseline, chosen on the training data.
    baseline_bits_ : dict of int to float
        Training bits per symbol of every candidate order.
    concentration_, discount_ : dict of int to float
        Blend parameters of every depth (leave-one-out choice).
    reader_ : dict
        How the training data were read (the ``reader`` argument of :meth:`fit`), e.g. numeric cut points.

    Examples
    --------
    >>> import numpy as np
    >>> from fractalseq.alphabet import dna
    >>> from fractalseq.stream import from_codes
    >>> train = from_codes(dna(), np.tile([0, 1, 2, 3], 1000))
    >>> model = CellPredictor(max_depth=4).fit(train)
    >>> model.predict_proba(["ACG"]).argmax(axis=1).tolist()
    [3]
    """

    def __init__(
        self,
        depths: Sequence[int] | None = None,
        max_depth: int | None = None,
        smoothing: float = 0.5,
        discount: float | str = "auto",
        max_cells: int | None = None,
        learning_rate: float = 0.002,
        reverse_complement: bool | str = "auto",
    ) -> None:
        self.depths = depths
        self.max_depth = max_depth
        self.smoothing = smoothing
        self.discount = discount
        self.max_cells = max_cells
        self.learning_rate = learning_rate
        self.reverse_complement = reverse_complement

    # -------------------------------------------------------- sklearn API
    @classmethod
    def _param_names(cls) -> tuple[str, ...]:
        """Names of the constructor's parameters, read from its signature."""
        sig = inspect.signature(cls.__init__)
        return tuple(n for n, p in sig.parameters.items() if n != "self" and p.kind == p.POSITIONAL_OR_KEYWORD)

    def get_params(self, deep: bool = True) -> dict:
        """Constructor parameters (introspected from ``__init__``, as scikit-learn does)."""
        return {name: getattr(self, name) for name in self._param_names()}

    def set_params(self, **params) -> "CellPredictor":
        """Set constructor parameters (unknown names raise :class:`ParameterError`); learned state is untouched until the next fit."""
        names = self._param_names()
        for k, v in params.items():
            if k not in names:
                raise ParameterError(f"CellPredictor has no parameter {k!r}; use one of {', '.join(names)}.", parameter=k)
            setattr(self, k, v)
        return self

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.get_params().items())
        return f"CellPredictor({args})"

    def _online_params(self) -> dict:
        return {k: v for k, v in self.get_params().items() if k != "discount"}

    def _reset(self) -> None:
        """Forget everything learned (attributes ending in ``_`` and the private index arrays)."""
        for name in [k for k in vars(self) if k.endswith("_") or k in _INDEX_ATTRS]:
            delattr(self, name)

    def _validate(self, alphabet: Alphabet) -> tuple[tuple[int, ...], bool]:
        s = self.smoothing
        if not (isinstance(s, (int, float)) and not isinstance(s, bool) and s > 0 and math.isfinite(s)):
            raise ParameterError(f"The smoothing must be a positive number (e.g. 0.5), not {s!r}.")
        d = self.discount
        if d != "auto" and not (isinstance(d, (int, float)) and not isinstance(d, bool) and 0 <= d < 1):
            raise ParameterError(f"The discount must be 'auto' or lie in [0, 1), not {d!r}.")
        if self.max_cells is not None and (isinstance(self.max_cells, bool) or int(self.max_cells) < 1):
            raise ParameterError(f"max_cells must be a positive number of cells, not {self.max_cells!r}.")
        reverse = _use_reverse(alphabet, self.reverse_complement)
        ladder = _check_depths(
            self.depths if self.depths is not None else default_depths(alphabet, self.max_depth), alphabet, reverse
        )
        return ladder, reverse

    # ---------------------------------------------------------------- fit
    def fit(self, source: Source, reader: dict | None = None) -> "CellPredictor":
        """Count the cells of a training stream (read chunk by chunk); returns ``self``.

        Parameters
        ----------
        source:
            The training data.
        reader:
            How the training data were read (numeric cut points, column, ...; the keyword
            options of :func:`fractalseq.sources.open_source`), kept as ``reader_`` and in the
            model file so that new data can be read the same way.  Default: nothing special.

        Every fit starts from scratch: all learned state of a previous fit is forgotten.
        """
        from fractalseq.words._counts import count_words

        self._reset()
        src = _as_source(source)
        ladder, _ = self._validate(src.alphabet)
        K_b = baseline_orders(src.alphabet)
        depth = max(max(ladder), K_b) + 1
        wc = count_words(src, depth)
        if wc.length == 0:
            raise InputError(f"{getattr(src, 'name', 'The input')} holds no symbols to learn from; check the input.")
        return self.fit_counts(wc, reader=reader)

    def fit_counts(self, counts, reader: dict | None = None) -> "CellPredictor":
        """Fit from :class:`~fractalseq.words._counts.WordCounts` (deep enough for every depth), e.g. one piece of a large input.

        ``reader`` is as in :meth:`fit`.  All learned state of a previous fit is forgotten first.
        """
        self._reset()
        if reader is not None and not isinstance(reader, dict):
            raise ParameterError(f"reader must be a dictionary of reader options, not {type(reader).__name__}.", parameter="reader")
        alphabet = counts.alphabet
        if counts.length == 0:
            raise InputError("The word counts hold no symbols to learn from; check the input.")
        ladder, reverse = self._validate(alphabet)
        K_b = baseline_orders(alphabet)
        fit_depths = tuple(sorted(set(range(K_b + 1)) | set(ladder)))
        if counts.depth < fit_depths[-1] + 1:
            raise ParameterError(
                f"Word counts of depth {counts.depth} cannot feed cells of depth {fit_depths[-1]}; count to depth {fit_depths[-1] + 1}."
            )
        tables = _cell_tables(counts, fit_depths, reverse)
        tables = {n: (c, _to_u32(cc)) for n, (c, cc) in tables.items()}
        self._install(alphabet, ladder, reverse, K_b, tables, int(counts.length), int(counts.segments), 0, reader)
        return self

    def _install(self, alphabet, ladder, reverse, K_b, tables, n_symbols, n_segments, pruned, reader=None) -> None:
        # reader options of the training data, JSON-ready (tuples as lists) as the model file keeps them
        self.reader_: dict = {k: (list(v) if isinstance(v, tuple) else v) for k, v in (reader or {}).items()}
        self.alphabet_ = alphabet
        self.ladder_ = tuple(ladder)
        self.reverse_complement_ = bool(reverse)
        self.baseline_max_order_ = int(K_b)
        self.n_symbols_ = int(n_symbols)
        self.n_segments_ = int(n_segments)
        cap = DEFAULT_FITTED_CELLS if self.max_cells is None else int(self.max_cells)
        tables, more = _prune(tables, K_b, cap)
        self.pruned_cells_ = int(pruned) + more
        self.max_cells_ = cap
        self.depths_ = tuple(sorted(tables))
        self.cells_ = {n: tables[n][0] for n in self.depths_}
        self.counts_ = {n: tables[n][1] for n in self.depths_}
        # baseline order chosen on the training data (closed form from the counts)
        strands = 2 if reverse else 1
        bits = kt_bits_by_order({k: tables[k] for k in range(K_b + 1)}, strands * self.n_symbols_, alphabet.size)
        per = {k: v / (strands * self.n_symbols_) for k, v in bits.items()}
        self.baseline_bits_ = per
        self.baseline_order_ = int(min(per, key=lambda k: (per[k], k)))
        self.concentration_, self.discount_ = _fit_blend(
            self.depths_, self.cells_, self.counts_, alphabet, float(self.smoothing), self.discount
        )
        self._build_index()

    def _build_index(self) -> None:
        a = self.alphabet_
        ds = self.depths_
        sizes = [self.cells_[n].size for n in ds]
        self._dstart = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
        self._addr = np.concatenate([self.cells_[n] for n in ds]).astype(np.uint64) if ds else np.zeros(0, np.uint64)
        self._counts = (
            np.concatenate([self.counts_[n] for n in ds]).astype(np.float64)
            if ds
            else np.zeros((0, a.size), np.float64)
        )
        self._depth_arr = np.array(ds, dtype=np.int64)
        self._beta = np.array([self.concentration_[n] for n in ds], dtype=np.float64)
        self._disc = np.array([self.discount_[n] for n in ds], dtype=np.float64)
        self._masks = np.array([(1 << (a.bits * n)) - 1 for n in ds], dtype=np.uint64)
        size = 1 << max(4, int(math.ceil(math.log2(max(2 * self._addr.size, 2)))))
        self._index = np.zeros(size, dtype=np.int64)
        FK.build_index(self._addr, self._dstart, self._depth_arr, self._index)

    @property
    def n_cells_(self) -> int:
        """Cells stored."""
        _check_fitted(self)
        return int(sum(c.size for c in self.cells_.values()))

    # -------------------------------------------------------------- merge
    def merge(self, other: "CellPredictor") -> "CellPredictor":
        """A new model whose counts are the sums of both (exact unless either was pruned)."""
        _check_fitted(self)
        _check_fitted(other)
        if not self.alphabet_.same_symbols(other.alphabet_):
            raise ModelFileError(
                f"Cannot merge models over different alphabets ({self.alphabet_.name} vs {other.alphabet_.name}); "
                "learn both with the same --alphabet."
            )
        if self.depths_ != other.depths_ or self.reverse_complement_ != other.reverse_complement_:
            raise ModelFileError("Cannot merge models with different cell depths or strand settings; learn both alike.")
        if self.reader_ != other.reader_:
            raise ModelFileError("Cannot merge models whose training data were read differently (numeric cut points, column); learn both alike.")
        tables = {}
        for n in self.depths_:
            addr, cnt = FK.merge_cells(self.cells_[n], self.counts_[n], other.cells_[n], other.counts_[n])
            tables[n] = (addr, _to_u32(cnt))
        out = CellPredictor(**self.get_params())
        out._install(
            self.alphabet_, self.ladder_, self.reverse_complement_, self.baseline_max_order_, tables,
            self.n_symbols_ + other.n_symbols_, self.n_segments_ + other.n_segments_,
            self.pruned_cells_ + other.pruned_cells_, self.reader_,
        )
        return out

    # ------------------------------------------------------------ predict
    def _contexts(self, contexts) -> tuple[np.ndarray, np.ndarray]:
        a = self.alphabet_
        parts = []
        for ctx in contexts:
            if isinstance(ctx, str):
                try:
                    codes = a.encode(ctx) if a.single_characters else a.encode(ctx.split())
                except InputError as exc:
                    raise InputError(f"The context {ctx!r} holds a symbol outside the {a.name} alphabet; {exc}") from None
            else:
                codes = np.asarray(ctx, dtype=np.int64)
                if codes.ndim != 1 or (codes.size and (codes.min() < 0 or codes.max() >= a.size)):
                    raise InputError(f"Context codes must be a list of integers in 0..{a.size - 1}.")
            parts.append(np.asarray(codes, dtype=np.int64)[-(a.max_depth - 1) :] if len(codes) else np.zeros(0, np.int64))
        offsets = np.zeros(len(parts) + 1, dtype=np.int64)
        offsets[1:] = np.cumsum([p.size for p in parts])
        flat = np.concatenate(parts) if parts else np.zeros(0, np.int64)
        return flat, offsets

    def predict_proba(self, contexts) -> np.ndarray:
        """Probabilities of every next symbol after each context.

        Parameters
        ----------
        contexts:
            A sequence of contexts, each a string of symbols (space-separated for
            multi-character symbols) or a sequence of codes.  Only the last
            ``max(depths_)`` symbols matter.

        Returns
        -------
        numpy.ndarray
            ``(len(contexts), A)``; each row sums to one.
        """
        return self._proba(contexts)[0]

    def _proba(self, contexts) -> tuple[np.ndarray, np.ndarray]:
        _check_fitted(self)
        if isinstance(contexts, str):
            contexts = [contexts]
        flat, offsets = self._contexts(contexts)
        m = offsets.size - 1
        out = np.zeros((m, self.alphabet_.size), dtype=np.float64)
        deepest = np.zeros(m, dtype=np.int64)
        FK.fitted_proba(
            flat, offsets, self.alphabet_.size, self.alphabet_.bits, self._depth_arr, self._masks, self._dstart,
            self._addr, self._counts, self._index, self._beta, self._disc, out, deepest,
        )
        return out, deepest

    def next_symbols(self, context, top: int = 5) -> list[dict]:
        """The ``top`` most likely next symbols after one context, with probabilities and the deepest cell's counts."""
        p, deepest = self._proba([context])
        p = p[0]
        order = np.lexsort((np.arange(p.size), -p))[: max(1, int(top))]
        di = int(deepest[0])
        depth = self.depths_[di] if di >= 0 else None
        counts = None
        if di >= 0:
            flat, offsets = self._contexts([context])
            b = self.alphabet_.bits
            a_ = 0
            for c in flat[max(0, flat.size - depth) :] if depth else []:
                a_ = (a_ << b) | int(c)
            cells = self.cells_[depth]
            i = int(np.searchsorted(cells, np.uint64(a_)))
            counts = self.counts_[depth][i] if i < cells.size and cells[i] == a_ else None
        return [
            {
                "symbol": self.alphabet_.symbols[int(s)],
                "probability": float(p[s]),
                "count_in_deepest_cell": None if counts is None else int(counts[s]),
                "deepest_cell_depth": depth,
            }
            for s in order
        ]

    # -------------------------------------------------------------- score
    def _check_alphabet(self, alphabet: Alphabet, where: str) -> None:
        if not self.alphabet_.same_symbols(alphabet):
            raise ModelFileError(
                f"The model was learned on the {self.alphabet_.name} alphabet ({self.alphabet_.describe_symbols(6)}) "
                f"but {where} uses {alphabet.name} ({alphabet.describe_symbols(6)}); "
                + self._reading_hint()
            )

    def _reading_hint(self) -> str:
        """How to read data the way the training data were read (for the mismatch message)."""
        name = self.alphabet_.name
        if name.startswith(("threshold", "quantile", "ordinal")):
            return "read it with the model's numeric settings (leave out --bins/--thresholds/--ordinal) or learn a model on this kind of data."
        if name == "templates":
            return "read it as a log (--format log) or learn a model on this kind of data."
        return f"read it with --alphabet {name if name != 'learned' else 'symbols:...'} or learn a model on this kind of data."

    def score(self, source: Source) -> float:
        """Mean log2-likelihood per symbol of held-out data under the fitted model (higher is better; scikit-learn's convention).

        It is ``-bits_per_symbol(source)``; :meth:`evaluate` gives the full report.
        """
        return -self.bits_per_symbol(source)

    def bits_per_symbol(self, source: Source) -> float:
        """Code length of held-out data under the fitted model, in bits per symbol (lower is better)."""
        return self.evaluate(source, baselines=False, window=None).bits_per_symbol

    def evaluate(
        self,
        source: Source,
        *,
        window: int | None = DEFAULT_WINDOW,
        keep_surprisal: bool = False,
        baselines: bool = True,
    ) -> PredictionResult:
        """Score held-out data with the fitted model: code length, accuracy, calibration and baselines."""
        from fractalseq.words._counts import WordCounter

        _check_fitted(self)
        src = _as_source(source)
        name = getattr(src, "name", "stream")
        self._check_alphabet(src.alphabet, name)
        a = self.alphabet_
        stats = np.zeros(K.ST_SIZE)
        calib = np.zeros((K.CALIB_BINS, 3))
        hist = np.zeros(2, np.uint64)
        seg = np.zeros(1, np.int64)
        tally = _Tally(window or DEFAULT_WINDOW, keep_surprisal) if (window or keep_surprisal) else None
        counter = WordCounter(a, self.baseline_order_ + 1) if baselines else None
        meter = CompressorMeter(a) if baselines else None
        for chunk in _chunks(src):
            codes = np.ascontiguousarray(chunk.codes)
            st = np.ascontiguousarray(chunk.starts, dtype=np.int64)
            sur = np.empty(codes.size if tally is not None else 0, dtype=np.float32)
            FK.fitted_score(
                codes, st, a.size, a.bits, self._depth_arr, self._masks, self._dstart, self._addr, self._counts,
                self._index, self._beta, self._disc, hist, seg, stats, calib, sur,
            )
            if tally is not None:
                tally.add(sur, st)
            if counter is not None:
                counter.add(codes, st)
                meter.feed(codes)
        n = int(stats[K.ST_COUNT])
        total = float(stats[K.ST_NATS] / math.log(2.0))
        wins, sur, recs = tally.finish(src.report.records) if tally is not None else (None, None, [])
        res = PredictionResult(
            mode="fitted",
            name=name,
            length=n,
            total_bits=total,
            bits_per_symbol=total / n if n else float("nan"),
            top1=float(stats[K.ST_TOP1] / n) if n else float("nan"),
            top3=float(stats[K.ST_TOP3] / n) if n else float("nan"),
            calibration_error=_ece(calib),
            brier=float(stats[K.ST_BRIER] / n) if n else float("nan"),
            calibration=_calibration_rows(calib),
            depths=self.depths_,
            cells_cap=self.max_cells_,
            cells_stored=self.n_cells_,
            evictions=self.pruned_cells_,
            table_bytes=int(self._addr.nbytes + sum(c.nbytes for c in self.counts_.values()) + self._index.nbytes),
            reverse_complement=self.reverse_complement_,
            params={**self.get_params(), "depths": list(self.ladder_)},
            records=tuple(recs),
            window=int(window or DEFAULT_WINDOW),
            window_bits=wins if window else None,
            surprisal=sur,
        )
        if counter is not None and n:
            wc = counter.finish()
            k = self.baseline_order_
            cells, cc = _cell_tables(wc, [k])[k]
            bits = kt_bits_after_training(self.cells_[k], self.counts_[k], cells, cc, n, a.size)
            hind = markov_online_baseline(wc) if wc.depth - 1 >= 0 else None
            mb = MarkovBaseline(
                k, bits / n, "model training data", dict(self.baseline_bits_),
                None if hind is None else hind.order, None if hind is None else hind.bits_per_symbol,
            )
            res = replace(res, baselines={"markov": mb.to_dict(), "compressors": meter.result()})
        return res

    def score_online(self, source: Source, **kwargs) -> PredictionResult:
        """Online code length of a stream with this predictor's parameters (no fitting needed); see :func:`evaluate_online`."""
        return evaluate_online(source, **kwargs, **self._online_params())

    # ---------------------------------------------------------- persistence
    def to_state(self) -> ModelState:
        """The fitted model as a plain state (JSON-ready header and cell tables) for :mod:`fractalseq.predict._modelfile`."""
        _check_fitted(self)
        arrays: dict[str, np.ndarray] = {}
        for n in self.depths_:
            arrays[f"cells_{n}"] = np.ascontiguousarray(self.cells_[n], dtype=np.uint64)
            arrays[f"counts_{n}"] = np.ascontiguousarray(self.counts_[n], dtype=np.uint32)
        params = {k: (list(v) if isinstance(v, (tuple, np.ndarray)) else v) for k, v in self.get_params().items()}
        if isinstance(params.get("depths"), list):
            params["depths"] = [int(d) for d in params["depths"]]
        header = {
            "alphabet": self.alphabet_.to_dict(),
            "params": params,
            "ladder": list(self.ladder_),
            "depths": list(self.depths_),
            "reverse_complement": bool(self.reverse_complement_),
            "training": {
                "symbols": self.n_symbols_,
                "segments": self.n_segments_,
                "pruned_cells": self.pruned_cells_,
                "max_cells": self.max_cells_,
            },
            "baseline": {
                "max_order": self.baseline_max_order_,
                "order": self.baseline_order_,
                "bits_per_symbol_by_order": {str(k): v for k, v in self.baseline_bits_.items()},
            },
            # how the training data were read (numeric cut points, column), so new data are read the same way
            "reader": dict(self.reader_),
        }
        return ModelState(header=header, arrays=arrays)

    @classmethod
    def from_state(cls, state: ModelState) -> "CellPredictor":
        """Rebuild a fitted model from a state written by :meth:`to_state` (as read by :func:`~fractalseq.predict._modelfile.read_state`)."""
        where = state.origin or "The model state"
        header = state.header
        try:
            alphabet = Alphabet.from_dict(header["alphabet"])
            depths = [int(n) for n in header["depths"]]
            ladder = tuple(int(n) for n in header["ladder"])
            params = dict(header["params"])
            training = header["training"]
            K_b = int(header["baseline"]["max_order"])
            reverse = bool(header["reverse_complement"])
            n_symbols, n_segments = int(training["symbols"]), int(training["segments"])
            pruned = int(training.get("pruned_cells", 0))
        except (KeyError, TypeError, ValueError, InputError):
            raise ModelFileError(f"{where} has an incomplete model header; learn the model again.") from None
        reader = header.get("reader", {})
        if not isinstance(reader, dict):
            raise ModelFileError(f"{where} has a damaged reader section in its header; learn the model again.")
        tables = state.tables(depths, alphabet.size)
        known = set(cls().get_params())
        model = cls(**{k: v for k, v in params.items() if k in known})
        try:
            model._install(alphabet, ladder, reverse, K_b, tables, n_symbols, n_segments, 0, reader)
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(f"{where} does not describe a consistent model ({exc}); learn the model again.") from None
        model.pruned_cells_ = pruned  # cells pruned when the model was learned (the file keeps the rest)
        return model

    def save(self, path, force: bool = False):
        """Write the fitted model (see :mod:`fractalseq.predict._modelfile`); refuses to overwrite without ``force``."""
        return write_state(self.to_state(), path, force=force)

    @classmethod
    def load(cls, path) -> "CellPredictor":
        """Read a model written by :meth:`save` (checksums verified, never uses pickle)."""
        return cls.from_state(read_state(path))


def save_model(model: CellPredictor, path, force: bool = False):
    """Write a fitted :class:`CellPredictor` to ``path`` (see :meth:`CellPredictor.save`)."""
    return model.save(path, force=force)


def load_model(path) -> CellPredictor:
    """Read a model file written by :func:`save_model` (see :meth:`CellPredictor.load`)."""
    return CellPredictor.load(path)


def _fit_blend(depths, cells, counts, alphabet: Alphabet, alpha: float, discount) -> tuple[dict, dict]:
    """Concentration and discount of every depth, chosen by leave-one-out likelihood of the training counts.

    Depth by depth from the coarsest, each observation is predicted from its
    cell with itself removed, blended with the parent's full estimate; the
    pair ``(beta, d)`` with the highest total log-likelihood wins (ties: the
    smaller).  A pure function of the counts, so merged models get exactly
    the parameters of a model fitted on everything.
    """
    A, b = alphabet.size, alphabet.bits
    betas: dict[int, float] = {}
    discs: dict[int, float] = {}
    grid_b = [A * alpha * 2.0**k for k in range(_BETA_STEPS)]
    grid_d = list(_DISCOUNTS) if discount == "auto" else [float(discount)]
    prev_cells = prev_p = None
    prev_depth = 0
    for n in depths:
        c = counts[n].astype(np.float64)
        C = c.shape[0]
        if prev_cells is None or C == 0:
            pp = np.full(c.shape, 1.0 / A, dtype=np.float64)
        else:
            par = cells[n] & np.uint64((1 << (b * prev_depth)) - 1)
            rows = np.minimum(np.searchsorted(prev_cells, par), max(prev_cells.size - 1, 0))
            found = prev_cells[rows] == par
            pp = prev_p[rows].astype(np.float64)
            pp[~found] = 1.0 / A
        step = max(1, -(-C // _GRID_CELLS))
        cs, ps = c[::step], pp[::step]
        N = cs.sum(axis=1, keepdims=True)
        u = (cs > 0).sum(axis=1, keepdims=True)
        seen = cs > 0
        cl = np.where(seen, cs - 1.0, 0.0)
        ul = u - (cs == 1)
        best = (-np.inf, grid_b[0], grid_d[0])
        for d in grid_d:
            kept = np.maximum(cl - d, 0.0)
            for beta in grid_b:
                with np.errstate(divide="ignore"):
                    q = (kept + (beta + d * ul) * ps) / (N - 1.0 + beta)
                    ll = float(np.sum(cs[seen] * np.log(q[seen])))
                if ll > best[0]:
                    best = (ll, beta, d)
        _, beta, d = best
        betas[n], discs[n] = float(beta), float(d)
        if C:
            Nf = c.sum(axis=1, keepdims=True)
            uf = (c > 0).sum(axis=1, keepdims=True)
            prev_p = ((np.maximum(c - d, 0.0) + (beta + d * uf) * pp) / (Nf + beta)).astype(np.float32)
            prev_cells = cells[n]
            prev_depth = n
    return betas, discs


def _prune(tables: dict, K_b: int, cap: int) -> tuple[dict, int]:
    """Drop the rarest cells of the deepest depths (beyond the baseline orders) until exactly ``cap`` remain.

    Cells with a total of at most 1 go first, deepest depth first, then at most
    2, 4, 8...; within the last class cut, cells are dropped in the order of a
    hash of their address.  A cell never outlives its coarser parent (whose
    total is at least as large).
    """
    total = sum(t[0].size for t in tables.values())
    if total <= cap:
        return tables, 0
    keep_fixed = sum(tables[n][0].size for n in tables if n <= K_b)
    if keep_fixed > cap:
        raise ParameterError(
            f"The cells up to depth {K_b} alone number {keep_fixed}; raise max_cells to at least {keep_fixed}."
        )
    deep = sorted((n for n in tables if n > K_b), reverse=True)
    tables = dict(tables)
    dropped = 0
    threshold = 1
    while total > cap:
        for n in deep:
            cells, counts = tables[n]
            tot = counts.sum(axis=1, dtype=np.int64)
            keep = tot > threshold
            gone = int(cells.size - keep.sum())
            if gone > total - cap:
                # the last class is cut in hash order (deterministic, no bias toward any address)
                rare = np.flatnonzero(~keep)
                order = np.argsort(FK.hash_cells(cells[rare], n), kind="stable")
                keep[rare[order[: gone - (total - cap)]]] = True
                gone = total - cap
            if gone:
                tables[n] = (cells[keep], counts[keep])
                total -= gone
                dropped += gone
            if total <= cap:
                break
        threshold = threshold * 2 if threshold < (1 << 40) else threshold
        if all(tables[n][0].size == 0 for n in deep):
            break
    return tables, dropped

"""Results of the predictor: the code length and evaluation of one stream, and their parts.

Every result derives from :class:`fractalseq.results.Result`, so its JSON form
(``to_dict``) is generated from its fields; the keys are those of the
``score --json`` document (``top1_accuracy``, ``expected_calibration_error``,
``memory.evictions``...).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from fractalseq.predict._kernel_tools import (
    CALIB_BINS,
    ST_BRIER,
    ST_COUNT,
    ST_NATS,
    ST_TOP1,
    ST_TOP3,
)
from fractalseq.results import Result

#: Default window (symbols) of the per-window report.
DEFAULT_WINDOW = 10_000
#: Default number of most surprising windows listed in a result.
DEFAULT_TOP_WINDOWS = 5


@dataclass(frozen=True)
class CalibrationBin(Result):
    """One bin of the top-1 confidence: its bounds, symbols in it, their mean confidence and accuracy (None when empty)."""

    low: float
    high: float
    symbols: int
    mean_confidence: float | None
    accuracy: float | None


@dataclass(frozen=True)
class RecordScore(Result):
    """Code length of one record (e.g. a FASTA record) of a scored stream."""

    name: str
    start: int
    length: int
    total_bits: float
    bits_per_symbol: float | None


@dataclass(frozen=True)
class SurprisingWindow(Result):
    """A window with a high code length: its span, bits per symbol and the record it starts in."""

    start: int
    end: int
    bits_per_symbol: float
    record: str | None
    #: file coordinates of a line-oriented input (``first_line``/``last_line``, ``first_row``...), merged into the JSON form
    coordinates: dict = field(default_factory=dict, compare=False, metadata={"json": False})

    def to_dict(self) -> dict:
        """The window's JSON form: ``start``, ``end`` (symbols, end exclusive), bits, record, then its file coordinates."""
        return {**super().to_dict(), **self.coordinates}


@dataclass(frozen=True)
class OnlineMemory(Result):
    """Memory of the online tables: row cap, rows in use, cells replaced in full buckets, bytes."""

    cells_cap: int
    cells_stored: int
    evictions: int
    table_bytes: int


@dataclass(frozen=True)
class FittedMemory(Result):
    """Memory of a fitted model: cap on cells kept, cells stored, cells pruned when learning, bytes."""

    cells_cap: int
    cells_stored: int
    cells_pruned: int
    table_bytes: int


@dataclass(frozen=True)
class PredictionResult(Result):
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
    top1_accuracy, top3_accuracy:
        Fraction of symbols that were the most likely / among the three most likely predictions.
    expected_calibration_error:
        Expected calibration error of the top-1 confidence over :data:`~fractalseq.predict._kernel_tools.CALIB_BINS`
        equal-width bins (mean absolute gap between confidence and accuracy, weighted by bin size).
    brier:
        Mean Brier score (squared error of the probability vector).
    calibration:
        Per bin: lower and upper confidence, symbols, mean confidence, accuracy.
    depths:
        Cell depths used.
    memory:
        :class:`OnlineMemory` (online) or :class:`FittedMemory` (fitted).
    reverse_complement:
        Whether reverse-complement words were counted too.
    params:
        Parameters of the predictor.
    records:
        Per record (e.g. FASTA record): name, start, length, bits.
    window:
        Window size (symbols) of ``window_bits``.
    most_surprising_windows:
        The windows with the highest bits per symbol (full windows first), best first.
    baselines:
        Set by :func:`~fractalseq.predict._online.evaluate_online` / :meth:`~fractalseq.predict._predictor.CellPredictor.evaluate`:
        ``markov`` (a :class:`~fractalseq.predict._baselines.MarkovBaseline` as a dict) and ``compressors``
        (bits per symbol of lzma/bz2/zlib on the symbols as text and packed).
    window_bits:
        Code length (bits) of each window (the last one may be shorter); not in the JSON form.
    surprisal:
        Bits of every position when asked for (``keep_surprisal=True``), else ``None``; not in the JSON form.
    """

    mode: str
    name: str
    length: int
    total_bits: float
    bits_per_symbol: float
    top1_accuracy: float
    top3_accuracy: float
    expected_calibration_error: float
    brier: float
    calibration: tuple[CalibrationBin, ...]
    depths: tuple[int, ...]
    memory: OnlineMemory | FittedMemory
    reverse_complement: bool
    params: dict
    records: tuple[RecordScore, ...] = ()
    window: int = DEFAULT_WINDOW
    most_surprising_windows: tuple[SurprisingWindow, ...] = ()
    baselines: dict = field(default_factory=dict)
    window_bits: np.ndarray | None = field(default=None, repr=False, compare=False, metadata={"json": False})
    surprisal: np.ndarray | None = field(default=None, repr=False, compare=False, metadata={"json": False})


def surprising_windows(window_bits, window: int, length: int, records, top: int) -> tuple[SurprisingWindow, ...]:
    """The ``top`` windows with the highest bits per symbol (full windows preferred), best first."""
    if window_bits is None or np.asarray(window_bits).size == 0 or top <= 0:
        return ()
    wb = np.asarray(window_bits, dtype=np.float64)
    lens = np.full(wb.size, window, dtype=np.int64)
    lens[-1] = length - window * (wb.size - 1)
    rate = wb / np.maximum(lens, 1)
    full = lens >= min(window, length)
    order = np.lexsort((np.arange(wb.size), -rate, ~full))
    out = []
    for i in order[:top]:
        start = int(i * window)
        where = next((r.name for r in records if r.start <= start < r.start + r.length), None)
        out.append(SurprisingWindow(start, int(start + lens[i]), float(rate[i]), where))
    return tuple(out)


def calibration_bins(calib: np.ndarray) -> tuple[CalibrationBin, ...]:
    """The calibration table (count, summed confidence, hits per bin) as :class:`CalibrationBin` rows."""
    B = calib.shape[0]
    rows = []
    for k in range(B):
        n, c, h = calib[k]
        rows.append(CalibrationBin(k / B, (k + 1) / B, int(n), float(c / n) if n else None, float(h / n) if n else None))
    return tuple(rows)


def expected_calibration_error(calib: np.ndarray) -> float:
    """Mean |accuracy - confidence| over the bins, weighted by their sizes (NaN when nothing was scored)."""
    total = calib[:, 0].sum()
    if total == 0:
        return float("nan")
    gap = np.abs(calib[:, 2] - calib[:, 1])  # |hits - summed confidence| per bin = n |acc - conf|
    return float(gap.sum() / total)


def prediction_result(
    mode: str,
    name: str,
    stats: np.ndarray,
    calib: np.ndarray,
    *,
    depths,
    memory: OnlineMemory | FittedMemory,
    reverse_complement: bool,
    params: dict,
    records=(),
    window: int = DEFAULT_WINDOW,
    window_bits=None,
    surprisal=None,
    top_windows: int = DEFAULT_TOP_WINDOWS,
) -> PredictionResult:
    """A :class:`PredictionResult` from the kernels' running totals (``stats``) and calibration table."""
    n = int(stats[ST_COUNT])
    total = float(stats[ST_NATS] / math.log(2.0))
    recs = tuple(records)
    return PredictionResult(
        mode=mode,
        name=name,
        length=n,
        total_bits=total,
        bits_per_symbol=total / n if n else float("nan"),
        top1_accuracy=float(stats[ST_TOP1] / n) if n else float("nan"),
        top3_accuracy=float(stats[ST_TOP3] / n) if n else float("nan"),
        expected_calibration_error=expected_calibration_error(calib),
        brier=float(stats[ST_BRIER] / n) if n else float("nan"),
        calibration=calibration_bins(calib),
        depths=tuple(int(d) for d in depths),
        memory=memory,
        reverse_complement=bool(reverse_complement),
        params=dict(params),
        records=recs,
        window=int(window),
        most_surprising_windows=surprising_windows(window_bits, int(window), n, recs, top_windows),
        window_bits=window_bits,
        surprisal=surprisal,
    )


__all__ = [
    "CALIB_BINS", "CalibrationBin", "DEFAULT_TOP_WINDOWS", "DEFAULT_WINDOW", "FittedMemory", "OnlineMemory",
    "PredictionResult", "RecordScore", "SurprisingWindow", "prediction_result",
]

"""Complexity figures in sliding windows along a stream, and their change points.

For windows ``[s, s + W)`` with ``s = 0, S, 2S, ...`` (full windows only),
the figures are computed from the n-words starting in the window (words do
not cross segment breaks):

``entropy_rate``
    Conditional entropy of the next symbol given the previous ``n - 1``,
    ``H_n - H_{n-1}`` of the window's word table, with the Miller–Madow
    correction ``(K_n - K_{n-1}) / (2N)`` (Miller 1955), in bits per symbol.
``D0``
    Box-counting dimension at depth n: ``log2(distinct n-words) / (n log2(1/k))``
    (the occupied boxes of side ``k**n`` are the distinct n-words).
``surprise``
    Mean code length of the window's symbols under the online count
    predictor run once along the whole stream (:mod:`fractalseq.predict._predictor`),
    bits per symbol: low where the stream repeats what it has seen.

A window pass is one numba kernel that updates the word and context tables
as the window slides (O(1) per symbol).  Change points are found on the
standardised figures by PELT with a BIC-like penalty
(:mod:`fractalseq.compare._changepoint`); each segment is listed as an interval with
its mean figures, and segments whose entropy rate lies far below the
stream's typical value are flagged as low-complexity (repeats, low-complexity
regions; in logs, stretches dominated by few templates).

Genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from fractalseq import __version__
from fractalseq.compare._changepoint import Segmentation, segment_series
from fractalseq.entropy._depth import ordinal_possible_words
from fractalseq.errors import ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.results import CAUTION_GENERAL, Result, caution_for, is_log_alphabet
from fractalseq.stream import Positions, SymbolArray
from fractalseq.compare._scan_pieces import split_window_counts, surprise_item, surprise_series, surprise_task  # noqa: F401 (surprise_series: callers import it from here)
from fractalseq.compare._window_kernel import window_counts

CAUTION = CAUTION_GENERAL
#: Templates named per segment of a log scan (the most frequent first).
TOP_TEMPLATES = 3
FIGURES: tuple[str, ...] = ("entropy_rate", "D0", "surprise")
#: Automatic depth: the window must hold this many words per possible word.
WORDS_PER_CELL = 20
#: Largest word table of the window kernel (address bits).
MAX_TABLE_BITS = 26
#: A segment is low-complexity when its entropy rate is this many noise scales below the median window.
LOW_SCALES = 5.0


def choose_scan_depth(alphabet_size: int, window: int, max_depth: int, order: int = 0, delay: int = 1) -> int:
    """Largest n with ``possible n-words * 20 <= window`` (at least 1, at most ``max_depth``).

    Possible n-words are ``A**n``; for a stream of ordinal patterns of order ``m`` (``order``) and
    delay ``tau`` they are ``m!**min(n, tau) * m**max(n - tau, 0)`` (consecutive patterns overlap),
    and the depth is at least ``tau + 1``: the entropy rate at depth ``n`` conditions on ``n - 1``
    patterns, and only the pattern ``tau`` steps back shares values with the next one, so shallower
    depths give the entropy of single patterns (up to ``log2 m!``), not a per-step rate (up to
    ``log2 m``).
    """
    if order:
        lowest = min(int(delay) + 1, max_depth)
        n = lowest
        while n < max_depth and ordinal_possible_words(order, n + 1, delay) * WORDS_PER_CELL <= window:
            n += 1
        return n
    n = 1
    while n < max_depth and float(alphabet_size) ** (n + 1) * WORDS_PER_CELL <= window:
        n += 1
    return n


#: Largest word table (address bits) the automatic depth of a log scan tries (2**22 cells of 8 bytes, twice).
EVIDENCE_TABLE_BITS = 22


def observed_scan_depth(arr: SymbolArray, window: int, step: int) -> int:
    """Automatic depth of a log scan, from the words the windows hold instead of the ``A**n`` possible ones.

    A log's alphabet is its template table (often dozens to thousands of templates), and a log uses few
    of the ``A**n`` words those could make, so the fixed rule (:func:`choose_scan_depth`) stops at
    ``n = 1`` and the entropy-rate figure becomes the entropy of single templates.  As the profile does
    (:func:`fractalseq.entropy._depth.evidence_depth`), the depth is taken from the observed words: the
    largest ``n`` such that every depth up to ``n`` has the median window seeing its distinct n-words
    ``WORDS_PER_CELL`` (20) times on average (``20 * K_n <= N_n``), never shallower than the fixed rule,
    at most the alphabet's deepest word and ``EVIDENCE_TABLE_BITS`` of table.
    """
    T = len(arr)
    bits = int(arr.alphabet.bits)
    n_windows = (T - window) // step + 1
    n = choose_scan_depth(arr.alphabet.size, window, arr.alphabet.max_depth)
    k = 2
    while k < window and k <= arr.alphabet.max_depth and bits * k <= EVIDENCE_TABLE_BITS:
        N, Kw, _, _, _ = window_counts(arr.codes, arr.starts, k, bits, int(window), int(step), int(n_windows))
        held = np.count_nonzero((N > 0) & (Kw * WORDS_PER_CELL <= N))
        if 2 * held < n_windows:  # the median window does not see its n-words often enough
            break
        n = max(n, k)
        k += 1
    return n


def ordinal_shape(arr: SymbolArray) -> tuple[int, int]:
    """``(order m, delay tau)`` when ``arr`` holds ordinal patterns (alphabet ``ordinal<m>`` of ``m!`` symbols), else ``(0, 1)``."""
    hit = re.fullmatch(r"ordinal(\d+)", arr.alphabet.name or "")
    if hit is None or not 2 <= int(hit.group(1)) <= 8 or arr.alphabet.size != math.factorial(int(hit.group(1))):
        return 0, 1
    extra = getattr(getattr(arr, "report", None), "extra", None) or {}
    try:
        delay = max(int(dict(extra.get("numeric", {})).get("delay", 1)), 1)
    except (TypeError, ValueError):
        delay = 1
    return int(hit.group(1)), delay


#: What each window figure is (the ``figures`` entry of the ``scan --json`` document).
FIGURE_DEFINITIONS: dict[str, str] = {
    "entropy_rate": "conditional entropy H_n - H_{n-1} (Miller-Madow), bits/symbol",
    "D0": "log2(distinct n-words) / (n log2(1/k))",
    "surprise": "mean online predictor code length, bits/symbol",
}


@dataclass(frozen=True, eq=False)
class ScanResult(Result):
    """Window figures, change points and intervals of one stream; :meth:`to_dict` is the ``scan --json`` document.

    Attributes
    ----------
    name, length, window, step, depth, ratio:
        What was scanned and how.
    starts:
        Window start positions (in the JSON under ``windows.start``).
    series:
        Figure name -> per-window values (in the JSON under ``windows``).
    segmentation:
        Change points (indices into the windows; in the JSON under ``change_points``).
    intervals:
        One dict per segment: ``start``, ``end`` (symbol positions), window
        count, mean figures, and ``low_complexity``.
    low_complexity:
        The low-complexity regions: runs of low-complexity segments, edges refined to whole windows.
    records:
        Records (e.g. FASTA records) of the stream, for orientation.
    notes:
        Sentences on limits and left-out figures.
    read_notes:
        What the reader reported (lines cut, Latin-1 lines, junk bytes and blank lines skipped, symbols left out).
    unit, positions:
        The input's own unit (``symbol``; ``line`` for event logs, ``row`` for numeric
        columns) and, for line-oriented inputs, where each symbol sits in the file
        (:class:`~fractalseq.stream.Positions`).  With positions, intervals and low-complexity
        regions carry ``first_<unit>`` and ``last_<unit>`` (file coordinates of their first and
        last symbol; ``first_time``/``last_time`` with a time column), ``windows`` carries
        ``first_<unit>`` and ``last_<unit>`` per window, and ``change_points`` the ``<unit>s``
        at the change positions.  Log intervals also name their most frequent ``templates``.
    windows, change_points, figures:
        Derived for the JSON form: per-window values with their starts, the
        segmentation with the change positions, and what each figure is (:data:`FIGURE_DEFINITIONS`).
    caution:
        The caution that fits the input (logs, genomes, or both in general).
    command, fractalseq:
        The document's kind and the package version.
    """

    name: str
    length: int
    window: int
    step: int
    depth: int
    ratio: float
    starts: np.ndarray = field(metadata={"json": False})
    series: dict[str, np.ndarray] = field(metadata={"json": False})
    segmentation: Segmentation = field(metadata={"json": False})
    intervals: tuple[dict, ...]
    low_complexity: tuple[dict, ...] = ()
    records: tuple[dict, ...] = ()
    notes: tuple[str, ...] = ()
    read_notes: tuple[str, ...] = ()
    unit: str = "symbol"
    positions: Positions | None = field(default=None, repr=False, metadata={"json": False})
    windows: dict = field(init=False)
    change_points: dict = field(init=False)
    figures: dict = field(init=False)
    command: str = field(default="scan", init=False)
    fractalseq: str = field(default=__version__, init=False)
    caution: str = CAUTION

    def __post_init__(self) -> None:
        windows: dict = {"start": self.starts}
        change_points: dict = {**self.segmentation.to_dict(), "positions": self.change_positions()}
        pos = self.positions
        if pos is not None and len(pos) == self.length and self.starts.size:
            u = pos.unit
            windows[f"first_{u}"] = pos.values[self.starts]
            windows[f"last_{u}"] = pos.values[np.minimum(self.starts + self.window - 1, self.length - 1)]
            change_points[f"{u}s"] = [pos.at(int(round(p))) for p in change_points["positions"]]
        derived = {
            "windows": {**windows, **self.series},
            "change_points": change_points,
            "figures": dict(FIGURE_DEFINITIONS),
            "intervals": tuple(self.intervals),
            "low_complexity": tuple(self.low_complexity),
            "records": tuple(self.records),
            "notes": tuple(self.notes),
            "read_notes": tuple(self.read_notes),
        }
        for name, value in derived.items():
            object.__setattr__(self, name, value)

    @property
    def centers(self) -> np.ndarray:
        """Window centres (symbol positions)."""
        return self.starts + self.window / 2.0

    def change_positions(self) -> list[float]:
        """Symbol positions of the change points (between two window centres)."""
        return [float(self.starts[b]) + self.window / 2.0 - self.step / 2.0 for b in self.segmentation.breaks]

    def to_json(self) -> str:
        """The ``scan --json`` document as deterministic JSON text."""
        return to_json(self.to_dict())


def window_figures(
    arr: SymbolArray, window: int, step: int, depth: int, ratio: float = 0.5, seed: int = 0, engine=None, piece: int | None = None,
    reader=None,
) -> tuple[np.ndarray, dict[str, np.ndarray], list[str]]:
    """Window starts and the figures of every window (see the module documentation).

    The windows are counted in pieces of about ``piece`` symbols of whole windows on ``engine``
    (default: serially), the online predictor's pass running beside them as a task of its own
    (:mod:`fractalseq.compare._scan_pieces`); the figures are the same bits on every engine.
    ``reader``: the byte reader of the file ``arr`` was read from, when workers can read it
    themselves (they then get spans of the file, not symbols).
    """
    from fractalseq.runner import SerialEngine

    T = len(arr)
    bits = arr.alphabet.bits
    if bits * depth > MAX_TABLE_BITS:
        raise ParameterError(f"depth {depth} needs a table of 2**{bits * depth} cells; use a smaller depth.", parameter="depth")
    n_windows = (T - window) // step + 1
    starts = np.arange(n_windows, dtype=np.int64) * step
    engine = engine or SerialEngine()
    pending = engine.submit(surprise_task, surprise_item(arr, engine, reader))  # the one pass that cannot be cut, beside the pieces
    N, Kw, Kc, Sw, Sc = split_window_counts(arr, int(depth), int(window), int(step), engine, piece, reader)
    notes: list[str] = []
    with np.errstate(divide="ignore", invalid="ignore"):
        Nf = N.astype(float)
        h = np.where(N > 0, (Sc - Sw) / np.where(N > 0, Nf, 1.0) + (Kw - Kc) / (2.0 * np.where(N > 0, Nf, 1.0)), np.nan)
        h = h / math.log(2.0)
        d0 = np.where(Kw > 0, np.log2(np.maximum(Kw, 1)) / (depth * math.log2(1.0 / ratio)), np.nan)
    figures = {"entropy_rate": h, "D0": d0}
    bits_per_symbol = pending.result()
    if bits_per_symbol is not None:
        c = np.concatenate([[0.0], np.cumsum(np.nan_to_num(bits_per_symbol))])
        figures["surprise"] = (c[starts + window] - c[starts]) / window
    else:
        notes.append("the online predictor gives no per-symbol code lengths; the surprise figure is left out")
    return starts, figures, notes


def scan_stream(
    arr: SymbolArray,
    window: int,
    step: int | None = None,
    depth: int | None = None,
    ratio: float = 0.5,
    penalty: float | str = "bic",
    seed: int = 0,
    engine=None,
    piece: int | None = None,
    reader=None,
) -> ScanResult:
    """Scan a stream in sliding windows and find change points.

    Parameters
    ----------
    arr:
        The stream (in memory).
    window:
        Window length W in symbols.
    step:
        Step S between window starts (default ``W / 4``).
    depth:
        Word length n (default: largest n with ``A**n * 20 <= W``; for a log, from the observed words:
        :func:`observed_scan_depth`).
    ratio:
        Contraction ratio k for D0.
    penalty:
        ``"bic"`` or a number (see :func:`fractalseq.compare._changepoint.segment_series`).
    seed:
        Seed of any random step (none at present; kept for the predictor).
    engine, piece:
        Where the windows are counted, in pieces of about ``piece`` symbols of whole windows
        (default 2**24; :func:`window_figures`); every engine gives the same bytes for the same ``piece``.
    reader:
        The :class:`~fractalseq.sources.ranges.ByteReader` of the file ``arr`` was read from, when
        the workers can read it apart: they then read their pieces from the file themselves.

    Returns
    -------
    ScanResult
    """
    T = len(arr)
    if not isinstance(window, (int, np.integer)) or window < 2:
        raise ParameterError(f"The window must be a whole number of at least 2 symbols, not {window!r}.", parameter="window")
    step = int(step) if step is not None else max(1, int(window) // 4)
    if step < 1 or step > window:
        raise ParameterError(f"The step must lie between 1 and the window ({window}); got {step}.", parameter="step")
    if not 0.0 < ratio < 1.0:
        raise ParameterError(f"The ratio k must lie strictly between 0 and 1, not {ratio}.", parameter="ratio")
    if T < window:
        raise ParameterError(f"{arr.name} has {T} symbols, fewer than one window of {window}; use a smaller window.", parameter="window")
    if depth is None:
        from fractalseq.alphabet import require_two_symbols

        require_two_symbols(arr.alphabet, arr.name or "The input")
        if is_log_alphabet(arr.alphabet):
            depth = observed_scan_depth(arr, int(window), step)
        else:
            depth = choose_scan_depth(arr.alphabet.size, window, arr.alphabet.max_depth, *ordinal_shape(arr))
    if depth < 1 or depth >= window:
        raise ParameterError(f"The depth must lie between 1 and the window length; got {depth}.", parameter="depth")
    starts, figures, notes = window_figures(arr, int(window), step, int(depth), ratio, seed, engine, piece, reader)
    if len(starts) < 4:
        notes.append("fewer than 4 windows: no change points can be found; use a smaller --window or --step")
    overlap = max(1, int(math.ceil(window / step)))
    seg = segment_series(figures, penalty, overlap)
    intervals = _intervals(seg, starts, figures, window, step, T)
    regions = _low_regions(seg, intervals, starts, figures, window, T)
    records = [r.to_dict() for r in (arr.report.records if arr.report is not None else [])][:1000]
    positions = arr.report.positions if arr.report is not None else None
    if positions is not None and len(positions) != T:
        positions = None  # not this stream's map (a slice, say): positions stay in symbols
    for entry in (*intervals, *regions):
        _locate(entry, arr, positions)
    return ScanResult(
        name=arr.name, length=T, window=int(window), step=step, depth=int(depth), ratio=ratio, starts=starts,
        series=figures, segmentation=seg, intervals=tuple(intervals), low_complexity=tuple(regions),
        records=tuple(records), notes=tuple(notes),
        read_notes=tuple(arr.report.summary_notes()) if arr.report is not None else (), unit=positions.unit if positions is not None else "symbol",
        positions=positions, caution=caution_for([arr.alphabet]),
    )


def _locate(entry: dict, arr: SymbolArray, positions: Positions | None) -> None:
    """Add file coordinates and, for a log, the templates that dominate ``entry``'s stretch."""
    a, b = int(entry["start"]), int(entry["end"])
    if positions is not None:
        entry.update(positions.span(a, b))
    if is_log_alphabet(arr.alphabet):
        entry["templates"] = dominant_templates(arr, a, b)


def dominant_templates(arr: SymbolArray, start: int, end: int, top: int = TOP_TEMPLATES) -> list[dict]:
    """The ``top`` most frequent symbols of ``arr[start:end]`` (ties by code): ``symbol`` (code), ``template``, ``count``, ``share``."""
    codes = arr.codes[max(0, start):max(start, end)]
    if codes.size == 0:
        return []
    counts = np.bincount(codes.astype(np.int64), minlength=arr.alphabet.size)
    order = np.lexsort((np.arange(counts.size), -counts))[:top]
    names = arr.alphabet.symbols
    return [
        {"symbol": int(c), "template": names[int(c)], "count": int(counts[c]), "share": float(counts[c]) / codes.size}
        for c in order if counts[c] > 0
    ]


def _intervals(seg: Segmentation, starts: np.ndarray, figures: dict[str, np.ndarray], window: int, step: int, T: int) -> list[dict]:
    pos = [0.0] + [float(starts[b]) + window / 2.0 - step / 2.0 for b in seg.breaks] + [float(T)]
    h = figures["entropy_rate"]
    med = float(np.nanmedian(h)) if np.isfinite(h).any() else math.nan
    scale = seg.noise.get("entropy_rate", math.nan)
    out = []
    for i, (a, b) in enumerate(seg.segments()):
        entry: dict[str, Any] = {
            "start": int(round(pos[i])),
            "end": int(round(pos[i + 1])),
            "windows": int(b - a),
        }
        for k, v in figures.items():
            vals = v[a:b]
            entry[k] = float(np.nanmean(vals)) if np.isfinite(vals).any() else None
        hv = entry.get("entropy_rate")
        entry["low_complexity"] = bool(
            hv is not None and math.isfinite(med) and math.isfinite(scale) and hv < med - LOW_SCALES * scale
        )
        out.append(entry)
    return out


#: A window lies inside a low-complexity run when its entropy rate is within this fraction of the gap above the run's level.
INSIDE_FRACTION = 0.25


def _low_regions(seg: Segmentation, intervals: list[dict], starts: np.ndarray, figures: dict[str, np.ndarray], window: int, T: int) -> list[dict]:
    """Runs of low-complexity segments merged, with edges refined to the windows wholly inside.

    A step in complexity at position ``r`` shows in overlapping windows as
    a ramp over the windows that straddle ``r``; the entropy rate of a mixed
    window is concave in the mixing fraction, so the ramp's half-height
    point is biased, but a window lying wholly inside the run sits at the
    run's own level.  Each region therefore runs from the start of the first
    to the end of the last window whose entropy rate is within
    ``INSIDE_FRACTION`` of the gap between the run's level (its lowest
    segment mean) and the typical level outside (the median window outside
    every low-complexity run) — the edges are then within one step of the
    truth for a sharp-edged region at least one window long.
    """
    segs = seg.segments()
    h = np.nan_to_num(figures["entropy_rate"], nan=float(np.nanmedian(figures["entropy_rate"])))
    low = np.zeros(len(h), dtype=bool)
    for k, (a, b) in enumerate(segs):
        low[a:b] = intervals[k]["low_complexity"]
    outside = float(np.median(h[~low])) if (~low).any() else float(np.median(h))
    out = []
    i = 0
    while i < len(segs):
        if not intervals[i]["low_complexity"]:
            i += 1
            continue
        j = i
        while j + 1 < len(segs) and intervals[j + 1]["low_complexity"]:
            j += 1
        a, b = segs[i][0], segs[j][1]
        inside = float(np.min([intervals[k]["entropy_rate"] for k in range(i, j + 1)]))
        thr = inside + INSIDE_FRACTION * (outside - inside)
        idx = np.flatnonzero(h[a:b] <= thr) + a
        if idx.size:
            start, end = int(starts[idx[0]]), int(starts[idx[-1]] + window)
            a, b = int(idx[0]), int(idx[-1]) + 1
        else:
            start, end = int(intervals[i]["start"]), int(intervals[j]["end"])
        entry: dict[str, Any] = {"start": start, "end": min(end, T), "windows": int(b - a)}
        for k, v in figures.items():
            vals = v[a:b]
            entry[k] = float(np.nanmean(vals)) if np.isfinite(vals).any() else None
        entry["edges"] = "first and last window lying inside the run (entropy rate near the run's level)"
        out.append(entry)
        i = j + 1
    return out

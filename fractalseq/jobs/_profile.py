"""One source's complexity profile, assembled from the estimators.

:func:`profile_source` runs, on one in-memory stream, every measurement the
package has and gathers the results in a :class:`ProfileResult`:

* exact word counts (counted once, reused by the entropy estimators and the
  absent-word scan);
* block entropies ``H_n`` by block length (plug-in, Miller–Madow,
  Grassberger) and entropy-rate estimates with block-bootstrap intervals, read at
  the block length the counts support (:mod:`fractalseq.entropy._depth`) and held
  to the upper bounds computed on the same data (:mod:`fractalseq.entropy._bounds`);
* for a stream of ordinal patterns, the permutation entropy (:mod:`fractalseq.entropy._ordinal`);
* Rényi entropy rates, topological entropy (growth and Koslicki), LZ76,
  compressor bounds, and the online predictor's code length (an upper bound
  on the information content);
* Rényi dimensions ``D_q`` with intervals, ``f(α)``, and the scaling data
  behind them;
* the consistency table (geometric ``D_q log2(1/k)`` against ``h_q``);
* absent words under a low-order Markov model;
* a density image of the encoding.

No estimate is computed here: this module chooses defaults, calls
:mod:`fractalseq.entropy._estimators`, :mod:`fractalseq.entropy._lz`, :mod:`fractalseq.dimensions._spectrum`,
:mod:`fractalseq.dimensions._consistency`, :mod:`fractalseq.words._absent`,
:mod:`fractalseq.predict._predictor` and :mod:`fractalseq.resampling._bootstrap`, and collects
what they say, including their reliability notes.

:func:`profile_source` runs one function per step of :data:`STEPS`; the result type lives in
:mod:`fractalseq.jobs._profile_result` and :meth:`ProfileResult.to_dict` is the public JSON
contract (documented in the README under "profile"); same input and seed give the same JSON bytes.

Genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace
from typing import Any, Callable, Sequence

import numpy as np

from fractalseq.words import _absent as absent_mod
from fractalseq.resampling import _bootstrap as bs
from fractalseq.resampling._options import Resampling, as_resampling
from fractalseq.resampling._spectra_tasks import forget_spectra
from fractalseq.entropy import _estimators as ent
from fractalseq.entropy import _lz as lz
from fractalseq.dimensions import _spectrum as sp
from fractalseq.alphabet import Alphabet
from fractalseq.encoding import check_ratio, corner_layout, density_image, overlap_check, points
from fractalseq.errors import FractalseqError, InputError, ParameterError
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.jobs._profile_rates import (
    annotate_rows, choose_rate, deepen_counts, evidence_rates, ordinal_delay, ordinal_order, safe_ordinal_entropy,
)
from fractalseq.jobs._profile_result import RATE_NAMES, ProfileResult, ScalingCurve
from fractalseq.jobs._profile_tasks import (
    Background, ParentSteps, _consistency, _predictor_code_length, consistency_task, predictor_task, words_counter,
)
from fractalseq.report.profile_json import CAUTION_GENERAL, CAUTION_GENOMIC, FORMAT, VERSION, contract, profile_caution
from fractalseq.runner import Engine
from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.words._counts import WordCounts, check_depth, count_words
from fractalseq.words._worker_stream import stream_for_workers

__all__ = [
    "CAUTION_GENERAL", "CAUTION_GENOMIC", "CONSISTENCY_MAX_LENGTH", "DEFAULT_BOOT", "FORMAT", "IMAGE_MAX_LENGTH",
    "QUICK_SKIPS", "STEPS", "VERSION", "ProfileResult", "ProfileSettings", "profile_caution",
    "ScalingCurve",
    "auto_depth", "check_qs", "contract", "image_levels", "profile_source",
]

#: Default number of block-bootstrap replicates of a profile.
DEFAULT_BOOT = 100
#: The block rule, scheme and interval method every interval of a profile uses.
PROFILE_RESAMPLING = Resampling(n_boot=0)
#: Deepest default word length counted for the block-entropy table.
MAX_AUTO_DEPTH = 12
#: LZ76 parses at most this many symbols (a prefix; the result says so).
LZ_MAX_LENGTH = 1 << 19
#: The compressor bound compresses at most this many symbols.
COMPRESS_MAX_LENGTH = 1 << 18
#: The consistency table's geometric side boxes the points of at most this many symbols (a prefix; the
#: information side is then computed on the same prefix, and the JSON's ``settings`` says so).
CONSISTENCY_MAX_LENGTH = 1 << 22
#: The density image draws the points of at most this many symbols (a prefix; 2^22 points fill the
#: largest image, 512 x 512 pixels, 16 times over).
IMAGE_MAX_LENGTH = 1 << 22
#: Shifted grids of the consistency table's extra column (0: none; the profile reports the aligned
#: grid, on which the verdict rests, so the shifted column is left to :func:`fractalseq.dimensions._consistency.consistency_table`).
CONSISTENCY_OFFSETS = 0
#: Orders q of the f(α) curve (added to the user's orders for the spectrum figure).
FALPHA_QS = (-2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0)
#: Absent words listed.
ABSENT_LIST = 25
#: Records of the input listed in the JSON (the rest are counted).
RECORDS_LISTED = 50

#: What ``quick=True`` (``profile --quick``, ``survey --quick``) leaves out, for a first look at big corpora.
QUICK_SKIPS = ("bootstrap intervals", "consistency table", "compressor bound")

#: The steps of a profile, in order, as reported to a progress callback.
STEPS = (
    "counting words",
    "block entropies",
    "dimensions",
    "entropy-rate intervals",
    "consistency table",
    "Lempel-Ziv",
    "compressors",
    "online predictor",
    "absent words",
    "encoding image",
    "permutation entropy",
)


# ----------------------------------------------------------------- helpers
def auto_depth(length: int, alphabet: Alphabet) -> int:
    """Default deepest word length: three past the deepest reliable one, within 2..:data:`MAX_AUTO_DEPTH`.

    The deepest reliable block length is the largest n with ``A**n <= length / 100``
    (:func:`fractalseq.entropy._estimators.choose_depth`); three more levels show where the
    estimates start to fail for lack of data.
    """
    n, _ = ent.choose_depth(length, max(alphabet.size, 2), offset=0)
    return int(min(max(n + 3, 2), MAX_AUTO_DEPTH, alphabet.max_depth))


def image_levels(length: int) -> int:
    """Pixels per side of the density image as a power of two (7..9), about 2 points per pixel."""
    side = math.sqrt(max(length, 1) / 2.0)
    return int(min(max(round(math.log2(max(side, 1.0))), 7), 9))


def check_qs(qs: Sequence[float]) -> tuple[float, ...]:
    """Orders q as sorted distinct floats; refuse an empty list."""
    vals = sp.check_qs(list(qs))
    return tuple(sorted({float(v) for v in vals}))


def _absent_depth(length: int, wc: WordCounts) -> int:
    """Deepest n <= counted depth whose average word is expected >= MIN_EXPECTED times (at least 2)."""
    A = wc.alphabet.size
    n = 2
    for k in range(2, wc.depth + 1):
        if float(A) ** k * absent_mod.MIN_EXPECTED <= length:
            n = k
    return n


def _read_report(arr: SymbolArray) -> dict:
    rep = arr.report.to_dict() if getattr(arr, "report", None) is not None else {}
    recs = rep.get("records", [])
    if len(recs) > RECORDS_LISTED:
        rep["records_total"] = len(recs)
        rep["records"] = recs[:RECORDS_LISTED]
    else:
        rep["records_total"] = len(recs)
    return rep


def _scaling_curves(spec, wc_spec: WordCounts | None, user_qs: tuple[float, ...], ratio: float) -> tuple[ScalingCurve, ...]:
    """Per-level H_q behind each D_q (word route), or the running sum of local slopes (geometric route)."""
    curves = []
    levels = spec.levels
    for q in user_qs:
        d = spec.get(q)
        if spec.route == "word counts" and wc_spec is not None:
            depths = [int(lv["n"]) for lv in levels if int(lv["n"]) <= wc_spec.depth]
            x = np.array(depths, float) * math.log(1.0 / ratio)
            y = np.empty(len(depths))
            for i, n in enumerate(depths):
                s = wc_spec.spectrum(n)
                y[i] = sp.level_stats(s.value, s.multiplicity, np.array([q])).H[0]
            quantity = "H_q(n): Rényi block entropy of the n-words" if q != 1 else "H_1(n): Shannon block entropy"
            lv = tuple(depths)
        else:
            local = np.asarray(d.local, float)
            eps = np.array([float(v["eps"]) for v in levels])[: local.size + 1]
            x = np.log(1.0 / eps)
            y = np.concatenate([[0.0], np.cumsum(np.where(np.isfinite(local), local, 0.0) * np.diff(x))])
            quantity = "running sum of per-level slopes (offset arbitrary)"
            lv = tuple(int(v["n"]) for v in levels[: x.size])
        lo = None if d.n_lo is None else lv.index(d.n_lo) if d.n_lo in lv else None
        hi = None if d.n_hi is None else lv.index(d.n_hi) if d.n_hi in lv else None
        slope = float(d.estimate)
        if lo is not None and hi is not None and np.isfinite(slope):
            sel = slice(lo, hi + 1)
            intercept = float(np.nanmean(y[sel]) - slope * np.mean(x[sel]))
        else:
            intercept = float("nan")
        curves.append(ScalingCurve(float(q), lv, x, y, lo, hi, slope, intercept, quantity))
    return tuple(curves)


# ----------------------------------------------------------------- settings
@dataclass(frozen=True)
class ProfileSettings:
    """The settings of a profile, checked when made (before anything is read).

    Attributes
    ----------
    ratio:
        Contraction ratio k of the encoding, ``0 < k < 1``.
    qs:
        Orders q (sorted, distinct).
    depth:
        Deepest word length of the block-entropy table (``None``: :func:`auto_depth`); at least 2.
    n_boot:
        Block-bootstrap replicates (0: none; else at least 20).
    level:
        Confidence level of the intervals, in (0.5, 1).
    seed:
        Seed of every random step (:func:`fractalseq.jobs._inputs.check_seed`).
    quick:
        First-look mode: no bootstrap (``n_boot`` becomes 0), no consistency table, no
        compressor bound (:data:`QUICK_SKIPS`).
    """

    ratio: float = 0.5
    qs: tuple[float, ...] = (0.0, 1.0, 2.0)
    depth: int | None = None
    n_boot: int = DEFAULT_BOOT
    level: float = 0.95
    seed: int = 0
    quick: bool = False

    def __post_init__(self) -> None:
        object.__setattr__(self, "qs", check_qs(self.qs))
        if self.quick:
            object.__setattr__(self, "n_boot", 0)
        object.__setattr__(self, "ratio", check_ratio(self.ratio))
        rs = Resampling(n_boot=self.n_boot, seed=self.seed, level=self.level)  # the one check of these three
        if self.depth is not None and (isinstance(self.depth, bool) or not isinstance(self.depth, (int, np.integer)) or self.depth < 2):
            raise ParameterError(f"Depth {self.depth!r} is too small; the entropy rates need words of length 2 or more.", parameter="depth")
        object.__setattr__(self, "n_boot", rs.n_boot)
        object.__setattr__(self, "seed", rs.seed)

    @property
    def resampling(self) -> Resampling:
        """The bootstrap settings of every interval of the profile."""
        return Resampling(n_boot=self.n_boot, seed=self.seed, level=self.level)

    def depth_for(self, length: int, alphabet: Alphabet) -> int:
        """The deepest word length counted for a stream of ``length`` symbols over ``alphabet``."""
        if self.depth is not None and self.depth > alphabet.max_depth:
            raise ParameterError(
                f"Depth {self.depth} exceeds the deepest word length {alphabet.max_depth} for {alphabet.size} symbols; "
                f"use {alphabet.max_depth} or less.",
                parameter="depth",
            )
        return check_depth(alphabet, auto_depth(length, alphabet) if self.depth is None else self.depth)

    def parameters(self, reader: ReaderOptions | None = None) -> dict[str, Any]:
        """The ``parameters`` object of the profile's JSON document (reader options only when not the defaults)."""
        reader = reader or ReaderOptions()
        out: dict[str, Any] = {
            "ratio": self.ratio, "q": list(self.qs), "depth": self.depth, "boot": self.n_boot, "level": self.level,
            "seed": self.seed, "alphabet": reader.alphabet, "format": reader.fmt, "unknown": reader.policy,
        }
        if reader.numeric_options():
            out["reader"] = reader.numeric_options()
        if self.quick:  # present only in quick mode, so the default document keeps its bytes
            out["quick"] = True
        return out


def _bound_name(by: str, alphabet_size: int, order: int) -> str:
    """What gave the smallest upper bound, in words (``alphabet`` is log2 A, or log2 m for ordinal patterns)."""
    if by != "alphabet":
        return by
    return f"log2 {order}: a pattern has at most {order} successors" if order else f"log2 {alphabet_size}, the alphabet's limit"


# ---------------------------------------------------------------- the steps
class _Clock:
    """Seconds per step (kept out of the JSON) and the progress callback."""

    def __init__(self, progress: Callable[[str], None] | None) -> None:
        self.progress = progress
        self.timings: dict[str, float] = {}
        self._current = ""
        self._start = time.perf_counter()

    def step(self, name: str) -> None:
        now = time.perf_counter()
        if self._current:
            self.timings[self._current] = round(now - self._start, 4)
        self._current, self._start = name, now
        if self.progress is not None and name:
            self.progress(name)


def _checked_input(arr: SymbolArray | SymbolStream, settings: ProfileSettings) -> tuple[SymbolArray, int]:
    """The stream in memory and the depth to count, after every check."""
    if isinstance(arr, SymbolStream):
        arr = arr.to_array()
    if not isinstance(arr, SymbolArray):
        raise InputError("profile_source needs a stream (SymbolArray or SymbolStream).")
    if arr.alphabet.size < 2:
        what = f"{arr.name} has" if arr.name and arr.name != "stream" else "The alphabet has"
        kind = "templates (all its lines are one event kind)" if arr.alphabet.name == "templates" else "symbols"
        raise InputError(
            f"{what} fewer than 2 distinct {kind}, so there is no complexity to measure; give data with at least "
            "two different symbols, or read it with a fixed alphabet (e.g. dna)."
        )
    L = len(arr)
    if L < 2:
        raise InputError(f"The stream has {L} symbol(s); a profile needs at least 2.")
    return arr, settings.depth_for(L, arr.alphabet)


@dataclass
class _Entropies:
    """Step 2: block entropies and the estimates read off the word counts."""

    rows: tuple[dict[str, Any], ...]
    rates: dict[str, ent.EntropyEstimate]
    renyi: tuple[ent.EntropyEstimate, ...]
    topological: ent.EntropyEstimate
    koslicki: ent.EntropyEstimate | None


def _block_entropies(arr: SymbolArray, wc: WordCounts, user_qs: tuple[float, ...], notes: list[str]) -> _Entropies:
    """Block entropies, entropy-rate estimates, Rényi rates and topological entropies from the counts.

    The rates are read at the block length the counts support (:func:`fractalseq.jobs._profile_rates.evidence_rates`).
    """
    order, delay = ordinal_order(arr), ordinal_delay(arr)
    rows = annotate_rows(tuple(ent.entropy_table(wc)), order, delay)
    rate_est, _ = evidence_rates(wc, order, delay)
    renyi = tuple(ent.h_renyi(wc, q) for q in user_qs)
    topo = ent.h_topological_growth(wc)
    try:
        kos = ent.h_topological_koslicki(arr)
    except FractalseqError as exc:
        kos = None
        notes.append(f"Koslicki topological entropy: not computed ({exc})")
    return _Entropies(rows, rate_est, renyi, topo, kos)


def _rate_depths(rate_est: dict[str, ent.EntropyEstimate], rs: Resampling, length: int) -> tuple[int, ...]:
    """The word lengths :func:`_rate_intervals` bootstraps (none without a bootstrap)."""
    n_rate = rate_est["grassberger"].depth or 0
    if rs.n_boot > 0 and length >= 2 * (n_rate + 2):
        return (n_rate, n_rate + 1) if n_rate >= 1 else (1,)
    return ()


def _dimensions(
    arr: SymbolArray, wc: WordCounts, user_qs: tuple[float, ...], k: float, rs: Resampling, notes: list[str],
    engine: Engine | None = None, ahead: tuple[int, ...] = (),
) -> tuple[sp.SpectrumResult, tuple[ScalingCurve, ...]]:
    """Step 3: D_q and f(alpha) (user's orders plus a grid for the f(alpha) curve) and the scaling curves.

    The conditional Rényi rates of the consistency table come from the same bootstrap pass.
    """
    all_qs = tuple(sorted(set(user_qs) | set(FALPHA_QS)))
    spec = sp.dimension_spectrum(arr, all_qs, ratio=k, resampling=rs, falpha=True, rates=True, engine=engine, ahead=ahead)
    notes.extend(f"dimensions: {f}" for f in spec.flags)
    wc_spec = None
    if spec.route == "word counts":
        top = max(int(lv["n"]) for lv in spec.levels) if spec.levels else 1
        wc_spec = wc if top <= wc.depth else count_words(arr, top)
    return spec, _scaling_curves(spec, wc_spec, user_qs, k)


def _rate_intervals(
    arr: SymbolArray, rate_est: dict[str, ent.EntropyEstimate], rs: Resampling, block, notes: list[str],
    engine: Engine | None = None,
) -> dict[str, Any] | None:
    """Step 4: intervals of the rate estimates by the block bootstrap (counts re-weighted, never recounted).

    Updates ``rate_est`` in place; returns the bootstrap's block rule (``None`` without a bootstrap).
    """
    n_rate = rate_est["grassberger"].depth or 0
    n_boot, level = rs.n_boot, rs.level
    if depths := _rate_depths(rate_est, rs, len(arr)):

        def stat(tables: dict[int, np.ndarray]) -> list[float]:
            c0 = tables[n_rate] if n_rate >= 1 else None
            c1 = tables[n_rate + 1]
            out = []
            for m in ent.METHODS:
                try:
                    out.append(ent.rate_from_counts(c0, c1, m))
                except FractalseqError:
                    out.append(float("nan"))
            return out

        def batch(specs: dict) -> np.ndarray:
            s0 = specs[n_rate] if n_rate >= 1 else None
            return np.column_stack([ent.replicate_rates(s0, specs[n_rate + 1], m) for m in ent.METHODS])

        boot = bs.block_bootstrap(
            arr, depths, stat, replace(rs, block_length=block), spectra=True, batch_statistic=batch, engine=engine
        )
        lo, hi = boot.interval(level, rs.interval)
        for j, m in enumerate(ent.METHODS):
            if np.isfinite(lo[j]) and np.isfinite(hi[j]):
                rate_est[m] = rate_est[m].with_interval(lo[j], hi[j], f"{level:.0%} block bootstrap, {n_boot} replicates")
        notes.extend(f"entropy-rate bootstrap: {n}" for n in boot.notes)
        return boot.block.to_dict()
    if n_boot > 0:
        notes.append("entropy-rate intervals: stream too short for the bootstrap")
    return None


def _rate_bounds(
    arr: SymbolArray, rates: dict[str, tuple[str, ent.EntropyEstimate]], clock: _Clock, notes: list[str],
    steps: ParentSteps, background: Background | None = None,
) -> None:
    """Step 6: Lempel-Ziv, the compressor bound and the online predictor (or ``background``'s), added to ``rates``."""
    clock.step("Lempel-Ziv")
    if (est := steps.take("Lempel-Ziv", notes)) is not None:
        rates["lz76"] = ("estimate", est)
    clock.step("compressors")
    if (est := steps.take("compressors", notes)) is not None:
        rates["compressors"] = ("upper bound", est)
    clock.step("online predictor")
    done = background.take("online predictor") if background is not None else None
    try:
        est, why = done if done is not None else (_predictor_code_length(arr), None)
    except FractalseqError as exc:
        est, why = None, str(exc)
    if est is not None:
        rates["online_predictor"] = ("upper bound", est)
    else:
        notes.append(f"online predictor: not computed ({why})")


def _parent_steps(
    arr: SymbolArray, wc: WordCounts, k: float, L: int, quick: bool, rs: Resampling, lz_max_length: int | None,
    compress_max_length: int | None, absent_list: int, image: bool, image_max_length: int | None,
) -> ParentSteps:
    """Steps 6 to 9 that stay in this process (each a function of a notes list; the predictor is a task)."""

    def lz76(ns: list[str]):
        try:
            return lz.h_lz76(arr, max_length=lz_max_length)
        except FractalseqError as exc:
            ns.append(f"LZ76: not computed ({exc})")

    def compressors(ns: list[str]):
        try:
            return None if quick else ent.h_compressors(arr, max_length=compress_max_length)
        except FractalseqError as exc:
            ns.append(f"compressor bound: not computed ({exc})")

    return ParentSteps({
        "Lempel-Ziv": lz76, "compressors": compressors,
        "absent words": lambda ns: _absent_words(wc, L, absent_list, ns),
        "encoding image": lambda ns: _encoding_image(arr, k, image, image_max_length),
        "permutation entropy": lambda ns: safe_ordinal_entropy(arr, ordinal_order(arr), rs.n_boot, rs.seed, rs.level, ns),
    })


def _absent_words(wc: WordCounts, length: int, absent_list: int, notes: list[str]) -> absent_mod.WordReport | None:
    """Step 7: absent words under a low-order Markov model, or ``None`` with a note."""
    try:
        return absent_mod.absent_words(wc, _absent_depth(length, wc), max_list=absent_list)
    except FractalseqError as exc:
        notes.append(f"absent words: not computed ({exc})")
        return None


def _encoding_image(
    arr: SymbolArray, k: float, image: bool, max_length: int | None = IMAGE_MAX_LENGTH
) -> tuple[np.ndarray | None, int | None]:
    """Step 8: the density image of the encoding (of a prefix of ``max_length`` symbols) and log2 of its side."""
    if not image:
        return None, None
    if max_length is not None and len(arr) > max_length:
        arr = arr.slice(0, max_length)
    levels = image_levels(len(arr))
    return density_image(points(arr, k), size=1 << levels), levels


def _reliability_notes(
    rates: dict[str, tuple[str, ent.EntropyEstimate]], topo: ent.EntropyEstimate, absent: absent_mod.WordReport | None
) -> list[str]:
    """The estimators' own reliability notes, one line each."""
    notes = [f"entropy rate ({name}): {e.note}" for name, (_, e) in rates.items() if e is not None and not e.reliable]
    if not topo.reliable:
        notes.append(f"topological entropy: {topo.note}")
    if absent is not None and not absent.reliable:
        notes.append(f"absent words: {absent.note}")
    return notes


# -------------------------------------------------------------- the profile
def profile_source(
    arr: SymbolArray | SymbolStream,
    *,
    ratio: float = 0.5,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    depth: int | None = None,
    resampling: Resampling | None = None,
    offsets: int = CONSISTENCY_OFFSETS,
    lz_max_length: int | None = LZ_MAX_LENGTH,
    compress_max_length: int | None = COMPRESS_MAX_LENGTH,
    absent_list: int = ABSENT_LIST,
    image: bool = True,
    progress: Callable[[str], None] | None = None,
    consistency_max_length: int | None = CONSISTENCY_MAX_LENGTH,
    image_max_length: int | None = IMAGE_MAX_LENGTH,
    quick: bool = False,
    engine: Engine | None = None,
    piece: int | None = None,
) -> ProfileResult:
    """Measure one stream with every estimator of the package.

    Parameters
    ----------
    arr:
        The stream (a :class:`~fractalseq.stream.SymbolStream` is read into memory).
    ratio:
        Contraction ratio k of the encoding, ``0 < k < 1`` (``k <= 1/2`` keeps
        the maps apart so that boxes are words).
    qs:
        Orders q of the dimensions, Rényi rates and consistency table.
    depth:
        Deepest word length of the block-entropy table; default
        :func:`auto_depth` (three past the fixed rule's length), counted deeper while
        every counted length is supported by the counts (at most 12).
    resampling:
        Replicates of every interval (``n_boot``; 0: none, else at least 20), the seed of
        every random step (the same seed gives the same result) and the confidence
        ``level``; ``None``: ``Resampling(n_boot=DEFAULT_BOOT)``.  The profile chooses
        one block length for all intervals and uses non-overlapping blocks and centered
        intervals, so ``block_length``, ``scheme`` and ``interval`` must keep their defaults.
    offsets:
        Random grid offsets of the geometric side of the consistency table.
    lz_max_length, compress_max_length:
        Prefix lengths for LZ76 and the compressor bound (``None``: whole stream).
    absent_list:
        Absent words listed.
    image:
        Compute the density image of the encoding.
    progress:
        Called with the name of each step of :data:`STEPS` as it starts.
    consistency_max_length, image_max_length:
        Prefix lengths for the consistency table (both sides) and the density image (``None``: whole
        stream); the JSON's ``settings`` records them.
    quick:
        Leave out what :data:`QUICK_SKIPS` names (the bootstrap, so no intervals; the consistency
        table; the compressor bound), each with a note: a first look at a big input.
    engine, piece:
        Where the heavy passes run (:mod:`fractalseq.jobs._profile_tasks`: one bootstrap task per
        depth, the predictor and the prefix's consistency table beside them, and with ``piece`` the
        word counts in pieces of that many symbols); ``None`` or the serial engine: in this process.
        Same result either way.

    Returns
    -------
    ProfileResult
    """
    rs = as_resampling(resampling, Resampling(n_boot=DEFAULT_BOOT))
    for name in ("block_length", "scheme", "interval"):
        if getattr(rs, name) != getattr(PROFILE_RESAMPLING, name):
            raise ParameterError(
                f"The profile chooses the block length itself and uses {PROFILE_RESAMPLING.scheme} blocks with "
                f"{PROFILE_RESAMPLING.interval} intervals; leave resampling.{name} at its default.",
                parameter=name,
            )
    if quick:
        rs = replace(rs, n_boot=0)
    n_boot, seed, level = rs.n_boot, rs.seed, rs.level
    clock = _Clock(progress)
    settings = ProfileSettings(ratio, tuple(qs), depth, n_boot, level, seed, quick=bool(quick))
    arr, N = _checked_input(arr, settings)
    notes: list[str] = []
    ov = overlap_check(settings.ratio, corner_layout(arr.alphabet.size))
    if ov.overlapping:
        notes.append(f"encoding: {ov.reason}")

    background = Background(engine)
    try:
        return _measure(arr, N, settings, rs, offsets, lz_max_length, compress_max_length, absent_list, image,
                        consistency_max_length, image_max_length, clock, notes, ov, engine, piece, background)
    finally:
        background.cancel()
        forget_spectra()


def _measure(arr, N, settings, rs, offsets, lz_max_length, compress_max_length, absent_list, image,
             consistency_max_length, image_max_length, clock, notes, ov, engine, piece, background) -> ProfileResult:
    """The steps of :func:`profile_source` on a checked stream (background tasks collected in step order)."""
    user_qs, k, depth, quick = settings.qs, settings.ratio, settings.depth, settings.quick
    n_boot, seed, level, L = rs.n_boot, rs.seed, rs.level, len(arr)
    clock.step("counting words")  # 1. words, counted once
    counter = words_counter(engine, piece)

    def start_background() -> None:  # steps that need nothing from the others, on the workers
        shipped = stream_for_workers(arr)
        background.start("online predictor", predictor_task, shipped)
        if not quick and consistency_max_length is not None and L > max(consistency_max_length, sp.TRANSIENT + 10):
            background.start("consistency table", consistency_task, (shipped, user_qs, k, rs, offsets, consistency_max_length))

    if background.engine is not None and piece is None:  # first, beside the counts made here
        start_background()
    wc = counter(arr, N)
    if depth is None:  # a source with memory supports longer words than the fixed rule counts
        wc = deepen_counts(arr, wc, MAX_AUTO_DEPTH, counter)
        N = wc.depth
    if background.engine is not None and piece is not None:  # after the pieces' counts (not queued before them)
        start_background()
    clock.step("block entropies")  # 2. block entropies and rate estimates
    found = _block_entropies(arr, wc, user_qs, notes)
    steps = _parent_steps(arr, wc, k, L, quick, rs, lz_max_length, compress_max_length, absent_list, image, image_max_length)
    if background.engine is not None:  # made while the workers run; taken, notes and all, at their places below
        steps.run_all()
    clock.step("dimensions")  # 3. dimensions, f(alpha) and the scaling data
    spec, scaling = _dimensions(arr, wc, user_qs, k, rs, notes, engine, ahead=_rate_depths(found.rates, rs, L))
    clock.step("entropy-rate intervals")  # 4. one block length for every interval (the spectrum's)
    rate_block = _rate_intervals(arr, found.rates, rs, spec.block, notes, engine)
    rates: dict[str, tuple[str, ent.EntropyEstimate]] = {m: ("estimate", found.rates[m]) for m in ent.METHODS}
    clock.step("consistency table")  # 5. geometry against information
    if quick:
        consistency = None
        notes.append("quick mode: " + ", ".join(QUICK_SKIPS) + " left out")
    elif (done := background.take("consistency table")) is not None:
        consistency = done[0]
        notes.extend(done[1])
    else:
        consistency = _consistency(arr, spec, user_qs, k, rs, offsets, notes, consistency_max_length)
    _rate_bounds(arr, rates, clock, notes, steps, background=background)  # 6. LZ76, compressors, predictor
    clock.step("absent words")  # 7. absent words
    absent = steps.take("absent words", notes)
    clock.step("encoding image")  # 8. encoding image
    img, levels_img = steps.take("encoding image", notes)
    clock.step("permutation entropy")  # 9. ordinal patterns: permutation entropy
    order = ordinal_order(arr)
    permutation = steps.take("permutation entropy", notes)
    clock.step("")

    choice = choose_rate(rates, arr.alphabet.size, order, RATE_NAMES)  # every rate held to the bounds it has
    g = rates.get("grassberger")
    if choice.estimator != "grassberger" or (g is not None and g[1] is not None and choice.estimate != g[1].estimate):
        notes.append(f"entropy rate: {choice.reason}")
    notes.extend(f"entropy rate ({name}): {rates[name][1].estimate:.4f} bits/symbol lies outside [0, {choice.upper_bound:.4f}], "
                 f"the smallest upper bound ({_bound_name(choice.upper_bound_by, arr.alphabet.size, order)})"
                 for name, ok in choice.within.items()
                 if not ok and rates[name][0] == "estimate" and name != "grassberger")
    notes.extend(_reliability_notes(rates, found.topological, absent))
    settings = {
        "lz_max_length": lz_max_length,
        "compress_max_length": compress_max_length,
        "consistency_offsets": offsets,
        "falpha_qs": list(FALPHA_QS),
        "image_pixels": None if levels_img is None else 1 << levels_img,
        "consistency_max_length": consistency_max_length,
        "image_max_length": image_max_length,
    }
    return ProfileResult(
        name=arr.name,
        length=L,
        segments=len(arr.segment_bounds),
        alphabet=arr.alphabet,
        ratio=k,
        qs=user_qs,
        depth=N,
        n_boot=int(n_boot),
        seed=int(seed),
        level=float(level),
        overlap=ov,
        spectrum=spec,
        entropy_rows=found.rows,
        rates=rates,
        renyi=found.renyi,
        topological=found.topological,
        koslicki=found.koslicki,
        consistency=consistency,
        absent=absent,
        scaling=scaling,
        image=img,
        image_levels=levels_img,
        read=_read_report(arr),
        rate_block=rate_block,
        settings=settings,
        notes=tuple(dict.fromkeys(notes)),
        timings=clock.timings,
        permutation=permutation,
        rate_choice=choice,
        quick=bool(quick),
    )

"""One source's complexity profile, assembled from the estimators.

:func:`profile_source` runs, on one in-memory stream, every measurement the
package has and gathers the results in a :class:`ProfileResult`:

* exact word counts (counted once, reused by the entropy estimators and the
  absent-word scan);
* block entropies ``H_n`` by block length (plug-in, Miller–Madow,
  Grassberger) and entropy-rate estimates with block-bootstrap intervals;
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

:meth:`ProfileResult.to_dict` is the public JSON contract (documented in
the README under "profile"); same input and seed give the same JSON bytes.

Genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Sequence

import numpy as np

from fractalseq.words import _absent as absent_mod
from fractalseq.resampling import _bootstrap as bs
from fractalseq.dimensions import _consistency as cons
from fractalseq.entropy import _estimators as ent
from fractalseq.entropy import _lz as lz
from fractalseq.dimensions import _spectrum as sp
from fractalseq.alphabet import Alphabet
from fractalseq.encoding import check_ratio, corner_layout, density_image, overlap_check, points
from fractalseq.errors import FractalseqError, InputError, ParameterError
from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.words._counts import WordCounts, check_depth, count_words

FORMAT = "fractalseq-profile"
VERSION = 1
CAUTION_GENOMIC = "Genomic output is for research, not for clinical decisions."
CAUTION_GENERAL = (
    "Estimates describe the stream given, at its length; read the reliability notes before comparing numbers. "
    + CAUTION_GENOMIC
)

#: Default number of block-bootstrap replicates of a profile.
DEFAULT_BOOT = 100
#: Deepest default word length counted for the block-entropy table.
MAX_AUTO_DEPTH = 12
#: LZ76 parses at most this many symbols (a prefix; the result says so).
LZ_MAX_LENGTH = 1 << 19
#: The compressor bound compresses at most this many symbols.
COMPRESS_MAX_LENGTH = 1 << 18
#: Shifted grids of the consistency table's extra column (0: none; the profile reports the aligned
#: grid, on which the verdict rests, so the shifted column is left to :func:`fractalseq.dimensions._consistency.consistency_table`).
CONSISTENCY_OFFSETS = 0
#: Orders q of the f(α) curve (added to the user's orders for the spectrum figure).
FALPHA_QS = (-2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0)
#: Absent words listed.
ABSENT_LIST = 25
#: Records of the input listed in the JSON (the rest are counted).
RECORDS_LISTED = 50

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
)


# ------------------------------------------------------------------ results
@dataclass(frozen=True, eq=False)
class ScalingCurve:
    """The log–log data behind one D_q: ``y`` against ``x = ln(1/ε)`` with the fitted range.

    ``y`` is the Rényi block entropy ``H_q`` (nats) per level, as the
    spectrum estimator computes it (:func:`fractalseq.dimensions._spectrum.level_stats`),
    or, for the geometric route, the running sum of the per-level slopes
    (same shape, arbitrary offset).  ``fit_lo``/``fit_hi`` are 0-based
    indices (inclusive) of the fitted levels; the drawn line has the fitted
    slope and passes through the mean of the fitted points.
    """

    q: float
    levels: tuple[int, ...]
    x: np.ndarray
    y: np.ndarray
    fit_lo: int | None
    fit_hi: int | None
    slope: float
    intercept: float
    quantity: str

    def to_dict(self) -> dict:
        return {
            "q": self.q,
            "levels": list(self.levels),
            "ln_inverse_scale": self.x,
            "value_nats": self.y,
            "quantity": self.quantity,
            "fit_first": None if self.fit_lo is None else self.levels[self.fit_lo],
            "fit_last": None if self.fit_hi is None else self.levels[self.fit_hi],
            "slope": self.slope,
        }


@dataclass(frozen=True, eq=False)
class ProfileResult:
    """Everything measured on one source (see :func:`profile_source`).

    Attributes
    ----------
    name, length, segments, alphabet:
        The source.
    ratio, qs, depth, n_boot, seed, level:
        Settings used (``depth`` = deepest word length counted for the entropy table).
    overlap:
        Whether the encoding's maps overlap (then word counts are not box counts).
    spectrum:
        :class:`fractalseq.dimensions._spectrum.SpectrumResult` over the user's orders plus :data:`FALPHA_QS`.
    entropy_rows:
        :func:`fractalseq.entropy._estimators.entropy_table` rows (block entropies by length).
    rates:
        Entropy-rate estimates by name (``plugin``, ``miller-madow``, ``grassberger``
        with bootstrap intervals; ``lz76``; ``compressors`` and
        ``online_predictor``, both upper bounds).
    renyi:
        Rényi entropy rates, one per q.
    topological, koslicki:
        Topological entropy by word growth, and Koslicki's finite-length form.
    consistency:
        :class:`fractalseq.dimensions._consistency.ConsistencyResult` or ``None`` (then a note says why).
    absent:
        :class:`fractalseq.words._absent.WordReport` or ``None``.
    scaling:
        One :class:`ScalingCurve` per user q.
    image:
        Density image of the encoding (counts per pixel), or ``None``.
    read:
        What the reader reported (dropped symbols, records...).
    notes:
        Reliability notes and everything that was not computed, with the reason.
    timings:
        Seconds per step (not part of the JSON, which must not depend on the clock).
    """

    name: str
    length: int
    segments: int
    alphabet: Alphabet
    ratio: float
    qs: tuple[float, ...]
    depth: int
    n_boot: int
    seed: int
    level: float
    overlap: Any
    spectrum: Any
    entropy_rows: tuple[dict, ...]
    rates: dict
    renyi: tuple
    topological: Any
    koslicki: Any
    consistency: Any
    absent: Any
    scaling: tuple[ScalingCurve, ...]
    image: np.ndarray | None
    image_levels: int | None
    read: dict
    rate_block: dict | None
    settings: dict
    notes: tuple[str, ...]
    timings: dict = field(default_factory=dict, compare=False)

    # -------------------------------------------------------------- views
    @property
    def alphabet_size(self) -> int:
        return int(self.alphabet.size)

    def dimension_rows(self) -> list[dict]:
        """The ``dimensions`` list of the JSON contract (user's orders only)."""
        out = []
        for q in self.qs:
            d = self.spectrum.get(q)
            out.append(
                {
                    "q": d.q,
                    "estimate": d.estimate,
                    "low": d.low,
                    "high": d.high,
                    "stderr": d.stderr,
                    "scaling_range": [d.n_lo, d.n_hi],
                    "scale_range": [d.eps_lo, d.eps_hi],
                    "method": d.method,
                    "range_rule": d.range_rule,
                    "reliable": bool(np.isfinite(d.estimate)) and not any(
                        f.startswith(("too little", "curved", "only", "negative q")) for f in d.flags
                    ),
                    "flags": list(d.flags),
                }
            )
        return out

    def falpha_rows(self) -> list[dict]:
        return [p.to_dict() for p in sorted(self.spectrum.falpha, key=lambda p: p.q)]

    def spectrum_rows(self) -> list[dict]:
        """D_q over every order computed (user's and the f(α) grid), sorted by q."""
        rows = []
        for d in sorted(self.spectrum.dims, key=lambda d: d.q):
            rows.append({"q": d.q, "estimate": d.estimate, "low": d.low, "high": d.high, "flags": list(d.flags)})
        return rows

    def rate_dict(self) -> dict:
        """The ``entropy_rate_bits`` object: estimator name → estimate, interval and notes."""
        out = {}
        for name, (kind, e) in self.rates.items():
            if e is None:
                continue
            out[name] = {
                "estimate": e.estimate,
                "low": e.low,
                "high": e.high,
                "kind": kind,
                "method": e.method,
                "depth": e.depth,
                "fraction_of_max": e.fraction_of_max,
                "reliable": e.reliable,
                "note": e.note,
                "details": dict(e.details),
            }
        return out

    def consistency_rows(self) -> list[dict]:
        """The ``consistency`` list of the JSON contract."""
        if self.consistency is None:
            return [
                {
                    "q": float(q), "dimension": None, "dimension_bits": None, "dimension_bits_low": None,
                    "dimension_bits_high": None, "entropy_bits": None, "entropy_bits_low": None,
                    "entropy_bits_high": None, "difference_bits": None, "verdict": cons.TOO_LITTLE,
                    "flags": [n for n in self.notes if n.startswith("consistency")],
                }
                for q in self.qs
            ]
        rows = []
        for r in self.consistency.rows:
            rows.append(
                {
                    "q": r.q,
                    "dimension": r.dimension,
                    "dimension_bits": r.geometry_bits,
                    "dimension_bits_low": r.geometry_low,
                    "dimension_bits_high": r.geometry_high,
                    "entropy_bits": r.information_bits,
                    "entropy_bits_low": r.information_low,
                    "entropy_bits_high": r.information_high,
                    "difference_bits": r.difference,
                    "verdict": r.verdict,
                    "flags": list(r.flags),
                }
            )
        return rows

    def absent_dict(self) -> dict | None:
        if self.absent is None:
            return None
        a = self.absent
        return {
            "depth": a.depth,
            "model_order": a.model_order,
            "min_expected": a.min_expected,
            "possible": a.possible,
            "distinct": a.distinct,
            "absent_total": a.absent_total,
            "examined": a.candidates,
            "absent_examined": a.matching,
            "reliable": a.reliable,
            "note": a.note,
            "words": [
                {k: v for k, v in r.to_dict().items() if k in ("word", "expected", "observed", "p_absent", "p_absent_poisson", "period", "minimal")}
                for r in a.rows
            ],
        }

    def to_dict(self) -> dict:
        """The JSON object of this source (the entries of the contract's ``sources`` list)."""
        topo = {
            "estimate": self.topological.estimate,
            "method": self.topological.method,
            "depth": self.topological.depth,
            "fraction_of_max": self.topological.fraction_of_max,
            "reliable": self.topological.reliable,
            "note": self.topological.note,
        }
        if self.koslicki is not None:
            topo["koslicki"] = {
                "estimate": self.koslicki.estimate,
                "fraction_of_max": self.koslicki.fraction_of_max,
                "depth": self.koslicki.depth,
                "note": self.koslicki.note,
            }
        return {
            "name": self.name,
            "length": self.length,
            "segments": self.segments,
            "alphabet_size": self.alphabet_size,
            "alphabet": self.alphabet.to_dict(),
            "ratio": self.ratio,
            "overlap": self.overlap.to_dict(),
            "depth": self.depth,
            "dimensions": self.dimension_rows(),
            "spectrum": self.spectrum_rows(),
            "falpha": self.falpha_rows(),
            "scaling": [c.to_dict() for c in self.scaling],
            "entropy_rate_bits": self.rate_dict(),
            "renyi_rate_bits": [
                {"q": r.q, "estimate": r.estimate, "depth": r.depth, "method": r.method, "reliable": r.reliable, "note": r.note}
                for r in self.renyi
            ],
            "topological_entropy_bits": topo,
            "block_entropies": list(self.entropy_rows),
            "consistency": self.consistency_rows(),
            "absent_words": self.absent_dict(),
            "bootstrap": {
                "n_boot": self.n_boot,
                "seed": self.seed,
                "level": self.level,
                "entropy_rate_block": self.rate_block,
                "spectrum_block": self.spectrum.block.to_dict() if self.spectrum.block else None,
            },
            "settings": dict(self.settings),
            "input": self.read,
            "notes": list(self.notes),
        }


def contract(results: Sequence[ProfileResult], parameters: dict | None = None) -> dict:
    """The whole JSON document: format, version, caution, parameters and the ``sources`` list."""
    return {
        "format": FORMAT,
        "version": VERSION,
        "caution": CAUTION_GENERAL,
        "parameters": dict(parameters or {}),
        "sources": [r.to_dict() for r in results],
    }


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


def _predictor_code_length(arr: SymbolArray):
    """The online predictor's code length in bits per symbol as an EntropyEstimate (an upper bound)."""
    from fractalseq.predict import _predictor as predict

    res = predict.online_code_length(arr)
    A = arr.alphabet.size
    bits = float(res.bits_per_symbol)
    details = {
        "total_bits": float(res.total_bits),
        "top1": float(res.top1_accuracy),
        "top3": float(res.top3_accuracy),
        "calibration_error": float(res.expected_calibration_error),
        "depths": [int(d) for d in res.depths],
        "cells_stored": int(res.memory.cells_stored),
        "evictions": int(res.memory.evictions),
    }
    return ent.EntropyEstimate(
        quantity="entropy rate upper bound", method="online predictor", estimate=bits, unit="bits/symbol",
        fraction_of_max=bits / math.log2(A), reliable=True,
        note="predict-then-update code length of the count-based predictor: an upper bound on the information content",
        details=details,
    )


# -------------------------------------------------------------- the profile
def profile_source(
    arr: SymbolArray | SymbolStream,
    *,
    ratio: float = 0.5,
    qs: Sequence[float] = (0.0, 1.0, 2.0),
    depth: int | None = None,
    n_boot: int = DEFAULT_BOOT,
    seed: int = 0,
    level: float = 0.95,
    offsets: int = CONSISTENCY_OFFSETS,
    lz_max_length: int | None = LZ_MAX_LENGTH,
    compress_max_length: int | None = COMPRESS_MAX_LENGTH,
    absent_list: int = ABSENT_LIST,
    image: bool = True,
    progress: Callable[[str], None] | None = None,
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
        :func:`auto_depth` (three past the deepest reliable length, at most 12).
    n_boot:
        Block-bootstrap replicates of every interval (0: none; else at least 20).
    seed:
        Seed of every random step; the same seed gives the same result.
    level:
        Confidence level of the intervals.
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

    Returns
    -------
    ProfileResult
    """
    if isinstance(arr, SymbolStream):
        arr = arr.to_array()
    if not isinstance(arr, SymbolArray):
        raise InputError("profile_source needs a stream (SymbolArray or SymbolStream).")
    user_qs = check_qs(qs)
    k = check_ratio(ratio)
    if not isinstance(n_boot, (int, np.integer)) or n_boot < 0 or 0 < n_boot < 20:
        raise ParameterError(f"Bootstrap replicates must be 0 (none) or at least 20, not {n_boot!r}.")
    if not 0.5 < float(level) < 1:
        raise ParameterError(f"Confidence level {level} is outside (0.5, 1); use e.g. 0.95.")
    A = arr.alphabet.size
    if A < 2:
        raise InputError("The alphabet has fewer than 2 symbols; there is no complexity to measure.")
    L = len(arr)
    if L < 2:
        raise InputError(f"The stream has {L} symbol(s); a profile needs at least 2.")
    N = check_depth(arr.alphabet, auto_depth(L, arr.alphabet) if depth is None else depth)
    if N < 2:
        raise ParameterError("The depth must be at least 2 for entropy-rate estimates; use --depth 2 or more.")
    notes: list[str] = []
    timings: dict[str, float] = {}
    step_start = [time.perf_counter()]
    current = [""]

    def step(name: str) -> None:
        now = time.perf_counter()
        if current[0]:
            timings[current[0]] = round(now - step_start[0], 4)
        current[0] = name
        step_start[0] = now
        if progress is not None and name:
            progress(name)

    corners = corner_layout(A)
    ov = overlap_check(k, corners)
    if ov.overlapping:
        notes.append(f"encoding: {ov.reason}")

    # 1. words, counted once
    step("counting words")
    wc = count_words(arr, N)

    # 2. block entropies and rate estimates
    step("block entropies")
    rows = tuple(ent.entropy_table(wc))
    rate_est = {m: ent.h_difference(wc, None, m) for m in ent.METHODS}
    renyi = tuple(ent.h_renyi(wc, q) for q in user_qs)
    topo = ent.h_topological_growth(wc)
    try:
        kos = ent.h_topological_koslicki(arr)
    except FractalseqError as exc:
        kos = None
        notes.append(f"Koslicki topological entropy: not computed ({exc})")

    # 3. dimensions and f(alpha) (user's orders plus a grid for the f(alpha) curve); the conditional
    #    Rényi rates of the consistency table come from the same bootstrap pass
    step("dimensions")
    all_qs = tuple(sorted(set(user_qs) | set(FALPHA_QS)))
    spec = sp.dimension_spectrum(arr, all_qs, ratio=k, n_boot=n_boot, seed=seed, level=level, falpha=True, rates=True)
    notes.extend(f"dimensions: {f}" for f in spec.flags)
    wc_spec = None
    if spec.route == "word counts":
        top = max(int(lv["n"]) for lv in spec.levels) if spec.levels else 1
        wc_spec = wc if top <= wc.depth else count_words(arr, top)
    scaling = _scaling_curves(spec, wc_spec, user_qs, k)
    # one block length for every interval of the profile (chosen once, for the deepest level used)
    block = spec.block

    # 4. intervals of the rate estimates by the block bootstrap (counts re-weighted, never recounted)
    step("entropy-rate intervals")
    n_rate = rate_est["grassberger"].depth or 0
    rate_block = None
    if n_boot > 0 and L >= 2 * (n_rate + 2):
        depths = (n_rate, n_rate + 1) if n_rate >= 1 else (1,)

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
            arr, depths, stat, n_boot=n_boot, seed=seed, block_length=block, spectra=True, batch_statistic=batch
        )
        lo, hi = boot.interval(level)
        for j, m in enumerate(ent.METHODS):
            if np.isfinite(lo[j]) and np.isfinite(hi[j]):
                rate_est[m] = rate_est[m].with_interval(lo[j], hi[j], f"{level:.0%} block bootstrap, {n_boot} replicates")
        rate_block = boot.block.to_dict()
        notes.extend(f"entropy-rate bootstrap: {n}" for n in boot.notes)
    elif n_boot > 0:
        notes.append("entropy-rate intervals: stream too short for the bootstrap")
    rates: dict[str, tuple[str, Any]] = {m: ("estimate", rate_est[m]) for m in ent.METHODS}

    # 5. consistency table (geometry against information)
    step("consistency table")
    consistency = None
    if L <= sp.TRANSIENT + 10:
        notes.append(f"consistency table: not computed, the stream has {L} symbols (needs more than {sp.TRANSIENT + 10})")
    else:
        info = None
        if spec.route == "word counts" and spec.rates:
            info = cons.RateResult(
                tuple(r for r in spec.rates if r.q in user_qs), block, int(n_boot) if block else 0, int(seed), L
            )
        try:
            consistency = cons.consistency_table(
                arr, user_qs, ratio=k, n_boot=n_boot, seed=seed, offsets=offsets, level=level,
                block_length=block, information=info,
                levels=spec.data_limit if spec.route == "word counts" and spec.data_limit else None,
            )
            notes.extend(f"consistency table: {f}" for f in consistency.flags)
        except FractalseqError as exc:
            notes.append(f"consistency table: not computed ({exc})")

    # 6. Lempel-Ziv, compressors, predictor
    step("Lempel-Ziv")
    try:
        rates["lz76"] = ("estimate", lz.h_lz76(arr, max_length=lz_max_length))
    except FractalseqError as exc:
        notes.append(f"LZ76: not computed ({exc})")
    step("compressors")
    try:
        rates["compressors"] = ("upper bound", ent.h_compressors(arr, max_length=compress_max_length))
    except FractalseqError as exc:
        notes.append(f"compressor bound: not computed ({exc})")
    step("online predictor")
    try:
        rates["online_predictor"] = ("upper bound", _predictor_code_length(arr))
    except FractalseqError as exc:
        notes.append(f"online predictor: not computed ({exc})")

    # 7. absent words
    step("absent words")
    absent = None
    try:
        absent = absent_mod.absent_words(wc, _absent_depth(L, wc), max_list=absent_list)
    except FractalseqError as exc:
        notes.append(f"absent words: not computed ({exc})")

    # 8. encoding image
    step("encoding image")
    img = None
    levels_img = None
    if image:
        levels_img = image_levels(L)
        img = density_image(points(arr, k), size=1 << levels_img)
    step("")

    # reliability notes from the estimators
    for name, (_, e) in rates.items():
        if e is not None and not e.reliable:
            notes.append(f"entropy rate ({name}): {e.note}")
    if not topo.reliable:
        notes.append(f"topological entropy: {topo.note}")
    if absent is not None and not absent.reliable:
        notes.append(f"absent words: {absent.note}")
    settings = {
        "lz_max_length": lz_max_length,
        "compress_max_length": compress_max_length,
        "consistency_offsets": offsets,
        "falpha_qs": list(FALPHA_QS),
        "image_pixels": None if levels_img is None else 1 << levels_img,
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
        entropy_rows=rows,
        rates=rates,
        renyi=renyi,
        topological=topo,
        koslicki=kos,
        consistency=consistency,
        absent=absent,
        scaling=scaling,
        image=img,
        image_levels=levels_img,
        read=_read_report(arr),
        rate_block=rate_block,
        settings=settings,
        notes=tuple(dict.fromkeys(notes)),
        timings=timings,
    )

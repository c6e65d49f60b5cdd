"""What a profile found: :class:`ProfileResult` (one source) and the scaling curves behind its D_q.

:meth:`ProfileResult.to_dict` is the public JSON object of one source (README,
"profile"); :func:`fractalseq.report.profile_json.contract` wraps a list of them
in the document.  Same input and seed, same JSON bytes.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Union

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.dimensions import _consistency as cons
from fractalseq.dimensions._consistency import ConsistencyResult
from fractalseq.dimensions._spectrum import SpectrumResult
from fractalseq.encoding import OverlapCheck
from fractalseq.entropy._bounds import RateChoice
from fractalseq.entropy._estimators import EntropyEstimate
from fractalseq.entropy._ordinal import OrdinalEntropy
from fractalseq.words._absent import WordReport

__all__ = ["JsonValue", "ProfileResult", "RATE_NAMES", "ScalingCurve"]

#: Readable names of the entropy-rate estimators (sentences of the notes and reports).
RATE_NAMES = {
    "plugin": "plug-in H(n+1) - H(n)", "miller-madow": "Miller-Madow H(n+1) - H(n)",
    "grassberger": "Grassberger H(n+1) - H(n)", "lz76": "Lempel-Ziv 1976",
    "compressors": "the best compressor's code length", "online_predictor": "the online predictor's code length",
}

#: A value of a JSON document (what the tables and reports of a profile hold).
JsonValue = Union[None, bool, int, float, str, list["JsonValue"], dict[str, "JsonValue"]]


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


#: Consistency verdict of a profile made in quick mode (the table was not computed).
SKIPPED = "skipped"


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
        Entropy-rate estimates by name, each as ``(kind, estimate)`` with kind
        ``estimate`` or ``upper bound`` (``plugin``, ``miller-madow``, ``grassberger``
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
    image_levels:
        log2 of the image's side in pixels, or ``None``.
    read:
        What the reader reported (dropped symbols, records...).
    rate_block:
        The block length rule of the entropy-rate bootstrap (``None`` without one).
    settings:
        Prefix lengths and grids the profile used (part of the JSON).
    notes:
        Reliability notes and everything that was not computed, with the reason.
    timings:
        Seconds per step (not part of the JSON, which must not depend on the clock).
    permutation:
        :class:`fractalseq.entropy._ordinal.OrdinalEntropy` of a stream of ordinal patterns, else ``None``.
    rate_choice:
        :class:`fractalseq.entropy._bounds.RateChoice`: each rate against the bounds, and the figure to use.
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
    overlap: OverlapCheck
    spectrum: SpectrumResult
    entropy_rows: tuple[dict[str, JsonValue], ...]
    rates: dict[str, tuple[str, EntropyEstimate]]
    renyi: tuple[EntropyEstimate, ...]
    topological: EntropyEstimate
    koslicki: EntropyEstimate | None
    consistency: ConsistencyResult | None
    absent: WordReport | None
    scaling: tuple[ScalingCurve, ...]
    image: np.ndarray | None
    image_levels: int | None
    read: dict[str, JsonValue]
    rate_block: dict[str, JsonValue] | None
    settings: dict[str, JsonValue]
    notes: tuple[str, ...]
    timings: dict[str, float] = field(default_factory=dict, compare=False)
    permutation: OrdinalEntropy | None = None
    rate_choice: RateChoice | None = None
    quick: bool = False  # quick mode left the consistency table out (verdict ``skipped``)

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
                    "reliable": d.reliable,
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
        """The ``entropy_rate_bits`` object: estimator name → estimate, interval, notes and ``within_bounds``."""
        within = {} if self.rate_choice is None else self.rate_choice.within
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
                "within_bounds": within.get(name),
            }
        return out

    def consistency_rows(self) -> list[dict]:
        """The ``consistency`` list of the JSON contract."""
        if self.consistency is None:
            return [
                {
                    "q": float(q), "dimension": None, "dimension_bits": None, "dimension_bits_low": None,
                    "dimension_bits_high": None, "entropy_bits": None, "entropy_bits_low": None,
                    "entropy_bits_high": None, "difference_bits": None,
                    "verdict": SKIPPED if self.quick else cons.TOO_LITTLE,
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
            "rate_to_use": None if self.rate_choice is None else self.rate_choice.to_dict(),
            "permutation_entropy": None if self.permutation is None else self.permutation.to_dict(),
        }

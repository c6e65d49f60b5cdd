"""Results of the Rényi dimensions: one estimate per q, f(alpha) points, and the spectrum of a stream or cloud."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import ClassVar, Mapping

from fractalseq.entropy._renyi_rates import RateEstimate
from fractalseq.errors import ParameterError
from fractalseq.resampling._block_length import BlockLength
from fractalseq.results import Estimate, Result


#: Notes that make a dimension estimate unreliable (they start with these words).
UNRELIABLE_NOTES = ("too little", "curved", "only", "negative q")


def is_reliable(estimate: float, notes: tuple[str, ...]) -> bool:
    """A finite estimate without a note that marks it unreliable (:data:`UNRELIABLE_NOTES`)."""
    return bool(math.isfinite(estimate)) and not any(n.startswith(UNRELIABLE_NOTES) for n in notes)


@dataclass(frozen=True, kw_only=True)
class DimensionEstimate(Estimate):
    """D_q with its interval and the scaling range used.

    ``n_lo``/``n_hi`` are depths (word route) or 1-based scale indices
    (geometric route); ``eps_lo``/``eps_hi`` the box sides at the ends.
    ``local`` holds the per-level differences (a local dimension per depth),
    ``stderr`` the bootstrap standard error, ``fit_stderr`` the WLS
    residual standard error (ignores correlation between levels).
    ``notes`` (JSON key ``flags`` too) say what limits the estimate;
    ``reliable`` is False when one of them marks it unreliable or it is NaN.
    """

    _aliases: ClassVar[Mapping[str, str]] = {"flags": "notes"}

    q: float
    stderr: float
    fit_stderr: float
    n_lo: int | None
    n_hi: int | None
    eps_lo: float | None
    eps_hi: float | None
    method: str
    range_rule: str
    local: tuple[float, ...]
    lattice_stderr: float | None = None

    @property
    def flags(self) -> tuple[str, ...]:
        """The notes (older name)."""
        return self.notes


@dataclass(frozen=True)
class FAlphaPoint(Result):
    """One point of the f(alpha) spectrum (Chhabra–Jensen direct method) with intervals."""

    q: float
    alpha: float
    alpha_low: float
    alpha_high: float
    f: float
    f_low: float
    f_high: float
    n_lo: int | None
    n_hi: int | None
    flags: tuple[str, ...]



@dataclass(frozen=True)
class SpectrumResult(Result):
    """Rényi dimensions (and f(alpha)) of a stream or point cloud.

    Attributes
    ----------
    route:
        ``"word counts"`` or ``"geometric box counting"``.
    ratio:
        Contraction ratio k (``None`` for a bare point cloud).
    length:
        Symbols (or points) used.
    dims:
        One :class:`DimensionEstimate` per q, in the order asked.
    falpha:
        f(alpha) points, one per q (empty when not asked).
    levels:
        Per level (depth or scale): ``{"n", "eps", "distinct", "occurrences", "unseen"}``.
    data_limit, complete_limit:
        Deepest level not starved of data, and deepest with every box hit.
    block:
        Block length and its rule (``None`` without bootstrap).
    scheme, n_boot, seed, level, interval:
        Bootstrap settings.
    flags:
        Notes that apply to every row.
    rates:
        Conditional-form Rényi entropy rates from the same bootstrap (word route, when asked).
    """

    route: str
    ratio: float | None
    length: int
    dims: tuple[DimensionEstimate, ...]
    falpha: tuple[FAlphaPoint, ...]
    levels: tuple[dict, ...]
    data_limit: int | None
    complete_limit: int | None
    block: BlockLength | None
    scheme: str
    n_boot: int
    seed: int
    level: float
    interval: str
    flags: tuple[str, ...] = field(default=())
    rates: tuple[RateEstimate, ...] = field(default=())

    def get(self, q: float) -> DimensionEstimate:
        """The estimate for order ``q``."""
        for d in self.dims:
            if d.q == float(q):
                return d
        raise ParameterError(f"q = {q} was not computed; ask for it in qs.", parameter="q")

    def rows(self) -> list[dict]:
        """One flat dict per q (for tables and CSV)."""
        return [
            {
                "q": d.q,
                "D_q": d.estimate,
                "low": d.low,
                "high": d.high,
                "stderr": d.stderr,
                "n_lo": d.n_lo,
                "n_hi": d.n_hi,
                "flags": "; ".join(d.flags),
            }
            for d in self.dims
        ]


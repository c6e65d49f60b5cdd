"""Results of the Rényi dimensions: one estimate per q, f(alpha) points, and the spectrum of a stream or cloud."""

from __future__ import annotations

from dataclasses import dataclass, field

from fractalseq.entropy._renyi_rates import RateEstimate
from fractalseq.errors import ParameterError
from fractalseq.resampling import _bootstrap as bs


@dataclass(frozen=True)
class DimensionEstimate:
    """D_q with its interval and the scaling range used.

    ``n_lo``/``n_hi`` are depths (word route) or 1-based scale indices
    (geometric route); ``eps_lo``/``eps_hi`` the box sides at the ends.
    ``local`` holds the per-level differences (a local dimension per depth),
    ``stderr`` the bootstrap standard error, ``fit_stderr`` the WLS
    residual standard error (ignores correlation between levels).
    """

    q: float
    estimate: float
    low: float
    high: float
    stderr: float
    fit_stderr: float
    n_lo: int | None
    n_hi: int | None
    eps_lo: float | None
    eps_hi: float | None
    method: str
    range_rule: str
    flags: tuple[str, ...]
    local: tuple[float, ...]
    lattice_stderr: float | None = None

    def to_dict(self) -> dict:
        return {
            "q": self.q,
            "estimate": self.estimate,
            "low": self.low,
            "high": self.high,
            "stderr": self.stderr,
            "fit_stderr": self.fit_stderr,
            "n_lo": self.n_lo,
            "n_hi": self.n_hi,
            "eps_lo": self.eps_lo,
            "eps_hi": self.eps_hi,
            "method": self.method,
            "range_rule": self.range_rule,
            "flags": list(self.flags),
            "local": list(self.local),
            "lattice_stderr": self.lattice_stderr,
        }


@dataclass(frozen=True)
class FAlphaPoint:
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

    def to_dict(self) -> dict:
        return {
            "q": self.q,
            "alpha": self.alpha,
            "alpha_low": self.alpha_low,
            "alpha_high": self.alpha_high,
            "f": self.f,
            "f_low": self.f_low,
            "f_high": self.f_high,
            "n_lo": self.n_lo,
            "n_hi": self.n_hi,
            "flags": list(self.flags),
        }


@dataclass(frozen=True)
class SpectrumResult:
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
    block: bs.BlockLength | None
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
        raise ParameterError(f"q = {q} was not computed; ask for it in qs.")

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

    def to_dict(self) -> dict:
        return {
            "route": self.route,
            "ratio": self.ratio,
            "length": self.length,
            "dims": [d.to_dict() for d in self.dims],
            "falpha": [p.to_dict() for p in self.falpha],
            "levels": list(self.levels),
            "data_limit": self.data_limit,
            "complete_limit": self.complete_limit,
            "block": self.block.to_dict() if self.block else None,
            "scheme": self.scheme,
            "n_boot": self.n_boot,
            "seed": self.seed,
            "level": self.level,
            "interval": self.interval,
            "flags": list(self.flags),
            "rates": [r.to_dict() for r in self.rates],
        }

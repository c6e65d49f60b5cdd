"""The result of every entropy estimator: :class:`EntropyEstimate` (bits, unit, reliability, interval)."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field

from fractalseq.results import Estimate


LN2 = math.log(2.0)


@dataclass(frozen=True, kw_only=True)
class EntropyEstimate(Estimate):
    """One entropy estimate with its unit, reliability and (optional) interval.

    Attributes
    ----------
    quantity:
        What is estimated: ``block entropy``, ``entropy rate``, ``Renyi entropy rate``,
        ``topological entropy``, ``entropy rate upper bound``.
    method:
        Estimator (``plugin``, ``miller-madow``, ``grassberger``, ``difference/grassberger``,
        ``lz76``, ``koslicki``, ``growth``, ``compressors`` ...).
    estimate:
        Value in bits (``unit`` says per block or per symbol).
    unit:
        ``bits`` (per block) or ``bits/symbol``.
    nats:
        The estimate in nats (derived).
    fraction_of_max:
        ``estimate`` divided by its maximum (``n log2 A`` or ``log2 A``); ``None`` when unknown.
    depth:
        Word length ``n`` the estimate is read at (``None`` when not depth-based).
    reliable:
        False when the data are too short for this estimate at this depth.
    note:
        Why it is unreliable, or what was done (cut to a prefix, counts rounded...);
        ``notes`` holds the same sentences one by one (derived).
    low, high:
        Interval in bits, when one was computed (see :meth:`with_interval`); ``None`` otherwise.
    q:
        Rényi order, for Rényi estimates.
    details:
        Extra numbers (counts, per-compressor sizes...).
    """

    low: float | None = None
    high: float | None = None
    notes: tuple[str, ...] = field(default=(), init=False)
    quantity: str
    method: str
    unit: str = "bits/symbol"
    nats: float = field(init=False)
    fraction_of_max: float | None = None
    depth: int | None = None
    note: str = ""
    q: float | None = None
    details: dict = field(default_factory=dict, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "nats", float(self.estimate) * LN2)
        object.__setattr__(self, "notes", tuple(x for x in self.note.split("; ") if x))

    @property
    def bits(self) -> float:
        """The estimate in bits (same as :attr:`estimate`)."""
        return self.estimate

    def with_interval(self, low: float, high: float, how: str = "") -> "EntropyEstimate":
        """A copy with the interval ``[low, high]`` (bits) attached; ``how`` is added to the note."""
        note = self.note if not how else (f"{self.note}; interval: {how}" if self.note else f"interval: {how}")
        return dataclasses.replace(self, low=float(low), high=float(high), note=note)

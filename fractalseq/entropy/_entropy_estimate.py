"""The result of every entropy estimator: :class:`EntropyEstimate` (bits, unit, reliability, interval)."""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass, field
from typing import Any


LN2 = math.log(2.0)


@dataclass(frozen=True)
class EntropyEstimate:
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
    fraction_of_max:
        ``estimate`` divided by its maximum (``n log2 A`` or ``log2 A``); ``None`` when unknown.
    depth:
        Word length ``n`` the estimate is read at (``None`` when not depth-based).
    reliable:
        False when the data are too short for this estimate at this depth.
    note:
        Why it is unreliable, or what was done (cut to a prefix, counts rounded...).
    low, high:
        Interval in bits, when one was computed (see :meth:`with_interval`).
    q:
        Rényi order, for Rényi estimates.
    details:
        Extra numbers (counts, per-compressor sizes...).
    """

    quantity: str
    method: str
    estimate: float
    unit: str = "bits/symbol"
    fraction_of_max: float | None = None
    depth: int | None = None
    reliable: bool = True
    note: str = ""
    low: float | None = None
    high: float | None = None
    q: float | None = None
    details: dict = field(default_factory=dict, compare=False)

    @property
    def bits(self) -> float:
        """The estimate in bits (same as :attr:`estimate`)."""
        return self.estimate

    @property
    def nats(self) -> float:
        """The estimate in nats."""
        return self.estimate * LN2

    def with_interval(self, low: float, high: float, how: str = "") -> "EntropyEstimate":
        """A copy with the interval ``[low, high]`` (bits) attached; ``how`` is added to the note."""
        note = self.note if not how else (f"{self.note}; interval: {how}" if self.note else f"interval: {how}")
        return dataclasses.replace(self, low=float(low), high=float(high), note=note)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary (NaN stays NaN; :func:`fractalseq.io._outputs.to_json` writes it as null)."""
        out = {
            "quantity": self.quantity,
            "method": self.method,
            "estimate": float(self.estimate),
            "unit": self.unit,
            "nats": float(self.nats),
            "fraction_of_max": None if self.fraction_of_max is None else float(self.fraction_of_max),
            "depth": self.depth,
            "reliable": bool(self.reliable),
            "note": self.note,
            "low": self.low,
            "high": self.high,
        }
        if self.q is not None:
            out["q"] = float(self.q)
        if self.details:
            out["details"] = dict(self.details)
        return out

"""The one result contract: frozen dataclasses whose JSON form is generated from their fields.

Every result of the package derives from :class:`Result`.  ``to_dict()`` walks
the fields in declaration order and uses the attribute names as JSON keys, so
an attribute and its key can never disagree.  A result that renamed an
attribute keeps the old JSON key through ``_aliases`` (old key -> attribute),
so existing consumers of the documents do not break.  A field declared with
``field(metadata={"json": False})`` stays out of the JSON form (large arrays
kept for figures, say).

Estimates share one shape, :class:`Estimate`: ``estimate``, ``low``,
``high``, ``reliable`` and ``notes`` (sentences that explain a flag or a
limit).  ``NaN`` stays ``NaN`` in the dictionary; the JSON writer
(:func:`fractalseq.io.to_json`) turns it into ``null``.
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass, field
from typing import Any, ClassVar, Mapping

import numpy as np


def to_plain(value: Any) -> Any:
    """A JSON-ready copy of ``value``: results, dataclasses, numpy values, tuples and mappings."""
    if isinstance(value, Result):
        return value.to_dict()
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        to_dict = getattr(value, "to_dict", None)
        if callable(to_dict):
            return to_dict()
        return {f.name: to_plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, np.ndarray):
        return [to_plain(v) for v in value.tolist()]
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, Mapping):
        return {str(k): to_plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_plain(v) for v in value]
    return value


@dataclass(frozen=True)
class Result:
    """Base of every result: frozen, with ``to_dict`` generated from the fields."""

    #: Old JSON key -> attribute name, for documents whose key predates a rename.
    _aliases: ClassVar[Mapping[str, str]] = {}

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary: one key per field (attribute name), then the aliases."""
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            if f.metadata.get("json", True) is False:
                continue
            out[f.name] = to_plain(getattr(self, f.name))
        for old, name in self._aliases.items():
            if name in out and old not in out:
                out[old] = out[name]
        return out


@dataclass(frozen=True)
class Estimate(Result):
    """A point estimate with its interval, a reliability flag and the notes that explain it.

    Attributes
    ----------
    estimate:
        The point estimate (NaN when it could not be computed).
    low, high:
        Interval ends (NaN when no interval was computed).
    reliable:
        False when the data are too short, the fit is poor, or a limit was crossed; the
        notes then say why.
    notes:
        Sentences explaining flags and limits (empty when there is nothing to say).
    """

    estimate: float
    low: float = float("nan")
    high: float = float("nan")
    reliable: bool = True
    notes: tuple[str, ...] = field(default=())


__all__ = ["CAUTION_GENERAL", "CAUTION_GENOMIC", "CAUTION_LOGS", "CAUTION_SERIES", "Estimate", "Result", "caution_for", "is_log_alphabet", "to_plain"]


# ------------------------------------------------------------------ cautions
#: Sequence alphabets whose output carries the genomic caution.
GENOMIC_ALPHABETS = frozenset({"dna", "rna", "protein"})
#: The alphabet name of event-log templates (see :mod:`fractalseq.sources.logs`).
LOG_ALPHABET = "templates"
CAUTION_GENOMIC = "Genomic output is for research, not for clinical decisions."
CAUTION_LOGS = "Reports on event logs (scans, surprise scores, drift, predicted events) are no security guarantee."
CAUTION_SERIES = (
    "Estimates of a measured series describe its symbols (the bins, thresholds or ordinal patterns read), "
    "not the raw values."
)
#: Alphabet names of symbolized numeric series (see :mod:`fractalseq.sources.numeric`).
_SERIES_ALPHABET = re.compile(r"(quantile|threshold|ordinal)\d+")
CAUTION_GENERAL = (
    "Genomic output is for research, not for clinical decisions; reports on event logs are no security guarantee."
)


def is_log_alphabet(alphabet: Any) -> bool:
    """True for an alphabet (or alphabet name) of log templates, also the union of several logs' (``joint-templates``)."""
    name = str(getattr(alphabet, "name", alphabet))
    return name == LOG_ALPHABET or name.endswith("-" + LOG_ALPHABET)


def caution_for(alphabet_names: Any) -> str:
    """The caution that fits the inputs, from their alphabet names (or alphabets).

    Logs only (template alphabets): :data:`CAUTION_LOGS`; sequences only (DNA, RNA,
    protein): :data:`CAUTION_GENOMIC`; symbolized numeric series only: :data:`CAUTION_SERIES`;
    anything else or a mix: :data:`CAUTION_GENERAL`.
    """
    names = {str(getattr(a, "name", a)).removeprefix("joint-") for a in alphabet_names}
    if names and all(_SERIES_ALPHABET.fullmatch(n) for n in names):
        return CAUTION_SERIES
    logs = any(is_log_alphabet(n) for n in names)
    genomic = bool(names & GENOMIC_ALPHABETS)
    if logs and not genomic:
        return CAUTION_LOGS
    if genomic and not logs:
        return CAUTION_GENOMIC
    return CAUTION_GENERAL

"""The profile's JSON document: format name, version, caution, parameters and one object per source.

:func:`contract` wraps the per-source objects (``ProfileResult.to_dict()``) in
the documented envelope (README, "profile"); it is shared by ``profile --json``
and the ``profile.json`` files of the report folders.
"""

from __future__ import annotations

from typing import Any, Protocol, Sequence

from fractalseq.results import CAUTION_GENOMIC, caution_for

__all__ = ["CAUTION_GENERAL", "CAUTION_GENOMIC", "FORMAT", "VERSION", "contract", "profile_caution"]

FORMAT = "fractalseq-profile"
VERSION = 1
ESTIMATES_NOTE = "Estimates describe the stream given, at its length; read the reliability notes before comparing numbers. "
CAUTION_GENERAL = ESTIMATES_NOTE + CAUTION_GENOMIC


def profile_caution(results: Sequence[Any]) -> str:
    """The caution of a profile document or page: the estimates note, then the caution that fits the inputs
    (genomes: research only; logs: no security guarantee; see :func:`fractalseq.results.caution_for`)."""
    return ESTIMATES_NOTE + caution_for([getattr(r, "alphabet", "") for r in results])


class _Source(Protocol):
    def to_dict(self) -> dict[str, Any]: ...


def contract(results: Sequence[_Source], parameters: dict | None = None) -> dict:
    """The whole JSON document: format, version, caution, parameters and the ``sources`` list."""
    return {
        "format": FORMAT,
        "version": VERSION,
        "caution": profile_caution(results),
        "parameters": dict(parameters or {}),
        "sources": [r.to_dict() for r in results],
    }

"""The profile's JSON document: format name, version, caution, parameters and one object per source.

:func:`contract` wraps the per-source objects (``ProfileResult.to_dict()``) in
the documented envelope (README, "profile"); it is shared by ``profile --json``
and the ``profile.json`` files of the report folders.
"""

from __future__ import annotations

from typing import Any, Protocol, Sequence

__all__ = ["CAUTION_GENERAL", "CAUTION_GENOMIC", "CAUTION_LOGS", "FORMAT", "VERSION", "contract"]

FORMAT = "fractalseq-profile"
VERSION = 1
CAUTION_GENOMIC = "Genomic output is for research, not for clinical decisions."
CAUTION_GENERAL = (
    "Estimates describe the stream given, at its length; read the reliability notes before comparing numbers. "
    + CAUTION_GENOMIC
)
#: the caution of profiles of event logs only
CAUTION_LOGS = (
    "Estimates describe the stream given, at its length; read the reliability notes before comparing numbers. "
    "Reports on event logs are no security guarantee."
)


class _Source(Protocol):
    def to_dict(self) -> dict[str, Any]: ...


def contract(results: Sequence[_Source], parameters: dict | None = None) -> dict:
    """The whole JSON document: format, version, caution, parameters and the ``sources`` list."""
    return {
        "format": FORMAT,
        "version": VERSION,
        "caution": CAUTION_GENERAL,
        "parameters": dict(parameters or {}),
        "sources": [r.to_dict() for r in results],
    }

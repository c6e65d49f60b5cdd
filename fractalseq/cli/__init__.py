"""The ``fractalseq`` command line (typer).  Parsing and formatting only; the math lives in the library.

``main(argv)`` runs a command and returns its exit status; ``app`` is the typer
application; ``OPTION_OF`` maps library parameter names to the options that set
them.  Names load on first use, so importing a command module stays cheap.
"""

from __future__ import annotations

import importlib
from typing import Any

_NAMES: dict[str, str] = {
    "app": "fractalseq.cli.app",
    "main": "fractalseq.cli.app",
    "entry": "fractalseq.cli.app",
    "EXIT_OK": "fractalseq.cli.app",
    "EXIT_FOUND": "fractalseq.cli.app",
    "EXIT_USAGE": "fractalseq.cli.app",
    "OPTION_OF": "fractalseq.cli.common",
}

__all__ = sorted(_NAMES)  # noqa: PLE0605 - the lazy names are the table above


def __getattr__(name: str) -> Any:
    """Load a public name from its module on first use (PEP 562)."""
    module = _NAMES.get(name)
    if module is None:
        raise AttributeError(f"module 'fractalseq.cli' has no attribute {name!r}")
    return getattr(importlib.import_module(module), name)


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))

"""Turning command-line paths into symbol streams (shared by every command)."""

from __future__ import annotations

from pathlib import Path

from fractalseq.errors import InputError
from fractalseq.stream import SymbolArray, SymbolStream


def open_input(path: str, fmt: str, alphabet: str, policy: str, **options) -> SymbolStream:
    """Open one input (``-`` is standard input) with the readers of :mod:`fractalseq.sources`."""
    from fractalseq.sources import open_source

    return open_source(path, fmt=fmt, alphabet=alphabet, policy=policy, **options)


def read_input(path: str, fmt: str, alphabet: str, policy: str, **options) -> SymbolArray:
    """Open and read one input into memory, refusing an input with no symbols."""
    arr = open_input(path, fmt, alphabet, policy, **options).to_array()
    if len(arr) == 0:
        raise InputError(f"{path} holds no usable symbols; check the file and the --alphabet/--format options.")
    return arr


def safe_stem(path: str) -> str:
    """A file-system-safe name derived from an input path (``stdin`` for ``-``)."""
    if path == "-":
        return "stdin"
    name = Path(path).name
    for suffix in (".gz", ".bz2", ".xz", ".zst"):
        if name.endswith(suffix):
            name = name[: -len(suffix)]
    keep = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in name)
    return keep.strip("._") or "input"

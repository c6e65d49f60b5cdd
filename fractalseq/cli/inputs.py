"""Command-line paths and reader options, handed to the library's one reader-options object.

The decisions (validation, numeric cut points) live in
:class:`fractalseq.jobs._inputs.ReaderOptions`; this module only builds it from
the options as typed and keeps the small helpers older command modules call.
"""

from __future__ import annotations

from pathlib import Path

from fractalseq.jobs._inputs import DEFAULT_BINS, ReaderOptions
from fractalseq.stream import SymbolArray, SymbolStream

__all__ = ["DEFAULT_BINS", "open_input", "read_input", "reader", "reader_options", "safe_stem", "shared_numeric_cuts"]


def reader(
    fmt: str = "auto", alphabet: str = "dna", policy: str = "break", column: str | None = None,
    bins: int = DEFAULT_BINS, thresholds: str | None = None, ordinal: int = 0,
    delay: int = 1, ties: str = "time", seed: int = 0,
) -> ReaderOptions:
    """The reader options of a command (``--format``, ``--alphabet``, ``--unknown`` and the numeric options)."""
    return ReaderOptions.parse(fmt, alphabet, policy, column, bins, thresholds, ordinal, delay, ties, seed)


def reader_options(column: str | None, bins: int = DEFAULT_BINS, thresholds: str | None = None, ordinal: int = 0,
                   delay: int = 1, ties: str = "time", seed: int = 0) -> dict:
    """The numeric reader options that differ from the defaults, as keywords of ``open_source``."""
    return ReaderOptions.parse(column=column, bins=bins, thresholds=thresholds, ordinal=ordinal,
                               delay=delay, ties=ties, seed=seed).numeric_options()


def _options(fmt: str, alphabet, policy: str, options: dict) -> ReaderOptions:
    return ReaderOptions.from_numeric(fmt, alphabet, policy, options)


def shared_numeric_cuts(baseline: list[str], fmt: str, options: dict, bins: int = DEFAULT_BINS) -> tuple[dict, str]:
    """Numeric options cutting every batch at the baseline's quantiles (:meth:`ReaderOptions.with_baseline_cuts`)."""
    opts = dict(options)
    opts.setdefault("bins", bins)
    cut, note = _options(fmt, "dna", "break", opts).with_baseline_cuts(baseline)
    return cut.numeric_options(), note


def open_input(path: str, fmt: str, alphabet, policy: str, name: str | None = None, **options) -> SymbolStream:
    """Open one input (``-`` is standard input) with the given reader options."""
    return _options(fmt, alphabet, policy, options).open(path, name=name)


def read_input(path: str, fmt: str, alphabet, policy: str, **options) -> SymbolArray:
    """Open and read one input into memory, refusing an input with no symbols."""
    return _options(fmt, alphabet, policy, options).read(path)


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

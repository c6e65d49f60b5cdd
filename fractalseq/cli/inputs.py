"""Turning command-line paths into symbol streams (shared by every command)."""

from __future__ import annotations

from pathlib import Path

from fractalseq.errors import InputError, ParameterError
from fractalseq.stream import SymbolArray, SymbolStream

#: Number of quantile bins of numeric input when --bins is not given (the reader's default).
DEFAULT_BINS = 4


def open_input(path: str, fmt: str, alphabet: str, policy: str, **options) -> SymbolStream:
    """Open one input (``-`` is standard input) with the readers of :mod:`fractalseq.sources`."""
    from fractalseq.sources import open_source

    return open_source(path, fmt=fmt, alphabet=alphabet, policy=policy, **options)


def reader_options(column: str | None, bins: int = DEFAULT_BINS, thresholds: str | None = None, ordinal: int = 0) -> dict:
    """The numeric reader options (``--column``, ``--bins``, ``--thresholds``, ``--ordinal``) for ``open_source``.

    Only options that differ from the reader's defaults are returned, so a run
    that does not use them keeps the same parameters (cache keys, JSON) as before.
    Impossible values raise :class:`ParameterError` before anything is read.
    """
    from fractalseq.sources import numeric

    opts: dict = {}
    if column is not None:
        opts["column"] = column
    if bins != DEFAULT_BINS:
        opts["bins"] = int(bins)
    edges = None
    if thresholds is not None and thresholds.strip():
        try:
            edges = tuple(float(t) for t in thresholds.replace(" ", "").split(",") if t)
        except ValueError:
            raise ParameterError(f"--thresholds must be numbers separated by commas (e.g. 0.2,0.5,0.8), not {thresholds!r}.") from None
        opts["thresholds"] = edges
    if ordinal:
        opts["ordinal"] = int(ordinal)
    numeric.check_parameters(int(bins), None if edges is None else list(edges), int(ordinal))
    return opts


def shared_numeric_cuts(baseline: list[str], fmt: str, reader: dict, bins: int = DEFAULT_BINS) -> tuple[dict, str]:
    """Reader options that cut every batch at the baseline's quantiles when the input is numeric and binned.

    Returns the options to read both batches with and a note for the report
    (empty when nothing changed: not numeric, fixed thresholds, or ordinal patterns).
    """
    from fractalseq.sources import detect_format, shared_quantile_edges

    if not baseline or "thresholds" in reader or reader.get("ordinal"):
        return reader, ""
    kind = fmt
    if fmt == "auto" and baseline[0] != "-":
        from fractalseq.errors import FractalseqError

        try:
            kind = detect_format(baseline[0])
        except FractalseqError:
            return reader, ""  # reading the batch will say what is wrong
    if kind != "numeric":
        return reader, ""
    edges = shared_quantile_edges(baseline, int(reader.get("bins", bins)), reader.get("column"))
    out = {k: v for k, v in reader.items() if k != "bins"}
    out["thresholds"] = tuple(float(e) for e in edges)
    note = (
        f"numeric batches cut at the baseline's {len(edges) + 1}-quantiles ("
        + ", ".join(f"{e:.6g}" for e in edges)
        + ") so that a shift in level changes the symbols"
    )
    return out, note


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

"""How every job reads its inputs: one validated set of reader options, and the seed rule.

:class:`ReaderOptions` holds what decides the symbols of an input (format,
alphabet, unknown-symbol policy and the numeric reader's column, bins,
thresholds and ordinal order).  Every command and every Python caller reads
through it, so the same options give the same symbols whoever asks.
:meth:`ReaderOptions.with_baseline_cuts` is the rule that cuts numeric batches
at the quantiles of a baseline (drift, survey ``common_cuts``, predictor
training), so that a shift in level changes the symbols.
:func:`check_seed` is the one rule for seeds (a whole number with
``0 <= seed < 2**64``); it lives with the bootstrap settings
(:mod:`fractalseq.resampling._options`) and is offered here too.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, replace
from typing import Sequence

from fractalseq.alphabet import Alphabet, check_policy, resolve
from fractalseq.errors import FractalseqError, InputError, ParameterError
from fractalseq.resampling._options import check_seed
from fractalseq.stream import SymbolArray, SymbolStream

#: Quantile bins of numeric input when none are given (the numeric reader's default).
DEFAULT_BINS = 4

#: Window of ``scan`` and ``score`` for inputs that are not line-oriented (genomes, text), in symbols.
DEFAULT_SYMBOL_WINDOW = 10_000
#: Line-oriented inputs (logs, numeric columns): the default window gives at least this many windows...
MIN_WINDOWS = 50
#: ...but holds at least this many lines (rows).
MIN_LINE_WINDOW = 40

__all__ = [
    "DEFAULT_BINS", "DEFAULT_SYMBOL_WINDOW", "MIN_LINE_WINDOW", "MIN_WINDOWS", "ReaderOptions", "check_piece", "check_seed",
    "default_window", "parse_thresholds",
]


def check_piece(piece) -> int | None:
    """A piece size (symbols) for splitting one large source: a positive whole number, or ``None`` for the default."""
    if piece is None:
        return None
    whole = not isinstance(piece, bool) and hasattr(piece, "__index__")  # int, numpy integers; not bool, float or text
    if not whole or int(piece) < 1:
        raise ParameterError(f"The piece size must be a positive number of symbols, not {piece!r}.", parameter="piece")
    return int(piece)


def default_window(length: int, line_oriented: bool, overlapping: bool) -> int:
    """The default window (symbols) of ``scan`` (``overlapping``: step = window / 4) or ``score`` (windows side by side).

    Genomes and other inputs: :data:`DEFAULT_SYMBOL_WINDOW`.  Line-oriented inputs (one
    symbol per log line or per numeric row): the largest window that still gives
    :data:`MIN_WINDOWS` windows, but at least :data:`MIN_LINE_WINDOW` lines.
    """
    if not line_oriented:
        return DEFAULT_SYMBOL_WINDOW
    n = max(0, int(length))
    if overlapping:  # windows = (n - w) // (w // 4) + 1
        w = max(MIN_LINE_WINDOW, (4 * n) // (MIN_WINDOWS + 3))
        while w > MIN_LINE_WINDOW and (n - w) // max(1, w // 4) + 1 < MIN_WINDOWS:
            w -= 1
        return w
    return max(MIN_LINE_WINDOW, n // MIN_WINDOWS)


def parse_thresholds(text: str | None) -> tuple[float, ...] | None:
    """``"0.2,0.5,0.8"`` as a tuple of floats; ``None`` or a blank text gives ``None``."""
    if text is None or not str(text).strip():
        return None
    try:
        return tuple(float(t) for t in str(text).replace(" ", "").split(",") if t)
    except ValueError:
        raise ParameterError(
            f"The thresholds must be numbers separated by commas (e.g. 0.2,0.5,0.8), not {text!r}.", parameter="thresholds"
        ) from None


@dataclass(frozen=True)
class ReaderOptions:
    """Everything that decides the symbols read from an input, validated when made.

    Attributes
    ----------
    fmt:
        ``auto``, ``fasta``, ``fastq``, ``text``, ``tokens``, ``log`` or ``numeric``.
    alphabet:
        Preset name, ``learn``, ``symbols:...`` or an :class:`~fractalseq.alphabet.Alphabet`.
    policy:
        Unknown symbols: ``break``, ``skip`` or ``error``.
    column:
        numeric: column name or 0-based index (``None``: the first numeric column).
    bins:
        numeric: number of equal-frequency bins.
    thresholds:
        numeric: fixed, increasing bin edges instead of quantiles.
    ordinal:
        numeric: ordinal-pattern order (0: bins or thresholds).
    delay:
        numeric, ordinal patterns: embedding delay in samples (default 1).
    ties:
        numeric, ordinal patterns: equal values ordered by ``time`` (default) or by a seeded ``dither``.
    seed:
        numeric, ``ties="dither"``: seed of the dither (the command's ``--seed``).

    Raises
    ------
    ParameterError
        An unknown format, policy or alphabet name, or impossible numeric options,
        before anything is read.
    """

    fmt: str = "auto"
    alphabet: str | Alphabet = "dna"
    policy: str = "break"
    column: str | int | None = None
    bins: int = DEFAULT_BINS
    thresholds: tuple[float, ...] | None = None
    ordinal: int = 0
    delay: int = 1
    ties: str = "time"
    seed: int = 0

    def __post_init__(self) -> None:
        from fractalseq.sources import numeric
        from fractalseq.sources.sniff import FORMATS

        if self.fmt not in FORMATS:
            raise ParameterError(f"Format {self.fmt!r} is not known; use one of {', '.join(FORMATS)}.", parameter="fmt")
        try:
            check_policy(self.policy)
        except ParameterError as exc:
            raise ParameterError(str(exc), parameter="policy") from None
        if isinstance(self.alphabet, str):
            if not self.alphabet.startswith("symbols:"):
                try:
                    resolve(self.alphabet)
                except ParameterError as exc:
                    raise ParameterError(str(exc), parameter="alphabet") from None
        elif not isinstance(self.alphabet, Alphabet):
            raise ParameterError(
                f"The alphabet must be a name, 'learn', 'symbols:...' or an Alphabet, not {type(self.alphabet).__name__}.",
                parameter="alphabet",
            )
        for name in ("bins", "ordinal", "delay"):
            value = getattr(self, name)
            if isinstance(value, bool) or not hasattr(value, "__index__"):
                raise ParameterError(f"The {name} option must be a whole number, not {value!r}.", parameter=name)
            object.__setattr__(self, name, int(value))
        if self.thresholds is not None:
            object.__setattr__(self, "thresholds", tuple(float(t) for t in self.thresholds))
        try:
            numeric.check_parameters(self.bins, None if self.thresholds is None else list(self.thresholds), self.ordinal,
                                     self.delay, self.ties)
        except ParameterError as exc:
            if exc.parameter is not None:
                raise
            which = "ordinal" if self.ordinal else "thresholds" if self.thresholds is not None else "bins"
            raise ParameterError(str(exc), parameter=which) from None
        object.__setattr__(self, "seed", check_seed(self.seed))

    @classmethod
    def parse(
        cls,
        fmt: str = "auto",
        alphabet: str | Alphabet = "dna",
        policy: str = "break",
        column: str | int | None = None,
        bins: int = DEFAULT_BINS,
        thresholds: str | None = None,
        ordinal: int = 0,
        delay: int = 1,
        ties: str = "time",
        seed: int = 0,
    ) -> "ReaderOptions":
        """Reader options from text as typed (thresholds ``"0.2,0.5,0.8"``)."""
        return cls(fmt, alphabet, policy, column, bins, parse_thresholds(thresholds), ordinal, delay, ties, seed)

    @classmethod
    def from_numeric(cls, fmt: str = "auto", alphabet: str | Alphabet = "dna", policy: str = "break",
                     options: dict | None = None) -> "ReaderOptions":
        """Reader options from :meth:`numeric_options` as stored (a cache key, a model file, a survey's options)."""
        extra = dict(options or {})
        thresholds = extra.get("thresholds")
        return cls(fmt, alphabet, policy, extra.get("column"), extra.get("bins", DEFAULT_BINS),
                   None if thresholds is None else tuple(thresholds), extra.get("ordinal", 0),
                   extra.get("delay", 1), extra.get("ties", "time"), extra.get("seed", 0))

    # ------------------------------------------------------------ views
    def numeric_options(self) -> dict:
        """The numeric reader's keyword options that differ from its defaults.

        A run that does not use them keeps the same parameters (cache keys,
        JSON documents) as one that never heard of them.
        """
        opts: dict = {}
        if self.column is not None:
            opts["column"] = self.column
        if self.bins != DEFAULT_BINS:
            opts["bins"] = self.bins
        if self.thresholds is not None:
            opts["thresholds"] = self.thresholds
        if self.ordinal:
            opts["ordinal"] = self.ordinal
        if self.delay != 1:
            opts["delay"] = self.delay
        if self.ties != "time":
            opts["ties"] = self.ties
            opts["seed"] = self.seed  # the dither's seed changes the symbols
        return opts

    # ---------------------------------------------------------- reading
    def per_column(self, path: str | os.PathLike) -> list[tuple[str | None, "ReaderOptions"]]:
        """One ``(column, options)`` per source that ``path`` gives with these options.

        A multi-column choice (``column="a,b"``, ``"0,2"`` or ``"all"``) gives one entry per
        column, each reading that column alone; otherwise the one entry is ``(None, self)``.
        """
        from fractalseq.sources import numeric_columns

        names = numeric_columns(path, self.column, self.fmt) if isinstance(self.column, str) else None
        if names is None:
            return [(None, self)]
        return [(c, replace(self, column=c)) for c in names]

    def open(self, path: str | os.PathLike, name: str | None = None) -> SymbolStream:
        """Open one input (``-`` is standard input) as a stream with these options."""
        from fractalseq.sources import open_source

        extra = self.numeric_options()
        if "thresholds" in extra:
            extra["thresholds"] = list(extra["thresholds"])
        return open_source(path, fmt=self.fmt, alphabet=self.alphabet, policy=self.policy, name=name, **extra)

    def read(self, path: str | os.PathLike, name: str | None = None) -> SymbolArray:
        """Open and read one input into memory, refusing an input with no symbols."""
        return self.read_ranged(path, name)[0]

    def read_ranged(self, path: str | os.PathLike, name: str | None = None) -> tuple[SymbolArray, object | None]:
        """:meth:`read`, and the byte reader with which workers can read the file apart (``None`` when they cannot)."""
        stream = self.open(path, name)
        arr = stream.to_array()
        if len(arr) == 0:
            raise InputError(f"{path} holds no usable symbols; check the file, its format and the alphabet.")
        return arr, getattr(stream, "byte_reader", None)

    def with_baseline_cuts(self, baseline: Sequence[str | os.PathLike]) -> tuple["ReaderOptions", str]:
        """These options with numeric inputs cut at the pooled quantiles of the ``baseline`` files.

        Returns the options to read every batch with and a note for the report.
        Nothing changes (and the note is empty) when the input is not numeric,
        when fixed thresholds or ordinal patterns are asked for, or when there
        is no baseline.
        """
        from fractalseq.sources import detect_format, shared_quantile_edges

        if not baseline or self.thresholds is not None or self.ordinal:
            return self, ""
        kind = self.fmt
        if kind == "auto" and str(baseline[0]) != "-":
            try:
                kind = detect_format(baseline[0])
            except FractalseqError:
                return self, ""  # reading the batch will say what is wrong
        if kind != "numeric":
            return self, ""
        edges = tuple(float(e) for e in shared_quantile_edges(list(baseline), self.bins, self.column))
        note = (
            f"numeric batches cut at the baseline's {len(edges) + 1}-quantiles ("
            + ", ".join(f"{e:.6g}" for e in edges)
            + ") so that a shift in level changes the symbols"
        )
        return replace(self, bins=DEFAULT_BINS, thresholds=edges), note

"""Input readers: every kind of input becomes a :class:`~fractalseq.stream.SymbolStream`.

>>> from fractalseq.sources import open_source
>>> stream = open_source("genome.fa.xz")                       # doctest: +SKIP
>>> for chunk in stream.chunks(): ...                          # doctest: +SKIP
>>> stream.report.to_dict()                                    # doctest: +SKIP

Formats (``fmt``)
-----------------
``fasta``, ``fastq``
    Multi-record sequence files (see :mod:`fractalseq.sources.sequence`).
``text``
    Plain text: plain sequence for sequence alphabets, characters otherwise
    (:mod:`fractalseq.sources.text`).
``tokens``
    Whitespace-separated tokens, one symbol each.
``log``
    Event lines reduced to templates (:mod:`fractalseq.sources.logs`,
    :func:`line_template`).
``numeric``
    A numeric column symbolized by quantile bins, thresholds or ordinal
    patterns (:mod:`fractalseq.sources.numeric`).
``auto``
    Chosen from the content (rules in :mod:`fractalseq.sources.sniff`).

Compression (gzip, bzip2, xz, Zstandard) is recognised by content and
undone on the fly; ``"-"`` reads standard input, which is held in memory
(read once, served for every pass).  Files are otherwise streamed: memory is
bounded by ``chunk_size``, except that quantile binning keeps the numeric
column's values for its first pass.

Errors found while opening (missing path, folder, empty or binary content,
format mismatch, learning pass) are raised by :func:`open_source`; errors in
the body (unknown symbols under the error policy, a truncated archive, no
symbol at all) are raised while the stream is iterated.  All are
:class:`~fractalseq.errors.InputError` or
:class:`~fractalseq.errors.ParameterError` with a one-sentence message.
"""

from __future__ import annotations

import functools
import inspect
import os
from typing import Iterator, Sequence

import numpy as np

from fractalseq import alphabet as _alpha
from fractalseq.alphabet import Alphabet, check_policy
from fractalseq.errors import InputError, ParameterError
from fractalseq.sources import logs, numeric, sequence, sniff, text
from fractalseq.sources.rawio import Origin, head, locate, spool
from fractalseq.sources.sniff import FORMATS
from fractalseq.sources.templates import line_template
from fractalseq.stream import DEFAULT_CHUNK, Chunk, ReadReport, SymbolStream

__all__ = ["FORMATS", "detect_format", "line_template", "numeric_columns", "open_source", "shared_quantile_edges"]

_LEARN_BLOCK = 1 << 16


def _resolve(spec: str | Alphabet | None) -> Alphabet | None:
    if spec is None or isinstance(spec, Alphabet):
        return spec
    if not isinstance(spec, str):
        raise ParameterError(f"The alphabet must be a name, 'learn', 'symbols:...' or an Alphabet; got {type(spec).__name__}.", parameter="alphabet")
    return _alpha.resolve(spec)


def _token_alphabet(spec: str | Alphabet | None) -> Alphabet | None:
    """Tokens use an explicit alphabet only (an Alphabet, or symbols:a,b,c); preset names mean learn."""
    if isinstance(spec, Alphabet):
        return spec
    if isinstance(spec, str) and spec.startswith("symbols:"):
        body = spec[len("symbols:"):]
        items = [s.strip() for s in body.split(",")] if "," in body else list(body)
        items = [s for s in items if s]
        if not items:
            raise ParameterError("The alphabet 'symbols:' lists no symbols; write e.g. symbols:up,down,flat.", parameter="alphabet")
        return _alpha.from_symbols(items, name="tokens")
    _resolve(spec)  # still reject misspelled names
    return None


def _byte_path(a: Alphabet) -> bool:
    """True when text can be read byte by byte through ``a.byte_table()``."""
    if not a.single_characters:
        return False
    return a.name == "bytes" or all(ord(s) < 128 for s in a.symbols)


def _follows(spec: str | Alphabet | None) -> bool:
    """True when the alphabet is a sequence preset given by name: a detected log or table brings its own."""
    return isinstance(spec, str) and spec in sniff.SEQUENCE_PRESETS


def _prepare(
    path: str | os.PathLike, fmt: str, a: Alphabet | None, allow_binary: bool, follow: bool = False
) -> tuple[Origin, str, bytes]:
    origin = locate(path)
    block = head(origin)
    sniff.check_content(block, origin.name, allow_binary)
    if fmt == "auto":
        fmt, why = sniff.detect_with_reason(block, a, origin.name, follow)
        origin.notes.append(f"format {fmt} ({why})")
    else:
        sniff.check_declared(fmt, block, origin.name)
    return origin, fmt, block


def detect_format(path: str | os.PathLike, alphabet: str | Alphabet | None = "dna") -> str:
    """The format ``fmt="auto"`` would choose for ``path`` (rules in :mod:`fractalseq.sources.sniff`).

    Given ``"-"`` this consumes standard input; use it on files.
    """
    a = _resolve(alphabet)
    allow = a is not None and a.name == "bytes"
    return _prepare(path, "auto", a, allow, _follows(alphabet))[1]


def _remember_how(opener):
    """Decorate :func:`open_source` so a stream read from a regular file knows how to be read again
    (:attr:`SymbolStream.reread <fractalseq.stream.SymbolStream>`: the absolute path and every option)."""
    signature = inspect.signature(opener)

    @functools.wraps(opener)
    def opened(*args, **kwargs) -> SymbolStream:
        stream = opener(*args, **kwargs)
        bound = signature.bind(*args, **kwargs)
        bound.apply_defaults()
        options = dict(bound.arguments)
        path = options.pop("path")
        if str(path) != "-" and os.path.isfile(path):
            stream.reread = (os.path.abspath(os.fspath(path)), options)
        return stream

    return opened


@_remember_how
def open_source(
    path: str | os.PathLike,
    fmt: str = "auto",
    alphabet: str | Alphabet | None = "dna",
    policy: str = "break",
    *,
    column: str | int | None = None,
    bins: int = 4,
    thresholds: list[float] | None = None,
    ordinal: int = 0,
    delay: int = 1,
    ties: str = "time",
    seed: int = 0,
    chunk_size: int = DEFAULT_CHUNK,
    name: str | None = None,
) -> SymbolStream:
    """Open an input as a stream of symbol codes.

    Parameters
    ----------
    path:
        File path (compressed or not), or ``"-"`` for standard input (read
        once into memory).
    fmt:
        ``auto``, ``fasta``, ``fastq``, ``text``, ``tokens``, ``log`` or ``numeric``.
    alphabet:
        Preset name (``dna``, ``rna``, ``protein``, ``binary``, ``bytes``),
        ``"learn"`` or ``None`` (learned from the data in a first pass),
        ``"symbols:XYZ"``, or an :class:`~fractalseq.alphabet.Alphabet`.
        Logs always use their learned template table; numeric input uses the
        symbolization's own alphabet; tokens use an explicit alphabet only
        (an Alphabet or ``symbols:a,b,c``), otherwise learn.
    policy:
        Ambiguous/unknown symbols: ``break`` (end the segment), ``skip``
        (drop, counted) or ``error`` (raise :class:`InputError`).
    column:
        numeric: column name or 0-based index (default: first numeric column).
    bins:
        numeric: number of equal-frequency bins.
    thresholds:
        numeric: fixed bin edges instead of quantiles.
    ordinal:
        numeric: ordinal-pattern order ``m`` (2..8); 0 uses bins/thresholds.
    delay:
        numeric, ordinal patterns: embedding delay ``tau`` in samples (default 1).
    ties:
        numeric, ordinal patterns: equal values ordered by ``time`` (default) or by a
        seeded ``dither`` (see :mod:`fractalseq.sources.numeric`).
    seed:
        numeric, ``ties="dither"``: seed of the dither.
    chunk_size:
        Decompressed bytes read per block; no chunk holds more symbols.
    name:
        Name of the stream (default: the path, ``-`` for standard input).

    Returns
    -------
    SymbolStream
        Re-iterable; its :attr:`~fractalseq.stream.SymbolStream.report`
        describes the last complete pass (symbols, segments, dropped counts
        by reason, records, notes, and ``extra`` such as the log template
        table).  For a regular file, :attr:`~fractalseq.stream.SymbolStream.reread`
        holds the absolute path and these options (worker processes read the
        file again from it; :mod:`fractalseq.words._worker_stream`).

    Raises
    ------
    InputError
        Unusable input (see the module documentation for when).
    ParameterError
        Impossible parameters.
    """
    if fmt not in FORMATS:
        raise ParameterError(f"Format {fmt!r} is not known; use one of {', '.join(FORMATS)}.", parameter="fmt")
    check_policy(policy)
    if isinstance(chunk_size, bool) or not isinstance(chunk_size, int) or chunk_size < 1:
        raise ParameterError(f"The chunk size must be a positive whole number of bytes; got {chunk_size!r}.", parameter="chunk_size")
    if fmt == "numeric":
        numeric.check_parameters(bins, thresholds, ordinal, delay, ties)
    a = _resolve(alphabet) if fmt not in ("tokens", "log", "numeric") else None
    allow_binary = a is not None and a.name == "bytes" and fmt in ("auto", "text")
    origin, fmt, block = _prepare(path, fmt, a, allow_binary, _follows(alphabet))
    if fmt in ("log", "numeric") and _follows(alphabet):
        alphabet = None  # detected: the log's templates or the numeric bins, as with the format given
    learn_block = max(chunk_size, _LEARN_BLOCK)
    stream_name = name or origin.name
    base_notes = origin.notes  # read when a pass begins: includes the note of a pipe copied for a learning pass

    def begin(report: ReadReport) -> None:
        report.notes.extend(base_notes)
        report.extra["format"] = fmt
        report.extra["compression"] = origin.compression or "none"

    if fmt in ("fasta", "fastq"):
        if a is None:
            spool(origin)  # a pipe is copied for the learning pass
            a = sequence.learn(origin, fmt, learn_block)
        elif not (a.single_characters and all(ord(s) < 256 for s in a.symbols)):
            raise ParameterError(
                f"The {a.name} alphabet has symbols longer than one character, which {fmt.upper()} cannot hold; "
                "use a character alphabet.",
                parameter="alphabet",
            )
        return _byte_stream(origin, fmt, a, policy, chunk_size, stream_name, begin, fmt)

    if fmt == "text":
        if a is None:
            spool(origin)
            a = text.learn_chars(origin, learn_block)
        if _byte_path(a):
            return _byte_stream(origin, "plain", a, policy, chunk_size, stream_name, begin, fmt)
        if not a.single_characters:
            raise ParameterError(
                f"The {a.name} alphabet has symbols longer than one character; read this input with the tokens format.",
                parameter="fmt",
            )
        final = a

        def char_factory(report: ReadReport) -> Iterator[Chunk]:
            begin(report)
            yield from text.char_chunks(origin, final, policy, chunk_size, report)
            sequence.finish(report, origin, final)

        return SymbolStream(final, char_factory, stream_name)

    if fmt == "tokens":
        ta = _token_alphabet(alphabet)
        if ta is None:
            spool(origin)
            ta = text.learn_tokens(origin, learn_block)
        tok_alpha = ta

        def token_factory(report: ReadReport) -> Iterator[Chunk]:
            begin(report)
            yield from text.token_chunks(origin, tok_alpha, policy, chunk_size, report)
            sequence.finish(report, origin, tok_alpha)

        return SymbolStream(tok_alpha, token_factory, stream_name)

    if fmt == "log":
        # a template alphabet given in advance (a model's) is kept; otherwise the templates are learned
        spool(origin)  # both read a first pass
        table = logs.fixed(origin, alphabet, learn_block) if isinstance(alphabet, Alphabet) else logs.learn(origin, learn_block)
        if policy == "error" and table.stats.junk_bytes_skipped:
            raise InputError(logs.junk_refusal(origin.name, table.stats))

        def log_factory(report: ReadReport) -> Iterator[Chunk]:
            begin(report)
            yield from logs.chunks(origin, table, chunk_size, report, policy)

        # one symbol per line at most: the first pass's line count bounds the stream (tables are sized by it)
        log_stream = SymbolStream(table.alphabet, log_factory, stream_name, length_hint=table.lines)
        log_stream.unit = "line"
        return log_stream

    if fmt == "numeric":
        numeric.check_parameters(bins, thresholds, ordinal, delay, ties)
        layout = _numeric_layout(origin, block, column)
        if not ordinal and thresholds is None:
            spool(origin)  # quantile bins need a first pass
        plan, info = numeric.plan(origin, layout, bins, thresholds, ordinal, learn_block, delay, ties, seed)

        def numeric_factory(report: ReadReport) -> Iterator[Chunk]:
            begin(report)
            yield from numeric.symbol_chunks(origin, layout, plan, chunk_size, report)

        numeric_stream = SymbolStream(plan.alphabet, numeric_factory, stream_name)
        numeric_stream.unit = "row"
        return numeric_stream

    raise ParameterError(f"Format {fmt!r} is not known; use one of {', '.join(FORMATS)}.")  # pragma: no cover


def _numeric_layout(origin: Origin, block: bytes, column: str | int | None) -> "numeric.Layout":
    """Delimiter, header and column of a numeric input, from its first block."""
    sample = block.decode("utf-8", errors="replace").split("\n")
    if len(block) >= (1 << 16) and len(sample) > 1:
        sample = sample[:-1]
    layout = numeric.detect_layout(sample)
    return numeric.choose_column(layout, sample, column, origin.name)


def numeric_columns(path: str | os.PathLike, column: str | int | None, fmt: str = "auto") -> list[str] | None:
    """The columns of a multi-column choice (``"a,b"``, ``"0,2"``, ``"all"``) in a numeric file, else ``None``.

    ``None`` means ``column`` names one column (or none): read the file as one source.
    Otherwise each returned name (a header name, or a 0-based index as text) is read as its
    own source with ``column=name`` (see :func:`fractalseq.sources.numeric.several_columns`).
    """
    if not isinstance(column, str) or not ("," in column or column.strip().lower() == "all"):
        return None
    if str(path) == "-":
        raise ParameterError("Several columns cannot be read from standard input (it is read once); save it to a file "
                             "or name one column.", parameter="column")
    origin, kind, block = _prepare(path, fmt, None, False)
    if kind != "numeric":
        raise ParameterError(f"Several columns ({column!r}) apply to numeric tables; {origin.name} reads as {kind}.",
                             parameter="column")
    sample = block.decode("utf-8", errors="replace").split("\n")
    if len(block) >= (1 << 16) and len(sample) > 1:
        sample = sample[:-1]
    return numeric.several_columns(numeric.detect_layout(sample), sample, column, origin.name)


def shared_quantile_edges(paths: Sequence[str | os.PathLike], bins: int = 4, column: str | int | None = None) -> np.ndarray:
    """Equal-frequency bin edges of the pooled values of several numeric inputs.

    Used to symbolize two batches with the same cut points (the baseline's),
    so that a shift in level changes the symbols; each file's own quantiles
    would hide it.  Reads every value of the files once (8 bytes a value).
    """
    numeric.check_parameters(bins, None, 0)
    parts = []
    for path in paths:
        if str(path) == "-":
            raise ParameterError(
                "Shared bin edges need the baseline as files (standard input is read only once); give files or fixed thresholds.",
                parameter="thresholds",
            )
        origin, _, block = _prepare(path, "numeric", None, False)
        spool(origin)  # the files are read again with these edges
        layout = _numeric_layout(origin, block, column)
        parts.extend(v[np.isfinite(v)] for v in numeric.value_blocks(origin, layout, _LEARN_BLOCK))
    values = np.concatenate(parts) if parts else np.zeros(0)
    if values.size == 0:
        raise InputError("The baseline holds no numbers in the chosen column; check the files or the column.")
    return np.quantile(values, np.arange(1, bins) / bins)


def _byte_stream(
    origin: Origin, layout: str, a: Alphabet, policy: str, chunk_size: int, stream_name: str, begin, fmt: str
) -> SymbolStream:
    from fractalseq.sources.ranges import reader_for

    lut = a.byte_table()

    def factory(report: ReadReport) -> Iterator[Chunk]:
        begin(report)
        yield from sequence.scan(origin, layout, lut, a.code_dtype, policy, chunk_size, report, a)
        sequence.finish(report, origin, a)

    stream = SymbolStream(a, factory, stream_name)
    stream.byte_reader = reader_for(origin, layout, a, policy, fmt)  # workers may read byte ranges themselves
    return stream


"""Jobs over files, as the commands run them: drift of two batches, a survey, a scan.

Each function takes paths and one :class:`~fractalseq.jobs._inputs.ReaderOptions`
and makes every decision the command line used to make about symbols and
documents: how numeric batches are cut, which cache a survey uses and when it
is pruned.  A Python caller therefore gets the same symbols and the same JSON
as ``fractalseq drift``, ``fractalseq survey`` and ``fractalseq scan`` with the
same arguments.
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Callable, Sequence

from fractalseq.errors import InputError, ParameterError
from fractalseq.io._cache import ResultCache
from fractalseq.jobs._inputs import ReaderOptions, check_piece, check_seed, default_window
from fractalseq.jobs._sources import SourceSpec, expand_inputs
from fractalseq.results import Result
from fractalseq.runner import Engine, SerialEngine
from fractalseq.words._counts import WordCounts

if TYPE_CHECKING:
    from fractalseq.compare._drift import DriftOptions, DriftResult
    from fractalseq.compare._novelty import NoveltyOptions, NoveltyResult
    from fractalseq.compare._scan import ScanResult
    from fractalseq.jobs._survey import Progress, SurveyOptions, SurveyResult

__all__ = [
    "CachePlan", "CountSummary", "DriftReport", "batch_specs", "count_files", "drift_files", "parse_penalty", "scan_file", "survey_cache",
    "survey_files",
]

Batch = str | Sequence[str]


# =================================================================== count
@dataclass(frozen=True, eq=False)
class CountSummary(Result):
    """Word counts of several inputs merged, as ``fractalseq count --json`` prints them.

    Attributes
    ----------
    inputs:
        Per input: its name and what its reader kept and dropped.
    alphabet, length, segments, depth, storage:
        The merged counts' alphabet, symbols, segments, deepest word length and table kind.
    ladder:
        Per depth: distinct words, occurrences, possible words (the box-counting ladder).
    top:
        The most frequent words at the deepest depth (empty unless asked for).
    counts:
        The counts themselves (not part of the JSON); ``None`` when the count was split by address on an
        engine and the tables were not asked for (see :func:`count_files`).
    """

    inputs: tuple[dict, ...]
    alphabet: dict
    length: int
    segments: int
    depth: int
    storage: str
    ladder: tuple[dict, ...]
    top: tuple[dict, ...]
    counts: WordCounts | None = field(metadata={"json": False})


def count_files(
    paths: Sequence[str],
    depth: int,
    reader: ReaderOptions | None = None,
    *,
    top: int = 0,
    on_input: Callable[[str], None] | None = None,
    engine: Engine | None = None,
    piece: int | None = None,
    on_piece: Callable[[int, object], None] | None = None,
    keep_counts: bool = True,
) -> CountSummary:
    """Count every word of length 1..``depth`` of several inputs together (what ``fractalseq count`` does).

    Parameters
    ----------
    paths, depth, reader, top:
        Inputs, deepest word length, reader options, most frequent words to list.
    on_input:
        Called with each input's name once it is counted.
    engine:
        Where the counting runs.  ``None`` or the serial engine count each input
        in one streamed pass in this process.  On another engine, when every
        input is a regular file and no ``piece`` is given, the word addresses are
        cut into one slice per worker (:mod:`fractalseq.words._slices`): each
        worker reads every input itself and counts the words of its slice, and the
        slices add up without a merge.  Otherwise each input is split into pieces
        of ``piece`` symbols overlapping by ``depth - 1``
        (:func:`~fractalseq.words._pieces.count_words_split`), counted on the
        workers and added up in order.  Either way the counts are identical.
    piece:
        Split by position into pieces of this many symbols (default, for inputs that are not
        regular files: :data:`~fractalseq.words._pieces.DEFAULT_PIECE`).  An
        uncompressed or BGZF FASTA or plain-text file (under the ``break`` or ``skip`` policy) is
        cut into byte ranges that the workers read themselves
        (:func:`~fractalseq.words._pieces.source_pieces`); ``piece`` is then bytes per
        range, by default one range per worker
        (:func:`~fractalseq.words._pieces.range_size`).
    on_piece:
        Called as ``on_piece(index, result)`` when a piece is counted (its counts) or a slice (its
        :class:`~fractalseq.words._slices.SliceCount`).
    keep_counts:
        Whether the summary must hold the counts themselves (``counts``); a count split by
        address sends its tables back only then.

    Raises
    ------
    InputError
        When the inputs hold no usable symbol.
    """
    from fractalseq.words._corpus import count_inputs

    reader = reader or ReaderOptions()
    if engine is None or isinstance(engine, SerialEngine):
        wc, reports = count_inputs(((p, reader.open(p)) for p in paths), depth, on_input=on_input)
        counted, counts = wc, wc
    elif piece is None and paths and all(p != "-" and os.path.isfile(p) for p in paths):
        counted = _count_sliced(paths, depth, reader, engine, keep_counts, on_input, on_piece, top)
        reports, counts = counted.reports, counted.counts
    else:
        wc, reports = _count_split(paths, depth, reader, engine, piece, on_input, on_piece)
        counted, counts = wc, wc
    if counted.length == 0:
        raise InputError("The inputs hold no usable symbols; check the files, their format and the alphabet.")
    return CountSummary(
        inputs=tuple({"name": p, **r.to_dict()} for p, r in reports),
        alphabet=counted.alphabet.to_dict(),
        length=counted.length,
        segments=counted.segments,
        depth=counted.depth,
        storage=counted.storage,
        ladder=tuple(counted.ladder()),
        top=tuple({"word": w, "count": c} for w, c in counted.top(counted.depth, top)) if top else (),
        counts=counts,
    )


def _count_sliced(paths, depth, reader, engine, keep_counts, on_input, on_piece, top):
    """Every input counted on ``engine`` one address slice per worker (:mod:`fractalseq.words._slices`).

    The parent reads nothing: each worker opens the inputs, plans the same slices from the first
    chunk and counts its own; a bad input, depth or alphabet raises in the workers with the
    serial count's sentence.
    """
    from fractalseq.words._slices import count_slice, join_slices

    parts = max(1, int(engine.workers))
    tasks = [(tuple(paths), reader.open, depth, k, parts, int(top), bool(keep_counts)) for k in range(parts)]
    joined = join_slices(engine.map(count_slice, tasks, on_piece))
    if on_input is not None:
        for p in paths:
            on_input(p)
    return joined


def _count_split(paths, depth, reader, engine, piece, on_input, on_piece):
    """Each input split into pieces counted on ``engine``; inputs added in order (each its own segments)."""
    from fractalseq.words._pieces import DEFAULT_PIECE, count_words_split, range_size, settle_storage

    if piece is not None and (isinstance(piece, bool) or int(piece) < 1):
        raise ParameterError(f"The piece size must be a positive number of symbols, not {piece!r}.", parameter="piece")
    total: WordCounts | None = None
    reports = []
    for p in paths:
        stream = reader.open(p)
        if total is not None and not total.alphabet.same_symbols(stream.alphabet):
            raise InputError(f"{p} has a different alphabet from the first input; give one alphabet (e.g. dna) for all inputs.")
        chunk = int(piece) if piece is not None else (range_size(stream, engine) or DEFAULT_PIECE)
        wc = count_words_split(stream, depth, engine, chunk=chunk, on_done=on_piece)
        total = wc if total is None else total + wc
        reports.append((p, stream.report))
        if on_input is not None:
            on_input(p)
    if total is None:
        raise InputError("There is no input to count; give at least one file.")
    return settle_storage(total), reports


# =================================================================== drift
def batch_specs(batch: Batch, stdin_lines: Sequence[str] | None = None) -> list[SourceSpec]:
    """The inputs of one batch.

    A string is a file, a folder (every file below), a quoted glob, ``@LIST``
    (a file naming one input per line; ``@-`` takes the lines from
    ``stdin_lines``) or ``-`` (standard input); a sequence is a list of such paths.
    """
    if isinstance(batch, (str, os.PathLike)):
        spec = str(batch)
        if spec.startswith("@"):
            return expand_inputs([], spec[1:], stdin_lines if spec == "@-" else None)
        return expand_inputs([spec])
    return expand_inputs([str(b) for b in batch])


@dataclass(frozen=True)
class DriftReport(Result):
    """What ``fractalseq drift`` reports: the drift test and, for logs, the event novelty test.

    Attributes
    ----------
    drift:
        The drift test (:class:`~fractalseq.compare._drift.DriftResult`).
    novelty:
        The event novelty test (:class:`~fractalseq.compare._novelty.NoveltyResult`) when both
        batches are logs read as templates; ``None`` otherwise.
    """

    drift: "DriftResult"
    novelty: "NoveltyResult | None" = None

    @property
    def changed(self) -> bool:
        """True when the drift test or the event novelty test found a change."""
        return bool(self.drift.changed or (self.novelty is not None and self.novelty.changed))

    def to_dict(self) -> dict:
        """The drift document, with the key ``novelty`` added when the novelty test ran."""
        out = self.drift.to_dict()
        if self.novelty is not None:
            out["novelty"] = self.novelty.to_dict()
        return out

    def to_json(self) -> str:
        from fractalseq.io._outputs import to_json

        return to_json(self.to_dict())


def drift_files(
    baseline: Batch,
    new: Batch,
    options: "DriftOptions | None" = None,
    reader: ReaderOptions | None = None,
    *,
    engine: Engine | None = None,
    stdin_lines: Sequence[str] | None = None,
    on_done: Callable[[int, object], None] | None = None,
    novelty: "NoveltyOptions | None" = None,
    per_record: bool = False,
) -> DriftReport:
    """Does the ``new`` batch come from the same source as the ``baseline``?

    Both batches are read with the same ``reader`` options; numeric batches
    binned by quantiles are cut at the baseline's quantiles for both
    (:meth:`ReaderOptions.with_baseline_cuts`), and the report's first note says so.

    Parameters
    ----------
    baseline, new:
        Batches (see :func:`batch_specs`); standard input can serve one batch only.
    options:
        Test parameters (default :class:`~fractalseq.compare._drift.DriftOptions`).
    reader:
        Reader options of both batches (default: DNA, automatic format).
    engine:
        Where blocks are counted (default: serially in this process).
    stdin_lines:
        Lines of an ``@-`` batch list.
    on_done:
        Called after each input's blocks are counted.
    novelty:
        Options of the event novelty test (default :class:`~fractalseq.compare._novelty.NoveltyOptions`
        with the drift test's ``alpha``); it runs when every input was read as a log
        (alphabet of templates) and none is standard input.
    per_record:
        Every record of every input (chromosome, contig, read) is an input of its batch
        of its own (:mod:`fractalseq.jobs._records`).

    Returns
    -------
    DriftReport
        The result ``fractalseq drift ... --json`` prints.
    """
    from fractalseq.compare._drift import DriftOptions, drift_test

    options = options or DriftOptions()
    reader = reader or ReaderOptions()
    check_seed(options.seed)
    options.check()
    if _is_stdin(baseline) and _is_stdin(new):
        raise ParameterError("Standard input can be read only once; give '-' for one batch at most.")
    base_specs, new_specs = batch_specs(baseline, stdin_lines), batch_specs(new, stdin_lines)
    cut, note = reader.with_baseline_cuts([s.path for s in base_specs])
    from fractalseq.jobs._sources import is_stream_path

    def opened(s):
        stream = cut.open(s.path, name=s.name)
        # a pipe can be read once: the test passes over each batch more than once, so hold it in memory
        return stream.to_array() if s.path != "-" and is_stream_path(s.path) else stream

    if per_record:
        from fractalseq.jobs._records import record_sources

        base = [arr for _, arr in record_sources(base_specs, cut)]
        fresh = [arr for _, arr in record_sources(new_specs, cut)]
    else:
        base = [opened(s) for s in base_specs]
        fresh = [opened(s) for s in new_specs]
    result = drift_test(base, fresh, options, engine or SerialEngine(), on_done=on_done)
    if note:
        notes = result.notes
        result = dataclasses.replace(result, notes=type(notes)([note, *notes]))
    events = None
    logs = all(s.alphabet.name == "templates" for s in base + fresh)
    if logs and any(s.path == "-" for s in base_specs + new_specs):
        result = dataclasses.replace(result, notes=type(result.notes)([*result.notes, "standard input can be read only once: the event novelty test was left out"]))
    elif logs:
        from fractalseq.compare._novelty import NoveltyOptions
        from fractalseq.jobs._events import novelty_files

        events = novelty_files(base_specs, new_specs, novelty or NoveltyOptions(alpha=options.alpha))
    return DriftReport(result, events)


def _is_stdin(batch: Batch) -> bool:
    return isinstance(batch, str) and batch == "-"


# ==================================================================== scan
def parse_penalty(text: str | float) -> float | str:
    """A change-point penalty: ``"bic"`` or a non-negative number (given as a number or as text)."""
    if isinstance(text, str) and text.strip().lower() == "bic":
        return "bic"
    try:
        value = float(text)
    except (TypeError, ValueError):
        raise ParameterError(f"The penalty must be 'bic' or a number, not {text!r}.", parameter="penalty") from None
    if not value >= 0:
        raise ParameterError(f"The penalty must be non-negative, not {value}.", parameter="penalty")
    return value


def scan_file(
    path: str | os.PathLike,
    window: int | None = None,
    step: int | None = None,
    depth: int | None = None,
    *,
    reader: ReaderOptions | None = None,
    ratio: float = 0.5,
    penalty: float | str = "bic",
    seed: int = 0,
    on_read: Callable[[], None] | None = None,
    engine: Engine | None = None,
    piece: int | None = None,
) -> "ScanResult":
    """Read one input and scan it in sliding windows (what ``fractalseq scan`` does).

    ``window=None`` chooses it (:func:`~fractalseq.jobs._inputs.default_window`): for
    line-oriented inputs (logs, numeric columns: one symbol per line or row) the size that
    gives at least 50 windows (at least 40 lines), else 10,000 symbols.  ``on_read`` is
    called once the input is in memory.  ``engine`` and ``piece``: the windows are counted in
    pieces of about ``piece`` symbols of whole windows on the engine (default: serially), the
    same bytes on every engine.  See :func:`fractalseq.compare._scan.scan_stream` for the
    other parameters.
    """
    from fractalseq.compare._scan import scan_stream

    seed = check_seed(seed)
    piece = check_piece(piece)
    pen = parse_penalty(penalty)
    arr, ranges = (reader or ReaderOptions()).read_ranged(path)  # ranges: workers read their pieces from the file
    if on_read is not None:
        on_read()
    lined = arr.report.positions is not None
    if window is None:
        window = default_window(len(arr), lined, overlapping=True)
    if lined and len(arr) < window:
        unit = arr.report.positions.unit
        raise ParameterError(
            f"{arr.name} has {len(arr)} {unit}{'' if len(arr) == 1 else 's'} to scan, fewer than one window of {window} {unit}s; "
            "give a smaller window.", parameter="window",
        )
    return scan_stream(arr, window, step, depth, ratio, pen, seed, engine=engine, piece=piece, reader=ranges)


# ================================================================== survey
@dataclass(frozen=True)
class CachePlan:
    """Which per-source cache a survey uses and whether it owns it.

    Attributes
    ----------
    store:
        The cache (disabled when no folder applies).
    prune:
        True when the cache belongs to this survey's output folder; a completed
        survey then removes the entries of earlier runs it did not use.
    """

    store: ResultCache
    prune: bool = False


def survey_cache(out: str | os.PathLike | None = None, cache: str | os.PathLike | None = None, use_cache: bool = True) -> CachePlan:
    """The cache rule of a survey.

    No cache when ``use_cache`` is false; a folder given as ``cache`` is shared
    and never pruned; otherwise ``OUT/.cache`` when there is an output folder,
    owned by this survey and pruned after it completes; otherwise no cache.
    """
    if not use_cache:
        return CachePlan(ResultCache(None))
    if cache is not None:
        return CachePlan(ResultCache(Path(cache)))
    if out is not None:
        return CachePlan(ResultCache(Path(out) / ".cache"), prune=True)
    return CachePlan(ResultCache(None))


def survey_files(
    inputs: Sequence[str | SourceSpec],
    options: "SurveyOptions | None" = None,
    *,
    from_list: str | None = None,
    stdin_lines: Sequence[str] | None = None,
    common_cuts: bool = False,
    engine: Engine | None = None,
    cache: CachePlan | None = None,
    progress: "Progress | None" = None,
    per_record: bool = False,
) -> "SurveyResult":
    """Survey files, folders, patterns and list files (what ``fractalseq survey`` does).

    Parameters
    ----------
    inputs, from_list, stdin_lines:
        Sources, see :func:`~fractalseq.jobs._sources.expand_inputs` (or sources
        already expanded, as :class:`~fractalseq.jobs._sources.SourceSpec`).
    options:
        Survey and reader settings (default :class:`~fractalseq.jobs._survey.SurveyOptions`;
        build one from a :class:`ReaderOptions` with ``SurveyOptions.from_reader``).
    common_cuts:
        numeric input: cut every source at the quantiles of all sources pooled
        (levels compared), not each at its own (only dynamics compared).
    engine:
        Where per-source work runs (default: serially).
    cache:
        The cache and its pruning rule (:func:`survey_cache`; default: none).
    progress:
        See :func:`~fractalseq.jobs._survey.run_survey`.
    per_record:
        Every record of every input (a chromosome, a contig, a read) is a source of
        its own, named ``INPUT:RECORD`` (:mod:`fractalseq.jobs._records`); each input
        is read once.

    Returns
    -------
    SurveyResult
        The result ``fractalseq survey ... --json`` prints.
    """
    from fractalseq.jobs._survey import SurveyOptions, column_specs, run_survey

    options = options or SurveyOptions()
    if inputs and all(isinstance(i, SourceSpec) for i in inputs) and from_list is None:
        specs = list(inputs)
    else:
        specs = expand_inputs([str(i) for i in inputs], from_list, stdin_lines)
    specs = column_specs(specs, options.reader_options)  # --column a,b / all: one source per column
    if common_cuts and any(s.column is not None for s in specs):
        raise ParameterError("Common cuts pool the values of one column across files; with several columns, survey "
                             "one column at a time or leave out common cuts.", parameter="common_cuts")
    if common_cuts:
        reader = options.reader_options
        if reader.thresholds is not None or reader.ordinal:
            raise ParameterError(
                "Common cuts set the cut points themselves; leave out the thresholds and the ordinal order.", parameter="common_cuts"
            )
        reader, _ = reader.with_baseline_cuts([s.path for s in specs])
        if reader.thresholds is None:
            raise ParameterError("Common cuts apply to numeric input only; read the inputs as numeric or leave them out.", parameter="common_cuts")
        options = dataclasses.replace(options, reader=tuple(sorted(reader.numeric_options().items())))
    plan = cache or CachePlan(ResultCache(None))
    arrays = None
    if per_record:
        from fractalseq.jobs._records import per_record as split_records

        specs, arrays = split_records(specs, options.reader_options)
    return run_survey(specs, options, engine, plan.store, progress, prune_cache=plan.prune, arrays=arrays)

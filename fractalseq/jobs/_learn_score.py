"""Learning a predictor from files and scoring files with it: the policy behind ``learn`` and ``score``.

Decisions that belong to the job, not to the command line:

* several training logs are read over the **union of their templates**, so no
  file's events become unknown to the model;
* numeric inputs binned by quantiles are **cut at the quantiles of all training
  files together**, and those cut points are **kept in the model** (``reader_``)
  so that ``score`` reads new data with the same symbols;
* scoring with a model reads new data with the model's alphabet and reader options
  unless others are given; log lines whose template the model never saw are not
  scored but listed (``unseen_templates``);
* the JSON documents of ``learn --json`` (:class:`LearnReport`) and ``score --json``
  (:class:`ScoreReport`) are generated from these results, so a Python caller and the
  command line get the same document for the same arguments.

Genomic output is for research, not for clinical decisions; surprise scores of event
logs are no security guarantee.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence

from fractalseq.alphabet import Alphabet
from fractalseq.errors import FractalseqError, InputError, ParameterError
from fractalseq.jobs._inputs import check_piece, default_window
from fractalseq.predict._baselines import baseline_kinds
from fractalseq.predict._online import evaluate_online
from fractalseq.predict._predictor import CellPredictor
from fractalseq.predict._results import DEFAULT_TOP_WINDOWS, DEFAULT_WINDOW, PredictionResult
from fractalseq.runner import Engine, SerialEngine
from fractalseq.results import CAUTION_GENOMIC, CAUTION_LOGS, Result, caution_for, is_log_alphabet

RESEARCH_NOTE = CAUTION_GENOMIC
LOG_NOTE = CAUTION_LOGS
#: Quantile bins of numeric input when the reader options give none (the reader's default).
DEFAULT_BINS = 4


def caution(alphabets: Iterable[Any]) -> str:
    """The caution that fits the inputs: logs (template alphabets), sequences, or both (:func:`fractalseq.results.caution_for`)."""
    return caution_for(alphabets)


def _is_templates(alphabet) -> bool:
    return is_log_alphabet(alphabet) if alphabet is not None else False


def _open(path: str, fmt: str, alphabet, policy: str, reader: dict):
    from fractalseq.sources import open_source

    return open_source(path, fmt=fmt, alphabet=alphabet, policy=policy, **reader)


def training_reader(paths: Sequence[str], fmt: str, reader: dict) -> dict:
    """Reader options that cut numeric training files at the quantiles of all of them together.

    Unchanged when the input is not numeric, or when ``reader`` fixes the cut points
    (``thresholds``) or asks for ordinal patterns.
    """
    from fractalseq.sources import detect_format, shared_quantile_edges

    if not paths or "thresholds" in reader or reader.get("ordinal"):
        return dict(reader)
    kind = fmt
    if fmt == "auto" and paths[0] != "-":
        try:
            kind = detect_format(paths[0])
        except FractalseqError:
            return dict(reader)  # reading the file will say what is wrong
    if kind != "numeric":
        return dict(reader)
    edges = shared_quantile_edges(list(paths), int(reader.get("bins", DEFAULT_BINS)), reader.get("column"))
    out = {k: v for k, v in reader.items() if k != "bins"}
    out["thresholds"] = tuple(float(e) for e in edges)
    return out


def training_alphabet(paths: Sequence[str], fmt: str, alphabet, policy: str, reader: dict):
    """The alphabet to read training files with: the union of their log templates when they are several logs."""
    if len(paths) < 2 or fmt not in ("log", "auto") or "-" in paths:
        return alphabet
    from fractalseq.compare._distances import joint_alphabet

    streams = [_open(p, fmt, alphabet, policy, reader) for p in paths]
    if not all(_is_templates(s.alphabet) for s in streams):
        return alphabet
    return joint_alphabet([s.alphabet for s in streams])


# ------------------------------------------------------------------- learn
@dataclass(frozen=True)
class DepthCells(Result):
    """Cells stored at one depth and the observations they hold."""

    depth: int
    cells: int
    observations: int


@dataclass(frozen=True)
class LearnReport(Result):
    """A model learned from files: what it holds and how it was read (the ``learn --json`` document).

    ``predictor`` is the fitted :class:`~fractalseq.predict._predictor.CellPredictor` (not in the JSON form);
    ``model`` is the file it was written to (``None`` when not saved).
    """

    model: str | None
    alphabet: dict
    inputs: tuple[dict, ...]
    symbols: int
    segments: int
    cell_depths: tuple[int, ...]
    stored_depths: tuple[DepthCells, ...]
    reverse_complement: bool
    cells: int
    max_cells: int
    pruned_cells: int
    baseline_order: int
    baseline_training_bits_per_symbol: float
    params: dict
    note: str
    predictor: CellPredictor = field(repr=False, compare=False, metadata={"json": False})


def learn_files(
    paths: Sequence[str],
    *,
    out: str | Path | None = None,
    force: bool = False,
    fmt: str = "auto",
    alphabet: str | Alphabet = "dna",
    policy: str = "break",
    reader: dict | None = None,
    params: dict | None = None,
    on_input: Callable[[str], None] | None = None,
    engine: Engine | None = None,
    piece: int | None = None,
) -> LearnReport:
    """Learn a :class:`~fractalseq.predict._predictor.CellPredictor` from training files (and save it).

    Parameters
    ----------
    paths:
        Training files (``-`` for standard input); each is its own segment, so no context spans two files.
    out, force:
        Model file to write (``None``: do not save); ``force`` overwrites an existing file.
    fmt, alphabet, policy:
        How to read the files (see :func:`fractalseq.sources.open_source`).
    reader:
        Numeric reader options (``column``, ``bins``, ``thresholds``, ``ordinal``); quantile cuts are
        taken over all training files and kept in the model.
    params:
        Parameters of the predictor (``depths``, ``max_depth``, ``smoothing``, ``discount``, ``max_cells``,
        ``reverse_complement``...).
    on_input:
        Called with each file's name once it is counted (progress display).
    engine, piece:
        Where the words are counted: ``None`` or the serial engine count each file in one
        streamed pass; another engine cuts each file into pieces of ``piece`` symbols
        (default 2**24) overlapping by the counting depth minus one, counts them on its
        workers and adds them up in order (exact integers: the model file is the same bytes).
        The fit itself runs in this process.
    """
    from fractalseq.words._corpus import count_inputs

    paths = [str(p) for p in paths]
    if not paths:
        raise ParameterError("Give at least one training file.", parameter="paths")
    model = CellPredictor(**(params or {}))
    read = training_reader(paths, fmt, dict(reader or {}))
    read_alpha = training_alphabet(paths, fmt, alphabet, policy, read)
    read_fmt = "log" if _is_templates(read_alpha) else fmt
    piece = check_piece(piece)
    opened = ((p, _open(p, read_fmt, read_alpha, policy, read)) for p in paths)
    if engine is None or isinstance(engine, SerialEngine):
        wc, reports = count_inputs(opened, model.count_depth, on_input=on_input, compact=True)
    else:
        wc, reports = _count_on_engine(opened, model.count_depth, engine, piece, on_input)
    if wc.length == 0:
        raise InputError("The training inputs hold no usable symbols; check the files and the alphabet and format they are read with.")
    # the fit drops the word counts (12 bytes a distinct deepest word) once its cell tables are built
    model.fit_counts(wc, reader=read, consume=True)
    del wc
    if out is not None:
        model.save(out, force=force)
    # a depth's observations are all its counts added up (the cells' totals without a cell-sized array)
    rows = tuple(
        DepthCells(n, int(model.cells_[n].size), int(model.counts_[n].counts.sum(dtype="int64"))) for n in model.depths_
    )
    return LearnReport(
        model=None if out is None else str(out),
        alphabet=model.alphabet_.to_dict(),
        inputs=tuple({"name": p, **r.to_dict()} for p, r in reports),
        symbols=model.n_symbols_,
        segments=model.n_segments_,
        cell_depths=model.ladder_,
        stored_depths=rows,
        reverse_complement=model.reverse_complement_,
        cells=model.n_cells_,
        max_cells=model.max_cells_,
        pruned_cells=model.pruned_cells_,
        baseline_order=model.baseline_order_,
        baseline_training_bits_per_symbol=model.baseline_bits_[model.baseline_order_],
        params=model.get_params(),
        note=caution([model.alphabet_]),
        predictor=model,
    )


def _online_task(task: tuple) -> PredictionResult:
    """Online code length of one source (a task of an engine): ``(source, window, top, baselines, params)``."""
    src, size, top, baselines, params = task
    return evaluate_online(src, window=size, top_windows=top, baselines=baselines, **params)


def _count_on_engine(opened, depth_of, engine: Engine, piece: int | None, on_input):
    """Each input cut into pieces counted on ``engine`` (:func:`~fractalseq.words._pieces.count_words_split`), inputs added in order."""
    from fractalseq.words._pieces import DEFAULT_PIECE, count_words_split, settle_storage

    total, reports = None, []
    for p, stream in opened:
        if total is not None and not total.alphabet.same_symbols(stream.alphabet):
            raise InputError(f"{p} has a different alphabet from the first input; give one alphabet (e.g. dna) for all inputs.")
        wc = count_words_split(stream, depth_of(stream.alphabet), engine, chunk=DEFAULT_PIECE if piece is None else piece)
        total = wc if total is None else total + wc
        reports.append((p, stream.report))
        if on_input is not None:
            on_input(p)
    return settle_storage(total), reports


# ------------------------------------------------------------------- score
@dataclass(frozen=True)
class SourceScore(PredictionResult):
    """The score of one file: the predictor's result plus how the file was read.

    ``name`` is the path as given; ``stream_name`` the reader's name of the stream; ``dropped`` the
    symbols or lines left out by reason; ``unseen_templates`` the log templates the model never saw
    (their lines were not scored; empty for other inputs); ``unit`` what a symbol is (``symbol``,
    ``line`` for logs, ``row`` for numeric columns: the most surprising windows then also carry
    ``first_<unit>``/``last_<unit>``, file line numbers); ``read_notes`` what the reader reported;
    ``not_scored`` why a file of length 0 was not scored (``None`` when it was scored).
    """

    stream_name: str = ""
    alphabet: dict = field(default_factory=dict)
    dropped: dict = field(default_factory=dict)
    unseen_templates: tuple = ()
    unit: str = "symbol"
    read_notes: tuple[str, ...] = ()
    not_scored: str | None = None


@dataclass(frozen=True)
class ScoreReport(Result):
    """Scores of several files (the ``score --json`` document): all together, then per file."""

    mode: str
    model: str | None
    bits_per_symbol: float
    total_bits: float
    length: int
    sources: tuple[SourceScore, ...]
    note: str


def unscored_reason(unseen: Sequence[dict] | None, alphabet) -> str | None:
    """Why a log read with a model's templates gave no symbol to score, in one clause; ``None`` if no line was left out so.

    Parameters
    ----------
    unseen:
        The reader's templates that the model does not list (``count`` lines each), or ``None``.
    alphabet:
        The model's template alphabet the log was read with.
    """
    if not unseen:
        return None
    lines = sum(int(e["count"]) for e in unseen)
    known = alphabet.size
    return (f"none of its {lines:,} {'line matches' if lines == 1 else 'lines match'} one of the {known:,} "
            f"{'template' if known == 1 else 'templates'} the model knows (they form {len(unseen):,} "
            f"{'template' if len(unseen) == 1 else 'templates'} new to it)")


def score_files(
    paths: Sequence[str],
    model: CellPredictor | str | Path | None = None,
    *,
    online: bool = False,
    fmt: str = "auto",
    alphabet: str | Alphabet | None = None,
    policy: str = "break",
    reader: dict | None = None,
    window: int | None = None,
    top: int = DEFAULT_TOP_WINDOWS,
    params: dict | None = None,
    on_source: Callable[[str], None] | None = None,
    baselines: str = "markov",
    engine: Engine | None = None,
    piece: int | None = None,
    per_record: bool = False,
) -> ScoreReport:
    """Score files with a fitted model (a model file or object) or online (``online=True``, a fresh model per file).

    Parameters
    ----------
    paths:
        Files to score (``-`` for standard input).
    model:
        A fitted :class:`~fractalseq.predict._predictor.CellPredictor` or the path of a model file; ``None`` with ``online``.
    online:
        Predict each symbol from the file's own past, then learn it (no model).
    fmt, alphabet, policy:
        How to read the files; ``alphabet=None`` means the model's alphabet (``dna`` online).
    reader:
        Numeric reader options; empty or ``None`` means the model's own (its training cut points).
    window, top:
        Window (symbols) of the per-window code lengths and how many of the most surprising to list;
        ``window=None`` chooses it per file (:func:`~fractalseq.jobs._inputs.default_window`): logs and
        numeric columns get windows of lines (rows) that give at least 50 windows (at least 40 lines),
        other inputs 10,000 symbols.
    params:
        Online mode: parameters of the predictor (``depths``, ``smoothing``, ``learning_rate``...).
    on_source:
        Called with each file's name once it is scored (progress display).
    baselines:
        ``"markov"`` (default: the KT Markov baseline, cheap), ``"all"`` (also lzma, bz2 and zlib on the
        same symbols, which take longer than the predictor itself) or ``"none"``; a baseline not
        computed is absent from each source's ``baselines`` object.
    engine, piece:
        Fitted mode: each file is cut into pieces of ``piece`` symbols (default 2**24), scored on
        ``engine`` (default: serially) and added up in order; every engine gives the same bytes
        for the same ``piece`` (:mod:`fractalseq.predict._split_score`).  Online mode takes an
        engine only with ``per_record``: each record is then one task.
    per_record:
        Every record of every file (chromosome, contig, read) is a source of its own, named
        ``INPUT:RECORD`` (:mod:`fractalseq.jobs._records`), scored from a fresh start: online, each
        record is coded by a fresh model, so each record's code length is an upper bound on its own
        information content and the total is their sum (an upper bound too, usually larger than coding
        the file as one stream, where later records profit from what earlier ones taught the model).
    """
    baseline_kinds(baselines)  # one sentence for a bad choice, before anything is read
    piece = check_piece(piece)
    if online and not per_record and engine is not None and not isinstance(engine, SerialEngine):
        raise ParameterError("Online scoring codes each file as one stream, which cannot be split into pieces; score each "
                             "record as a stream of its own (per record) on the workers, or leave out the engine and workers.",
                             parameter="engine")
    if (model is None) == (not online):
        raise ParameterError("Give either a model (fitted mode) or online=True (no model), not both or neither.", parameter="model")
    model_name = None
    if isinstance(model, (str, Path)):
        model_name = str(model)
        model = CellPredictor.load(model)
    read_alpha = alphabet if alphabet is not None else (model.alphabet_ if model is not None else "dna")
    read = dict(reader or {})
    if model is not None and not read:
        read = {k: (tuple(v) if isinstance(v, list) else v) for k, v in model.reader_.items()}
    scored, alphabets = [], []
    if fmt == "auto" and _is_templates(read_alpha):
        fmt = "log"  # a log model (one log's templates or the union of several) reads logs
    # (input, name, source, read report, alphabet, window) of every source to score: a file, or each of its records
    items: list[tuple] = []
    for p in map(str, paths):
        stream = _open(p, fmt, read_alpha, policy, read)
        lined = stream.unit != "symbol"
        arr = None
        if lined or per_record:  # one symbol per line: read it whole (one code per line) to size the windows and map positions
            arr = stream.to_array()
        if lined:
            size = window if window is not None else default_window(len(arr), True, overlapping=False)
        else:
            size = window if window is not None else DEFAULT_WINDOW
        if per_record:
            from fractalseq.jobs._records import record_arrays

            parts = list(record_arrays(arr, p))
            if not parts:
                raise InputError(f"{p} holds no record with usable symbols; check the file and the alphabet and format it is read with.")
            items.extend((p, part.name, part, part.report, stream.alphabet, size) for part in parts)
        else:
            # a lazy stream's report is complete once it is read: the stream stands for it until then
            items.append((p, p, arr.as_stream() if lined else stream, arr.report if lined else stream, stream.alphabet, size))
    last = {it[0]: i for i, it in enumerate(items)}

    def scored_one(i: int, it: tuple, res: PredictionResult) -> None:
        p, name, _, rep, alpha, _ = it
        rep = rep.report if hasattr(rep, "chunks") else rep
        why = unscored_reason(rep.extra.get("unlisted_templates"), alpha) if res.length == 0 else None
        if res.length == 0 and (len(items) == 1 or why is None):
            if why is not None:
                raise InputError(f"{name} holds no usable symbols: {why}; learn a model on logs of the same kind.")
            raise InputError(f"{name} holds no usable symbols; check the file and the alphabet and format it is read with.")
        # a log none of whose templates the model knows: kept as a source of length 0 with its unseen templates
        # listed, so the other files' results are not lost
        alphabets.append(alpha)
        values = {f.name: getattr(res, f.name) for f in dataclasses.fields(res)}
        values["name"] = name
        pos = rep.positions
        if pos is not None and len(pos) == res.length:
            values["most_surprising_windows"] = tuple(
                dataclasses.replace(w, coordinates=pos.span(w.start, w.end)) for w in res.most_surprising_windows
            )
        scored.append(SourceScore(
            **values, stream_name=res.name, alphabet=alpha.to_dict(), dropped=dict(sorted(rep.dropped.items())),
            # log lines whose template the model never saw: not scored (the policy left them out), listed here
            unseen_templates=tuple(rep.extra.get("unlisted_templates", ())),
            unit=pos.unit if pos is not None and len(pos) == res.length else "symbol",
            read_notes=tuple(rep.summary_notes()),
            not_scored=why,
        ))
        if on_source is not None and last[p] == i:
            on_source(p)

    if model is None and engine is not None and not isinstance(engine, SerialEngine):
        # records are independent online codings: one task each, results taken in record order
        tasks = [(it[2], it[5], top, baselines, dict(params or {})) for it in items]
        for i, res in enumerate(engine.map(_online_task, tasks)):
            scored_one(i, items[i], res)
    else:
        for i, it in enumerate(items):
            if model is not None:
                res = model.evaluate(it[2], window=it[5], top_windows=top, baselines=baselines, engine=engine, piece=piece,
                                     model_path=model_name)
            else:
                res = _online_task((it[2], it[5], top, baselines, params or {}))
            scored_one(i, it, res)
    total_bits = sum(s.total_bits for s in scored if s.length)
    length = sum(s.length for s in scored)
    if length == 0:
        raise InputError("None of the inputs holds a symbol the model can score (every template is new to it); "
                         "learn a model on logs of the same kind.")
    return ScoreReport(
        mode="fitted" if model is not None else "online",
        model=model_name,
        bits_per_symbol=total_bits / length if length else float("nan"),
        total_bits=total_bits,
        length=length,
        sources=tuple(scored),
        note=caution(alphabets),
    )

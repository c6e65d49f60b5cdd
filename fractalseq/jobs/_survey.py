"""Survey many sources: one row of complexity figures per source, distances, clustering.

Map, merge, estimate (see :mod:`fractalseq.jobs._engines`):

* **map** — each source, on a worker: read it, compute every per-source
  figure with :func:`fractalseq.jobs._profile.profile_source` (so a survey row and
  ``fractalseq profile`` agree), and count its words up to the distance depth;
* **merge** — gather the rows in input order and align the word tables
  (over a joint alphabet when alphabets were learned per source);
* **estimate** — Jensen–Shannon divergences of the depth-n word
  distributions, distances between D_q spectra, and hierarchical clustering
  (:mod:`fractalseq.compare._distances`).

Each finished source is stored in a :class:`fractalseq.io._cache.ResultCache`
keyed by its content hash and the parameters, so an interrupted survey
resumes where it stopped and gives the same result as an uninterrupted one.

Genomic output is for research, not for clinical decisions.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np

from fractalseq import __version__
from fractalseq.alphabet import Alphabet
from fractalseq.compare._distances import (
    LINKAGES,
    Clustering,
    cluster,
    condensed_upper,
    joint_alphabet,
    js_matrix,
    remap_words,
    spectrum_matrix,
    word_matrix,
)
from fractalseq.errors import InputError, ParameterError
from fractalseq.io._cache import ResultCache, array_hash, cache_key, file_hash
from fractalseq.io._matrices import matrix_reference
from fractalseq.io._outputs import compact_json, to_json
from fractalseq.jobs._inputs import ReaderOptions, check_seed
from fractalseq.jobs._sources import SourceSpec, expand_inputs, is_stream_path
from fractalseq.report.survey import MATRICES_IN_JSON, MATRIX_FILE, SurveyView
from fractalseq.results import Result, caution_for
from fractalseq.runner import Engine, SerialEngine, pause_point
from fractalseq.stream import ReadReport, SymbolArray
from fractalseq.words._counts import WordCounts, count_words

__all__ = [
    "SourceSpec", "SurveyDistances", "SurveyOptions", "SurveyResult", "expand_inputs", "figures_of", "merge_survey",
    "run_survey", "spectrum_of", "survey_task", "write_outputs",
]

CAUTION = "Genomic output is for research, not for clinical decisions; drift reports on logs are no security guarantee."

#: Deepest word length stored per source for the distances (capped by the alphabet's address width).
STORE_DEPTH = 8
#: Cap on the number of possible words A**n stored per source.
STORE_WORDS = 1 << 20
#: Automatic distance depth: the shortest source needs this many words per possible word.
WORDS_PER_CELL = 20
#: What the distance matrices measure (the JSON says it beside each matrix).
JS_METRIC = "Jensen-Shannon distance (square root of the divergence)"
SPECTRUM_MEASURE = "root mean square difference of the D_q spectra over common q"


# ================================================================= options
@dataclass(frozen=True)
class SurveyOptions:
    """Everything that changes a survey's numbers (all of it enters the cache key).

    Attributes
    ----------
    fmt, alphabet, policy:
        Reader settings (see :func:`fractalseq.sources.open_source`).
    depth:
        Deepest word length for the per-source profile (``None``: the profile's automatic depth).
    ratio:
        Contraction ratio k of the encoding (D_q are in units of ``log(1/k)``).
    distance_depth:
        Word length n of the Jensen–Shannon distances; ``None`` chooses the
        largest n with ``A**n <= shortest length / 20`` (at most 8).
    seed:
        Seed of every random step (bootstrap intervals).
    linkage:
        Linkage rule of the clustering (``average``, ``complete``, ``single``, ``weighted``).
    reader:
        Extra reader options (numeric columns, bins ...), as a sorted tuple of pairs.
    quick:
        First look: each source's profile without bootstrap, consistency table and compressor
        bound (:data:`fractalseq.jobs._profile.QUICK_SKIPS`).
    """

    fmt: str = "auto"
    alphabet: str = "dna"
    policy: str = "break"
    depth: int | None = None
    ratio: float = 0.5
    distance_depth: int | None = None
    seed: int = 0
    linkage: str = "average"
    reader: tuple[tuple[str, Any], ...] = ()
    quick: bool = False

    def __post_init__(self) -> None:
        object.__setattr__(self, "seed", check_seed(self.seed))
        if self.linkage not in LINKAGES:
            raise ParameterError(f"Linkage {self.linkage!r} is not one of {', '.join(LINKAGES)}.", parameter="linkage")
        self.reader_options  # noqa: B018 - validates the reader settings before any work

    @classmethod
    def from_reader(cls, reader: ReaderOptions, **options: Any) -> "SurveyOptions":
        """Survey options reading every source with ``reader`` (other settings as keywords)."""
        alphabet = reader.alphabet
        if isinstance(alphabet, Alphabet):
            raise ParameterError("A survey takes an alphabet by name (its cache key and JSON name it).", parameter="alphabet")
        return cls(fmt=reader.fmt, alphabet=alphabet, policy=reader.policy, reader=tuple(sorted(reader.numeric_options().items())), **options)

    @property
    def reader_options(self) -> ReaderOptions:
        """The reader settings of every source as one :class:`ReaderOptions`."""
        return ReaderOptions.from_numeric(self.fmt, self.alphabet, self.policy, dict(self.reader))

    def task_params(self) -> dict:
        """Parameters that change a per-source result (the cache key)."""
        return {
            "fmt": self.fmt,
            "alphabet": self.alphabet,
            "policy": self.policy,
            "depth": self.depth,
            "ratio": self.ratio,
            "store_depth": self.distance_depth,
            "seed": self.seed,
            "reader": [list(kv) for kv in self.reader],
            "fractalseq": __version__,
            **({"quick": True} if self.quick else {}),  # absent otherwise: earlier cache keys stay valid
        }

    def to_dict(self) -> dict:
        """The ``parameters`` object of the survey's JSON document."""
        return {
            "format": self.fmt,
            "alphabet": self.alphabet,
            "unknown": self.policy,
            "depth": self.depth,
            "ratio": self.ratio,
            "distance_depth": self.distance_depth,
            "seed": self.seed,
            "linkage": self.linkage,
            "reader": {k: v for k, v in self.reader},
            **({"quick": True} if self.quick else {}),
        }


@dataclass(frozen=True)
class SurveyTask:
    """Arguments of one map task: a path to read, or symbols already read (standard input)."""

    spec: SourceSpec
    options: SurveyOptions
    alphabet: dict | None = None
    codes: np.ndarray | None = None
    starts: np.ndarray | None = None
    report: ReadReport | None = None  # what the reader of standard input kept and dropped


def _store_depth(alphabet: Alphabet, options: SurveyOptions) -> int:
    if options.distance_depth is not None:
        if options.distance_depth > alphabet.max_depth:
            raise ParameterError(
                f"Distance depth {options.distance_depth} exceeds the address width of the {alphabet.name} alphabet; "
                f"use {alphabet.max_depth} or less.",
                parameter="distance_depth",
            )
        return int(options.distance_depth)
    n = 1
    while n < min(STORE_DEPTH, alphabet.max_depth) and float(alphabet.size) ** (n + 1) <= STORE_WORDS:
        n += 1
    return n


def profile_row(arr: SymbolArray, options: SurveyOptions) -> dict:
    """Every per-source figure of one source, from :func:`fractalseq.jobs._profile.profile_source`."""
    from fractalseq.jobs._profile import DEFAULT_BOOT, profile_source
    from fractalseq.resampling._options import Resampling

    resampling = Resampling(n_boot=DEFAULT_BOOT, seed=options.seed)
    result = profile_source(arr, depth=options.depth, ratio=options.ratio, resampling=resampling, quick=options.quick)
    data = result.to_dict() if hasattr(result, "to_dict") else dict(result)
    return json.loads(compact_json(data))  # the values of the indented JSON, written by the faster C encoder


#: Survey tasks started in this process (the pause point ``survey.task:N`` counts them).
_TASKS_RUN = [0]


def survey_task(task: SurveyTask) -> dict:
    """Map step for one source: its profile and its word counts (runs on a worker).

    Returns a dict with ``profile`` (JSON-ready), ``read`` (what the reader
    kept and dropped), ``counts_header`` and ``counts_arrays`` (the word
    counts up to the stored distance depth, see :meth:`WordCounts.to_arrays`).
    """
    _TASKS_RUN[0] += 1
    pause_point("survey.task", _TASKS_RUN[0])  # test hook: a worker stopped inside its n-th task
    opts = task.options
    if task.codes is not None:
        alphabet = Alphabet.from_dict(task.alphabet or {})
        arr = SymbolArray(alphabet, task.codes, task.starts if task.starts is not None else np.zeros(0, np.int64), task.spec.name,
                          task.report if task.report is not None else ReadReport())
    else:
        read = opts.reader_options if task.spec.column is None else replace(opts.reader_options, column=task.spec.column)
        arr = read.open(task.spec.path, name=task.spec.name).to_array()
    if len(arr) == 0:
        raise InputError(f"{task.spec.path} holds no usable symbols; check the file, its format and the alphabet.")
    arr.name = task.spec.name
    profile = profile_row(arr, opts)
    wc = count_words(arr, min(_store_depth(arr.alphabet, opts), arr.alphabet.max_depth))
    header, arrays = wc.to_arrays()
    read = arr.report.to_dict() if arr.report is not None else {}
    read = {k: read[k] for k in ("symbols", "segments", "dropped", "dropped_total", "notes") if k in read}
    return {"profile": profile, "read": json.loads(compact_json(read)), "counts_header": header, "counts_arrays": arrays}


# ================================================================= results
def _triple(value: Any) -> dict:
    """``{estimate, low, high}`` from a number, a dict or None."""
    if isinstance(value, dict):
        est = value.get("estimate", value.get("value", value.get("bits_per_symbol")))
        return {"estimate": est, "low": value.get("low"), "high": value.get("high")}
    if isinstance(value, (int, float)) or value is None:
        return {"estimate": value, "low": None, "high": None}
    return {"estimate": None, "low": None, "high": None}


def _dimension(profile: dict, q: float) -> dict:
    for d in profile.get("dimensions", []) or []:
        if isinstance(d, dict) and d.get("q") is not None and float(d["q"]) == q:
            return _triple(d)
    return _triple(None)


#: Key of the online predictor's code length among the profile's entropy-rate estimates.
PREDICTOR_KEY = "online_predictor"


def figures_of(profile: dict) -> dict:
    """The survey's figures of one source, read from its profile dict.

    The online predictor's bits per symbol is the profile's
    ``entropy_rate_bits["online_predictor"]`` (an upper bound on the entropy
    rate); the other entropy-rate estimators stay under ``entropy_rate_bits``.
    """
    rates = profile.get("entropy_rate_bits") or {}
    rates = rates if isinstance(rates, dict) else {}
    return {
        "length": profile.get("length"),
        "alphabet_size": profile.get("alphabet_size"),
        "D0": _dimension(profile, 0.0),
        "D1": _dimension(profile, 1.0),
        "D2": _dimension(profile, 2.0),
        "entropy_rate_bits": {k: _triple(v) for k, v in sorted(rates.items()) if k != PREDICTOR_KEY},
        "topological_entropy_bits": _triple(profile.get("topological_entropy_bits")),
        "predictor_bits_per_symbol": _triple(rates.get(PREDICTOR_KEY)),
    }


def spectrum_rows(profile: dict) -> list[dict]:
    rows = profile.get("spectrum") or profile.get("dimensions") or []
    return [d for d in rows if isinstance(d, dict) and d.get("q") is not None]


def spectrum_of(profile: dict) -> tuple[list[float], list[float | None]]:
    """``(q values, D_q estimates)`` of a profile (every order it computed)."""
    qs, ds = [], []
    for d in spectrum_rows(profile):
        if isinstance(d, dict) and d.get("q") is not None:
            qs.append(float(d["q"]))
            ds.append(d.get("estimate"))
    return qs, ds


@dataclass(frozen=True, eq=False)
class SpectrumDistances(Result):
    """RMS distances between the sources' D_q spectra."""

    matrix: np.ndarray
    measure: str = SPECTRUM_MEASURE


@dataclass(frozen=True, eq=False)
class SurveyDistances(Result):
    """The ``distances`` object of a survey: Jensen–Shannon divergences, spectrum distances, clustering.

    Attributes
    ----------
    names:
        Source names (row/column order of the matrices).
    matrix:
        Jensen–Shannon divergences (bits) of the depth-``depth`` word distributions.
    measure:
        What ``matrix`` holds, in words.
    depth:
        Word length of the divergences.
    alphabet:
        Name of the (joint) alphabet the words were compared over.
    spectrum:
        RMS distances between the D_q spectra.
    clustering:
        Hierarchical clustering on the Jensen–Shannon distance.
    """

    names: tuple[str, ...]
    matrix: np.ndarray
    measure: str
    depth: int
    alphabet: str
    spectrum: SpectrumDistances
    clustering: Clustering

    def to_dict(self) -> dict:
        """JSON form; above :data:`MATRICES_IN_JSON` sources each matrix is a ``matrix_file`` reference
        (:func:`fractalseq.io._matrices.matrix_reference`) to ``distances.npz`` instead of nested lists."""
        if len(self.names) <= MATRICES_IN_JSON:
            return super().to_dict()
        spectrum = {"matrix_file": matrix_reference(MATRIX_FILE, "spectrum", self.spectrum.matrix), "measure": self.spectrum.measure}
        return {"names": list(self.names), "matrix_file": matrix_reference(MATRIX_FILE, "js", self.matrix), "measure": self.measure,
                "depth": self.depth, "alphabet": self.alphabet, "spectrum": spectrum, "clustering": self.clustering.to_dict()}


@dataclass(frozen=True, eq=False)
class SurveyResult(Result):
    """A finished survey; :meth:`to_dict` is the documented JSON contract (README, ``survey --json``).

    Attributes
    ----------
    sources:
        Per source (input order): ``name``, ``path``, ``content_sha256``,
        the figures of :func:`figures_of`, ``read`` and the full ``profile``.
    distances:
        Divergences, spectrum distances and the clustering.
    parameters:
        The options used (JSON: :meth:`SurveyOptions.to_dict`).
    notes:
        Anything the reader of the result should know.
    command, fractalseq, caution:
        What made the document, the package version, and the caution that goes with it.
    cache_pruned:
        Cache entries of earlier runs removed after this one (``run_survey(...,
        prune_cache=True)``); not part of the JSON, which depends only on the inputs and options.
    cache_notes:
        One sentence per cache entry that was damaged or edited and was recomputed;
        not part of the JSON (the recomputed result equals an uncached run).
    """

    sources: tuple[dict, ...]
    distances: SurveyDistances
    parameters: SurveyOptions
    notes: tuple[str, ...] = ()
    command: str = "survey"
    fractalseq: str = __version__
    caution: str = CAUTION
    cache_pruned: int = field(default=0, metadata={"json": False})
    cache_notes: tuple[str, ...] = field(default=(), metadata={"json": False})

    # views kept for callers that read the matrices directly
    @property
    def options(self) -> SurveyOptions:
        """The options used."""
        return self.parameters

    @property
    def names(self) -> tuple[str, ...]:
        """Source names (row/column order of the matrices)."""
        return self.distances.names

    @property
    def js(self) -> np.ndarray:
        """Jensen–Shannon divergences (bits) of the depth-:attr:`js_depth` word distributions."""
        return self.distances.matrix

    @property
    def js_depth(self) -> int:
        return self.distances.depth

    @property
    def js_alphabet(self) -> str:
        return self.distances.alphabet

    @property
    def spectrum(self) -> np.ndarray:
        """RMS distances between the D_q spectra."""
        return self.distances.spectrum.matrix

    @property
    def clustering(self) -> Clustering:
        return self.distances.clustering

    def to_json(self) -> str:
        """The JSON document (sorted keys, fixed float form)."""
        return to_json(self.to_dict())

    def table(self) -> tuple[list[str], list[list]]:
        """Header and rows of the one-row-per-source table (CSV, HTML, terminal)."""
        rate_keys = sorted({k for s in self.sources for k in s["entropy_rate_bits"]})
        header = ["name", "length", "alphabet_size"]
        for f in ("D0", "D1", "D2"):
            header += [f, f"{f}_low", f"{f}_high"]
        for k in rate_keys:
            header += [f"h_{k}", f"h_{k}_low", f"h_{k}_high"]
        header += ["h_top", "h_top_low", "h_top_high", "predictor_bits", "predictor_low", "predictor_high"]
        rows = []
        for s in self.sources:
            row: list[Any] = [s["name"], s["length"], s["alphabet_size"]]
            for f in ("D0", "D1", "D2"):
                row += [s[f]["estimate"], s[f]["low"], s[f]["high"]]
            for k in rate_keys:
                t = s["entropy_rate_bits"].get(k, _triple(None))
                row += [t["estimate"], t["low"], t["high"]]
            for f in ("topological_entropy_bits", "predictor_bits_per_symbol"):
                row += [s[f]["estimate"], s[f]["low"], s[f]["high"]]
            rows.append(row)
        return header, rows


# ===================================================================== run
Progress = Callable[[str, int, SourceSpec], None]


def _content_hash(spec: SourceSpec, arr: SymbolArray | None) -> str:
    if arr is not None:
        return "symbols:" + array_hash(arr.codes, arr.starts, extra=arr.alphabet.fingerprint())
    return "file:" + file_hash(spec.path)


def column_specs(specs: Sequence[SourceSpec], reader: ReaderOptions) -> list[SourceSpec]:
    """The sources with a multi-column choice (``column="a,b"`` or ``"all"``) spread out: one per column,
    named ``NAME:COLUMN``; other sources unchanged."""
    out: list[SourceSpec] = []
    for spec in specs:
        if spec.column is not None:
            out.append(spec)
            continue
        for col, _ in reader.per_column(spec.path):
            out.append(spec if col is None else SourceSpec(spec.path, f"{spec.name}:{col}", col))
    return out


def _read_stdin(spec: SourceSpec, options: SurveyOptions) -> SymbolArray:
    """Standard input or a pipe, read once into memory (its cache key is the hash of its symbols)."""
    arr = options.reader_options.open(spec.path, name=spec.name).to_array()
    if len(arr) == 0:
        what = "Standard input" if spec.path == "-" else f"The pipe {spec.path}"
        raise InputError(f"{what} holds no usable symbols; check the data, its format and the alphabet.")
    return arr


def run_survey(
    specs: Sequence[SourceSpec],
    options: SurveyOptions,
    engine: Engine | None = None,
    cache: ResultCache | None = None,
    progress: Progress | None = None,
    prune_cache: bool = False,
    arrays: Sequence[SymbolArray | None] | None = None,
) -> SurveyResult:
    """Survey sources: per-source figures (cached), distances and clustering.

    Parameters
    ----------
    specs:
        Sources (see :func:`expand_inputs`).
    options:
        Survey parameters.
    engine:
        Where the per-source work runs (default: serially in this process).
    cache:
        Per-source result cache (default: none).  Finished sources are stored
        as soon as they finish, so an interrupted survey loses nothing.
    progress:
        Called as ``progress(event, index, spec)`` with event ``"cached"``,
        ``"queued"`` or ``"done"``.
    prune_cache:
        After the survey is complete, remove the cache entries it did not use and
        that are older than this run (:meth:`ResultCache.prune`), so the cache holds
        exactly the current sources and parameters.  Meant for a cache that belongs
        to this survey (``survey --out DIR`` uses ``DIR/.cache``), not for one shared
        by several surveys.  An interrupted or failed survey prunes nothing.
    arrays:
        Symbols already read, one per source (``None`` where the source is to be
        read from its path): the records of a per-record survey.  Such a source
        is keyed in the cache by its symbols.

    Returns
    -------
    SurveyResult
        The same for every engine, and for a resumed or an uninterrupted run.
    """
    if not specs:
        raise InputError("No inputs were given; name files, folders, patterns or a list file.")
    specs = column_specs(specs, options.reader_options)
    engine = engine or SerialEngine()
    cache = cache or ResultCache(None)
    started = time.time()
    params = options.task_params()
    outputs: list[dict | None] = [None] * len(specs)
    hashes: list[str] = []
    keys: list[str] = []
    todo: list[int] = []
    tasks: list[SurveyTask] = []
    damaged: list[str] = []
    given = arrays
    if given is not None and len(given) != len(specs):
        raise ParameterError("Give one symbol array (or None) per source.", parameter="arrays")
    for i, spec in enumerate(specs):
        arr = given[i] if given is not None else None
        if arr is None and is_stream_path(spec.path):
            arr = _read_stdin(spec, options)
        content = _content_hash(spec, arr)
        key = cache_key(content, params if spec.column is None else {**params, "column": spec.column})
        hashes.append(content)
        keys.append(key)
        hit, problem = cache.lookup(key)
        if problem is not None:
            damaged.append(f"the cached entry of {spec.name} was not used ({problem}); it was recomputed")
        if hit is not None:
            results, arrays = hit
            outputs[i] = _kept_for_merge({**results, "counts_arrays": arrays}, options)
            if progress:
                progress("cached", i, spec)
            continue
        todo.append(i)
        if arr is not None:
            tasks.append(SurveyTask(spec, options, arr.alphabet.to_dict(), arr.codes, arr.starts, arr.report))
        else:
            tasks.append(SurveyTask(spec, options))
        if progress:
            progress("queued", i, spec)

    finished = [0]

    def done(j: int, res: dict) -> None:
        i = todo[j]
        stored = {k: v for k, v in res.items() if k != "counts_arrays"}
        cache.put(keys[i], stored, res["counts_arrays"])
        outputs[i] = _kept_for_merge(res, options)
        if progress:
            progress("done", i, specs[i])
        finished[0] += 1
        pause_point("survey.cached", finished[0])

    if tasks:
        # a bounded number of tasks in flight: thousands of sources do not all sit in the engine's queue
        for j, res in engine.imap(survey_task, tasks, max_pending=4 * engine.workers + 2):
            done(j, res)
    result = merge_survey(specs, outputs, hashes, options)  # type: ignore[arg-type]
    if damaged:
        result = replace(result, cache_notes=tuple(damaged))
    if prune_cache:
        result = replace(result, cache_pruned=cache.prune(keys, before=started))
    return result


def _counts_of(out: dict) -> WordCounts:
    arrays = dict(out["counts_arrays"])
    arrays["header"] = np.frombuffer(json.dumps(out["counts_header"], sort_keys=True).encode(), np.uint8)
    return WordCounts.from_arrays(arrays, "cached counts")


def _kept_for_merge(out: dict, options: SurveyOptions) -> dict:
    """A finished source as the merge needs it: its word counts cut to the deepest distance depth it allows.

    The distance depth is at most the one this source's own length and alphabet allow (the shortest
    source and the joint alphabet only lower it), so counts beyond it are never read; dropping them
    keeps thousands of finished sources small in memory (the cache keeps the full counts).
    """
    wc = _counts_of(out)
    if options.distance_depth is not None:
        depth = min(int(options.distance_depth), wc.depth)
    else:
        depth = 1
        while depth < wc.depth and float(wc.alphabet.size) ** (depth + 1) * WORDS_PER_CELL <= wc.length:
            depth += 1
    if depth >= wc.depth:
        return out
    header, arrays = wc.truncate(depth).to_arrays()
    return {**out, "counts_header": header, "counts_arrays": arrays}


def merge_survey(specs: Sequence[SourceSpec], outputs: Sequence[dict], hashes: Sequence[str], options: SurveyOptions) -> SurveyResult:
    """Merge and estimate: rows in input order, aligned word tables, distances, clustering."""
    notes: list[str] = []
    counts: list[WordCounts] = []
    for out in outputs:
        counts.append(_counts_of(out))
    alphabets = [wc.alphabet for wc in counts]
    joint = joint_alphabet(alphabets)
    if joint is not alphabets[0]:
        notes.append(f"sources have different alphabets; words were compared over their joint alphabet of {joint.size} symbols")
    stored = min(wc.depth for wc in counts)
    shortest = min(wc.length for wc in counts)
    if options.distance_depth is not None:
        depth = min(int(options.distance_depth), stored)
    else:
        depth = 1
        while depth < stored and float(joint.size) ** (depth + 1) * WORDS_PER_CELL <= shortest:
            depth += 1
    if joint.bits * depth > 64:
        depth = max(1, 64 // joint.bits)
    tables = []
    for wc in counts:
        w, c = wc.words(depth)
        if joint is not alphabets[0] or not wc.alphabet.same_symbols(joint):
            w = remap_words(w, depth, wc.alphabet, joint)
            order = np.argsort(w, kind="stable")
            w, c = w[order], c[order]
        tables.append((w, c))
    if any(c.sum() == 0 for _, c in tables):
        raise ParameterError(f"A source has no word of length {depth}; use a smaller distance depth.", parameter="distance_depth")
    _, mat = word_matrix(tables)
    js = js_matrix(mat)
    sources = []
    spectra = []
    for spec, out, h in zip(specs, outputs, hashes):
        prof = out["profile"]
        spectra.append(spectrum_of(prof))
        entry = {"name": spec.name, "path": spec.path, "content_sha256": h.split(":", 1)[1], **figures_of(prof)}
        entry["read"] = out.get("read", {})
        entry["profile"] = prof
        sources.append(entry)
    spec_d = spectrum_matrix(spectra)
    if len(specs) >= 2:
        clustering = cluster(condensed_upper(js, np.sqrt), options.linkage, JS_METRIC)  # no n x n temporaries
    else:
        clustering = cluster(np.zeros((1, 1)), options.linkage, JS_METRIC)
        notes.append("one source: no distances or clustering")
    if float(joint.size) ** depth * WORDS_PER_CELL > shortest:
        notes.append(
            f"the shortest source ({shortest} symbols) has fewer than {WORDS_PER_CELL} words per possible "
            f"{depth}-word; divergences are inflated by sampling"
        )
    distances = SurveyDistances(
        names=tuple(s.name for s in specs),
        matrix=js,
        measure=f"Jensen-Shannon divergence of the depth-{depth} word distributions, bits (0..1)",
        depth=depth,
        alphabet=joint.name,
        spectrum=SpectrumDistances(spec_d),
        clustering=clustering,
    )
    kinds = [((s.get("profile") or {}).get("alphabet") or {}).get("name", "") for s in sources]
    return SurveyResult(tuple(sources), distances, options, tuple(notes), caution=caution_for(kinds))


def report_view(result: SurveyResult) -> SurveyView:
    """What the survey report draws, as plain data (the report layer does not know jobs)."""
    header, rows = result.table()
    return SurveyView(
        sources=tuple({"name": s["name"], "spectrum": spectrum_rows(s["profile"])} for s in result.sources),
        names=result.names,
        js=result.js,
        spectrum=result.spectrum,
        js_depth=result.js_depth,
        clustering=result.clustering,
        header=tuple(header),
        rows=tuple(tuple(r) for r in rows),
        notes=result.notes,
        subtitle=(
            f"profile depth {'automatic' if result.options.depth is None else result.options.depth}, "
            f"ratio k = {result.options.ratio}, seed {result.options.seed}"
        ),
        caution=result.caution,
    )


def write_outputs(result: SurveyResult, folder: Path, force: bool = False) -> list[Path]:
    """Write survey.json, survey.csv, distances.csv, survey.html and the PNG figures (atomically)."""
    from fractalseq.io._outputs import write_text
    from fractalseq.report.survey import write_report

    folder = Path(folder)
    written = write_report(report_view(result), folder, force=force)
    written.append(write_text(folder / "survey.json", result.to_json(), force=force))
    return written



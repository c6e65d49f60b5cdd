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

import glob
import inspect
import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np

from fractalseq import __version__
from fractalseq.alphabet import Alphabet
from fractalseq.io._cache import ResultCache, array_hash, cache_key, file_hash
from fractalseq.compare._distances import (
    Clustering,
    cluster,
    joint_alphabet,
    js_matrix,
    remap_words,
    spectrum_matrix,
    word_matrix,
)
from fractalseq.runner import Engine, SerialEngine, pause_point
from fractalseq.errors import InputError, ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.stream import ReadReport, SymbolArray
from fractalseq.words._counts import WordCounts, count_words

CAUTION = "Genomic output is for research, not for clinical decisions; drift reports on logs are no security guarantee."
#: Deepest word length stored per source for the distances (capped by the alphabet's address width).
#: Sources drawn in colour with a legend in the overlaid spectra (more: thin lines, no legend).
LABELLED_SOURCES = 12
#: Sources named on the dendrogram and heat map axes (more: unlabelled, fixed-size figures).
NAMED_LEAVES = 60
#: Sources whose distance matrices are shown as tables in survey.html (more: distances.csv only).
MATRIX_IN_PAGE = 40
STORE_DEPTH = 8
#: Cap on the number of possible words A**n stored per source.
STORE_WORDS = 1 << 20
#: Automatic distance depth: the shortest source needs this many words per possible word.
WORDS_PER_CELL = 20
_GLOB_CHARS = set("*?[")


# ================================================================== inputs
@dataclass(frozen=True)
class SourceSpec:
    """One input of a survey: a path (``-`` for standard input) and its display name."""

    path: str
    name: str


def _folder_files(folder: Path) -> list[Path]:
    return sorted(p for p in folder.rglob("*") if p.is_file() and not any(part.startswith(".") for part in p.relative_to(folder).parts))


def expand_inputs(items: Sequence[str], list_file: str | None = None, stdin_lines: Sequence[str] | None = None) -> list[SourceSpec]:
    """Turn files, folders, glob patterns and a list file into a list of sources.

    Parameters
    ----------
    items:
        Paths: a file; a folder (every non-hidden file below it, sorted);
        a glob pattern such as ``genomes/*.fa.gz`` (``**`` recurses); or
        ``-`` for standard input.
    list_file:
        A text file with one path (or pattern) per line; blank lines and
        lines starting with ``#`` are skipped; relative paths are relative
        to the list file's folder.  ``-`` reads the list from ``stdin_lines``.
    stdin_lines:
        Lines of the list when ``list_file`` is ``-``.

    Returns
    -------
    list of SourceSpec
        In the order given, duplicates removed; names are file names, or
        paths relative to the current folder when two file names clash.

    Raises
    ------
    InputError
        A path that does not exist, a pattern or folder matching no file, or
        no input at all.
    """
    raw: list[tuple[str, Path | None]] = [(it, None) for it in items]
    if list_file is not None:
        if list_file == "-":
            lines, base = list(stdin_lines or []), Path(".")
        else:
            lp = Path(list_file)
            try:
                lines = lp.read_text(encoding="utf-8").splitlines()
            except FileNotFoundError:
                raise InputError(f"The list file {list_file} does not exist; check the path.") from None
            except (OSError, UnicodeDecodeError) as exc:
                raise InputError(f"The list file {list_file} cannot be read ({exc}); give a UTF-8 text file.") from None
            base = lp.parent
        for ln in lines:
            ln = ln.strip()
            if ln and not ln.startswith("#"):
                raw.append((ln, base))
    paths: list[str] = []
    for item, base in raw:
        if item == "-":
            paths.append("-")
            continue
        p = Path(item)
        if base is not None and not p.is_absolute():
            p = base / p
        if p.is_file():
            paths.append(str(p))
        elif p.is_dir():
            found = _folder_files(p)
            if not found:
                raise InputError(f"The folder {item} holds no files; give a folder with inputs.")
            paths.extend(str(f) for f in found)
        elif _GLOB_CHARS & set(str(p)):
            found = sorted(f for f in glob.glob(str(p), recursive=True) if Path(f).is_file())
            if not found:
                raise InputError(f"The pattern {item} matches no file; check the pattern (quote it for the shell).")
            paths.extend(found)
        else:
            raise InputError(f"Input {item} does not exist; check the path.")
    if not paths:
        raise InputError("No inputs were given; name files, folders, patterns or a list file.")
    if paths.count("-") > 1 or ("-" in paths and list_file == "-"):
        raise InputError("Standard input can be read only once; give '-' once and not together with --from-list -.")
    seen: set[str] = set()
    unique: list[str] = []
    for p in paths:
        key = p if p == "-" else os.path.realpath(p)
        if key not in seen:
            seen.add(key)
            unique.append(p)
    names = [("stdin" if p == "-" else Path(p).name) for p in unique]
    if len(set(names)) < len(names):
        names = [("stdin" if p == "-" else os.path.relpath(p)) for p in unique]
    if len(set(names)) < len(names):
        names = [("stdin" if p == "-" else os.path.abspath(p)) for p in unique]
    return [SourceSpec(p, n) for p, n in zip(unique, names)]


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
        }

    def to_dict(self) -> dict:
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
                f"use --distance-depth {alphabet.max_depth} or less."
            )
        return int(options.distance_depth)
    n = 1
    while n < min(STORE_DEPTH, alphabet.max_depth) and float(alphabet.size) ** (n + 1) <= STORE_WORDS:
        n += 1
    return n


def profile_row(arr: SymbolArray, options: SurveyOptions) -> dict:
    """Every per-source figure of one source, from :func:`fractalseq.jobs._profile.profile_source`."""
    from fractalseq.jobs._profile import profile_source

    sig = inspect.signature(profile_source)
    wanted = {"depth": options.depth, "ratio": options.ratio, "seed": options.seed}
    kwargs = {k: v for k, v in wanted.items() if k in sig.parameters}
    result = profile_source(arr, **kwargs)
    data = result.to_dict() if hasattr(result, "to_dict") else dict(result)
    return json.loads(to_json(data))


def survey_task(task: SurveyTask) -> dict:
    """Map step for one source: its profile and its word counts (runs on a worker).

    Returns a dict with ``profile`` (JSON-ready), ``read`` (what the reader
    kept and dropped), ``counts_header`` and ``counts_arrays`` (the word
    counts up to the stored distance depth, see :meth:`WordCounts.to_arrays`).
    """
    opts = task.options
    if task.codes is not None:
        alphabet = Alphabet.from_dict(task.alphabet or {})
        arr = SymbolArray(alphabet, task.codes, task.starts if task.starts is not None else np.zeros(0, np.int64), task.spec.name,
                          task.report if task.report is not None else ReadReport())
    else:
        from fractalseq.sources import open_source

        stream = open_source(task.spec.path, fmt=opts.fmt, alphabet=opts.alphabet, policy=opts.policy, name=task.spec.name, **dict(opts.reader))
        arr = stream.to_array()
    if len(arr) == 0:
        raise InputError(f"{task.spec.path} holds no usable symbols; check the file and the --alphabet/--format options.")
    arr.name = task.spec.name
    profile = profile_row(arr, opts)
    wc = count_words(arr, min(_store_depth(arr.alphabet, opts), arr.alphabet.max_depth))
    header, arrays = wc.to_arrays()
    read = arr.report.to_dict() if arr.report is not None else {}
    read = {k: read[k] for k in ("symbols", "segments", "dropped", "dropped_total", "notes") if k in read}
    return {"profile": profile, "read": json.loads(to_json(read)), "counts_header": header, "counts_arrays": arrays}


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


def _spectrum_rows(profile: dict) -> list[dict]:
    rows = profile.get("spectrum") or profile.get("dimensions") or []
    return [d for d in rows if isinstance(d, dict) and d.get("q") is not None]


def spectrum_of(profile: dict) -> tuple[list[float], list[float | None]]:
    """``(q values, D_q estimates)`` of a profile (every order it computed)."""
    qs, ds = [], []
    for d in _spectrum_rows(profile):
        if isinstance(d, dict) and d.get("q") is not None:
            qs.append(float(d["q"]))
            ds.append(d.get("estimate"))
    return qs, ds


@dataclass
class SurveyResult:
    """A finished survey.

    Attributes
    ----------
    sources:
        Per source (input order): ``name``, ``path``, ``content_sha256``,
        the figures of :func:`figures_of`, ``read`` and the full ``profile``.
    names:
        Source names (row/column order of the matrices).
    js, js_depth:
        Jensen–Shannon divergences (bits) of the depth-``js_depth`` word distributions.
    spectrum:
        RMS distances between the D_q spectra.
    clustering:
        Hierarchical clustering on the Jensen–Shannon distance.
    options:
        The options used.
    notes:
        Anything the reader of the result should know.
    cache_pruned:
        Cache entries of earlier runs removed after this one (``run_survey(...,
        prune_cache=True)``); not part of the JSON, which depends only on the inputs and options.
    """

    sources: list[dict]
    names: list[str]
    js: np.ndarray
    js_depth: int
    js_alphabet: str
    spectrum: np.ndarray
    clustering: Clustering
    options: SurveyOptions
    notes: list[str] = field(default_factory=list)
    cache_pruned: int = 0

    def to_dict(self) -> dict:
        """The documented JSON contract (see the README section on ``survey --json``)."""
        return {
            "command": "survey",
            "fractalseq": __version__,
            "caution": CAUTION,
            "parameters": self.options.to_dict(),
            "sources": self.sources,
            "distances": {
                "names": list(self.names),
                "matrix": self.js.tolist(),
                "measure": f"Jensen-Shannon divergence of the depth-{self.js_depth} word distributions, bits (0..1)",
                "depth": self.js_depth,
                "alphabet": self.js_alphabet,
                "spectrum": {
                    "matrix": self.spectrum.tolist(),
                    "measure": "root mean square difference of the D_q spectra over common q",
                },
                "clustering": self.clustering.to_dict(),
            },
            "notes": list(self.notes),
        }

    def to_json(self) -> str:
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


def _read_stdin(spec: SourceSpec, options: SurveyOptions) -> SymbolArray:
    from fractalseq.sources import open_source

    arr = open_source("-", fmt=options.fmt, alphabet=options.alphabet, policy=options.policy, name=spec.name, **dict(options.reader)).to_array()
    if len(arr) == 0:
        raise InputError("Standard input holds no usable symbols; check the data and the --alphabet/--format options.")
    return arr


def run_survey(
    specs: Sequence[SourceSpec],
    options: SurveyOptions,
    engine: Engine | None = None,
    cache: ResultCache | None = None,
    progress: Progress | None = None,
    prune_cache: bool = False,
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

    Returns
    -------
    SurveyResult
        The same for every engine, and for a resumed or an uninterrupted run.
    """
    if not specs:
        raise InputError("No inputs were given; name files, folders, patterns or a list file.")
    engine = engine or SerialEngine()
    cache = cache or ResultCache(None)
    started = time.time()
    params = options.task_params()
    outputs: list[dict | None] = [None] * len(specs)
    hashes: list[str] = []
    keys: list[str] = []
    todo: list[int] = []
    tasks: list[SurveyTask] = []
    for i, spec in enumerate(specs):
        arr = _read_stdin(spec, options) if spec.path == "-" else None
        content = _content_hash(spec, arr)
        key = cache_key(content, params)
        hashes.append(content)
        keys.append(key)
        hit = cache.get(key)
        if hit is not None:
            results, arrays = hit
            outputs[i] = {**results, "counts_arrays": arrays}
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
        outputs[i] = res
        if progress:
            progress("done", i, specs[i])
        finished[0] += 1
        pause_point("survey.cached", finished[0])

    if tasks:
        engine.map(survey_task, tasks, on_done=done)
    result = merge_survey(specs, outputs, hashes, options)  # type: ignore[arg-type]
    if prune_cache:
        result.cache_pruned = cache.prune(keys, before=started)
    return result


def merge_survey(specs: Sequence[SourceSpec], outputs: Sequence[dict], hashes: Sequence[str], options: SurveyOptions) -> SurveyResult:
    """Merge and estimate: rows in input order, aligned word tables, distances, clustering."""
    notes: list[str] = []
    counts: list[WordCounts] = []
    for out in outputs:
        arrays = dict(out["counts_arrays"])
        header = out["counts_header"]
        arrays["header"] = np.frombuffer(json.dumps(header, sort_keys=True).encode(), np.uint8)
        counts.append(WordCounts.from_arrays(arrays, "cached counts"))
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
        raise InputError(f"A source has no word of length {depth}; use a smaller --distance-depth.")
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
        clustering = cluster(np.sqrt(js), options.linkage, "Jensen-Shannon distance (square root of the divergence)")
    else:
        clustering = cluster(np.zeros((1, 1)), options.linkage, "Jensen-Shannon distance (square root of the divergence)")
        notes.append("one source: no distances or clustering")
    if float(joint.size) ** depth * WORDS_PER_CELL > shortest:
        notes.append(
            f"the shortest source ({shortest} symbols) has fewer than {WORDS_PER_CELL} words per possible "
            f"{depth}-word; divergences are inflated by sampling"
        )
    return SurveyResult(
        sources, [s.name for s in specs], js, depth, joint.name, spec_d, clustering, options, notes
    )


# ================================================================= figures
def spectra_png(result: SurveyResult) -> bytes:
    """D_q against q for every source, overlaid (intervals as bands)."""
    from fractalseq.report.figures import PALETTE, figure, fig_to_png, short, style

    crowded = len(result.sources) > LABELLED_SOURCES
    with style():
        fig, ax = figure(7.6, 4.6)
        drawn = False
        for i, s in enumerate(result.sources):
            dims = [d for d in _spectrum_rows(s["profile"]) if d.get("estimate") is not None]
            if not dims:
                continue
            drawn = True
            q = np.array([float(d["q"]) for d in dims])
            est = np.array([float(d["estimate"]) for d in dims])
            if crowded:  # many sources: thin lines of one colour, no bands or legend
                ax.plot(q, est, color="#0b6e69", lw=0.8, alpha=max(0.08, min(0.6, 12.0 / len(result.sources))))
                continue
            color = PALETTE[i % len(PALETTE)]
            ax.plot(q, est, marker="o", color=color, label=short(s["name"], 28))
            lo = np.array([np.nan if d.get("low") is None else float(d["low"]) for d in dims])
            hi = np.array([np.nan if d.get("high") is None else float(d["high"]) for d in dims])
            if np.isfinite(lo).any():
                ax.fill_between(q, lo, hi, color=color, alpha=0.15, lw=0)
        ax.set_xlabel("order q")
        ax.set_ylabel("D_q")
        ax.set_title("Rényi dimension spectra" + (f" of {len(result.sources)} sources" if crowded else ""))
        if drawn and not crowded:  # no source may have an estimate (all too short): then there is nothing to label
            ax.legend(loc="best", fontsize=8)
        return fig_to_png(fig)


def dendrogram_png(result: SurveyResult) -> bytes:
    """Dendrogram of the clustering (Jensen–Shannon distance)."""
    from scipy.cluster.hierarchy import dendrogram

    from fractalseq.report.figures import figure, fig_to_png, short, style

    n = len(result.names)
    named = n <= NAMED_LEAVES  # beyond that the leaves are too many to label; the CSV and JSON name them
    with style():
        fig, ax = figure(7.6, max(3.0, 0.32 * n + 1.5) if named else 12.0)
        if result.clustering.linkage.shape[0]:
            dendrogram(
                result.clustering.linkage, labels=[short(nm, 32) for nm in result.names] if named else None,
                no_labels=not named, orientation="right", ax=ax, color_threshold=0, above_threshold_color="#0b6e69",
            )
        ax.set_xlabel("Jensen–Shannon distance (bits^½)")
        ax.set_title(f"Clustering ({result.clustering.method} linkage), depth-{result.js_depth} words")
        ax.grid(False)
        return fig_to_png(fig)


def heatmap_png(result: SurveyResult) -> bytes:
    """Heat map of the Jensen–Shannon divergences, rows in dendrogram order."""
    from fractalseq.report.figures import heatmap_png as _heat

    order = result.clustering.order or list(range(len(result.names)))
    m = result.js[np.ix_(order, order)]
    labels = [result.names[i] for i in order] if len(order) <= NAMED_LEAVES else None
    return _heat(m, labels, f"Jensen–Shannon divergence, depth-{result.js_depth} words", "bits")


def html_report(result: SurveyResult, figures: dict[str, bytes] | None = None):
    """The survey as an :class:`~fractalseq.report.html.HtmlReport` (sortable tables, figures).

    ``figures`` (``spectra``, ``heatmap``, ``dendrogram`` PNG bytes) are drawn here when not given.
    Distance matrices of more than :data:`MATRIX_IN_PAGE` sources are left to ``distances.csv``.
    """
    figs = dict(figures or {})
    from fractalseq.report.html import HtmlReport

    n = len(result.sources)
    depth = "automatic" if result.options.depth is None else result.options.depth
    page = HtmlReport(f"Survey of {n} source{'s' if n != 1 else ''}", f"profile depth {depth}, ratio k = {result.options.ratio}, seed {result.options.seed}", caution=CAUTION)
    page.section("Sources")
    page.paragraph(
        "One row per source: length, alphabet size, the Rényi dimensions D_0, D_1, D_2, entropy-rate estimates, "
        "topological entropy and the online predictor's bits per symbol, each with its interval (low, high). "
        "Click a heading to sort."
    )
    header, rows = result.table()
    page.table(header, rows, sortable=True, caption="Per-source figures")
    page.section("Spectra")
    page.figure(figs.get("spectra") or spectra_png(result), "D_q against q for every source (bands: intervals).", "Overlaid D_q spectra")
    page.section("Distances")
    page.paragraph(
        f"Jensen–Shannon divergence (bits, 0 to 1) between the depth-{result.js_depth} word distributions; "
        "clustering uses its square root, which is a metric."
    )
    if len(result.names) <= MATRIX_IN_PAGE:
        page.table(["source"] + list(result.names), [[nm] + list(r) for nm, r in zip(result.names, result.js.tolist())], caption="Jensen–Shannon divergence (bits)")
        page.table(["source"] + list(result.names), [[nm] + list(r) for nm, r in zip(result.names, result.spectrum.tolist())], caption="RMS distance between D_q spectra")
    else:
        page.paragraph(f"The {n} × {n} distance matrices are in distances.csv and survey.json (too large for this page).")
    if len(result.names) >= 2:
        page.figure(figs.get("heatmap") or heatmap_png(result), "Jensen–Shannon divergences, rows and columns in dendrogram order.", "Distance heat map")
        page.figure(figs.get("dendrogram") or dendrogram_png(result), "Hierarchical clustering of the sources.", "Dendrogram")
    if result.notes:
        page.section("Notes")
        page.note("", result.notes)
    return page


def write_outputs(result: SurveyResult, folder: Path, force: bool = False) -> list[Path]:
    """Write survey.json, survey.csv, distances.csv, survey.html and the PNG figures (atomically)."""
    from fractalseq.io._outputs import write_bytes, write_csv, write_text

    folder = Path(folder)
    written = []
    header, rows = result.table()
    written.append(write_csv(folder / "survey.csv", header, rows, force=force))
    written.append(write_csv(folder / "distances.csv", ["source"] + list(result.names), [[nm] + list(r) for nm, r in zip(result.names, result.js.tolist())], force=force))
    figs = {"spectra": spectra_png(result)}  # drawn once, written as PNG files and embedded in the page
    if len(result.names) >= 2:
        figs["heatmap"], figs["dendrogram"] = heatmap_png(result), dendrogram_png(result)
    for name, png in figs.items():
        written.append(write_bytes(folder / f"{name}.png", png, force=force))
    written.append(write_text(folder / "survey.html", html_report(result, figs).render(), force=force))
    written.append(write_text(folder / "survey.json", result.to_json(), force=force))
    return written

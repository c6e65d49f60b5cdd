"""``fractalseq profile``: the complexity profile of each input, as tables, JSON or a report folder."""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import List, Optional

import typer
from rich.table import Table
from rich.text import Text

from fractalseq.cli import common
from fractalseq.cli.inputs import reader, safe_stem
from fractalseq.errors import OutputError, ParameterError

BOOT = typer.Option(
    100, "--boot", "-b", min=0,
    help="Block-bootstrap replicates for every interval (0 = no intervals; otherwise at least 20).",
)
QS = typer.Option("0,1,2", "--q", help="Orders q of the dimensions, Rényi rates and consistency table, comma-separated.")
PROFILE_DEPTH = typer.Option(
    None, "--depth", "-n",
    help="Deepest word length (symbols) of the block-entropy table (default: deep enough for the longest words the data support, at most 12).",
)
LEVEL = typer.Option(0.95, "--level", help="Confidence level of the intervals, between 0.5 and 1.")
QUICK = typer.Option(
    False, "--quick",
    help="First look: no bootstrap (--boot ignored; no bootstrap intervals), no consistency table, no compressor bound.",
)


def parse_qs(text: str) -> tuple[float, ...]:
    """Parse ``"0,1,2"`` into sorted distinct orders; one clear sentence on a bad list."""
    parts = [p.strip() for p in str(text).split(",") if p.strip()]
    if not parts:
        raise ParameterError("The --q list is empty; give orders such as --q 0,1,2.")
    out = []
    for p in parts:
        try:
            v = float(p)
        except ValueError:
            raise ParameterError(f"--q entry {p!r} is not a number; give orders such as --q 0,1,2.") from None
        if not math.isfinite(v):
            raise ParameterError(f"--q entry {p!r} is not a finite number; give orders such as --q 0,1,2.")
        out.append(v)
    return tuple(sorted(set(out)))


def _check_out(out: Optional[Path], force: bool) -> None:
    if out is None:
        return
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out} is a file, not a folder; choose another output folder.")
    if out.exists() and any(not p.name.startswith(".") for p in out.iterdir()) and not force:
        raise OutputError(f"{out} already holds files; pass --force to overwrite them or choose another folder.")


def _fmt(v, digits: int = 4) -> str:
    if v is None or isinstance(v, bool) or (isinstance(v, float) and not math.isfinite(v)):
        return "–"
    return f"{v:.{digits}f}"


def _interval(low, high) -> str:
    """``[low, high]``, or nothing when no interval was computed."""
    if low is None or high is None:
        return ""
    return f"[{_fmt(low)}, {_fmt(high)}]"


def _depths(first, last) -> str:
    """The scaling range of a D_q as words, never a raw ``None``."""
    if first is None or last is None:
        return "no scaling range found"
    return f"depths {first}-{last}" if first != last else f"depth {first}"


def _numeric_line(read: dict) -> str:
    """For a numeric input: the column read, its time column, missing values and gaps (one line), else nothing."""
    info = read.get("numeric") if isinstance(read, dict) else None
    if not isinstance(info, dict):
        return ""
    parts = [f"column {common.safe(str(info.get('column')))!r}"]
    if info.get("time_column"):
        step = info.get("time_step")
        unit = info.get("time_unit") or ""
        parts.append(f"time column {common.safe(str(info['time_column']))!r}"
                     + (f" (step {step:g}{' ' + unit if unit else ''})" if step else ""))
    parts.append(f"{info.get('values', 0):,} values, {info.get('missing', 0):,} missing, {info.get('time_gaps', 0):,} time gap(s)")
    if info.get("method") == "ordinal":
        parts.append(f"ordinal patterns of order {info.get('order')}, delay {info.get('delay', 1)}, ties by {info.get('ties', 'time')}")
    return "\n" + "; ".join(parts)


RATE_SHORT = {
    "plugin": "h plug-in", "miller-madow": "h Miller-Madow", "grassberger": "h Grassberger", "lz76": "h LZ76",
    "compressors": "h <= compressors", "online_predictor": "h <= online predictor", "alphabet": "the alphabet's limit",
}


def _print_tables(result, quiet: bool) -> None:
    con = common.out_console
    d = result.to_dict()
    t = Table(title=f"{common.safe(result.name)}: {result.length:,} symbols, {result.segments:,} segment(s), "
                    f"{result.alphabet.name} (A = {result.alphabet_size}), k = {result.ratio:g}; rates in bits/symbol"
                    + _numeric_line(d.get("input") or {}))
    t.add_column("quantity", no_wrap=True)
    t.add_column("estimate", justify="right", no_wrap=True)
    t.add_column(f"{result.level:.0%} interval", justify="right", no_wrap=True)
    t.add_column("note")
    for r in d["dimensions"]:
        short = any(f.startswith("too little data") for f in r["flags"]) and None in r["scaling_range"]
        t.add_row(f"D_{r['q']:g}", _fmt(r["estimate"]), _interval(r["low"], r["high"]),
                  ("too few levels for a scaling range" if short else _depths(*r["scaling_range"]))
                  + ("" if r["reliable"] else ", see flags"))
    pe = d.get("permutation_entropy")
    per = " per step" if pe else ""
    for name, r in d["entropy_rate_bits"].items():
        note = (f"n = {r['depth']}{per}" if r["depth"] is not None else r["kind"]) + ("" if r["reliable"] else ", unreliable")
        if r.get("within_bounds") is False:
            limit = f"log2 {pe['order']}" if pe else "log2 A"
            note += f", above {limit}, the largest rate possible" if r["kind"] == "upper bound" else ", above the smallest upper bound"
        t.add_row(RATE_SHORT.get(name, name), _fmt(r["estimate"]), _interval(r["low"], r["high"]), note)
    use = d.get("rate_to_use")
    if use:
        t.add_row("h to use", _fmt(use["estimate"]), _interval(use["low"], use["high"]),
                  RATE_SHORT.get(use["estimator"], use["estimator"]) + f", within [0, {_fmt(use['upper_bound'])}]")
    topo = d["topological_entropy_bits"]
    t.add_row("h_top", _fmt(topo["estimate"]), "", "word growth" + ("" if topo["depth"] is None else f", n = {topo['depth']}"))
    if pe:
        t.add_row(f"PE order {pe['order']}", _fmt(pe["bits"]), _interval(pe["low"], pe["high"]),
                  f"bits of single patterns, delay {pe['delay']}, ties by {pe['ties']}")
        t.add_row("PE normalized", _fmt(pe["normalized"]), _interval(pe["normalized_low"], pe["normalized_high"]),
                  f"divided by log2({pe['order']}!)")
        t.add_row("PE conditional", _fmt(pe["conditional_bits"]), "",
                  f"next pattern given the current one, at most {_fmt(pe['conditional_max_bits'])}")
        fb = pe["forbidden"]
        t.add_row("patterns seen", f"{pe['distinct']} of {pe['possible']}", "",
                  f"{fb['count']} never seen; {fb['expected_missing_if_uniform']:.3g} expected by chance if uniform")
    for r in d["consistency"]:
        t.add_row(f"consistency q={r['q']:g}", r["verdict"], "",
                  f"{_fmt(r['dimension_bits'])} vs {_fmt(r['entropy_bits'])}")
    con.print(t)
    _print_templates(result.read)
    from fractalseq.stream import read_summary

    read = result.read or {}
    common.read_notes(read_summary(read.get("notes"), read.get("dropped")))
    for n in () if quiet else merged_notes(result.notes):
        common.err_console.print(f"note: {n}", markup=False, highlight=False)


_NAMED_NOTE = re.compile(r"^(?P<what>[^():]+) \((?P<name>[^()]+)\): (?P<rest>.*)$", re.S)


def merged_notes(notes) -> list[str]:
    """Notes in order, with ``what (a): text`` and ``what (b): text`` (the same text) said once as ``what (a, b): text``."""
    out: list[str] = []
    where: dict[tuple[str, str], int] = {}
    names: dict[int, list[str]] = {}
    for n in notes:
        hit = _NAMED_NOTE.match(str(n))
        if hit is None:
            out.append(str(n))
            continue
        key = (hit["what"], hit["rest"])
        if key in where:
            names[where[key]].append(hit["name"])
            continue
        where[key] = len(out)
        names[len(out)] = [hit["name"]]
        out.append(str(n))
    for i, ns in names.items():
        if len(ns) > 1:
            hit = _NAMED_NOTE.match(out[i])
            out[i] = f"{hit['what']} ({', '.join(ns)}): {hit['rest']}"
    return out


#: Templates listed under a log's profile table (all of them are in the JSON and the report).
TOP_TEMPLATES = 10


def _print_templates(read: dict | None) -> None:
    """The most frequent event templates of a log input, escaped for the terminal."""
    templates = (read or {}).get("templates") or []
    if not templates:
        return
    t = Table(title=f"most frequent templates ({min(len(templates), TOP_TEMPLATES)} of {len(templates):,})")
    t.add_column("count", justify="right", no_wrap=True)
    t.add_column("first line", justify="right", no_wrap=True)
    t.add_column("template")
    for row in sorted(templates, key=lambda r: (-int(r["count"]), int(r["first_line"])))[:TOP_TEMPLATES]:
        t.add_row(f"{int(row['count']):,}", f"{int(row['first_line']):,}", Text(common.safe(str(row["template"]))))
    common.out_console.print(t)


def _each_source(paths: List[str], read, per_record: bool):
    """``(name, symbols)`` per input, per column of a numeric table (``--column a,b`` / ``all``: ``FILE:COLUMN``),
    or per record of each input with ``per_record`` (each input read once)."""
    for path in paths:
        for col, opts in read.per_column(path):
            label = path if col is None else f"{path}:{col}"
            arr = opts.read(path, name=None if col is None else label)
            if not per_record:
                yield label, arr
                continue
            from fractalseq.jobs._records import record_arrays

            for part in record_arrays(arr, label):
                yield part.name, part


def profile(
    paths: List[str] = typer.Argument(
        ..., help="Input files (FASTA/FASTQ/text/log/numeric, optionally compressed); - reads standard input.",
    ),
    out: Optional[Path] = common.OUT,
    json_out: bool = common.JSON,
    alphabet: str = common.ALPHABET,
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    column: Optional[str] = common.COLUMNS,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    delay: int = common.DELAY,
    ties: str = common.TIES,
    ratio: float = common.RATIO,
    qs: str = QS,
    depth: Optional[int] = PROFILE_DEPTH,
    boot: int = BOOT,
    level: float = LEVEL,
    seed: int = common.SEED,
    quick: bool = QUICK,
    force: bool = common.FORCE,
    quiet: bool = common.QUIET,
    per_record: bool = typer.Option(
        False, "--per-record", help="Profile every record of every input (chromosome, contig, read) on its own, named INPUT:RECORD.",
    ),
    engine: Optional[str] = common.ENGINE,
    workers: Optional[int] = common.WORKERS,
    scheduler: Optional[str] = common.SCHEDULER,
    connect_timeout: float = common.CONNECT_TIMEOUT,
    piece: Optional[int] = typer.Option(
        None, "--piece", min=1,
        help="With --engine/--workers/--scheduler: also count the words on the workers, in pieces of this many symbols "
             "overlapping by DEPTH-1 (added up exactly); default: counted here, on two threads (faster on one machine).",
    ),
) -> None:
    """Measure the complexity of each input: dimensions, entropies, consistency.

    For every input this computes the Rényi dimensions D_q of its contractive
    encoding with bootstrap intervals, the f(α) spectrum, block entropies and
    entropy-rate estimates (plug-in, Miller–Madow, Grassberger, Lempel–Ziv,
    compressor bound, online predictor code length), the topological entropy,
    absent words, and the consistency table that sets the geometric D_q·log2(1/k)
    beside the entropy rate h_q.

    Without --out a table per input is printed and no file is written. With
    --out DIR each input gets a folder DIR/NAME (index.html, profile.json, CSV
    tables, PNG figures) and DIR/index.html links them. --json prints the same
    numbers on standard output (the JSON contract in the README); the same
    input and --seed give the same bytes. --quick leaves out the bootstrap, the
    consistency table and the compressor bound for a first look at a big input.
    Beyond 2^22 symbols the consistency table and the density image use the
    first 2^22 symbols (the JSON's settings and notes say so).

    With --per-record every record of an input (the chromosomes of an assembly, the
    contigs of a metagenome) is profiled on its own, as if it were a file of its own,
    and named INPUT:RECORD.

    With --workers N (or --engine dask, --scheduler tcp://HOST:PORT) the heavy passes run
    on the workers: the bootstrap pass of each word length, the online predictor and
    the consistency table beside them, and with --piece also the word counts, in pieces.
    The numbers are the serial ones, to the last digit.

    Genomic output is for research, not for clinical decisions.

    Example: fractalseq profile lambda.fa.gz --out lambda-profile --q 0,1,2 --boot 200
    """
    common.protect_inputs(paths)  # no output may replace an input, even with --force
    from fractalseq.io._outputs import StagedFolder, to_json
    from fractalseq.jobs._profile import STEPS, ProfileSettings, contract, profile_caution, profile_source
    from fractalseq.report.profile import safe_name, write_profile_index, write_profile_report

    caution = profile_caution

    # validate everything before reading anything
    settings = ProfileSettings(ratio=ratio, qs=parse_qs(qs), depth=depth, n_boot=boot, level=level, seed=seed, quick=quick)
    read = reader(fmt, alphabet, policy, column, bins, thresholds, ordinal, delay, ties, seed)
    _check_out(out, force)
    parameters = settings.parameters(read)

    results = []
    subfolders: list[str] = []
    taken: set[str] = {"index.html", "profile.json"}
    stage = StagedFolder(out, force) if out is not None else None  # built aside, renamed into place at the end
    with common.make_engine(engine, workers, scheduler, connect_timeout) as eng, common.progress(quiet) as bar:
        for label, arr in _each_source(paths, read, per_record):
            task = bar.add_task(f"{label}: reading", total=len(STEPS) + 1)
            settings.depth_for(len(arr), arr.alphabet)  # refuse an impossible depth before any work
            bar.advance(task)

            def on_step(name: str, task=task, label=label) -> None:
                bar.update(task, description=f"{label}: {name}")
                bar.advance(task)

            res = profile_source(arr, ratio=settings.ratio, qs=settings.qs, depth=settings.depth,
                                 resampling=settings.resampling, progress=on_step, quick=settings.quick,
                                 engine=eng, piece=piece)
            results.append(res)
            if stage is not None:
                bar.update(task, description=f"{label}: writing report")
                sub = safe_name(safe_stem(label), taken)
                write_profile_report(res, stage.path / sub, contract([res], parameters), caution([res]), force=force)
                subfolders.append(sub)
            bar.remove_task(task)
    if stage is not None:
        write_profile_index(results, subfolders, stage.path, contract(results, parameters), caution(results), force=force)
        stage.commit()
        if not quiet:
            common.err_console.print(f"wrote {len(results)} profile(s) to {out}/ (open {out}/index.html)",
                                     markup=False, highlight=False)
    if json_out:
        typer.echo(to_json(contract(results, parameters)), nl=False)
        return
    if out is None:
        for res in results:
            _print_tables(res, quiet)
        common.caution_line(caution(results))


def register(app: typer.Typer) -> None:
    app.command("profile")(profile)

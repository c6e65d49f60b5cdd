"""``fractalseq learn``, ``score`` and ``next``: the count-based next-symbol predictor.

The ``--json`` output of ``score`` is a public contract (documented in the
README): a top-level ``bits_per_symbol`` (all sources together) and a
``sources`` list whose items carry at least ``name``, ``length`` and
``bits_per_symbol``.  The documents and every decision behind them (template union,
training cut points kept in the model, unseen templates) come from
:mod:`fractalseq.jobs._learn_score`; this module parses options and formats.
"""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer
from rich.table import Table
from rich.text import Text

from fractalseq.cli import common
from fractalseq.errors import ParameterError
from fractalseq.guards import return_freed_arrays
from fractalseq.io._outputs import check_writable, to_json

DEPTHS = typer.Option(
    None, "--depths", help="Cell depths in symbols, comma-separated (e.g. 3,6,10,14,20); default: a ladder up to --depth (3,6,10,14,20 for DNA)."
)
DEPTH = typer.Option(
    None, "--depth", "-n", min=1, help="Deepest cell in symbols when --depths is not given; default: 20 for DNA, about 40 bits of context otherwise."
)
# the option's former name, still accepted (hidden from --help) so existing scripts keep working
OLD_MAX_DEPTH = typer.Option(None, "--max-depth", min=1, hidden=True, help="Deprecated spelling of --depth.")
SMOOTHING = typer.Option(0.5, "--smoothing", help="Additive constant alpha of each cell's estimate (c+alpha)/(N+A alpha); 0.5 is Krichevsky-Trofimov.")
MAX_CELLS = typer.Option(
    None, "--max-cells", min=1,
    help="Memory cap in cells: online, rows of the count tables (default 16,777,216, fewer for large alphabets); learn, cells kept (default 8,388,608).",
)
STRANDS = typer.Option(
    "auto", "--strands", help="DNA/RNA: count each word on both strands (both), the given strand only (forward), or auto (both for DNA/RNA)."
)
LEARNING_RATE = typer.Option(0.002, "--learning-rate", help="Online mode: step size of the mixing-weight updates (0 keeps the initial weights).")


def _depths(text: Optional[str]) -> Optional[list[int]]:
    if text is None or text.strip() == "":
        return None
    try:
        return [int(x) for x in text.replace(" ", "").split(",") if x]
    except ValueError:
        raise ParameterError(f"--depths must be whole numbers separated by commas (e.g. 3,6,12), not {text!r}.") from None


def _strands(text: str) -> bool | str:
    choices = {"auto": "auto", "both": True, "forward": False}
    if text not in choices:
        raise ParameterError(f"--strands must be auto, both or forward, not {text!r}.")
    return choices[text]


def _discount(text: str) -> float | str:
    if text == "auto":
        return "auto"
    try:
        return float(text)
    except ValueError:
        raise ParameterError(f"--discount must be auto or a number in [0, 1), not {text!r}.") from None


def _deepest(depth: Optional[int], old_max_depth: Optional[int], quiet: bool) -> Optional[int]:
    """The --depth value, taking the deprecated --max-depth spelling into account."""
    if old_max_depth is None:
        return depth
    if depth is not None and depth != old_max_depth:
        raise ParameterError(f"--depth {depth} and --max-depth {old_max_depth} disagree; give only --depth (the new name of --max-depth).")
    if not quiet:
        common.err_console.print("note: --max-depth is now called --depth (-n); the old name will be removed.")
    return old_max_depth


def _summary(read: dict) -> list[str]:
    from fractalseq.stream import read_summary

    return read_summary(read.get("notes"), read.get("dropped"))


def _model_params(depths, max_depth, smoothing, max_cells, strands) -> dict:
    return {
        "depths": _depths(depths),
        "max_depth": max_depth,
        "smoothing": smoothing,
        "max_cells": max_cells,
        "reverse_complement": _strands(strands),
    }


# ------------------------------------------------------------------- learn
def learn(
    paths: List[str] = typer.Argument(..., help="Training files (FASTA/FASTQ/text/log/numeric, optionally compressed); - reads standard input."),
    out: Path = typer.Option(..., "--out", "-o", help="Model file to write (.npz; plain arrays and a JSON header, no pickle)."),
    alphabet: str = common.ALPHABET,
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    column: Optional[str] = common.COLUMN,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    delay: int = common.DELAY,
    ties: str = common.TIES,
    depths: Optional[str] = DEPTHS,
    depth: Optional[int] = DEPTH,
    old_max_depth: Optional[int] = OLD_MAX_DEPTH,
    smoothing: float = SMOOTHING,
    discount: str = typer.Option("auto", "--discount", help="Absolute discount d of every count in the coarse-to-fine blend: a number in [0, 1), or auto (chosen per depth by leave-one-out likelihood)."),
    max_cells: Optional[int] = MAX_CELLS,
    strands: str = STRANDS,
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    force: bool = common.FORCE,
    engine: Optional[str] = common.ENGINE,
    workers: Optional[int] = common.WORKERS,
    scheduler: Optional[str] = common.SCHEDULER,
    connect_timeout: float = common.CONNECT_TIMEOUT,
    piece: int = common.PIECE,
) -> None:
    """Learn a predictor from training files and save it as a model file.

    Counts, for every cell depth, how often each symbol followed each context
    (the cell of all histories sharing their last n symbols). All inputs are
    merged; each file is its own segment, so no context spans two files. When
    the cells exceed --max-cells, the rarest cells of the deepest depths are
    pruned first, and the summary says how many. The order of the fixed-order
    Markov baseline shown by 'score' is chosen here, on the training data.
    Several logs are read over the union of their templates; numeric inputs
    binned by quantiles are cut at the quantiles of all training files. The
    model keeps that symbolization, and 'score' reads new data with it.

    With --workers N (or --engine dask, --scheduler) each file is cut into
    pieces of --piece symbols whose words are counted on the workers and
    added up exactly; the fit runs here, and the model file is the same
    bytes as a serial run's.

    Example: fractalseq learn strainA.fna.gz strainB.fna.gz -o kleb.npz
    """
    common.protect_inputs(paths)  # no output may replace an input, even with --force
    from fractalseq.cli.inputs import reader_options
    from fractalseq.jobs._learn_score import learn_files

    check_writable(out, force)
    return_freed_arrays()  # the cell tables are built in parts of a few MiB: freed ones must not stay resident
    max_depth = _deepest(depth, old_max_depth, quiet)
    params = {**_model_params(depths, max_depth, smoothing, max_cells, strands), "discount": _discount(discount)}
    with common.make_engine(engine, workers, scheduler, connect_timeout) as eng, common.progress(quiet) as bar:
        task = bar.add_task("counting" if eng.name == "serial" else f"counting ({eng.name}, {eng.workers} workers)", total=len(paths))
        report = learn_files(
            list(paths), out=out, force=force, fmt=fmt, alphabet=alphabet, policy=policy,
            reader=reader_options(column, bins, thresholds, ordinal, delay, ties), params=params, on_input=lambda _: bar.advance(task),
            engine=eng, piece=piece,
        )
    model = report.predictor
    rows = [r.to_dict() for r in report.stored_depths]
    if json_out:
        typer.echo(to_json(report.to_dict()), nl=False)
        return
    a = model.alphabet_
    t = Table(title=f"Model {out}: {model.n_symbols_:,} symbols in {model.n_segments_:,} segments ({a.name}, A = {a.size})")
    t.add_column("depth n", justify="right")
    t.add_column("cells", justify="right")
    t.add_column("observations", justify="right")
    t.add_column("use")
    for r in rows:
        use = []
        if r["depth"] in model.ladder_ or r["depth"] == 0:
            use.append("blend")
        if r["depth"] <= model.baseline_max_order_:
            use.append("Markov baseline" + (" (chosen)" if r["depth"] == model.baseline_order_ else ""))
        t.add_row(str(r["depth"]), f"{r['cells']:,}", f"{r['observations']:,}", ", ".join(use))
    common.out_console.print(t)
    strand = "both strands" if model.reverse_complement_ else "one strand"
    common.out_console.print(
        f"{model.n_cells_:,} cells stored (cap {model.max_cells_:,}; {model.pruned_cells_:,} rare deep cells pruned); "
        f"counted on {strand}. Baseline: order-{model.baseline_order_} KT Markov model, "
        f"{model.baseline_bits_[model.baseline_order_]:.4f} bits/symbol on the training data."
    )
    if not quiet:
        common.err_console.print(f"wrote {common.safe(str(out))}.", markup=False, highlight=False)
    for item in report.inputs:
        common.read_notes(_summary(item), item["name"] if len(report.inputs) > 1 else "")
    common.caution_line(report.note)


# ------------------------------------------------------------------- score
def _compressor_summary(comp: dict) -> tuple[str, float]:
    best = min(comp, key=lambda k: comp[k])
    return best, comp[best]


def score(
    paths: List[str] = typer.Argument(..., help="Files to score (FASTA/FASTQ/text/log/numeric, optionally compressed); - reads standard input."),
    model: Optional[Path] = typer.Option(None, "--model", "-m", help="Model file written by 'fractalseq learn' (fitted mode)."),
    online: bool = typer.Option(False, "--online", help="Predict-then-update over each file with a fresh model instead (no model file)."),
    alphabet: Optional[str] = typer.Option(
        None, "--alphabet", "-a", help="Symbol set: dna, rna, protein, binary, bytes, learn, or symbols:XYZ; default: the model's alphabet, dna with --online."
    ),
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    window: Optional[int] = typer.Option(
        None, "--window", "-W", min=1,
        help="Window length in symbols (one symbol = one log line or numeric row) for the per-window code lengths; "
             "default: logs and numeric columns, the size that gives at least 50 windows but at least 40 lines; other inputs 10,000.",
    ),
    top: int = typer.Option(5, "--top", "-t", min=0, help="Number of most surprising windows to list per file."),
    depths: Optional[str] = DEPTHS,
    depth: Optional[int] = DEPTH,
    old_max_depth: Optional[int] = OLD_MAX_DEPTH,
    smoothing: float = SMOOTHING,
    max_cells: Optional[int] = MAX_CELLS,
    learning_rate: float = LEARNING_RATE,
    strands: str = STRANDS,
    column: Optional[str] = common.COLUMN,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    baselines: str = typer.Option(
        "markov", "--baselines",
        help="Baselines beside the score: markov (the KT Markov model, cheap), all (also lzma, bz2 and zlib, which take longer than the predictor), or none.",
    ),
    delay: int = common.DELAY,
    ties: str = common.TIES,
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    engine: Optional[str] = common.ENGINE,
    workers: Optional[int] = common.WORKERS,
    scheduler: Optional[str] = common.SCHEDULER,
    connect_timeout: float = common.CONNECT_TIMEOUT,
    piece: int = common.PIECE,
    per_record: bool = typer.Option(
        False, "--per-record",
        help="Score every record of every input (chromosome, contig, read) as a source of its own, named INPUT:RECORD; "
             "with --online each record is coded by a fresh model (the total is the sum of the records' upper bounds).",
    ),
) -> None:
    """Score files: bits per symbol overall, per record and per window, with the most surprising stretches.

    Fitted mode (--model) scores each file with a learned model that does not
    change while scoring. Online mode (--online) predicts each symbol from the
    file's own past, then learns it; the total is an upper bound on the file's
    information content. Beside every score: top-1 and top-3 accuracy, the
    expected calibration error, the best fixed-order adaptive Markov model
    (Krichevsky-Trofimov estimates; order chosen on the training data, or in
    hindsight on the file itself with --online) and, with --baselines all,
    lzma/bz2/zlib on the same symbols (as text and packed); --baselines none
    leaves every baseline out (the quickest score). The model options (--depths ... --strands)
    apply to --online only. Exit status 2 for unusable input, e.g. data whose
    alphabet differs from the model's. With a model, data are read with the
    model's symbolization (its log templates, its numeric cut points) unless
    --column/--bins/--thresholds/--ordinal say otherwise.

    Fitted mode cuts each file into pieces of --piece symbols (each piece
    preceded by the model's deepest context, so every symbol is scored with
    the history a single pass would give it) and adds the pieces' totals in
    order; with --workers N (or --engine dask, --scheduler) the pieces are
    scored on the workers and the output is the same bytes as a serial run
    with the same --piece.

    With --per-record every record is scored as a source of its own. Online,
    a file is one stream by default (later records profit from what earlier
    ones taught the model); with --per-record each record starts from a fresh
    model, so each record's total is an upper bound on its own information
    content and the total is their sum (usually larger than the one-stream
    figure). Online scoring
    runs on --workers only with --per-record (one record per task; the same
    bytes as serial).

    Example: fractalseq score --online genome.fna.xz --window 50000 --json
    """
    common.protect_inputs(paths, model)  # no output may replace an input, even with --force
    from fractalseq.cli.inputs import reader_options
    from fractalseq.jobs._learn_score import score_files

    params = _model_params(depths, _deepest(depth, old_max_depth, quiet), smoothing, max_cells, strands)
    params["learning_rate"] = learning_rate
    with common.make_engine(engine, workers, scheduler, connect_timeout) as eng, common.progress(quiet) as bar:
        task = bar.add_task("scoring" if eng.name == "serial" else f"scoring ({eng.name}, {eng.workers} workers)", total=len(paths))
        report = score_files(
            list(paths), model, online=online, fmt=fmt, alphabet=alphabet, policy=policy,
            reader=reader_options(column, bins, thresholds, ordinal, delay, ties), window=window, top=top, params=params,
            on_source=lambda _: bar.advance(task), baselines=baselines, engine=eng, piece=piece, per_record=per_record,
        )
    if json_out:
        typer.echo(to_json(report.to_dict()), nl=False)
        return
    mode = f"model {model}" if report.mode == "fitted" else "online (predict, then update)"
    t = Table(title=f"Code length, {mode}")
    for col in ("source", "symbols", "bits/symbol", "top-1", "top-3", "calib. error", "Markov KT (order)", "best compressor"):
        t.add_column(col, justify="left" if col in ("source", "best compressor") else "right")
    for r in report.sources:
        mk = r.baselines.get("markov")
        comp = r.baselines.get("compressors")
        cname, cbits = _compressor_summary(comp) if comp else ("", float("nan"))
        if not r.length:  # nothing the model knows (a log of new templates only): listed below, not scored
            t.add_row(common.safe(r.name), "0", "–", "–", "–", "–", "–", "–")
            continue
        t.add_row(
            common.safe(r.name), f"{r.length:,}", f"{r.bits_per_symbol:.4f}", f"{r.top1_accuracy:.3f}", f"{r.top3_accuracy:.3f}",
            f"{r.expected_calibration_error:.4f}",
            f"{mk['bits_per_symbol']:.4f} ({mk['order']})" if mk else "not computed",
            f"{cbits:.4f} {cname}" if comp else "not computed",
        )
    common.out_console.print(t)
    common.out_console.print(f"All sources: {report.bits_per_symbol:.4f} bits/symbol over {report.length:,} symbols.")
    for r in report.sources:
        p = r.name
        if r.not_scored:  # a file of length 0 in the table above: say why
            common.out_console.print(f"{common.safe(p)}: not scored: {r.not_scored}.")
        if r.unseen_templates:
            unseen = r.unseen_templates
            ut = Table(title=f"{common.safe(p)}: {sum(e['count'] for e in unseen):,} lines with templates the model never saw (not scored)")
            for col in ("lines", "first line", "template"):
                ut.add_column(col, justify="left" if col == "template" else "right")
            for e in unseen[:top]:
                ut.add_row(f"{e['count']:,}", f"{e['first_line']:,}", Text(common.safe(e["template"])))
            common.out_console.print(ut)
        if len(r.records) > 1:
            rt = Table(title=f"{common.safe(p)}: records")
            for col in ("record", "start", "symbols", "bits/symbol"):
                rt.add_column(col, justify="left" if col == "record" else "right")
            for rec in r.records:
                bps = rec.bits_per_symbol
                rt.add_row(common.safe(rec.name), f"{rec.start:,}", f"{rec.length:,}", "-" if bps is None else f"{bps:.4f}")
            common.out_console.print(rt)
        if r.most_surprising_windows:
            unit = r.unit
            what = {"line": "lines (file line numbers)", "row": "rows (file line numbers)"}.get(unit, "symbols")
            wt = Table(title=f"{common.safe(p)}: most surprising windows of {r.window:,} {what}")
            cols = ("start", "end") if unit == "symbol" else (f"first {unit}", f"last {unit}")
            for col in (*cols, "record", "bits/symbol"):
                wt.add_column(col, justify="left" if col == "record" else "right")
            for w in r.most_surprising_windows:
                if unit == "symbol":
                    a, b = f"{w.start:,}", f"{w.end:,}"
                else:
                    c = w.coordinates
                    a, b = f"{c[f'first_{unit}']:,}", f"{c[f'last_{unit}']:,}"
                    if c.get("first_time") is not None:
                        a, b = f"{a} ({common.safe(c['first_time'])})", f"{b} ({common.safe(c['last_time'])})"
                wt.add_row(a, b, common.safe(w.record or "-"), f"{w.bits_per_symbol:.4f}")
            common.out_console.print(wt)
        m = r.memory
        gone = f"evictions {m.evictions:,}" if r.mode == "online" else f"pruned at learning {m.cells_pruned:,}"
        if r.length:  # (a source of length 0 was not scored: no tables to speak of)
            common.out_console.print(
                f"{common.safe(p)}: cells cap {m.cells_cap:,}, stored {m.cells_stored:,}, {gone}, tables "
                f"{m.table_bytes / 2**20:.1f} MiB; depths {', '.join(map(str, r.depths))}; "
                f"{'both strands' if r.reverse_complement else 'one strand'}."
            )
        common.read_notes(r.read_notes, p if len(report.sources) > 1 else "")
    common.caution_line(report.note)


# -------------------------------------------------------------------- next
def next_symbols(
    context: str = typer.Argument(
        ..., help="The context, oldest first: symbols (space-separated when longer than one character); for a log model "
                  "template ids '#3 #7' or template texts separated by ' || ' (\\| is a literal |); '' for none."
    ),
    model: Path = typer.Option(..., "--model", "-m", help="Model file written by 'fractalseq learn'."),
    top: int = typer.Option(5, "--top", "-t", min=1, help="Number of next symbols to list."),
    json_out: bool = common.JSON,
) -> None:
    """Show the most likely next symbols after a context, with their probabilities.

    The probabilities blend the counts of every cell the context falls in, from
    the coarsest (no context) to the deepest cell the model holds. The count
    column shows how often each symbol followed the deepest matching cell in the
    training data. A symbol outside the model's alphabet is an error (exit 2).

    Log models: the context is a list of events, oldest first, given as template ids
    ('#3 #7 #12', the numbers next prints beside its predictions; an empty context ''
    lists the most frequent events with their ids) or as template texts separated by
    ' || ' ('status unpacked <*> <*> || status installed <*> <*>'); a raw log line is
    matched to its template; ids and texts may be mixed. Inside a text \\| stands for
    a literal |, \\# for a # at its start, \\\\ for a backslash. The predicted next
    events are printed as template texts with their ids. Predictions on logs are no
    security guarantee.

    Example: fractalseq next GATTACAGATTACA --model kleb.npz --top 4

    Example: fractalseq next '#4 #8' --model dpkg.npz
    """
    from fractalseq.jobs._next import next_after
    from fractalseq.predict._predictor import CellPredictor

    fitted = CellPredictor.load(model)
    doc = next_after(fitted, context, top=top, model_name=str(model))
    if json_out:
        typer.echo(common.json_safe(to_json(doc)), nl=False)
        return
    rows, depth, ctx = doc["next"], doc["deepest_cell_depth"], doc["context"]
    logs = "context_ids" in doc
    if logs:
        title = f"Next event after {len(doc['context_ids'])} event(s) {ctx or '(no context)'} (deepest cell: depth {depth})"
    else:
        shown = ctx if len(ctx) <= 40 else "..." + ctx[-37:]
        title = f"Next symbol after {common.safe(repr(shown))} (deepest cell: depth {depth})"
    t = Table(title=title)
    cols = ("rank", "id", "template", "probability", "count in deepest cell") if logs else ("rank", "symbol", "probability", "count in deepest cell")
    for col in cols:
        t.add_column(col, justify="left" if col in ("symbol", "template") else "right")
    for i, r in enumerate(rows, 1):
        c = r["count_in_deepest_cell"]
        sym = [f"#{r['id']}", Text(common.safe(r["symbol"]))] if logs else [Text(common.safe(r["symbol"]))]
        t.add_row(str(i), *sym, f"{r['probability']:.4f}", "-" if c is None else f"{c:,}")
    if logs and doc["context_templates"]:
        common.say("context, oldest first:")
        for k, text in zip(doc["context_ids"], doc["context_templates"]):
            common.say(f"  #{k}  {common.safe(text)}")
    common.out_console.print(t)
    common.caution_line(doc["note"])


def register(app: typer.Typer) -> None:
    app.command("learn")(learn)
    app.command("score")(score)
    app.command("next")(next_symbols)

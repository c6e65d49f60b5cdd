"""``fractalseq survey``, ``drift`` and ``scan``: comparing sources and stretches of a stream.

The commands only parse options, call the library (:mod:`fractalseq.jobs._survey`,
:mod:`fractalseq.compare._drift`, :mod:`fractalseq.compare._scan`), show progress and format
results.  Exit status: 0 ran; 1 ``drift`` found a change at the chosen level;
2 usage or input error.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import List, Optional

import typer
from rich.table import Table

from fractalseq.cli import common

EXIT_FOUND = 1
#: Sources listed in the survey's terminal table (all of them are in --json and --out).
TERMINAL_ROWS = 50

PER_RECORD = typer.Option(
    False, "--per-record", help="Take every record of every input (chromosome, contig, read) as a source of its own, named INPUT:RECORD.",
)
ENGINE = common.ENGINE
WORKERS = common.WORKERS
SCHEDULER = common.SCHEDULER
CONNECT_TIMEOUT = common.CONNECT_TIMEOUT
SEED_HELP = "Seed of every random step (bootstrap intervals, permutations), 0 <= seed < 2^64; same input and seed, same bytes."


def _engine(kind: Optional[str], workers: Optional[int], scheduler: Optional[str], timeout: float = 5.0):
    return common.make_engine(kind, workers, scheduler, timeout)



# ==================================================================== survey
def survey(
    paths: List[str] = typer.Argument(None, help="Input files, folders (every file below), quoted glob patterns, or - for standard input."),
    from_list: Optional[str] = typer.Option(None, "--from-list", help="Text file listing one input per line (# comments); - reads the list from standard input."),
    alphabet: str = common.ALPHABET,
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    column: Optional[str] = common.COLUMNS,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    delay: int = common.DELAY,
    ties: str = common.TIES,
    common_cuts: bool = typer.Option(
        False, "--common-cuts", help="numeric input: cut every source at the quantiles of all sources pooled (levels compared), not each at its own (only dynamics compared)."
    ),
    depth: Optional[int] = typer.Option(None, "--depth", "-n", min=2, help="Deepest word length (symbols) of each profile; default: automatic, as in fractalseq profile."),
    ratio: float = common.RATIO,
    distance_depth: Optional[int] = typer.Option(None, "--distance-depth", min=1, help="Word length n of the Jensen-Shannon distances (symbols); default: largest n with A^n x 20 <= shortest source, at most 8."),
    linkage: str = typer.Option("average", "--linkage", help="Clustering linkage: average, complete, single or weighted."),
    quick: bool = typer.Option(
        False, "--quick", help="First look at a big corpus: profiles without bootstrap intervals, consistency table and compressor bound."
    ),
    out: Optional[Path] = common.OUT,
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    seed: int = common.seed_option(help=SEED_HELP),
    force: bool = common.FORCE,
    cache: Optional[Path] = typer.Option(
        None, "--cache", help="Folder of the per-source result cache, kept as it is and shareable by several surveys (default: OUT/.cache with --out, pruned after each run; else none)."
    ),
    no_cache: bool = typer.Option(False, "--no-cache", help="Do not read or write the per-source cache."),
    per_record: bool = PER_RECORD,
    engine: Optional[str] = ENGINE,
    workers: Optional[int] = WORKERS,
    scheduler: Optional[str] = SCHEDULER,
    connect_timeout: float = CONNECT_TIMEOUT,
) -> None:
    """Survey many sources: one row of complexity figures per source, distances and a clustering.

    Each source (a file; FASTA records of one file stay together) gets its length,
    alphabet size, D_0, D_1, D_2, entropy-rate estimates, topological entropy and the
    online predictor's bits per symbol, each with its interval. Sources are compared by
    the Jensen-Shannon divergence of their depth-n word distributions and by the RMS
    distance of their D_q spectra, and clustered (scipy, average linkage by default).

    With --out the folder receives survey.csv, survey.json, distances.csv,
    survey.html (sortable tables, overlaid spectra, heat map, dendrogram) and the
    PNG figures; finished sources are cached in OUT/.cache, so an interrupted survey
    (Ctrl-C) resumes where it stopped when run again with the same options and gives
    the same result. When a survey completes, OUT/.cache keeps only the entries of its
    own sources and options: entries of earlier runs over other files or with other
    options are removed (a folder given with --cache is never pruned). --json prints
    the JSON contract (sources, distances) on standard output. Numeric inputs take the
    reader options of fractalseq profile (--column, --bins, --thresholds, --ordinal,
    --delay, --ties), applied to every source; --column a,b or all makes each column of
    each table its own source (FILE:COLUMN). By default each source is cut at its own quantiles
    (equally likely symbols: sources compared by their dynamics), with --common-cuts
    all at the pooled quantiles (a source at a higher level then gets other symbols).
    With --per-record every record of every input (the chromosomes of an assembly,
    the contigs of a metagenome) is a source of its own, named INPUT:RECORD.
    Genomic output is for research, not for clinical decisions.

    Example: fractalseq survey genomes/ phage.fa --out survey --workers 2
    """
    common.protect_inputs(paths, from_list)  # no output may replace an input, even with --force
    from fractalseq.cli.inputs import reader
    from fractalseq.io._outputs import StagedFolder
    from fractalseq.jobs._files import survey_cache, survey_files
    from fractalseq.jobs._sources import expand_inputs
    from fractalseq.jobs._survey import SurveyOptions, column_specs, write_outputs
    from fractalseq.report.survey import MATRICES_IN_JSON, MATRIX_FILE

    options = SurveyOptions.from_reader(
        reader(fmt, alphabet, policy, column, bins, thresholds, ordinal, delay, ties, seed),
        depth=depth, ratio=ratio, distance_depth=distance_depth, seed=seed, linkage=linkage, quick=quick,
    )
    stdin_lines = sys.stdin.read().splitlines() if from_list == "-" else None
    specs = column_specs(expand_inputs(list(paths or []), from_list, stdin_lines), options.reader_options)
    common.protect_inputs([spec.path for spec in specs])  # the entries of a list file are inputs too
    # the report is built aside and renamed into place at the end; the cache stays in OUT/.cache meanwhile
    # (an interrupted run leaves only it) and is carried into the new folder by the commit
    stage = StagedFolder(out, force) if out is not None else None
    plan = survey_cache(out, cache, use_cache=not no_cache)
    store = plan.store
    with _engine(engine, workers, scheduler, connect_timeout) as eng, common.progress(quiet) as bar:
        overall = bar.add_task(f"survey ({eng.name}, {eng.workers} worker{'s' if eng.workers != 1 else ''})", total=None if per_record else len(specs))
        rows = {}
        show_rows = len(specs) <= 20 and not per_record
        cached = [0]

        def progress(event: str, i: int, spec) -> None:
            if event == "cached":
                cached[0] += 1
                bar.advance(overall)
                if show_rows:
                    rows[i] = bar.add_task(f"  {spec.name} (cached)", total=1, completed=1)
            elif event == "queued":
                if show_rows:
                    rows[i] = bar.add_task(f"  {spec.name}", total=1)
            elif event == "done":
                bar.advance(overall)
                if i in rows:
                    bar.update(rows[i], completed=1, description=f"  {spec.name} (done)")

        try:
            result = survey_files(specs, options, common_cuts=common_cuts, engine=eng, cache=plan, progress=progress, per_record=per_record)
        except (KeyboardInterrupt, SystemError) as exc:
            if not common.caused_by_interrupt(exc):
                raise
            bar.stop()
            kept = " finished sources are kept in the cache; run the same command again to resume" if store.enabled else ""
            common.interrupt_note = f"interrupted:{kept or ' nothing was written'}."
            raise typer.Exit(130) from None
    for note in result.cache_notes:
        common.err_console.print(f"note: {note}.", markup=False, highlight=False)
    if cached[0] and not quiet:
        common.err_console.print(f"resumed: {cached[0]} of {len(result.names)} sources read from the cache")
    if result.cache_pruned and not quiet:
        common.err_console.print(f"removed {result.cache_pruned} cache entries of earlier runs from {store.folder}", markup=False, highlight=False)
    written = write_outputs(result, stage.path, force=True) if stage is not None else []
    if stage is not None:
        stage.commit()
    if out is None and len(result.names) > MATRICES_IN_JSON:
        common.err_console.print(
            f"note: the {len(result.names)} x {len(result.names)} distance matrices are too large for the JSON, which refers to "
            f"{MATRIX_FILE}; only --out writes that file.", markup=False, highlight=False,
        )
    if json_out:
        typer.echo(result.to_json(), nl=False)
        return
    header, table_rows = result.table()
    show = ["name", "length", "D0", "D1", "D2", "h_top", "predictor_bits"]
    idx = [header.index(h) for h in show if h in header]
    rate_cols = [i for i, h in enumerate(header) if h == "h_grassberger"] or [
        i for i, h in enumerate(header) if h.startswith("h_") and not h.endswith(("_low", "_high")) and h != "h_top"
    ][:1]
    idx[5:5] = rate_cols  # after D2
    table = Table(title=f"Survey of {len(result.names)} sources (D_q in units of log 1/k, k = {ratio:g}; entropies in bits)")
    for i in idx:
        table.add_column(header[i], justify="left" if header[i] == "name" else "right")
    for r in table_rows[:TERMINAL_ROWS]:
        table.add_row(*[_cell(common.safe(r[i]) if isinstance(r[i], str) else r[i]) for i in idx])
    common.out_console.print(table)
    if len(table_rows) > TERMINAL_ROWS:
        common.out_console.print(f"(the first {TERMINAL_ROWS} of {len(table_rows)} sources; --out or --json give every row)")
    if len(result.names) >= 2:
        side = lambda group: (  # noqa: E731
            "{" + ", ".join(common.safe(result.names[i]) for i in group) + "}" if len(group) <= 10 else f"{{{len(group)} sources}}"
        )
        groups = result.clustering.top_groups()
        if len(groups) > 2:
            height = float(result.clustering.linkage[-1][2])
            common.out_console.print(
                f"Top of the clustering: {len(groups)} groups joined at the same distance ({height:.3g}): "
                + " vs ".join(side(g) for g in groups)
            )
        else:
            a, b = result.clustering.top_split()
            common.out_console.print(f"Top split of the clustering: {side(a)} vs {side(b)}")
    for note in result.notes:
        common.say(f"note: {_safe(note)}")
    _survey_read_notes(result.sources)
    if written:
        common.say(f"Wrote {len(written)} files to {_safe(out)}.")
    common.caution_line(result.caution)


def _survey_read_notes(sources) -> None:
    """The readers' notes of a survey; a note shared by several sources is printed once with their count."""
    who: dict[str, list[str]] = {}
    for s in sources:
        for note in _read_summary(s.get("read")):
            who.setdefault(str(note), []).append(s["name"])
    for note, names in who.items():
        if len(names) == 1:
            common.read_notes([note], names[0])
            continue
        shown = ", ".join(common.safe(n) for n in names[:3]) + (f" and {len(names) - 3} more" if len(names) > 3 else "")
        common.say(f"read note: {len(names)} sources ({shown}): {common.safe(note)}")


def _read_summary(read: dict | None) -> list[str]:
    from fractalseq.stream import read_summary

    return read_summary((read or {}).get("notes"), (read or {}).get("dropped"))


def _cell(v) -> str:
    if v is None:
        return "–"
    if isinstance(v, float):
        return f"{0.0 if abs(v) < 1e-12 else v:.4g}"  # rounding noise (-6e-17) is 0
    return str(v)


# ===================================================================== drift
def drift(
    baseline: str = typer.Argument(..., help="Baseline batch: a file, a folder (all files below), a quoted glob, @LIST (one path per line), or -."),
    new: str = typer.Argument(..., help="New batch, given the same way as the baseline."),
    alphabet: str = common.ALPHABET,
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    depth: Optional[int] = typer.Option(None, "--depth", "-n", min=1, help="Word length n tested (symbols); default: 3, less when A^n x 10 exceeds the shorter batch."),
    block: Optional[int] = typer.Option(None, "--block", min=1, help="Block length for the permutations (symbols); default: max(10 n, shorter batch / 64)."),
    permutations: int = typer.Option(999, "--permutations", "-R", min=19, help="Block permutations; the smallest possible p-value is 1/(R+1)."),
    alpha: float = typer.Option(0.05, "--alpha", help="Level of the verdict (exit status 1 when the smallest adjusted p-value is below it)."),
    adjust: str = typer.Option("holm", "--adjust", help="Adjustment across the figures tested: holm or bh (Benjamini-Hochberg)."),
    column: Optional[str] = common.COLUMNS,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    delay: int = common.DELAY,
    ties: str = common.TIES,
    figures: str = typer.Option("words,transitions,entropy_rate,D2", "--figures", help="Comma-separated figures to test: words, transitions, entropy_rate, D2."),
    top: int = typer.Option(10, "--top", min=0, help="How many contributing words and contexts to list."),
    ratio: float = common.RATIO,
    out: Optional[Path] = common.OUT,
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    seed: int = common.seed_option(help=SEED_HELP),
    force: bool = common.FORCE,
    per_record: bool = PER_RECORD,
    engine: Optional[str] = ENGINE,
    workers: Optional[int] = WORKERS,
    scheduler: Optional[str] = SCHEDULER,
    connect_timeout: float = CONNECT_TIMEOUT,
) -> None:
    """Does the NEW batch come from the same source as the BASELINE?

    Both batches are cut into blocks and their depth-n words counted per block. Tested
    figures: the n-word distribution (G statistic), the next-symbol distribution given
    the previous n-1 symbols (conditional G), the entropy rate and D_2. p-values come
    from block permutations (pooled blocks, labels reassigned), which respect
    dependence within streams, and are adjusted across figures (Holm by default).
    The first line is the verdict; the evidence follows: statistics, effect sizes,
    and the words and contexts that contribute most. Log inputs (--format log) are
    compared over the union of both batches' templates. Numeric inputs binned by
    quantiles are cut at the baseline's quantiles for both batches (so a shift in
    level changes the symbols); --thresholds fixes the cut points, --ordinal
    compares ordinal patterns, which ignore level and scale. --column a,b (or all)
    tests each column on its own, with Holm's adjustment across the columns.

    Exit status: 0 no change detected, 1 changed (smallest adjusted p < --alpha),
    2 usage or input error. Log inputs also get the event novelty test (templates new
    in the new batch, vanished, changed in rate, bursting; both batches mined together),
    printed after the drift report and under the key "novelty" of --json; its verdict
    counts for the exit status too. Drift reports on logs are no security guarantee.

    Example: fractalseq drift logs/monday.log logs/tuesday.log --format log --alpha 0.01
    """
    common.protect_inputs(baseline, new)  # no output may replace an input, even with --force
    from fractalseq.cli.inputs import reader
    from fractalseq.compare._drift import DriftOptions
    from fractalseq.jobs._drift_columns import batch_columns, drift_columns
    from fractalseq.jobs._files import drift_files

    figs = tuple(f.strip() for f in figures.split(",") if f.strip())
    options = DriftOptions(depth, block, permutations, alpha, adjust, seed, ratio, figs, top)
    options.check()
    read = reader(fmt, alphabet, policy, column, bins, thresholds, ordinal, delay, ties, seed)
    if out is not None:
        from fractalseq.io._outputs import StagedFolder

        stage = StagedFolder(out, force)  # built aside, renamed into place at the end
    stdin_lines = sys.stdin.read().splitlines() if "@-" in (baseline, new) else None
    columns = batch_columns(baseline, read, stdin_lines)  # --column a,b / all: one test per column
    if columns is not None and per_record:
        from fractalseq.errors import ParameterError

        raise ParameterError("--per-record and a list of columns cannot be combined; choose one way to split the inputs.")
    with _engine(engine, workers, scheduler, connect_timeout) as eng, common.progress(quiet) as bar:
        task = bar.add_task(f"counting blocks ({eng.name})", total=None)
        if columns is not None:
            several = drift_columns(baseline, new, columns, options, read, engine=eng, stdin_lines=stdin_lines,
                                    on_done=lambda i, r: bar.advance(task))
        else:
            report = drift_files(baseline, new, options, read, engine=eng, stdin_lines=stdin_lines,
                                 on_done=lambda i, r: bar.advance(task), per_record=per_record)
    if columns is not None:
        _drift_by_column(several, stage.path if out is not None else None, json_out)
        if out is not None:
            stage.commit()
        raise typer.Exit(EXIT_FOUND if several.changed else 0)
    result = report.drift
    if out is not None:
        from fractalseq.report.drift import write_outputs

        write_outputs(result, stage.path, force=True)
        if report.novelty is not None:
            from fractalseq.io._outputs import to_json, write_text

            write_text(stage.path / "novelty.json", to_json(report.novelty.to_dict()), force=True)
        stage.commit()
    if json_out:
        typer.echo(report.to_json(), nl=False)
    else:
        from fractalseq.report.drift import drift_text

        typer.echo(drift_text(result), nl=False)
        if report.novelty is not None:
            _print_novelty(report.novelty)
        common.caution_line(result.caution)
    raise typer.Exit(EXIT_FOUND if report.changed else 0)


def _drift_by_column(several, folder: Optional[Path], json_out: bool) -> None:
    """Print (and write) the drift of several columns: the verdict across columns, then each column's report."""
    from fractalseq.report.drift import drift_text, write_outputs

    if folder is not None:
        from fractalseq.cli.inputs import safe_stem
        from fractalseq.io._outputs import write_text

        for col, rep in zip(several.columns, several.reports):
            write_outputs(rep.drift, folder / safe_stem(col), force=True)
        write_text(folder / "drift.json", several.to_json(), force=True)
    if json_out:
        typer.echo(several.to_json(), nl=False)
        return
    typer.echo(several.verdict)
    for col, p, rep in zip(several.columns, several.p_across, several.reports):
        typer.echo(f"\n=== column {_safe(col)} (smallest adjusted p {rep.drift.p_value:.3g}; across columns {p:.3g})")
        typer.echo(drift_text(rep.drift), nl=False)


def _safe(text: object) -> str:
    """Text from the input made safe for the terminal (the consoles never interpret markup)."""
    return common.safe(str(text))


def _print_novelty(nov) -> None:
    """The event novelty sections after the drift report (strings from the input escaped)."""
    out = common.out_console
    say = lambda line="": out.print(line, highlight=False, soft_wrap=True, emoji=False)  # noqa: E731
    say()
    say(_safe(nov.verdict))
    for f in nov.families:
        say(f"  {f.family:<16} p = {f.p_value:<10.3g} adjusted {f.p_adjusted:<10.3g} {_safe(f.method)}")
    m = nov.model
    say(f"\nnew events: {nov.new_templates} templates, {nov.novel_lines} lines ({100 * nov.novel_share:.1f}% of the new batch); "
        f"the baseline shows {m.rate_per_line:.3g} unseen templates per line (leave-out blocks of {m.block_lines} lines)")
    for e in nov.new_events:
        say(f"  {e.lines:>7}  {_safe(e.template)}\n           first at {_safe(e.first_input)}:{e.first_line}: {_safe(e.example)}")
    say(f"\nvanished events: {len(nov.vanished_events)}")
    for e in nov.vanished_events:
        say(f"  baseline {e.baseline_count:>6} (expected {e.expected_new:.1f} in new)  p = {e.p_adjusted:.3g}  {_safe(e.template)}")
    say(f"\nrate changes: {len(nov.rate_changes)}")
    for c in nov.rate_changes:
        say(f"  baseline {c.baseline_count:>6} new {c.new_count:>6}  {c.direction:<11}  q = {c.q_value:.3g}  {_safe(c.template)}")
    if nov.bursts:
        say(f"\nbursts: {len(nov.bursts)}")
        for b in nov.bursts:
            say(f"  {b.count} in {b.window} lines at {_safe(b.first_input)}:{b.first_line}-{b.last_line} "
                f"(expected {b.expected:.2g})  p = {b.p_adjusted:.3g}  {_safe(b.template)}")
    for n in nov.notes:
        say(f"note: {_safe(n)}")
    say("\nDrift reports on logs are no security guarantee.")


def _num(v) -> str:
    return "–" if v is None else f"{v:.4g}"


# ====================================================================== scan
def scan(
    path: str = typer.Argument(..., help="Input file (FASTA/FASTQ/text/log/numeric, optionally compressed), or - for standard input."),
    window: Optional[int] = typer.Option(
        None, "--window", "-W", min=2,
        help="Window length in symbols (one symbol = one log line or numeric row); default: logs and numeric columns, "
             "the size that gives at least 50 windows but at least 40 lines; other inputs 10,000.",
    ),
    step: Optional[int] = typer.Option(None, "--step", "-S", min=1, help="Step between window starts (symbols, lines for logs); default: window / 4."),
    depth: Optional[int] = typer.Option(None, "--depth", "-n", min=1, help="Word length n of the window figures (symbols); default: largest n with A^n x 20 <= window; for logs, largest n whose distinct n-words the median window sees 20 times each on average."),
    penalty: str = typer.Option("bic", "--penalty", help="Change-point penalty: bic, i.e. (figures + 1) x ln(independent windows), or a number."),
    alphabet: str = common.ALPHABET,
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    column: Optional[str] = common.COLUMN,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    delay: int = common.DELAY,
    ties: str = common.TIES,
    ratio: float = common.RATIO,
    out: Optional[Path] = common.OUT,
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    seed: int = common.seed_option(help=SEED_HELP),
    force: bool = common.FORCE,
    engine: Optional[str] = common.ENGINE,
    workers: Optional[int] = common.WORKERS,
    scheduler: Optional[str] = common.SCHEDULER,
    connect_timeout: float = common.CONNECT_TIMEOUT,
    piece: int = common.PIECE,
) -> None:
    """Complexity figures in sliding windows along a stream, with change points.

    For each window: the entropy rate (next symbol given the previous n-1, bits per
    symbol), D_0 at depth n (distinct n-words), and the online predictor's surprise
    (bits per symbol). Change points are found by PELT on the standardised figures with
    a BIC-like penalty and listed as intervals with their mean figures; intervals far
    below the typical entropy rate are flagged low-complexity (repeats, low-complexity
    regions in genomes; in logs, stretches dominated by few templates). With --out:
    scan.json, scan.csv (one row per window), scan.png and scan.html.

    Logs: each non-blank line is one symbol (its template), so windows count lines;
    intervals are shown as file line numbers (1-based, as an editor shows them, blank
    lines counted) and name the templates that dominate them. Numeric columns: one
    symbol per row, intervals shown as file line numbers of the rows (and the time
    column's values when there is one). Genomic output is for research, not for
    clinical decisions; reports on logs are no security guarantee.

    The windows are counted in pieces of about --piece symbols of whole windows;
    with --workers N (or --engine dask, --scheduler) the pieces are counted on the
    workers while one of them runs the online predictor along the whole stream (a
    pass that cannot be cut); the change points are searched here. The output is
    the same bytes as a serial run with the same --piece.

    Example: fractalseq scan chr.fa.gz --window 5000 --step 1000 --out scan
    """
    common.protect_inputs(path)  # no output may replace an input, even with --force
    from fractalseq.cli.inputs import reader
    from fractalseq.jobs._files import parse_penalty, scan_file

    read = reader(fmt, alphabet, policy, column, bins, thresholds, ordinal, delay, ties, seed)
    pen = parse_penalty(penalty)
    if out is not None:
        from fractalseq.io._outputs import StagedFolder

        stage = StagedFolder(out, force)  # built aside, renamed into place at the end
    with common.make_engine(engine, workers, scheduler, connect_timeout) as eng, common.progress(quiet) as bar:
        task = bar.add_task("reading", total=2)
        what = "scanning" if eng.name == "serial" else f"scanning ({eng.name}, {eng.workers} workers)"
        result = scan_file(
            path, window, step, depth, reader=read, ratio=ratio, penalty=pen, seed=seed,
            on_read=lambda: bar.update(task, advance=1, description=what), engine=eng, piece=piece,
        )
        bar.advance(task)
    if out is not None:
        from fractalseq.report.scan import write_outputs

        write_outputs(result, stage.path, force=True)
        stage.commit()
    if json_out:
        typer.echo(result.to_json(), nl=False)
        return
    _print_scan(result)


def _span(iv: dict, unit: str) -> tuple[str, str]:
    """First and last coordinate of an interval: file lines/rows for line-oriented inputs, else symbols (end exclusive)."""
    if unit == "symbol":
        return f"{iv['start']:,}", f"{iv['end']:,}"
    first, last = f"{iv[f'first_{unit}']:,}", f"{iv[f'last_{unit}']:,}"
    if iv.get("first_time") is not None:
        first, last = f"{first} ({_safe(iv['first_time'])})", f"{last} ({_safe(iv['last_time'])})"
    return first, last


def _print_scan(result) -> None:
    """The scan as text: summary, segments (with their dominant templates for logs), regions, notes, caution."""
    from rich.text import Text

    unit = result.unit
    what = {"line": "lines (one symbol per non-blank line)", "row": "rows (one symbol per value)"}.get(unit, "symbols")
    say = common.say
    say(f"{_safe(result.name)}: {result.length:,} {what}; {len(result.starts)} window{'' if len(result.starts) == 1 else 's'} of {result.window:,} "
        f"(step {result.step:,}), depth {result.depth}.")
    breaks = len(result.segmentation.breaks)
    say(f"{breaks} change point{'' if breaks == 1 else 's'}; {len(result.low_complexity)} low-complexity region(s). "
        f"Method: {result.segmentation.method}; penalty {result.segmentation.penalty:.3g} ({result.segmentation.penalty_rule}).")
    first, last = ("first line", "last line") if unit == "line" else ("first row", "last row") if unit == "row" else ("start", "end")
    t = Table(title="Segments between change points" + ("" if unit == "symbol" else " (file line numbers)"))
    for col in (first, last, "windows", *result.series, "low"):
        t.add_column(col, justify="right" if col != "low" else "left", no_wrap=True)
    logs = any("templates" in iv for iv in result.intervals)
    if logs:
        t.add_column("dominant templates (lines)")
    for iv in result.intervals:
        row = [*_span(iv, unit), f"{iv['windows']:,}", *(_num(iv.get(k)) for k in result.series), "yes" if iv["low_complexity"] else ""]
        if logs:
            row.append(Text("\n".join(f"{e['count']:,}  {_safe(e['template'])}" for e in iv.get("templates", ()))))
        t.add_row(*row)
    common.out_console.print(t)
    if result.low_complexity:
        say("Low-complexity regions:")
        for iv in result.low_complexity:
            a, b = _span(iv, unit)
            names = "; ".join(f"{_safe(e['template'])} x{e['count']:,}" for e in iv.get("templates", ()))
            say(f"  {unit}s {a}-{b}  entropy rate {_num(iv.get('entropy_rate'))} bits/symbol"
                + (f"  ({names})" if names else ""))
    for n in result.notes:
        say(f"note: {_safe(n)}")
    common.read_notes(result.read_notes)
    common.caution_line(result.caution)


def register(app: typer.Typer) -> None:
    """Add ``survey``, ``drift`` and ``scan`` to the application."""
    for name, fn in (("survey", survey), ("drift", drift), ("scan", scan)):
        app.command(name, no_args_is_help=True, help=_help(fn.__doc__ or ""))(fn)


def _help(doc: str) -> str:
    """Docstring paragraphs each joined into one line (the help formatter wraps them)."""
    import inspect

    paras = [" ".join(p.split()) for p in inspect.cleandoc(doc).split("\n\n")]
    return "\n\n".join(p for p in paras if p)

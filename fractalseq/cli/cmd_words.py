"""``fractalseq count``: exact word counts for every depth, saved or summarised."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer
from rich.table import Table

from fractalseq.cli import common
from fractalseq.cli.inputs import reader
from fractalseq.io._outputs import check_writable, to_json


def count(
    paths: List[str] = typer.Argument(..., help="Input files (FASTA/FASTQ/text/log/numeric, optionally compressed); - reads standard input."),
    depth: int = common.DEPTH,
    alphabet: str = common.ALPHABET,
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    column: Optional[str] = common.COLUMN,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    delay: int = common.DELAY,
    ties: str = common.TIES,
    save: Optional[Path] = typer.Option(None, "--save", help="Write the merged counts to this .npz file (loads without pickle)."),
    top: int = typer.Option(0, "--top", min=0, help="Also list the TOP most frequent words at the deepest depth (0 = none)."),
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    force: bool = common.FORCE,
    engine: Optional[str] = common.ENGINE,
    workers: Optional[int] = common.WORKERS,
    scheduler: Optional[str] = common.SCHEDULER,
    connect_timeout: float = common.CONNECT_TIMEOUT,
    piece: Optional[int] = typer.Option(
        None, "--piece", min=1,
        help="With --engine/--workers/--scheduler: split each input by position into pieces of this many symbols "
        "overlapping by DEPTH-1, counted on the workers and added up exactly (FASTA and text files, uncompressed or BGZF, "
        "are cut into byte ranges the workers read themselves: then bytes per range). Without it, inputs that are files "
        "are split by word instead: each worker reads them whole and counts one slice of the words; standard input "
        "is cut into pieces of 16777216 symbols.",
    ),
) -> None:
    """Count every word of length 1..DEPTH exactly, merging all inputs.

    Occupied boxes of the encoding at scale k^n are the distinct n-words, so the
    table printed here is also the box-counting ladder. Inputs are read in chunks;
    memory is bounded by the distinct words counted.

    With --workers N (or --engine dask, --scheduler tcp://HOST:PORT) the words are
    cut into N slices by their leading symbols (for DNA on two workers: words
    starting with A or C, and with G or T): each worker reads every input itself
    and counts the words of its slice, and the slices add up without a merge.
    With --piece (or from standard input) each input is instead split into pieces
    that overlap by DEPTH-1 symbols, counted on the workers and added up in order;
    an uncompressed or BGZF FASTA or text file is then read by the workers in byte
    ranges. Either way the counts are identical to a serial run, and the files
    must be at the same path on every worker of a cluster.

    Example: fractalseq count genome.fa.gz --depth 16 --save genome16.npz
    """
    common.protect_inputs(paths)  # no output may replace an input, even with --force
    from fractalseq.alphabet import Alphabet
    from fractalseq.jobs._files import count_files  # imported here: numba makes it slow, and --help/completion need speed

    if save is not None:
        check_writable(save, force)
    read = reader(fmt, alphabet, policy, column, bins, thresholds, ordinal, delay, ties)
    with common.make_engine(engine, workers, scheduler, connect_timeout) as eng, common.progress(quiet) as bar:
        task = bar.add_task("counting" if eng.name == "serial" else f"counting ({eng.name}, {eng.workers} workers)", total=len(paths))
        summary = count_files(paths, depth, read, top=top, on_input=lambda _: bar.advance(task), engine=eng, piece=piece,
                              keep_counts=save is not None)
    alphabet = Alphabet.from_dict(summary.alphabet)
    if save is not None:
        summary.counts.save(save, force=force)
    result = summary.to_dict()
    rows = result["ladder"]
    reports = [(r["name"], r) for r in result["inputs"]]
    if json_out:
        typer.echo(to_json(result), nl=False)
        return
    table = Table(title=f"Word counts, {summary.length:,} symbols in {summary.segments:,} segments ({alphabet.name}, A = {alphabet.size})")
    for col in ("depth n", "distinct n-words", "occurrences", "possible A^n", "occupied fraction"):
        table.add_column(col, justify="right")
    for r in rows:
        table.add_row(
            str(r["depth"]), f"{r['distinct']:,}", f"{r['occurrences']:,}", f"{r['possible']:.4g}",
            f"{r['distinct'] / r['possible']:.4f}",
        )
    common.out_console.print(table)
    if top:
        t2 = Table(title=f"Most frequent {summary.depth}-words")
        t2.add_column("word")
        t2.add_column("count", justify="right")
        for row in result["top"]:
            t2.add_row(common.safe(str(row["word"])), f"{row['count']:,}")
        common.out_console.print(t2)
    from fractalseq.results import caution_for
    from fractalseq.stream import read_summary

    for p, r in reports:  # what each reader reported: format, lines cut, symbols left out...
        common.read_notes(read_summary(r.get("notes"), r.get("dropped")), p if len(reports) > 1 else "")
    common.caution_line(caution_for([alphabet]))
    if save is not None and not quiet:
        common.err_console.print(f"saved counts to {common.safe(str(save))}", markup=False, highlight=False)


def register(app: typer.Typer) -> None:
    app.command("count")(count)

"""``fractalseq demo``: the whole job on the invented scenario, estimates beside their true values."""

from __future__ import annotations

from pathlib import Path

import typer
from rich.text import Text
from rich.table import Table

from fractalseq.cli import common


def demo(
    out: Path = typer.Option(Path("fractalseq-demo"), "--out", "-o", help="Report folder (created; must be empty unless --force)."),
    seed: int = common.seed_option(7, help="Seed of the simulated scenario and every random step, 0 <= seed < 2^64; same seed, same bytes."),
    length: int = typer.Option(120_000, "--length", min=5_000, help="Bases per simulated sample."),
    workers: int = typer.Option(1, "--workers", "-w", min=1, help="Local worker processes for the survey (1 = serial: the demo's samples are small, so starting workers costs more than it saves)."),
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    force: bool = common.FORCE,
) -> None:
    """Run survey, scan, drift and the predictor on built-in simulated data and compare with the truth.

    The scenario is invented: a fictional marine station's simulated symbiont samples (Markov chains of
    known entropy rate, one with an inserted repeat island) and its telemetry relay's log in two weekly
    batches, the second with a new failure mode. One report folder is written (index.html links the
    survey, scan and drift reports); the table printed compares every estimate with its true value.

    Example: fractalseq demo --out demo-report
    """
    from fractalseq.demo import CAUTION, run_demo, summary_json
    from fractalseq.io._outputs import check_folder
    from fractalseq.datasets._scenario import SCENARIO_NOTE

    from fractalseq.datasets._scenario import check_size

    check_size(length)  # the memory a sample length implies, before any folder or note
    check_folder(out, force)  # refuse a file, a non-empty folder or an unwritable place before any work (creates nothing)
    if not quiet and not json_out:
        common.err_console.print(Text(SCENARIO_NOTE, style="bold"))
    with common.err_console.status("starting", spinner="dots") if not quiet else _Null() as status:
        def step(text: str) -> None:
            if status is not None:
                status.update(text)
            if not quiet:
                common.err_console.print(f"  · {text}")

        result = run_demo(out, seed=seed, length=length, workers=workers, force=force, step=step)
    if json_out:
        typer.echo(summary_json(result), nl=False)
        return
    table = Table(title="Estimates beside the truth (invented scenario)")
    for col in ("subject", "figure", "estimate", "95% interval", "truth", "ok"):
        # names and figures may wrap (narrow terminals); numbers never do
        table.add_column(
            col, justify="right" if col in ("estimate", "truth") else "left",
            no_wrap=col not in ("subject", "figure"), min_width=10 if col == "figure" else None,
        )
    for r in result.rows:
        est = f"{r.estimate:.3f}" if isinstance(r.estimate, float) else str(r.estimate)
        ci = f"{r.low:.3f}–{r.high:.3f}" if r.low is not None and r.high is not None else ""
        truth = f"{r.truth:.3f}" if isinstance(r.truth, float) else str(r.truth)
        inside = Text("") if r.within is None else (Text("yes", style="green") if r.within else Text("no", style="red"))
        table.add_row(r.subject, r.figure, est, ci, truth, inside)
    common.out_console.print(table)
    common.out_console.print(f"Report: {out / 'index.html'}  ({result.seconds:.1f} s)")
    common.out_console.print(CAUTION)


class _Null:
    def __enter__(self):
        return None

    def __exit__(self, *exc):
        return False


def register(app: typer.Typer) -> None:
    app.command("demo")(demo)

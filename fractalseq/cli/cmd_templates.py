"""``fractalseq templates``: the template table mined from event logs, and each line's template."""

from __future__ import annotations

from pathlib import Path
from typing import List, Optional

import typer
from rich.table import Table
from rich.text import Text

from fractalseq.cli import common
from fractalseq.cli.common import json_safe, safe
from fractalseq.io._outputs import StagedFolder, check_writable, to_json, write_csv, write_text

def _fields_text(t: dict) -> str:
    parts = []
    for name in ("hosts", "programs", "levels"):
        values = t.get(name) or {}
        if values:
            parts.append(name + " " + ", ".join(f"{v} {c:,}" for v, c in values.items()))
    return "; ".join(parts)


def templates(
    paths: List[str] = typer.Argument(..., help="Log files (optionally compressed), mined together as one sequence; - reads standard input."),
    csv_file: Optional[Path] = typer.Option(None, "--csv", help="Also write the table to this CSV file (atomically; not overwritten without --force)."),
    out: Optional[Path] = common.OUT,
    json_out: bool = common.JSON,
    quiet: bool = common.QUIET,
    force: bool = common.FORCE,
) -> None:
    """Mine the templates of event logs: one row per template, with its count, first line and an example.

    Several logs share one table (mined over their union, in the order given),
    with a count per log.  --json also gives the template id of every line
    (null for a blank line).  --out writes templates.json and templates.csv.
    Drift reports on logs are no security guarantee.

    Example: fractalseq templates /var/log/dpkg.log --csv dpkg-templates.csv
    """
    common.protect_inputs(paths)  # no output may replace an input, even with --force
    from fractalseq.jobs._templates import mine_logs  # imported here: --help and completion need speed
    from fractalseq.results import CAUTION_LOGS

    if csv_file is not None:
        check_writable(csv_file, force)
    if out is not None:
        stage = StagedFolder(out, force)  # before reading; built aside, renamed into place at the end
    with common.progress(quiet) as bar:
        task = bar.add_task("mining templates", total=len(paths))
        run = mine_logs(paths, on_input=lambda _: bar.advance(task))
    if csv_file is not None:
        header, rows = run.csv_rows()
        write_csv(csv_file, header, rows, force=force)
    if out is not None:
        header, rows = run.csv_rows()
        write_text(stage.path / "templates.json", to_json(run.to_dict()), force=force)
        write_csv(stage.path / "templates.csv", header, rows, force=force)
        stage.commit()
    if not quiet:
        for log in run.inputs:
            for note in log.notes():
                common.err_console.print(Text(f"{safe(log.name)}: {note}"))
    if json_out:
        typer.echo(json_safe(to_json(run.to_dict())), nl=False)
        return
    _print_table(run)
    common.caution_line(CAUTION_LOGS)
    if not quiet:
        for target in [p for p in (csv_file, out) if p is not None]:
            common.err_console.print(Text(f"wrote {safe(str(target))}"))


def _print_table(run) -> None:
    several = len(run.inputs) > 1
    total = sum(log.lines - log.blank for log in run.inputs)
    title = Text(f"{len(run.templates):,} templates in {total:,} lines of " + ", ".join(safe(log.name) for log in run.inputs))
    table = Table(title=title, title_justify="left")
    table.add_column("id", justify="right", overflow="fold")
    table.add_column("template", overflow="fold")
    table.add_column("count", justify="right", overflow="fold")
    table.add_column("first line", justify="right", overflow="fold")
    if several:
        for log in run.inputs:
            table.add_column(Text(safe(log.name)), justify="right", overflow="fold")
    table.add_column("example", overflow="fold")
    table.add_column("header fields", overflow="fold")
    for t in run.templates:
        first = f"{t['first_line']:,}"
        if several:
            first = f"{safe(run.inputs[t['first_input']].name)}:{first}"
        row = [Text(str(t["id"])), Text(safe(t["text"])), Text(f"{t['count']:,}"), Text(first)]
        if several:
            row += [Text(f"{c:,}") for c in t["counts"]]
        row += [Text(safe(t["example"])), Text(safe(_fields_text(t)))]
        table.add_row(*row)
    common.out_console.print(table)  # off a terminal nothing is cut: the table is as wide as its widest row


def register(app: typer.Typer) -> None:
    app.command("templates")(templates)

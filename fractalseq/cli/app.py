"""Entry point of the ``fractalseq`` command.

Exit status: 0 ran and found nothing to flag; 1 ran and found something
(for example drift detected); 2 usage or input error (one sentence on
standard error, no traceback).  Each command lives in its own module under
``fractalseq.cli`` and registers itself through a ``register(app)`` function
listed in :data:`COMMAND_MODULES`.
"""

from __future__ import annotations

import importlib
import os
import sys

import typer

from fractalseq.errors import FractalseqError

EXIT_OK = 0
EXIT_FOUND = 1
EXIT_USAGE = 2

app = typer.Typer(
    name="fractalseq",
    help=(
        "Measure, compare and predict long symbolic streams (genomes, event logs, "
        "symbolized time series) through their contractive chaos-game encoding.\n\n"
        "Exit status: 0 ran, 1 ran and found something (e.g. drift), 2 usage or input error.\n\n"
        "Genomic output is for research, not for clinical decisions; drift reports on logs "
        "are no security guarantee."
    ),
    no_args_is_help=True,
    add_completion=True,
    pretty_exceptions_enable=False,
    rich_markup_mode="rich",
    context_settings={"help_option_names": ["-h", "--help"]},
)

#: Modules that add commands; each defines ``register(app: typer.Typer) -> None``.
COMMAND_MODULES: tuple[str, ...] = (
    "fractalseq.cli.cmd_words",
    "fractalseq.cli.cmd_render",
    "fractalseq.cli.cmd_profile",
    "fractalseq.cli.cmd_predict",
    "fractalseq.cli.cmd_compare",
    "fractalseq.cli.cmd_demo",
    "fractalseq.cli.cmd_templates",
)


def _print_version(value: bool) -> None:
    # an eager option callback runs while parsing, so `fractalseq --version` needs no command
    if value:
        from fractalseq import __version__

        typer.echo(f"fractalseq {__version__}")
        raise typer.Exit(EXIT_OK)


@app.callback()
def _root(
    version: bool = typer.Option(
        False, "--version", help="Print the version and exit.", is_eager=True, callback=_print_version
    ),
) -> None:
    """Measure, compare and predict long symbolic streams."""


def _register_all() -> None:
    for name in COMMAND_MODULES:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:  # command not written yet
                continue
            raise
        module.register(app)


_register_all()


def fail(message: str) -> "typer.Exit":
    """Print one sentence on standard error and return an Exit(2) to raise."""
    typer.echo(f"error: {message}", err=True)
    return typer.Exit(EXIT_USAGE)


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit status instead of raising.

    A run that fails (status 2 or more) removes the output folders it created
    and left empty, so a refused run leaves nothing behind.
    """
    from fractalseq.io._outputs import tracking_folders

    with tracking_folders() as discard_empty:
        status = _run(argv)
        if status >= EXIT_USAGE:
            discard_empty()
    return status


def _run(argv: list[str] | None) -> int:
    try:
        result = app(args=argv, prog_name="fractalseq", standalone_mode=False)
        return int(result or 0)
    except FractalseqError as exc:
        from fractalseq.cli.common import option_hint

        hint = option_hint(getattr(exc, "parameter", None))
        typer.echo(f"error: {exc}{hint}" if not hint else f"error: {str(exc).rstrip('.')}{hint}.", err=True)
        return EXIT_USAGE
    except typer.Exit as exc:
        return int(exc.exit_code)
    except KeyboardInterrupt:
        typer.echo("interrupted: finished outputs are kept, nothing half-written was left.", err=True)
        return 130
    except MemoryError:
        typer.echo("error: out of memory; use a smaller depth or split the input.", err=True)
        return EXIT_USAGE
    except OSError as exc:
        where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
        typer.echo(f"error: {exc.strerror or exc}{where}; check the path and permissions.", err=True)
        return EXIT_USAGE
    except Exception as exc:  # click usage errors and the like
        usage, abort = _click_exceptions()
        if isinstance(exc, usage):
            if type(exc).__name__ == "NoArgsIsHelpError":  # the help was printed already
                return EXIT_USAGE
            return _usage_error(exc)
        if isinstance(exc, abort):
            typer.echo("interrupted.", err=True)
            return 130
        if os.environ.get("FRACTALSEQ_DEBUG"):
            raise
        typer.echo(
            f"error: internal failure ({type(exc).__name__}: {exc}); please report it with the command you ran.",
            err=True,
        )
        return 3


def _click_exceptions() -> tuple[tuple[type, ...], tuple[type, ...]]:
    """Click's exception classes: recent typer vendors click as ``typer._click``, older typer uses ``click``."""
    usage: list[type] = []
    abort: list[type] = [typer.Abort]
    for name in ("typer._click.exceptions", "click.exceptions"):
        try:
            module = importlib.import_module(name)
        except ImportError:
            continue
        usage.append(module.ClickException)
        if hasattr(module, "Abort"):
            abort.append(module.Abort)
    return tuple(usage), tuple(abort)


def _usage_error(exc: Exception) -> int:
    """One sentence for a click usage error (bad option, missing argument...), exit status 2."""
    message = " ".join(str(exc.format_message()).split()).rstrip(".")
    ctx = getattr(exc, "ctx", None)
    command = getattr(ctx, "command_path", None) or "fractalseq"
    typer.echo(f"error: {message}; see {command} --help.", err=True)
    return EXIT_USAGE


def entry() -> None:  # pragma: no cover - thin wrapper
    sys.exit(main())

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
import re
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


from fractalseq.runner import pause_point  # noqa: E402 - the test hook, light

pause_point("cli.import", 1)  # test hook: blocks while the command modules are about to be imported
_register_all()


_built: tuple = (None, None)


def _command():
    """The click command of :data:`app`, built once per process (typer rebuilds it on every call: about 12 ms
    of signatures and annotations for the eleven commands, which a caller running several commands in one
    process, the tests among them, paid each time); rebuilt when the registered commands change."""
    global _built
    # typer reads one setting from the environment while building (its switch that makes --show-completion take
    # the shell as a value): a change of it rebuilds too
    key = (tuple(app.registered_commands), tuple(app.registered_groups), app.registered_callback,
           os.environ.get("_TYPER_COMPLETE_TEST_DISABLE_SHELL_DETECTION"))
    if _built[0] != key:
        import typer.main

        _built = (key, typer.main.get_command(app))
    return _built[1]


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
        from fractalseq.cli import common

        common.interrupt_note = None
        result = _command()(args=argv, prog_name="fractalseq", standalone_mode=False)
        if result == 130:  # typer turns an uncaught Ctrl-C into Exit(130), returned here without a word
            return _interrupted()
        return int(result or 0)
    except FractalseqError as exc:
        from fractalseq.cli.common import option_hint, safe

        hint = option_hint(getattr(exc, "parameter", None))
        text = safe(str(exc))  # messages quote paths and symbols from the input: no terminal control reaches the screen
        typer.echo(f"error: {text}{hint}" if not hint else f"error: {text.rstrip('.')}{hint}.", err=True)
        return EXIT_USAGE
    except typer.Exit as exc:
        if exc.exit_code == 130:
            return _interrupted()
        return int(exc.exit_code)
    except KeyboardInterrupt:
        return _interrupted()
    except MemoryError as exc:
        from fractalseq.cli.common import safe

        typer.echo(safe(f"error: {_memory_sentence(exc, argv)}"), err=True)
        return EXIT_USAGE
    except OSError as exc:
        from fractalseq.cli.common import safe

        where = f" ({exc.filename})" if getattr(exc, "filename", None) else ""
        typer.echo(safe(f"error: {exc.strerror or exc}{where}; check the path and permissions."), err=True)
        return EXIT_USAGE
    except Exception as exc:  # click usage errors and the like
        if _caused_by_interrupt(exc):
            # Ctrl-C inside a compiled kernel surfaces as "SystemError: ... returned a result with an
            # exception set" (the interrupt is its cause or context): an interruption all the same
            return _interrupted()
        usage, abort = _click_exceptions()
        if isinstance(exc, usage):
            if type(exc).__name__ == "NoArgsIsHelpError":  # the help was printed already
                return EXIT_USAGE
            return _usage_error(exc)
        if isinstance(exc, abort):
            return _interrupted()
        if os.environ.get("FRACTALSEQ_DEBUG"):
            raise
        from fractalseq.cli.common import safe

        typer.echo(
            safe(f"error: internal failure ({type(exc).__name__}: {exc}); please report it with the command you ran."),
            err=True,
        )
        return 3


INTERRUPTED = "interrupted: finished outputs are kept, nothing half-written was left."


def _interrupted() -> int:
    """Report an interruption in one line (exit status 130, the shell's 128 + SIGINT)."""
    import signal

    # a second Ctrl-C while the message is printed must not turn into a traceback
    previous = signal.signal(signal.SIGINT, signal.SIG_IGN) if _main_thread() else None
    try:
        from fractalseq.cli import common

        typer.echo(common.interrupt_note or INTERRUPTED, err=True)
    finally:
        if previous is not None:
            signal.signal(signal.SIGINT, previous)
    return 130


def _main_thread() -> bool:
    import threading

    return threading.current_thread() is threading.main_thread()


def _caused_by_interrupt(exc: BaseException) -> bool:
    from fractalseq.cli.common import caused_by_interrupt

    return caused_by_interrupt(exc)


#: Command -> the options that set how much memory it allocates (named when memory runs out).
MEMORY_OPTIONS: dict[str, str] = {
    "count": "--depth (or split the input)",
    "render": "--size",
    "profile": "--depth and --boot",
    "learn": "--depth and --max-cells",
    "score": "--window (and the model file's size: learn it with a smaller --depth or --max-cells)",
    "next": "the model file's size (learn it with a smaller --depth or --max-cells)",
    "survey": "--depth, --boot and --workers",
    "drift": "--depth, --block and --permutations",
    "scan": "--window and --depth",
    "demo": "--length",
    "templates": "the size of the input",
}


def _memory_sentence(exc: MemoryError, argv: list[str] | None) -> str:
    """What ran out (numpy names the array it failed to allocate) and which options control it."""
    words = list(sys.argv[1:] if argv is None else argv)
    command = next((w for w in words if not w.startswith("-")), "")
    # numpy says "Unable to allocate 273. MiB ...": drop the bare full stop so the sentence stays one sentence
    detail = re.sub(r"(\d)\.(?!\d)", r"\1", " ".join(str(exc).split()))
    what = f" ({detail.rstrip('.')})" if detail else ""
    options = MEMORY_OPTIONS.get(command)
    where = f" while running {command}" if command in MEMORY_OPTIONS else ""
    fix = f"use smaller values of {options}" if options else "use smaller options or a smaller input"
    return f"out of memory{where}{what}; {fix}."


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
    from fractalseq.cli.common import safe

    typer.echo(safe(f"error: {message}; see {command} --help."), err=True)
    return EXIT_USAGE


def entry() -> None:  # pragma: no cover - thin wrapper
    sys.exit(main())

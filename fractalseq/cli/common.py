"""Options shared by every command, so the same thing has the same name everywhere.

Use these as defaults in command signatures, e.g.
``alphabet: str = common.ALPHABET``.  Keep one line of help per option,
with units and defaults.
"""

from __future__ import annotations

from typing import Any

import re
from pathlib import Path

import typer
from rich.console import Console, ConsoleDimensions

ALPHABET = typer.Option(
    "dna",
    "--alphabet",
    "-a",
    help="Symbol set: dna, rna, protein, binary, bytes, learn (from the data), or symbols:XYZ.",
)
FORMAT = typer.Option(
    "auto",
    "--format",
    "-f",
    help="Input kind: auto, fasta, fastq, text, tokens, log, numeric (compression is detected by content).",
)
POLICY = typer.Option(
    "break",
    "--unknown",
    help="What to do with ambiguous or unknown symbols: break (end the segment), skip, or error.",
)
DEPTH = typer.Option(12, "--depth", "-n", min=1, help="Deepest word length (symbols) counted.")
RATIO = typer.Option(0.5, "--ratio", "-k", help="Contraction ratio k of the encoding, 0 < k < 1.")
OUT = typer.Option(None, "--out", "-o", help="Output folder (created; must be empty unless --force).")
JSON = typer.Option(False, "--json", help="Print machine-readable JSON on standard output instead of tables.")
QUIET = typer.Option(False, "--quiet", "-q", help="No progress bars or notes on standard error.")
SEED_HELP = "Seed of every random step (bootstrap, permutation), 0 <= seed < 2^64; same seed, same bytes."


def _check_seed(value: int) -> int:
    from fractalseq.jobs._inputs import check_seed  # the one rule for seeds, shared with the library

    return check_seed(value)


def seed_option(default: int = 0, help: str = SEED_HELP) -> Any:
    """The ``--seed`` option of every command: one spelling, one rule (0 <= seed < 2**64, checked on parsing)."""
    return typer.Option(default, "--seed", help=help, callback=_check_seed)


SEED = seed_option()
FORCE = typer.Option(False, "--force", help="Overwrite existing output files.")
BINS = typer.Option(4, "--bins", help="numeric input: number of quantile bins (symbols).")
ORDINAL = typer.Option(0, "--ordinal", help="numeric input: ordinal-pattern order m (0 = use bins).")
DELAY = typer.Option(
    1, "--delay", help="numeric input with --ordinal: embedding delay tau, samples between the m values of a pattern."
)
TIES = typer.Option(
    "time", "--ties",
    help="numeric input with --ordinal: order equal values by time (the earlier counts as smaller) "
         "or by dither (a random key per value from --seed, 0 where the command has none).",
)
COLUMN = typer.Option(None, "--column", help="numeric input: CSV column name or 0-based index.")
COLUMNS = typer.Option(
    None, "--column",
    help="numeric input: CSV column name or 0-based index; several (a,b) or all (every numeric column but time "
         "columns and calendar parts) give one source per column.",
)
THRESHOLDS = typer.Option(
    None, "--thresholds", help="numeric input: fixed bin edges, increasing and comma-separated (e.g. 0.2,0.5,0.8), instead of quantile --bins."
)

ENGINE = typer.Option(
    None, "--engine", help="Where the work runs: serial, processes or dask (default: processes if --workers > 1, dask if --scheduler, else serial)."
)
WORKERS = typer.Option(
    None, "--workers", "-w", min=1,
    help="Local worker processes (processes engine, or a local Dask cluster), at most 4 per core; default: all cores for processes, 2 for dask.",
)
SCHEDULER = typer.Option(None, "--scheduler", help="Address of a running Dask scheduler, e.g. tcp://10.0.0.5:8786 (implies --engine dask).")
PIECE = typer.Option(
    1 << 24, "--piece", min=1,
    help="Symbols per piece: a large input is cut into pieces of this many symbols (overlapping by what a piece needs "
         "from its neighbours), worked on by the engine and merged in order; the same piece size gives the same bytes "
         "on every engine.",
)
CONNECT_TIMEOUT = typer.Option(5.0, "--connect-timeout", help="Seconds allowed for reaching the --scheduler (default 5).")


def make_engine(kind: str | None, workers: int | None, scheduler: str | None, timeout: float = 5.0):
    """The engine the options ask for (checked, and the scheduler reached, before any work)."""
    from fractalseq.jobs._engines import make_engine as build

    return build(kind, workers, scheduler, timeout)


#: Library parameter name -> the command-line option that sets it.  Library errors name
#: parameters (``ParameterError.parameter``); the command line adds the option to change.
OPTION_OF: dict[str, str] = {
    "alphabet": "--alphabet",
    "fmt": "--format",
    "policy": "--unknown",
    "depth": "--depth",
    "max_depth": "--depth",
    "ratio": "--ratio",
    "seed": "--seed",
    "n_boot": "--boot",
    "bins": "--bins",
    "ordinal": "--ordinal",
    "delay": "--delay",
    "ties": "--ties",
    "column": "--column",
    "thresholds": "--thresholds",
    "qs": "--q",
    "baselines": "--baselines",
    "workers": "--workers",
    "engine": "--engine",
    "address": "--scheduler",
    "connect_timeout": "--connect-timeout",
    "piece": "--piece",
    "window": "--window",
    "step": "--step",
    "level": "--level",
    "block_length": "--block",
    "block": "--block",
    "linkage": "--linkage",
    "distance_depth": "--distance-depth",
    "common_cuts": "--common-cuts",
    "penalty": "--penalty",
    "force": "--force",
    "cache": "--cache",
    "permutations": "--permutations",
    "alpha": "--alpha",
    "adjust": "--adjust",
    "figures": "--figures",
    "model": "--model",
    "depths": "--depths",
    "smoothing": "--smoothing",
    "discount": "--discount",
    "max_cells": "--max-cells",
    "learning_rate": "--learning-rate",
    "reverse_complement": "--strands",
    "length": "--length",
    "log_lines": "--log-lines",
    "size": "--size",
    "drop": "--drop",
    "top": "--top",
}


#: The one line printed when the run is interrupted, when a command has a more precise one than the default.
interrupt_note: str | None = None


def caused_by_interrupt(exc: BaseException) -> bool:
    """True when ``exc`` is a KeyboardInterrupt or was raised while one was being delivered (cause/context chain).

    Ctrl-C that lands while a compiled (numba) kernel runs is delivered when the
    kernel returns and can surface as ``SystemError: ... returned a result with
    an exception set`` whose context is the KeyboardInterrupt: still an interruption.
    """
    seen: set[int] = set()
    link: BaseException | None = exc
    while link is not None and id(link) not in seen:
        if isinstance(link, KeyboardInterrupt):
            return True
        seen.add(id(link))
        link = link.__cause__ or link.__context__
    return False


def protect_inputs(*groups) -> None:
    """Declare a command's inputs (paths, lists of paths): no output may replace them (io._outputs.protect_inputs)."""
    from fractalseq.io._outputs import protect_inputs as protect

    for group in groups:
        protect([group] if isinstance(group, (str, Path)) or group is None else list(group))


def option_hint(parameter: str | None) -> str:
    """`` (option --x)`` for a library parameter the command line exposes, else an empty string."""
    option = OPTION_OF.get(parameter or "")
    return f" (option {option})" if option else ""


#: Width of standard output when it is no terminal (a pipe, a file): wide enough that no table cell, header,
#: template, path or note is cut or wrapped.
PIPE_WIDTH = 1 << 20


class OutputConsole(Console):
    """Standard output: as wide as the terminal on a terminal; off a terminal nothing is cut or wrapped.

    Checked at every print (a test runner or a caller may swap ``sys.stdout``), so every command
    gets whole lines in a pipe from this one place.  Tables are only as wide as their content.
    """

    @property
    def size(self) -> ConsoleDimensions:
        dims = Console.size.fget(self)  # type: ignore[attr-defined]
        if self._width is None and not self.is_terminal:
            return ConsoleDimensions(PIPE_WIDTH, dims.height)
        return dims

    @size.setter
    def size(self, new_size: tuple[int, int]) -> None:
        Console.size.fset(self, new_size)  # type: ignore[attr-defined]

    def print(self, *objects: Any, **kwargs: Any) -> None:
        """Print; off a terminal a table title wider than its table goes on its own line (never wrapped)."""
        if not self.is_terminal and len(objects) == 1:
            from rich.table import Table

            obj = objects[0]
            if isinstance(obj, Table) and isinstance(obj.title, str) and len(obj.title) > self.measure(obj).maximum:
                title, obj.title = obj.title, None
                try:
                    super().print(title, highlight=False, emoji=False, soft_wrap=True)
                    super().print(obj, **kwargs)
                finally:
                    obj.title = title
                return
        super().print(*objects, **kwargs)


#: Standard error console for progress and notes (standard output stays clean for --json).  Neither console
#: interprets rich markup: names, paths and templates come from the input and are printed as they are (styles
#: are given as Text objects); control characters go through :func:`safe`.
err_console = OutputConsole(stderr=True, markup=False)
out_console = OutputConsole(markup=False)


def say(line: str = "") -> None:
    """One line of text on standard output, whole (no markup, no highlighting, never wrapped off a terminal)."""
    out_console.print(line, highlight=False, emoji=False, soft_wrap=not out_console.is_terminal)


def caution_line(caution: str) -> None:
    """The caution that closes a command's terminal output (logs, genomes, or both)."""
    say(caution)


def read_notes(notes, name: str = "") -> None:
    """The reader's notes (lines cut, Latin-1 lines, junk bytes, blank lines, dropped symbols) on standard output."""
    prefix = f"{safe(name)}: " if name else ""
    for n in notes or ():
        say(f"read note: {prefix}{safe(str(n))}")


def progress(quiet: bool):
    """A rich progress bar on standard error, disabled when ``quiet`` or when standard error is no terminal.

    (Off a terminal rich draws nothing but still ends with a stray blank line, which would
    break the one-sentence error contract of redirected runs.)
    """
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    return Progress(
        TextColumn("[bold]{task.description}"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        console=err_console,
        disable=quiet or not err_console.is_terminal,
        transient=True,
    )


# characters that a terminal could act on: C0 and C1 controls, DEL, and the bidirectional-text controls
_UNSAFE = re.compile("[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
_NAMED = {"\t": "\\t", "\r": "\\r", "\n": "\\n"}


def _escape_char(m: re.Match) -> str:
    c = m.group(0)
    named = _NAMED.get(c)
    if named:
        return named
    o = ord(c)
    return f"\\x{o:02x}" if o < 0x100 else f"\\u{o:04x}"


def safe(text: str) -> str:
    """``text`` from the input with every terminal control character shown as an escape (``\\x1b``, ``\\r``,
    ``\\u202e``): the one sanitiser for strings from input on their way to a terminal."""
    return _UNSAFE.sub(_escape_char, text)


def json_safe(doc: str) -> str:
    """A JSON document with DEL, C1 and bidirectional controls escaped too (JSON escapes C0 itself)."""
    # JSON escapes C0 controls itself; DEL, C1 and bidirectional controls are legal raw, so escape them too
    return re.sub("[\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069]", lambda m: f"\\u{ord(m.group(0)):04x}", doc)

"""What every example script shares: its command line, its output folder and the invented scenario.

**The data are invented.**  Every example works on the Kelpwater Marine Station
scenario (``fs.scenario``), generated from a seed into the output
folder.  A script defines ``run(folder, args)`` and ends with
``sys.exit(run_example(run, __doc__))``; this module parses the options common
to all scripts, prepares the folder (or a temporary one) and turns a
fractalseq error into one line on standard error and exit status 2.

Options of every script: an optional output folder (created; must be empty
unless ``--force``), ``--quick`` for small sizes (also
``FRACTALSEQ_EXAMPLES_QUICK=1``), ``--seed`` for the scenario's seed (default 7).
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from pathlib import Path
from typing import Callable

import fractalseq as fs

#: Seed of the invented scenario unless ``--seed`` says otherwise.
DEFAULT_SEED = 7


def parse_args(doc: str, argv: list[str] | None = None) -> argparse.Namespace:
    """Parse the options every example accepts; the description is the first paragraph of ``doc``."""
    p = argparse.ArgumentParser(description=doc.split("\n\n")[0])
    p.add_argument("folder", nargs="?", help="output folder (default: a temporary folder)")
    p.add_argument("--quick", action="store_true", help="small sizes (also: FRACTALSEQ_EXAMPLES_QUICK=1)")
    p.add_argument("--seed", type=int, default=DEFAULT_SEED, help="seed of the invented scenario")
    p.add_argument("--force", action="store_true", help="overwrite files in the output folder")
    args = p.parse_args(argv)
    args.quick = args.quick or os.environ.get("FRACTALSEQ_EXAMPLES_QUICK", "") not in ("", "0")
    return args


def make_scenario(
    folder: Path, args: argparse.Namespace, *, length: int, log_lines: int = 200
) -> tuple["fs.scenario.Scenario", dict[str, "fs.scenario.SourceTruth"]]:
    """Generate the invented scenario into ``folder/scenario`` and print its note.

    Returns the scenario and its samples' ground truth by sample name.
    """
    world = fs.scenario.generate(folder / "scenario", seed=args.seed, length=length, log_lines=log_lines, force=args.force)
    print(world.note)
    return world, {s.name: s for s in world.sources}


def run_example(
    run: Callable[[Path, argparse.Namespace], None], doc: str, argv: list[str] | None = None
) -> int:
    """Parse the options, call ``run(folder, args)`` and return the exit status (2 after a fractalseq error).

    Without a folder argument ``run`` gets a temporary folder that is removed at the end.
    """
    args = parse_args(doc, argv)
    try:
        if args.folder:
            run(fs.prepare_folder(Path(args.folder), args.force), args)
        else:
            with tempfile.TemporaryDirectory() as tmp:
                run(Path(tmp), args)
    except fs.FractalseqError as exc:
        # library errors name the parameter to change; say which option of the script sets it
        option = {"force": "--force", "seed": "--seed"}.get(getattr(exc, "parameter", None) or "")
        print(f"error: {str(exc).rstrip('.')} (option {option})." if option else f"error: {exc}", file=sys.stderr)
        return 2
    return 0

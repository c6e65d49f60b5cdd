"""The command line's click command is built once per process and rebuilt when commands are added.

``main`` used to let typer rebuild every command's options from the functions' signatures on each call;
now one build serves every call of a process (the tests run hundreds of commands in one process), so these
checks hold that reuse gives the same outputs and never hides a command registered later.
"""

from __future__ import annotations

import json
from pathlib import Path

from fractalseq.cli import app as cli_app
from fractalseq.cli.app import app, main

LOGS = Path(__file__).resolve().parents[1] / "reference" / "logs"  # provenance: reference/logs/README.md


def test_the_same_command_serves_every_call_and_gives_the_same_output(capsys):
    argv = ["score", "--online", "-f", "log", str(LOGS / "named-refused.log"), "--json", "-q"]
    capsys.readouterr()
    assert main(argv) == 0
    first = capsys.readouterr().out
    built = cli_app._command()
    assert main(argv) == 0
    assert capsys.readouterr().out == first
    assert cli_app._command() is built
    assert json.loads(first)["sources"][0]["length"] > 0


def test_a_command_registered_later_is_found(capsys):
    main(["--version"])
    before = cli_app._command()

    @app.command("zz-probe", hidden=True)
    def _probe() -> None:
        """A command added after the first call (removed again below)."""
        print("probe ran")

    try:
        capsys.readouterr()
        assert main(["zz-probe"]) == 0
        assert capsys.readouterr().out == "probe ran\n"
        assert cli_app._command() is not before
    finally:
        app.registered_commands.pop()
    capsys.readouterr()
    assert main(["zz-probe"]) == 2  # gone again: a usage error
    assert "zz-probe" not in cli_app._command().commands

"""Shared fixtures: the reference data and a runner of the command line."""

from __future__ import annotations

import signal
import subprocess
from pathlib import Path

import pytest

from _paths import CLI, LAMBDA, REFERENCE, ROOT

# The interruption tests send SIGINT (Ctrl-C) to child processes.  A suite started in the background of
# a non-interactive shell (``nohup pytest &``, a CI step's ``cmd &``) inherits SIGINT *ignored* — POSIX
# shells ignore SIGINT and SIGQUIT in asynchronous lists without job control — and an ignored signal stays
# ignored across exec, so every child would ignore the test's Ctrl-C and the outcome would depend on how
# the suite was launched.  A handled signal is reset to the default at exec (POSIX execve(2)), so giving
# this process Python's own handler makes every child start with the ordinary Ctrl-C behaviour.
if signal.getsignal(signal.SIGINT) is signal.SIG_IGN:
    signal.signal(signal.SIGINT, signal.default_int_handler)


@pytest.fixture(scope="session")
def root() -> Path:
    """The project folder."""
    return ROOT


@pytest.fixture(scope="session")
def reference() -> Path:
    """``reference/``: small open datasets with provenance."""
    return REFERENCE


@pytest.fixture(scope="session")
def lambda_fasta() -> Path:
    """Phage lambda (48,502 bases; Debian bowtie2-examples, reference/PROVENANCE.md)."""
    assert LAMBDA.is_file(), f"{LAMBDA} is missing (copy of bowtie2-examples' lambda_virus.fa.gz)"
    return LAMBDA


@pytest.fixture()
def run_cli():
    """Run ``fractalseq ARGS...`` in a child interpreter; returns the completed process (text mode)."""

    def run(*args: str, **kwargs) -> subprocess.CompletedProcess:
        return subprocess.run([*CLI, *map(str, args)], capture_output=True, text=True, **kwargs)

    return run

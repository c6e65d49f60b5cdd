"""Shared fixtures: the reference data and a runner of the command line."""

from __future__ import annotations

import subprocess
from pathlib import Path

import pytest

from _paths import CLI, LAMBDA, REFERENCE, ROOT


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

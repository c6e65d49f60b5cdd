"""The learn/score jobs (fractalseq.jobs): a Python caller and the command line get the same JSON documents.

The command line only parses options and formats; the documents come from
:func:`fractalseq.jobs.learn_files` and :func:`fractalseq.jobs.score_files`.  Data: the lambda phage
genome (reference/PROVENANCE.md) and an invented two-file service log.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from fractalseq.cli.app import main
from fractalseq.io import to_json
from fractalseq.jobs import learn_files, score_files

ROOT = Path(__file__).resolve().parents[1]
LAMBDA = ROOT / "reference" / "lambda_virus.fa.gz"  # provenance: reference/PROVENANCE.md


def cli_json(*argv: str) -> str:
    """Standard output of ``python -m fractalseq ...`` in a fresh interpreter."""
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    proc = subprocess.run([sys.executable, "-m", "fractalseq", *map(str, argv)], capture_output=True, env=env, timeout=600)
    assert proc.returncode == 0, proc.stderr.decode()
    return proc.stdout.decode()


@pytest.fixture(scope="module")
def model_path(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("jobs") / "lambda.npz"
    report = learn_files([str(LAMBDA)], out=path, params={"max_depth": 12})
    assert report.symbols == 48502  # NC_001416.1 (Sanger et al. 1982)
    return path


def test_score_json_of_the_job_and_the_command_line_are_identical(model_path: Path):
    python = to_json(score_files([str(LAMBDA)], str(model_path), window=5000, top=3).to_dict())
    cli = cli_json("score", LAMBDA, "--model", model_path, "--window", "5000", "--top", "3", "--json", "-q")
    assert python == cli
    doc = json.loads(cli)
    assert doc["mode"] == "fitted" and doc["model"] == str(model_path)
    assert len(doc["sources"][0]["most_surprising_windows"]) == 3


def test_online_score_json_of_the_job_and_the_command_line_are_identical():
    params = {"depths": [2, 4, 8], "smoothing": 0.5, "max_cells": 1 << 16, "learning_rate": 0.01,
              "reverse_complement": False, "max_depth": None}
    python = to_json(score_files([str(LAMBDA)], online=True, window=8000, params=params).to_dict())
    cli = cli_json("score", "--online", LAMBDA, "--depths", "2,4,8", "--max-cells", 1 << 16, "--learning-rate", "0.01",
                   "--strands", "forward", "--window", "8000", "--json", "-q")
    assert python == cli


def test_learn_json_of_the_job_and_the_command_line_are_identical(tmp_path: Path, capsys):
    # invented service log in two files: the model is learned over the union of their templates
    (tmp_path / "a.log").write_text("".join(f"svc {'up' if i % 3 else 'sync'} {i}\n" for i in range(300)))
    (tmp_path / "b.log").write_text("".join(f"svc {'up' if i % 2 else 'drain'} {i}\n" for i in range(300)))
    paths = [str(tmp_path / "a.log"), str(tmp_path / "b.log")]
    out = tmp_path / "m.npz"
    python = to_json(learn_files(paths, out=out, fmt="log").to_dict())
    capsys.readouterr()
    assert main(["learn", *paths, "-f", "log", "-o", str(out), "--force", "--json", "-q"]) == 0
    assert capsys.readouterr().out == python
    assert sorted(json.loads(python)["alphabet"]["symbols"]) == ["svc drain <*>", "svc sync <*>", "svc up <*>"]


def test_score_needs_a_model_or_online():
    from fractalseq.errors import ParameterError

    with pytest.raises(ParameterError) as e:
        score_files([str(LAMBDA)])
    assert e.value.parameter == "model"

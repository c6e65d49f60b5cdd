"""The example scripts run, write what they say, and their estimates agree with the invented scenario's truth.

All four scripts are started at once (``--quick`` sizes, each into its own folder) and
checked afterwards, so the file costs about as long as the slowest script.  The truth
the scripts print beside their estimates is the scenario's: closed forms of the simulated
Markov chains (entropy rate, Cover & Thomas, *Elements of Information Theory*, 2nd ed.,
§4.2; Rényi rates from the spectral radius of the q-th Hadamard power, Rached, Alajaji &
Campbell 2001), the transition matrix itself, and which log templates were introduced.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from fractalseq.datasets import _scenario as scenario

from _paths import ROOT

#: Whole processes or many of them: part of every CI run; skip in a quick loop with -m 'not slow'.
pytestmark = pytest.mark.slow
EXAMPLES = ("profile_a_sample", "compare_samples", "predict_next_symbol", "relay_log_drift")


def _env() -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    env["FRACTALSEQ_EXAMPLES_QUICK"] = "1"
    return env


@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict:
    base = tmp_path_factory.mktemp("examples")
    procs = {}
    for name in EXAMPLES:
        script = ROOT / "examples" / f"{name}.py"
        assert script.exists(), f"{script} is missing"
        procs[name] = subprocess.Popen(
            [sys.executable, str(script), str(base / name), "--quick"],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=_env(), cwd=base,
        )
    out = {}
    for name, proc in procs.items():
        stdout, stderr = proc.communicate(timeout=300)
        out[name] = (proc.returncode, stdout.decode(), stderr.decode(), base / name)
    return out


def _ok(runs, name) -> tuple[str, Path]:
    code, out, err, folder = runs[name]
    assert code == 0, f"{name} exited {code}: {err}"
    assert "Traceback" not in err
    assert "Invented scenario" in out, "every example says its data are invented"
    return out, folder


def _number(pattern: str, text: str) -> list[float]:
    m = re.search(pattern, text)
    assert m, f"no line matching {pattern!r} in:\n{text}"
    return [float(g) for g in m.groups()]


def test_every_script_says_in_its_docstring_that_the_data_are_invented():
    for name in EXAMPLES:
        doc = (ROOT / "examples" / f"{name}.py").read_text()
        assert "**The data are invented.**" in doc, name
    listed = (ROOT / "examples" / "README.md").read_text()
    for name in EXAMPLES:
        assert f"`{name}.py`" in listed, f"examples/README.md does not list {name}.py"


def test_profile_a_sample(runs):
    out, folder = _ok(runs, "profile_a_sample")
    # D_1 and D_2 of the first-order chain at k = 1/2 equal its Rényi rates h_1, h_2 in bits
    for q in ("1", "2"):
        t, est, lo, hi = _number(rf"D_{q}: truth ([\d.]+)\s+estimate ([\d.]+)\s+interval \[([\d.]+), ([\d.]+)\]", out)
        assert abs(est - t) < 0.02, (q, t, est)
        assert lo <= est <= hi
    t, est = _number(r"entropy rate\s+truth ([\d.]+)\s+H\(n\+1\)-H\(n\) at n=\d+: ([\d.]+)", out)
    assert abs(est - t) < 0.02
    # an upper bound stays above the entropy rate (Shannon's source coding theorem)
    (bound,) = _number(r"online_predictor: ([\d.]+) bits/symbol \(upper bound\)", out)
    assert bound >= t - 0.01
    doc = json.loads((folder / "profile.json").read_text())
    assert doc["length"] == 30_000 and {d["q"] for d in doc["dimensions"]} == {0.0, 1.0, 2.0}


def test_compare_samples(runs):
    out, folder = _ok(runs, "compare_samples")
    assert "the nearest-neighbour table agrees" in out
    by_hand, survey = _number(r"by hand: JS\(kelp-chain, kelp-island\) = ([\d.]+) bits at depth \d+ \(survey: ([\d.]+)\)", out)
    assert by_hand == pytest.approx(survey, abs=1e-5)
    rows = re.findall(r"^(reef-uniform|reef-skewed|kelp-chain|kelp-sticky)\s+([\d.]+)\s+([\d.]+)\s+([\d.]+)\s+([\d.]+)$", out, re.M)
    assert len(rows) == 4
    for name, d2_true, d2_est, h_true, h_est in rows:
        assert abs(float(d2_est) - float(d2_true)) < 0.05, name
        assert abs(float(h_est) - float(h_true)) < 0.05, name
    doc = json.loads((folder / "survey" / "survey.json").read_text())
    assert len(doc["sources"]) == 5


def test_predict_next_symbol(runs):
    out, folder = _ok(runs, "predict_next_symbol")
    # the printed probabilities after each symbol against the chain's transition matrix
    rows = re.findall(r"after ([ACGT]): ([\d. ]+?)\s+truth ([\d. ]+)$", out, re.M)
    assert [r[0] for r in rows] == list("ACGT")
    est = np.array([[float(x) for x in r[1].split()] for r in rows])
    assert np.allclose(est.sum(axis=1), 1.0, atol=0.002)
    assert np.abs(est - scenario.ORDER1).max() < 0.03
    (h,) = _number(r"truth \(entropy rate\) ([\d.]+)", out)
    (held,) = _number(r"before its island \(same chain, held out\): ([\d.]+)", out)
    (island,) = _number(r"never seen in training\): ([\d.]+)", out)
    (online,) = _number(r"upper bound\): ([\d.]+)", out)
    assert h - 0.02 < held < h + 0.05  # cross-entropy of held-out data is at least h, and close to it
    assert online > h - 0.02
    assert island > held  # the repeat island was never seen: it costs more
    assert (folder / "kelp-chain.model.npz").exists()


def test_relay_log_drift(runs):
    out, folder = _ok(runs, "relay_log_drift")
    assert "truth: changed = True; test says changed = True" in out
    k = len(scenario.FAILURE_TEMPLATES)  # the scenario's new event kinds (its ground truth)
    assert f"found among the top four: {k} of {k}" in out
    assert out.splitlines()[-1] == "Drift reports on logs are no security guarantee."
    doc = json.loads((folder / "drift.json").read_text())
    assert doc["changed"] is True


def test_an_example_refuses_a_used_folder_without_force(runs):
    _, folder = _ok(runs, "relay_log_drift")
    proc = subprocess.run(
        [sys.executable, str(ROOT / "examples" / "relay_log_drift.py"), str(folder), "--quick"],
        capture_output=True, env=_env(), timeout=120,
    )
    assert proc.returncode == 2
    assert b"already holds files" in proc.stderr and b"--force" in proc.stderr


def test_examples_use_only_the_facade():
    """The examples show the public API: ``import fractalseq as fs`` and nothing below it (a rule of this code base)."""
    import ast

    scripts = sorted((ROOT / "examples").glob("*.py"))
    assert len(scripts) >= 5
    for path in scripts:
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.ImportFrom) and node.module and node.module.split(".")[0] == "fractalseq":
                raise AssertionError(f"{path.name} imports from {node.module}; use import fractalseq as fs")
            if isinstance(node, ast.Import):
                for alias in node.names:
                    if alias.name.split(".")[0] == "fractalseq":
                        assert (alias.name, alias.asname) == ("fractalseq", "fs"), f"{path.name}: import {alias.name}"

"""The finished command line: help pages, option names, exit codes, completion, standard input, version.

Most checks run in-process through :func:`fractalseq.cli.app.main` (imports paid once);
shell completion, ``--version`` and a pipe into ``count -`` also run as real processes,
because that is how a shell meets them.
"""

from __future__ import annotations

import io
import json
import os
import re
import subprocess
import sys
from collections import defaultdict
from pathlib import Path

import numpy as np
import pytest
import typer

import fractalseq
from fractalseq.cli.app import app, main

from _paths import ROOT
COMMANDS = ("count", "render", "profile", "learn", "score", "next", "survey", "drift", "scan", "demo", "templates")

#: The spelling of each shared concept, by the parameter name the commands use for it.
SHARED = {
    "alphabet": ("--alphabet", "-a"),
    "depth": ("--depth", "-n"),
    "ratio": ("--ratio", "-k"),
    "out": ("--out", "-o"),
    "json_out": ("--json",),
    "quiet": ("--quiet", "-q"),
    "seed": ("--seed",),
    "force": ("--force",),
    "fmt": ("--format", "-f"),
    "policy": ("--unknown",),
}


def _env() -> dict:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    env.pop("FRACTALSEQ_DEBUG", None)
    return env


def _run(args, **kwargs) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "fractalseq.cli", *args], capture_output=True, env=kwargs.pop("env", _env()),
                          timeout=120, **kwargs)


def _commands() -> dict:
    return typer.main.get_command(app).commands


def _options(command) -> list:
    return [p for p in command.params if p.param_type_name == "option" and p.name != "help"]


def _help(capsys, monkeypatch, *argv) -> str:
    monkeypatch.setenv("COLUMNS", "250")
    capsys.readouterr()
    status = main([*argv, "--help"])
    out = capsys.readouterr().out
    assert status == 0, f"{' '.join(argv)} --help exited {status}"
    return out


# ------------------------------------------------------------------ help pages
def test_every_command_is_registered():
    assert set(_commands()) == set(COMMANDS)


def test_top_level_help_documents_exit_codes_and_cautions(capsys, monkeypatch):
    text = " ".join(_help(capsys, monkeypatch).split())
    assert re.search(r"Exit status: 0 ran, 1 ran and found something.{0,40}, 2 usage or input error", text), text
    assert "not for clinical decisions" in text and "no security guarantee" in text
    for name in COMMANDS:
        assert re.search(rf"\b{name}\b", text), f"{name} missing from the command list"


@pytest.mark.parametrize("name", COMMANDS)
def test_command_help_has_an_example_and_shows_defaults(name, capsys, monkeypatch):
    out = _help(capsys, monkeypatch, name)
    example = [ln.strip() for ln in out.splitlines() if ln.strip().startswith("Example:")]
    assert example, f"{name} --help has no 'Example:' line"
    assert example[0].startswith(f"Example: fractalseq {name}"), example[0]
    lines = out.splitlines()
    row = re.compile(r"^│\s+(?:\*\s+)?(--[a-z][a-z-]*)")
    starts = {}
    for i, ln in enumerate(lines):
        m = row.match(ln)
        if m:
            starts[m.group(1)] = i
    for opt in _options(_commands()[name]):
        long = next(o for o in opt.opts if o.startswith("--"))
        if opt.hidden:  # a deprecated spelling kept for old scripts (learn/score --max-depth) has no row
            assert long not in starts, f"{name}: hidden option {long} shows in the help"
            continue
        assert long in starts, f"{name}: {long} has no row in the help"
        if opt.is_flag or opt.default is None:
            continue  # flags are off unless given; None defaults are described in words where they matter
        i = starts[long]
        j = min([k for k in starts.values() if k > i] + [len(lines)])
        block = " ".join(lines[i:j])
        assert "[default:" in block, f"{name} --help does not show the default of {long}"


# ---------------------------------------------------------------- option names
def test_shared_concepts_have_one_spelling():
    """Each command that takes a shared concept spells it the same way."""
    seen = defaultdict(list)
    for cname, command in _commands().items():
        for opt in _options(command):
            if opt.name in SHARED:
                assert tuple(opt.opts) == SHARED[opt.name], f"{cname}: {opt.name} is spelled {opt.opts}, expected {SHARED[opt.name]}"
                seen[opt.name].append(cname)
    # the concepts are really shared (the test would be empty otherwise)
    assert set(seen["out"]) >= {"render", "profile", "learn", "survey", "drift", "scan", "demo"}
    assert set(seen["ratio"]) >= {"render", "profile", "survey", "drift", "scan"}
    assert set(seen["alphabet"]) >= {"count", "render", "profile", "learn", "score", "survey", "drift", "scan"}
    assert set(seen["depth"]) >= {"count", "profile", "survey", "drift", "scan", "learn", "score"}
    assert set(seen["seed"]) >= {"profile", "survey", "drift", "scan", "demo"}
    for concept in ("json_out", "quiet", "force"):
        assert len(seen[concept]) >= 6, (concept, seen[concept])


def test_short_flags_mean_one_thing_everywhere():
    """A short flag stands for one long option in every command, and a long option has one short flag."""
    short_to_long = defaultdict(set)
    long_to_short = defaultdict(set)
    for cname, command in _commands().items():
        for opt in _options(command):
            longs = [o for o in opt.opts if o.startswith("--")]
            shorts = [o for o in opt.opts if not o.startswith("--")]
            for s in shorts:
                short_to_long[s].update((f"{cname} {lg}" for lg in longs))
            for lg in longs:
                long_to_short[lg].update(shorts)
    clash = {s: sorted(v) for s, v in short_to_long.items() if len({x.split()[1] for x in v}) > 1}
    assert not clash, f"short flags with two meanings: {clash}"
    double = {lg: sorted(v) for lg, v in long_to_short.items() if len(v) > 1}
    assert not double, f"long options with two different short flags: {double}"


# ----------------------------------------------------------- exit codes, version
def test_version_in_process_and_as_a_process(capsys):
    assert main(["--version"]) == 0
    assert capsys.readouterr().out.strip() == f"fractalseq {fractalseq.__version__}"
    proc = _run(["--version"])
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.decode().strip() == f"fractalseq {fractalseq.__version__}"
    # the version the package reports is the one it was built with
    pyproject = (ROOT / "pyproject.toml").read_text()
    assert re.search(rf'^version = "{re.escape(fractalseq.__version__)}"', pyproject, re.MULTILINE)


def test_exit_codes_zero_one_two(tmp_path, capsys):
    """0 ran; 1 ran and found something (drift); 2 usage error."""
    from fractalseq.datasets._markov import iid

    def fasta(path, p, seed):
        x = iid(20_000, np.array(p), seed)
        path.write_text(">x invented test sequence\n" + "".join("ACGT"[c] for c in x) + "\n")
        return str(path)

    a = fasta(tmp_path / "a.fa", [0.25] * 4, 1)
    b = fasta(tmp_path / "b.fa", [0.25] * 4, 2)
    c = fasta(tmp_path / "c.fa", [0.55, 0.05, 0.05, 0.35], 3)
    assert main(["count", "-q", "-n", "3", a]) == 0
    # same source: no drift (exit 0); a very different source: drift (exit 1)
    assert main(["drift", "-q", "--permutations", "99", "--figures", "words", a, b]) == 0
    assert main(["drift", "-q", "--permutations", "99", "--figures", "words", a, c]) == 1
    assert main(["count", "--no-such-option", a]) == 2
    capsys.readouterr()


def test_a_bare_call_shows_the_commands(capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "250")
    status = main([])
    out = capsys.readouterr()
    assert status == 2  # no command is a usage error; the help says what to type
    assert "profile" in out.out + out.err and "Usage" in out.out + out.err


# ------------------------------------------------------------------ completion
def test_shell_completion_of_a_partial_command_name_in_a_real_process():
    env = {**_env(), "_FRACTALSEQ_COMPLETE": "complete_bash", "COMP_WORDS": "fractalseq pro", "COMP_CWORD": "1"}
    proc = _run([], env=env)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.decode().split() == ["profile"]


def test_shell_completion_of_options_and_several_commands(monkeypatch, capsys):
    monkeypatch.setenv("_FRACTALSEQ_COMPLETE", "complete_bash")
    for words, cword, expected in (("fractalseq count --al", "2", {"--alphabet"}), ("fractalseq s", "1", {"score", "scan", "survey"})):
        monkeypatch.setenv("COMP_WORDS", words)
        monkeypatch.setenv("COMP_CWORD", cword)
        with pytest.raises(SystemExit) as stop:
            main([])
        assert stop.value.code == 0
        assert set(capsys.readouterr().out.split()) == expected


def test_show_completion_prints_a_bash_script(capsys, monkeypatch):
    # Without a shell named, typer detects the shell among the process's ancestors (shellingham), so the
    # outcome would depend on how the suite was launched (a loop started by setsid has no shell above it);
    # typer's own switch for tests makes --show-completion take the shell as its value instead.
    monkeypatch.setenv("_TYPER_COMPLETE_TEST_DISABLE_SHELL_DETECTION", "1")
    with pytest.raises(SystemExit) as stop:
        main(["--show-completion", "bash"])
    assert stop.value.code == 0
    script = capsys.readouterr().out
    assert "_FRACTALSEQ_COMPLETE=complete_bash" in script and "complete " in script and "fractalseq" in script


# -------------------------------------------------------------- standard input
@pytest.fixture(scope="module")
def sample(tmp_path_factory) -> Path:
    from fractalseq.datasets._markov import simulate_markov

    P = np.array([[0.5, 0.2, 0.2, 0.1], [0.1, 0.5, 0.2, 0.2], [0.2, 0.1, 0.5, 0.2], [0.2, 0.2, 0.1, 0.5]])
    x = simulate_markov(P, 8_000, seed=5)
    path = tmp_path_factory.mktemp("stdin") / "sample.fa"
    text = "".join("ACGT"[c] for c in x)
    path.write_text(">sample invented test sequence\n" + "\n".join(text[i : i + 60] for i in range(0, len(text), 60)) + "\n")
    return path


def _json_run(argv, capsys, monkeypatch, stdin: bytes | None = None):
    if stdin is not None:
        monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(stdin)))
    capsys.readouterr()
    status = main(argv)
    cap = capsys.readouterr()
    assert status in (0, 1), (argv, cap.err)
    return json.loads(cap.out)


def _strip_names(obj):
    """Drop what names the input (path versus '-') and the reader's note that standard input was held in memory."""
    if isinstance(obj, dict):
        drop = ("name", "names", "stream_name", "inputs", "path", "content_hash", "content_sha256")
        return {k: _strip_names(v) for k, v in obj.items() if k not in drop}
    if isinstance(obj, list):
        return [_strip_names(v) for v in obj if not (isinstance(v, str) and v.startswith("read from standard input"))]
    return obj


@pytest.mark.parametrize(
    "argv",
    [
        ("count", "-n", "6"),
        ("score", "--online", "--window", "2000"),
        ("profile", "--boot", "0", "--q", "0,2"),
        ("scan", "--window", "2000"),
    ],
    ids=["count", "score", "profile", "scan"],
)
def test_standard_input_gives_the_same_numbers_as_the_file(argv, sample, capsys, monkeypatch):
    from_file = _json_run([*argv, "-q", "--json", str(sample)], capsys, monkeypatch)
    from_pipe = _json_run([*argv, "-q", "--json", "-"], capsys, monkeypatch, stdin=sample.read_bytes())
    assert _strip_names(from_pipe) == _strip_names(from_file)


def test_survey_reads_one_source_from_standard_input(sample, tmp_path, capsys, monkeypatch):
    copy = tmp_path / "copy.fa"
    copy.write_bytes(sample.read_bytes())
    argv = ["survey", "-q", "--json", "--depth", "4"]
    from_files = _json_run([*argv, str(sample), str(copy)], capsys, monkeypatch)
    from_pipe = _json_run([*argv, str(sample), "-"], capsys, monkeypatch, stdin=sample.read_bytes())
    assert from_pipe["sources"][1]["read"]["symbols"] == 8_000  # what the reader kept is reported for '-' too
    assert _strip_names(from_pipe) == _strip_names(from_files)


def test_learn_from_standard_input_writes_the_same_model_file(sample, tmp_path, capsys, monkeypatch):
    assert main(["learn", "-q", "--depth", "6", "-o", str(tmp_path / "a.npz"), str(sample)]) == 0
    monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(sample.read_bytes())))
    assert main(["learn", "-q", "--depth", "6", "-o", str(tmp_path / "b.npz"), "-"]) == 0
    assert (tmp_path / "a.npz").read_bytes() == (tmp_path / "b.npz").read_bytes()


def test_learn_and_score_still_accept_the_old_max_depth_spelling(sample, tmp_path, capsys):
    """--max-depth was the name of --depth/-n for learn and score: still accepted with a note, hidden from --help."""
    assert main(["learn", "-q", "-n", "5", "-o", str(tmp_path / "new.npz"), str(sample)]) == 0
    capsys.readouterr()
    assert main(["learn", "--max-depth", "5", "-o", str(tmp_path / "old.npz"), str(sample)]) == 0
    assert "--max-depth is now called --depth" in capsys.readouterr().err
    assert (tmp_path / "old.npz").read_bytes() == (tmp_path / "new.npz").read_bytes()
    online = [("--depth", "5"), ("--max-depth", "5"), ("--depth", "5", "--max-depth", "5")]
    docs = []
    for extra in online:
        capsys.readouterr()
        assert main(["score", "-q", "--json", "--online", "--window", "2000", *extra, str(sample)]) == 0
        docs.append(json.loads(capsys.readouterr().out))
    assert docs[0] == docs[1] == docs[2]
    assert docs[0]["sources"][0]["depths"][-1] == 5  # the deepest cell is the one asked for
    # two different values are a usage error naming both spellings
    assert main(["score", "-q", "--online", "-n", "4", "--max-depth", "5", str(sample)]) == 2
    err = capsys.readouterr().err
    assert "--depth 4" in err and "--max-depth 5" in err


def test_drift_reads_one_batch_from_standard_input(sample, capsys, monkeypatch):
    res = _json_run(["drift", "-q", "--json", "--permutations", "99", str(sample), "-"], capsys, monkeypatch, stdin=sample.read_bytes())
    # the same data on both sides: every figure's statistic is zero, no drift
    assert res["changed"] is False
    assert all(t["statistic"] == pytest.approx(0.0, abs=1e-9) for t in res["tests"])


def test_a_real_pipe_into_count(sample):
    proc = _run(["count", "-", "-n", "4", "--json", "-q"], input=sample.read_bytes())
    assert proc.returncode == 0, proc.stderr
    doc = json.loads(proc.stdout)
    n = len(sample.read_text().split("\n", 1)[1].replace("\n", ""))
    assert doc["length"] == n == 8_000
    assert doc["ladder"][0]["occurrences"] == n  # 1-words: one per symbol


# ------------------------------------------------- the library gives what the command prints
def _buoy(path: Path, seed: int, level: float, n: int = 4000) -> np.ndarray:
    """Invented test data: hourly salinity of a fictional buoy (one column with a header)."""
    values = np.round(level + np.random.default_rng(seed).normal(size=n), 4)
    path.write_text("salinity\n" + "\n".join(f"{v:.4f}" for v in values) + "\n")
    return values


def _cli_text(argv, capsys) -> str:
    capsys.readouterr()
    status = main(argv)
    cap = capsys.readouterr()
    assert status in (0, 1), (argv, cap.err)
    return cap.out


def test_drift_files_in_python_prints_the_same_json_as_the_command(tmp_path, capsys):
    base = _buoy(tmp_path / "monday.csv", 1, 35.0)
    _buoy(tmp_path / "tuesday.csv", 2, 35.4)
    argv = ["drift", str(tmp_path / "monday.csv"), str(tmp_path / "tuesday.csv"), "-f", "numeric", "--bins", "3",
            "-R", "99", "--seed", "5", "--json", "-q"]
    printed = _cli_text(argv, capsys)
    result = fractalseq.drift_files(
        str(tmp_path / "monday.csv"), str(tmp_path / "tuesday.csv"),
        fractalseq.DriftOptions(permutations=99, seed=5), fractalseq.ReaderOptions(fmt="numeric", bins=3),
    )
    assert result.to_json() == printed
    # both batches were cut at the baseline's tertiles (numpy.quantile of the baseline, the reference)
    edges = np.quantile(base, [1 / 3, 2 / 3])
    assert json.loads(printed)["notes"][0].startswith(
        "numeric batches cut at the baseline's 3-quantiles (" + ", ".join(f"{e:.6g}" for e in edges) + ")"
    )


def test_survey_files_in_python_prints_the_same_json_as_the_command(sample, tmp_path, capsys):
    other = tmp_path / "other.fa"
    other.write_text(">other invented test sequence\n" + "ACGGTCA" * 900 + "\n")
    argv = ["survey", str(sample), str(other), "--depth", "5", "--seed", "3", "--linkage", "complete", "--json", "-q"]
    printed = _cli_text(argv, capsys)
    options = fractalseq.SurveyOptions.from_reader(fractalseq.ReaderOptions(), depth=5, seed=3, linkage="complete")
    result = fractalseq.survey_files([str(sample), str(other)], options)
    assert result.to_json() == printed
    assert json.loads(printed)["distances"]["names"] == ["sample.fa", "other.fa"]


def test_scan_file_in_python_prints_the_same_json_as_the_command(sample, capsys):
    printed = _cli_text(["scan", str(sample), "--window", "2000", "--penalty", "4", "--json", "-q"], capsys)
    assert fractalseq.scan_file(str(sample), 2000, penalty=4.0).to_json() == printed


@pytest.mark.parametrize("command", ["profile", "survey", "drift", "scan", "demo"])
def test_every_command_refuses_a_negative_seed_in_one_sentence(command, sample, tmp_path, capsys):
    args = {"profile": [str(sample)], "survey": [str(sample)], "drift": [str(sample), str(sample)],
            "scan": [str(sample)], "demo": ["--out", str(tmp_path / "demo")]}[command]
    capsys.readouterr()
    assert main([command, *args, "--seed", "-1"]) == 2
    err = capsys.readouterr().err
    assert err == "error: The seed must be a whole number from 0 to 2**64 - 1, not -1 (option --seed).\n"
    assert main([command, *args, "--seed", str(2**64)]) == 2
    assert "not 18446744073709551616 (option --seed)" in capsys.readouterr().err
    assert not (tmp_path / "demo").exists()


def test_library_errors_name_parameters_and_the_command_names_the_option(sample, tmp_path, capsys):
    """A library ParameterError carries the parameter; the command line adds the option that sets it."""
    existing = tmp_path / "existing.npz"  # an earlier output (not an input: an input is refused even with --force)
    existing.write_bytes(b"an earlier output\n")
    cases = [
        (["survey", str(sample), "--distance-depth", "40"], "distance_depth", "(option --distance-depth)."),
        (["scan", str(sample), "--window", "2000", "--penalty", "soft"], "penalty", "(option --penalty)."),
        (["count", str(sample), "--thresholds", "1,x"], "thresholds", "(option --thresholds)."),
        (["count", str(sample), "--unknown", "drop"], "policy", "(option --unknown)."),
        (["count", str(sample), "--save", str(existing)], "force", "(option --force)."),
        (["survey", str(sample), "--cache", str(sample)], "cache", "(option --cache)."),
    ]
    for argv, parameter, hint in cases:
        capsys.readouterr()
        assert main(argv) == 2
        err = capsys.readouterr().err
        assert err.startswith("error: ") and err.rstrip().endswith(hint), (argv, err)
        assert err.count("\n") == 1 and "--" not in err.rstrip()[: -len(hint)], err  # the sentence itself names no option
    with pytest.raises(fractalseq.ParameterError) as info:
        fractalseq.ReaderOptions(fmt="numeric", thresholds=(0.5, 0.2))
    assert info.value.parameter == "thresholds"


def test_count_files_in_python_prints_the_same_json_as_the_command(sample, capsys):
    printed = _cli_text(["count", str(sample), "-n", "5", "--top", "3", "--json", "-q"], capsys)
    summary = fractalseq.count_files([str(sample)], 5, top=3)
    from fractalseq.io import to_json

    assert to_json(summary.to_dict()) == printed
    # the ladder's 1-words are every symbol once (the sample holds 8,000 bases)
    assert summary.ladder[0]["occurrences"] == summary.length == 8_000

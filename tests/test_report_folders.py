"""Report folders appear as a whole: built under a hidden sibling name and renamed into place.

An interrupted run leaves nothing under the final name, so the same command run again works without
``--force`` and gives the same bytes as an uninterrupted run.  The interruption lands at a known point:
the writer pauses (``fractalseq.runner.pause_point("report.file", n)``) after the n-th file of the
folder is written, and the test sends SIGINT only once that file is there.
"""

from __future__ import annotations

import os
import signal
import subprocess
import time

import numpy as np
import pytest

from fractalseq.cli.app import main
from fractalseq.datasets._markov import simulate_markov
from fractalseq.errors import OutputError
from fractalseq.io._outputs import PROCESS_START, StagedFolder, write_text
from fractalseq.runner import PAUSE_VARIABLE

from _paths import CLI


def _write_fasta(path, seed, n=6000):
    """Invented test sequence: a random four-state Markov chain."""
    chain = np.random.default_rng(seed).dirichlet(np.full(4, 2.0), size=4)
    path.write_text(f">{path.stem} invented test sequence\n" + "".join("ACGT"[c] for c in simulate_markov(chain, n, seed=seed)) + "\n")
    return path


def _stages(parent, name):
    return sorted(p for p in parent.iterdir() if p.name.startswith(f".{name}.partial-"))


def _interrupt_while_writing(cmd, parent, name, pause_at="report.file:1"):
    """Run ``cmd`` in a child that pauses after the first report file; SIGINT it there; return its stderr."""
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, PAUSE_VARIABLE: pause_at})

    def first_file_written() -> bool:
        return any(f.is_file() and not f.name.endswith(".part") for st in _stages(parent, name) for f in st.rglob("*"))

    deadline = time.monotonic() + 900  # a safety net against a hang, not part of the check
    while proc.poll() is None and not first_file_written() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert proc.poll() is None, "the run ended before its pause point"
    assert first_file_written()
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    return err


def test_an_interrupted_profile_leaves_nothing_and_the_rerun_needs_no_force(tmp_path):
    src = _write_fasta(tmp_path / "s.fa", 3)
    args = ["profile", str(src), "-q", "--boot", "20", "--seed", "5", "--depth", "6"]
    assert main([*args, "--out", str(tmp_path / "ref")]) == 0
    out = tmp_path / "out"
    _interrupt_while_writing(CLI + args + ["--out", str(out)], tmp_path, "out")
    assert not out.exists()  # nothing under the final name
    assert _stages(tmp_path, "out") == []  # and the unfinished folder is gone
    assert main([*args, "--out", str(out)]) == 0  # the same command, no --force
    ref_files = sorted(p.relative_to(tmp_path / "ref") for p in (tmp_path / "ref").rglob("*"))
    assert sorted(p.relative_to(out) for p in out.rglob("*")) == ref_files
    assert (out / "profile.json").read_bytes() == (tmp_path / "ref" / "profile.json").read_bytes()
    assert main([*args, "--out", str(out)]) == 2  # nothing is overwritten without --force


def test_a_survey_interrupted_while_writing_keeps_its_cache_and_resumes(tmp_path):
    srcs = [_write_fasta(tmp_path / f"t{i}.fa", 10 + i) for i in range(3)]
    args = ["survey", *map(str, srcs), "-q", "--seed", "2", "--depth", "6"]
    assert main([*args, "--out", str(tmp_path / "ref"), "--no-cache"]) == 0
    out = tmp_path / "out"
    _interrupt_while_writing(CLI + args + ["--out", str(out)], tmp_path, "out")
    assert [p.name for p in out.iterdir()] == [".cache"]  # only the hidden cache, all three sources in it
    assert len(list((out / ".cache").rglob("*.json"))) == 3
    assert _stages(tmp_path, "out") == []
    stamps = {p.relative_to(out): p.stat().st_mtime_ns for p in (out / ".cache").rglob("*.json")}
    assert main([*args, "--out", str(out)]) == 0
    assert (out / "survey.json").read_bytes() == (tmp_path / "ref" / "survey.json").read_bytes()
    # the cache moved into the new folder, every entry reused (a recomputed entry would be written again)
    assert {p.relative_to(out): p.stat().st_mtime_ns for p in (out / ".cache").rglob("*.json")} == stamps


@pytest.mark.parametrize("command", ["drift", "scan", "templates"])
def test_other_report_folders_leave_nothing_when_interrupted(tmp_path, command):
    if command == "templates":
        log = tmp_path / "a.log"
        log.write_text("".join(f"2026-01-0{1 + k % 9} relay started unit {k}\nframe {k} sent ok\n" for k in range(200)))
        args = ["templates", str(log), "-q"]
    elif command == "scan":
        args = ["scan", str(_write_fasta(tmp_path / "s.fa", 4, 20_000)), "--window", "2000", "--step", "1000", "-q"]
    else:
        a, b = _write_fasta(tmp_path / "a.fa", 5, 20_000), _write_fasta(tmp_path / "b.fa", 6, 20_000)
        args = ["drift", str(a), str(b), "--permutations", "19", "--seed", "1", "-q", "--json"]
    assert main([*args, "--out", str(tmp_path / "ref")]) == 0
    out = tmp_path / "out"
    _interrupt_while_writing(CLI + args + ["--out", str(out)], tmp_path, "out")
    assert not out.exists() and _stages(tmp_path, "out") == []
    assert main([*args, "--out", str(out)]) == 0
    for ref in sorted((tmp_path / "ref").glob("*.json")):
        assert (out / ref.name).read_bytes() == ref.read_bytes()


def test_force_swaps_the_whole_folder_and_keeps_its_hidden_entries(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "old-report.html").write_text("from an earlier run")
    (out / ".cache").mkdir()
    (out / ".cache" / "entry.json").write_text("{}")
    with pytest.raises(OutputError, match="already holds files"):
        StagedFolder(out, force=False)
    stage = StagedFolder(out, force=True)
    write_text(stage.path / "new.json", "{}\n")
    assert (out / "old-report.html").exists() and not (out / "new.json").exists()  # nothing visible until the end
    assert stage.commit() == out
    assert sorted(p.name for p in out.iterdir()) == [".cache", "new.json"]
    assert (out / ".cache" / "entry.json").read_text() == "{}"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # no stage, no old folder left


def test_a_failed_build_leaves_nothing_and_a_killed_runs_leftovers_go(tmp_path):
    out = tmp_path / "out"
    with pytest.raises(RuntimeError):
        with StagedFolder(out, force=False) as path:
            write_text(path / "a.txt", "x")
            raise RuntimeError("simulated failure")
    assert sorted(tmp_path.iterdir()) == []
    # what a SIGKILLed run leaves: a stage (and a swapped-out old folder) older than this process
    killed = tmp_path / ".out.partial-abcd1234"
    killed.mkdir()
    (killed / "half.json").write_text("{")
    old = tmp_path / ".out.old-zz_y9876"
    old.mkdir()
    other = tmp_path / ".other.partial-abcd1234"  # another folder's stage: never touched
    other.mkdir()
    for p in (killed, old, other):
        os.utime(p, (PROCESS_START - 60, PROCESS_START - 60))
    with StagedFolder(out, force=False) as path:
        write_text(path / "a.txt", "x")
    assert sorted(p.name for p in tmp_path.iterdir()) == [".other.partial-abcd1234", "out"]
    assert (out / "a.txt").read_text() == "x"


def test_the_working_directory_as_report_folder_is_filled_in_place(tmp_path, monkeypatch):
    """``--out .`` must never rename the working directory away: the finished files are moved into it."""
    (tmp_path / "old.json").write_text("old")
    monkeypatch.chdir(tmp_path)
    with StagedFolder(".", force=True) as path:
        write_text(path / "new.json", "{}\n")
        write_text(path / "old.json", "new")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["new.json", "old.json"]
    assert (tmp_path / "old.json").read_text() == "new" and os.getcwd() == str(tmp_path)

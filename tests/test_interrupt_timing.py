"""Interruptions whose moment the test controls: Ctrl-C before a counting kernel, SIGKILL mid-survey and mid-report.

Every child runs with ``FRACTALSEQ_PAUSE_AT=name:count`` (``fractalseq.runner.pause_point``):
it blocks at a known point (just before the first counting kernel, after the first source
stored in the survey cache, after the first report file written), the test waits for the
state that point leaves behind (a flag file, a cache entry, a report file in the staged
folder), then sends the signal.  Nothing depends on how fast the machine is; the deadlines
are a safety net against a hang, never part of a check.

The rules checked (DEVELOPERS.md, "Rules of the house"): an interruption is reported as one
line and exit status 130 whatever was running (a Ctrl-C delivered as a compiled kernel
returns can surface as ``SystemError ... returned a result with an exception set``);
nothing is left under the final output name; the rerun needs no ``--force`` and gives the
uninterrupted run's bytes.
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
from fractalseq.runner import PAUSE_FLAG_VARIABLE, PAUSE_VARIABLE

from _paths import CLI

SAFETY = 900  # seconds: a net against a hang, not part of any check


def _write_fasta(path, seed, n=20_000):
    """Invented test sequence: a random four-state Markov chain."""
    chain = np.random.default_rng(seed).dirichlet(np.full(4, 2.0), size=4)
    path.write_text(f">{path.stem} invented test sequence\n" + "".join("ACGT"[c] for c in simulate_markov(chain, n, seed=seed)) + "\n")
    return path


def _wait_until(proc, reached) -> None:
    deadline = time.monotonic() + SAFETY
    while proc.poll() is None and not reached() and time.monotonic() < deadline:
        time.sleep(0.05)
    assert proc.poll() is None, "the run ended before its pause point"
    assert reached()


def _one_interruption_line(err: str) -> None:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert "Traceback" not in err and "SystemError" not in err, err
    assert len(lines) == 1 and lines[0].startswith("interrupted"), err


# ----------------------------------------------------------------- Ctrl-C at a counting kernel
@pytest.mark.parametrize("command", ["count", "learn"])
def test_ctrl_c_at_a_counting_kernel_is_exit_130_and_leaves_nothing(tmp_path, command):
    src = _write_fasta(tmp_path / "s.fa", 1)
    target = tmp_path / ("counts.npz" if command == "count" else "model.npz")
    args = ["count", str(src), "--depth", "8", "--save", str(target)] if command == "count" else \
        ["learn", str(src), "--depth", "4", "-o", str(target)]
    flag = tmp_path / "paused"
    proc = subprocess.Popen(CLI + args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, PAUSE_VARIABLE: "words.kernel:1", PAUSE_FLAG_VARIABLE: str(flag)})
    _wait_until(proc, flag.exists)
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    _one_interruption_line(err)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["paused", "s.fa"]  # no output, no .part
    assert main(args) == 0 and target.exists()  # the same command then just works


def test_an_interrupt_surfacing_as_a_system_error_is_still_an_interruption(monkeypatch, capsys, tmp_path):
    """What numba's dispatcher raises when Ctrl-C lands in a kernel: a SystemError whose context is the interrupt."""
    import fractalseq.jobs._files as files

    def kernel_interrupted(*args, **kwargs):
        try:
            raise KeyboardInterrupt
        except KeyboardInterrupt:
            raise SystemError("CPUDispatcher(<function count>) returned a result with an exception set")

    monkeypatch.setattr(files, "count_files", kernel_interrupted)
    monkeypatch.delenv("FRACTALSEQ_DEBUG", raising=False)
    src = _write_fasta(tmp_path / "s.fa", 2, 2000)
    capsys.readouterr()
    assert main(["count", str(src), "--save", str(tmp_path / "c.npz")]) == 130
    captured = capsys.readouterr()
    _one_interruption_line(captured.err)
    assert not (tmp_path / "c.npz").exists()


def test_a_system_error_without_an_interrupt_stays_an_internal_failure(monkeypatch, capsys, tmp_path):
    """The other side: a SystemError that no interrupt caused is a bug (exit 3), not an interruption."""
    import fractalseq.jobs._files as files

    def broken(*args, **kwargs):
        raise SystemError("simulated bug")

    monkeypatch.setattr(files, "count_files", broken)
    monkeypatch.delenv("FRACTALSEQ_DEBUG", raising=False)
    src = _write_fasta(tmp_path / "s.fa", 2, 2000)
    assert main(["count", str(src)]) == 3
    assert "SystemError" in capsys.readouterr().err


# ----------------------------------------------------------------- SIGKILL: a survey and a report
def _survey_args(tmp_path):
    srcs = [_write_fasta(tmp_path / f"t{i}.fa", 10 + i, 12_000) for i in range(3)]
    return ["survey", *map(str, srcs), "-q", "--seed", "3", "--depth", "6"]


def _rerun(args) -> int:
    """The user's rerun: a new process (leftovers of a killed run are older than it, so they are removed)."""
    return subprocess.run(CLI + args, capture_output=True, timeout=SAFETY).returncode


def _stages(parent, name):
    return sorted(p for p in parent.iterdir() if p.name.startswith(f".{name}."))


def test_sigkill_after_the_first_source_of_a_serial_survey_keeps_it(tmp_path):
    args = _survey_args(tmp_path)
    assert main([*args, "--out", str(tmp_path / "ref"), "--no-cache"]) == 0
    out = tmp_path / "out"
    proc = subprocess.Popen(CLI + args + ["--out", str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            env={**os.environ, PAUSE_VARIABLE: "survey.cached:1"})

    def first_source_stored() -> bool:
        cache = out / ".cache"
        return cache.exists() and len(list(cache.rglob("*.json"))) == 1 and len(list(cache.rglob("*.npz"))) == 1

    _wait_until(proc, first_source_stored)
    proc.kill()  # SIGKILL: no handler runs, no clean-up
    proc.communicate(timeout=120)
    assert proc.returncode == -signal.SIGKILL
    assert [p.name for p in out.iterdir()] == [".cache"]  # nothing visible under the final name
    kept = {p.relative_to(out): p.stat().st_mtime_ns for p in (out / ".cache").rglob("*.json")}
    assert len(kept) == 1
    assert _rerun([*args, "--out", str(out)]) == 0  # no --force needed
    assert (out / "survey.json").read_bytes() == (tmp_path / "ref" / "survey.json").read_bytes()
    for name, stamp in kept.items():  # the finished source was reused, not recomputed
        assert (out / name).stat().st_mtime_ns == stamp
    assert _stages(tmp_path, "out") == []  # the killed run's unfinished sibling is gone


def test_sigkill_while_the_report_is_written_then_the_rerun_gives_the_same_bytes(tmp_path):
    args = _survey_args(tmp_path)
    assert main([*args, "--out", str(tmp_path / "ref"), "--no-cache"]) == 0
    out = tmp_path / "out"
    proc = subprocess.Popen(CLI + args + ["--out", str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            env={**os.environ, PAUSE_VARIABLE: "report.file:1"})

    def first_file_written() -> bool:
        return any(f.is_file() and not f.name.endswith(".part") for st in _stages(tmp_path, "out") for f in st.rglob("*"))

    _wait_until(proc, first_file_written)
    proc.kill()
    proc.communicate(timeout=120)
    assert proc.returncode == -signal.SIGKILL
    assert [p.name for p in out.iterdir()] == [".cache"]  # the half-built report is in a hidden sibling only
    assert _stages(tmp_path, "out"), "the killed run should have left its unfinished sibling"
    assert _rerun([*args, "--out", str(out)]) == 0  # no --force needed
    for ref in sorted((tmp_path / "ref").glob("*.json")):
        assert (out / ref.name).read_bytes() == ref.read_bytes()
    assert _stages(tmp_path, "out") == []
    assert main([*args, "--out", str(out)]) == 2  # and nothing is overwritten without --force


# ----------------------------------------------------------------- the demo's report folder
def test_an_interrupted_demo_leaves_nothing_and_the_rerun_needs_no_force(tmp_path):
    """``demo --out`` is built under a hidden sibling too; its JSON names the final folder, never the sibling."""
    out = tmp_path / "demo"
    args = ["demo", "--out", str(out), "--length", "6000", "-q", "--json"]
    proc = subprocess.Popen(CLI + args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, PAUSE_VARIABLE: "report.file:1"})

    def first_file_written() -> bool:
        return any(f.is_file() and not f.name.endswith(".part") for st in _stages(tmp_path, "demo") for f in st.rglob("*"))

    _wait_until(proc, first_file_written)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 130, err
    _one_interruption_line(err)
    assert not out.exists() and _stages(tmp_path, "demo") == []
    done = subprocess.run(CLI + args, capture_output=True, text=True, timeout=SAFETY)
    assert done.returncode == 0, done.stderr
    assert out.is_dir() and _stages(tmp_path, "demo") == []
    for page in [out / "demo.json", *out.rglob("*.json"), *out.rglob("*.html")]:
        assert ".partial-" not in page.read_text(encoding="utf-8"), page
    assert str(out / "data" / "samples") in (out / "demo.json").read_text(encoding="utf-8")


def _children(pid: int) -> list[int]:
    """Process ids whose parent is ``pid`` (Linux ``/proc/PID/stat``, field 4 — proc(5))."""
    found = []
    for entry in os.listdir("/proc"):
        if entry.isdigit():
            try:
                with open(f"/proc/{entry}/stat", encoding="utf-8") as fh:
                    fields = fh.read().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                found.append(int(entry))
    return found


def test_an_interrupted_demo_stops_its_warm_up_process(tmp_path):
    """The demo's predictor warm-up runs in a second process; Ctrl-C on the demo ends that process too.

    Both processes are held at pause points (the demo after its first report file, the warm-up
    before it compiles anything), so the warm-up is certainly alive when the signal is sent.
    """
    flag = tmp_path / "paused"
    args = ["demo", "--out", str(tmp_path / "demo"), "--length", "6000", "-q"]
    proc = subprocess.Popen(CLI + args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, PAUSE_VARIABLE: "report.file:1,demo.warmup:1", PAUSE_FLAG_VARIABLE: str(flag)})

    def both_paused() -> bool:
        written = any(f.is_file() and not f.name.endswith(".part") for st in _stages(tmp_path, "demo") for f in st.rglob("*"))
        return written and flag.exists() and "demo.warmup:1" in flag.read_text(encoding="utf-8")

    _wait_until(proc, both_paused)
    warm = [pid for pid in _children(proc.pid) if b"warm_predictor" in open(f"/proc/{pid}/cmdline", "rb").read()]
    assert len(warm) == 1
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=300)
    try:
        assert proc.returncode == 130, err
        _one_interruption_line(err)
        assert not os.path.exists(f"/proc/{warm[0]}"), "the warm-up process outlived the interrupted demo"
    finally:
        if os.path.exists(f"/proc/{warm[0]}"):
            os.kill(warm[0], signal.SIGKILL)


def test_ctrl_c_while_the_commands_are_imported_is_one_line_too(tmp_path):
    """The first second of a run imports numba and scipy; an interrupt there is exit 130 and one line as well."""
    import sys

    flag = tmp_path / "paused"
    src = _write_fasta(tmp_path / "s.fa", 3, 2000)
    proc = subprocess.Popen([sys.executable, "-m", "fractalseq", "count", str(src), "--save", str(tmp_path / "c.npz")],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env={**os.environ, PAUSE_VARIABLE: "cli.import:1", PAUSE_FLAG_VARIABLE: str(flag)})
    _wait_until(proc, flag.exists)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    _one_interruption_line(err)
    assert not (tmp_path / "c.npz").exists()

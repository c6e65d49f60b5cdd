"""Inputs that can be read only once: named pipes (FIFOs), ``/dev/stdin`` and ``<(command)``.

A FIFO is made with ``os.mkfifo``; a writer thread opens it, writes everything
and closes it (opening blocks until the reader opens, writing blocks while the
pipe is full: no sleeps, no timing).  Compressed bodies come from the standard
library's ``gzip``, ``bz2`` and ``lzma``.  The data are invented (seeded random
DNA, an invented service log, a normal series); counts are checked against the
standard library's ``collections.Counter`` and numpy, and readings of a pipe
against readings of the same bytes from a regular file.
"""

from __future__ import annotations

import bz2
import collections
import contextlib
import gzip
import json
import lzma
import os
import shutil
import subprocess
import sys
import threading
from pathlib import Path

import numpy as np
import pytest

from fractalseq.errors import InputError
from fractalseq.sources import detect_format, open_source, rawio

ROOT = Path(__file__).resolve().parents[1]
CLI = [sys.executable, "-m", "fractalseq"]

RNG = np.random.default_rng(11)
#: 300,000 bases: several times the sniffed block and the pipe buffer
SEQ = "".join(RNG.choice(list("ACGT"), 300_000))
FASTA = (">invented chromosome, seeded random bases\n" + "\n".join(SEQ[i:i + 70] for i in range(0, len(SEQ), 70)) + "\n").encode()
LOG = "".join(
    f"2031-05-0{1 + i % 9} 12:{i % 60:02d}:{(7 * i) % 60:02d} node-{i % 5} "
    + ("accepted job %d from queue %d" % (i, i % 3) if i % 4 else "lost heartbeat after %d ms" % (10 * i))
    + "\n"
    for i in range(4000)
).encode()
VALUES = np.round(np.random.default_rng(5).normal(size=20_000), 4)
NUMERIC = ("level\n" + "\n".join(f"{v:.4f}" for v in VALUES) + "\n").encode()

COMPRESSORS = {"plain": lambda b: b, "gzip": gzip.compress, "bzip2": bz2.compress, "xz": lzma.compress}


@pytest.fixture(autouse=True)
def _forget_pipes():
    yield
    rawio.close_pipes()


@contextlib.contextmanager
def fifo_with(folder: Path, data: bytes, name: str = "stream"):
    """A FIFO whose writer thread writes ``data`` once and closes."""
    path = folder / name
    os.mkfifo(path)
    errors: list[BaseException] = []

    def write() -> None:
        try:
            with open(path, "wb") as fh:
                fh.write(data)
        except BrokenPipeError:  # the reader stopped early (a refused input): nothing left to prove
            pass
        except BaseException as exc:  # pragma: no cover - reported below
            errors.append(exc)

    writer = threading.Thread(target=write, daemon=True)
    writer.start()
    try:
        yield path
    finally:
        rawio.close_pipes()
        if writer.is_alive():
            # the reader never opened the pipe, or left data in it: drain so the writer ends
            fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK)  # never waits for a writer that already left
            os.set_blocking(fd, True)
            with os.fdopen(fd, "rb") as fh:
                while fh.read(1 << 16):
                    pass
        writer.join()
        assert not errors, errors


def base_counts(seq: str) -> dict[str, int]:
    return dict(collections.Counter(seq))


def decoded(arr) -> str:
    symbols = np.array(arr.alphabet.symbols)
    return "".join(symbols[arr.codes])


# ------------------------------------------------------------------ library: FIFOs
@pytest.mark.parametrize("kind", sorted(COMPRESSORS))
def test_fasta_through_a_fifo(tmp_path, kind):
    with fifo_with(tmp_path, COMPRESSORS[kind](FASTA)) as path:
        arr = open_source(path).to_array()
    assert len(arr) == len(SEQ)
    assert decoded(arr) == SEQ
    assert "read from a pipe (opened once)" in arr.report.notes
    assert arr.report.extra["compression"] == ("none" if kind == "plain" else kind)


def test_learned_alphabet_through_a_fifo_is_copied_once(tmp_path):
    seq = SEQ[:50_000] + "NNNNRY" + SEQ[50_000:60_000]
    fasta = f">x\n{seq}\n".encode()
    with fifo_with(tmp_path, gzip.compress(fasta)) as path:
        stream = open_source(path, alphabet="learn")
        arr = stream.to_array()
        again = stream.to_array()  # the copy serves every later pass too
    assert sorted(arr.alphabet.symbols) == sorted(set(seq))
    assert decoded(arr) == seq and decoded(again) == seq
    notes = [n for n in arr.report.notes if "temporary file" in n]
    assert notes == [f"read from a pipe and copied to a temporary file ({len(gzip.compress(fasta))} bytes) for a second pass"]


def test_log_templates_through_a_fifo_match_the_file(tmp_path):
    (tmp_path / "events.log").write_bytes(LOG)
    ref = open_source(tmp_path / "events.log", fmt="log").to_array()
    with fifo_with(tmp_path, gzip.compress(LOG)) as path:
        arr = open_source(path, fmt="log").to_array()
    assert len(arr) == LOG.count(b"\n") == len(ref)
    assert arr.alphabet.symbols == ref.alphabet.symbols
    np.testing.assert_array_equal(arr.codes, ref.codes)
    assert any("copied to a temporary file" in n for n in arr.report.notes)


def test_quantile_bins_through_a_fifo(tmp_path):
    with fifo_with(tmp_path, NUMERIC) as path:
        arr = open_source(path, fmt="numeric", bins=4).to_array()
    assert len(arr) == VALUES.size
    # equal-frequency bins: each quarter of the values (numpy's quantiles) in one bin
    edges = np.quantile(VALUES, [0.25, 0.5, 0.75])
    expected = np.searchsorted(edges, VALUES, side="right")
    agree = np.mean(arr.codes == expected)
    assert agree > 0.999, agree  # values equal to an edge may go either side
    assert any("copied to a temporary file" in n for n in arr.report.notes)


def test_format_check_then_reading_share_one_opening(tmp_path):
    """A command may sniff an input first and read it afterwards: the pipe must not be opened twice."""
    with fifo_with(tmp_path, gzip.compress(NUMERIC)) as path:
        assert detect_format(path, alphabet=None) == "numeric"
        arr = open_source(path, fmt="numeric", thresholds=[0.0]).to_array()
    np.testing.assert_array_equal(arr.codes, (VALUES >= 0).astype(arr.codes.dtype))  # a value on an edge goes to the upper bin


def test_second_pass_of_a_pipe_read_once_is_refused(tmp_path):
    with fifo_with(tmp_path, FASTA) as path:
        stream = open_source(path)
        assert len(stream.to_array()) == len(SEQ)
        with pytest.raises(InputError) as err:
            stream.to_array()
    msg = str(err.value)
    assert "already read once" in msg and "\n" not in msg and msg.endswith(".")


def test_empty_fifo_is_refused(tmp_path):
    with fifo_with(tmp_path, b"") as path:
        with pytest.raises(InputError, match="is empty"):
            open_source(path)


def test_truncated_gzip_through_a_fifo_is_refused(tmp_path):
    body = gzip.compress(FASTA)
    with fifo_with(tmp_path, body[: len(body) // 2]) as path:
        with pytest.raises(InputError, match="truncated or damaged gzip"):
            open_source(path).to_array()


def test_the_same_fifo_read_again_waits_for_its_next_writer(tmp_path):
    """After a full pass, a named pipe is forgotten: opening it again reads what the next writer sends."""
    with fifo_with(tmp_path, f">a\n{SEQ[:1000]}\n".encode()) as path:
        assert decoded(open_source(path).to_array()) == SEQ[:1000]
        second = threading.Thread(target=lambda: path.write_bytes(f">b\n{SEQ[1000:1500]}\n".encode()), daemon=True)
        second.start()
        assert decoded(open_source(path).to_array()) == SEQ[1000:1500]
        second.join()


# ------------------------------------------------------------------ through the command line
def _env() -> dict[str, str]:
    return dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))


def _ladder(seq: str, depth: int) -> list[tuple[int, int, int]]:
    out = []
    for n in range(1, depth + 1):
        c = collections.Counter(seq[i:i + n] for i in range(len(seq) - n + 1))
        out.append((n, len(c), sum(c.values())))
    return out


def _check_count(done: subprocess.CompletedProcess, seq: str, depth: int = 4) -> dict:
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    assert [(r["depth"], r["distinct"], r["occurrences"]) for r in out["ladder"]] == _ladder(seq, depth)
    return out


SHORT = SEQ[:40_000]
SHORT_FASTA = f">invented\n{SHORT}\n".encode()


@pytest.mark.parametrize("kind", ["plain", "gzip"])
def test_cli_count_reads_a_fifo(tmp_path, kind):
    with fifo_with(tmp_path, COMPRESSORS[kind](SHORT_FASTA)) as path:
        done = subprocess.run([*CLI, "count", str(path), "--depth", "4", "--json"],
                              capture_output=True, text=True, env=_env())
    out = _check_count(done, SHORT)
    assert "read from a pipe (opened once)" in out["inputs"][0]["notes"]


@pytest.mark.parametrize("kind", ["plain", "gzip"])
def test_cli_count_reads_dev_stdin(kind):
    done = subprocess.run([*CLI, "count", "/dev/stdin", "--depth", "4", "--json"], input=COMPRESSORS[kind](SHORT_FASTA),
                          capture_output=True, env=_env())
    _check_count(subprocess.CompletedProcess(done.args, done.returncode, done.stdout.decode(), done.stderr.decode()), SHORT)


def test_cli_count_learned_alphabet_from_dev_stdin():
    done = subprocess.run([*CLI, "count", "/dev/stdin", "--alphabet", "learn", "--depth", "4", "--json"],
                          input=gzip.compress(SHORT_FASTA), capture_output=True, env=_env())
    out = _check_count(subprocess.CompletedProcess(done.args, done.returncode, done.stdout.decode(), done.stderr.decode()), SHORT)
    assert any("copied to a temporary file" in n for n in out["inputs"][0]["notes"])


@pytest.mark.skipif(shutil.which("bash") is None, reason="process substitution needs bash")
@pytest.mark.parametrize("kind, extra", [("plain", []), ("gzip", []), ("gzip", ["--alphabet", "learn"])])
def test_cli_count_reads_process_substitution(tmp_path, kind, extra):
    src = tmp_path / ("in.fa.gz" if kind == "gzip" else "in.fa")
    src.write_bytes(COMPRESSORS[kind](SHORT_FASTA))
    script = 'exec "$@" <(cat "$SRC")'
    done = subprocess.run(["bash", "-c", script + " " + " ".join(["--depth", "4", "--json", *extra]), "bash",
                           *CLI, "count"], capture_output=True, text=True, env=dict(_env(), SRC=str(src)))
    _check_count(done, SHORT)


# ------------------------------------------------------------------ survey and drift: pipes read once
def _json_without_paths(text: str):
    """The document with every string blanked: a pipe's name and path differ from the file's; no number may."""
    def blank(x):
        if isinstance(x, dict):
            return {k: blank(v) for k, v in x.items() if k not in ("content_sha256", "notes")}  # notes say "pipe"
        if isinstance(x, list):
            return [blank(v) for v in x]
        return "" if isinstance(x, str) else x

    return blank(json.loads(text))


@pytest.mark.skipif(shutil.which("bash") is None, reason="process substitution needs bash")
@pytest.mark.parametrize("command", ["survey", "drift"])
def test_survey_and_drift_read_process_substitutions_like_files(tmp_path, command):
    """``<(cat file)`` is a pipe: survey and drift read it once (into memory) and give the file's figures."""
    a, b = tmp_path / "a.fa", tmp_path / "b.fa"
    a.write_bytes(SHORT_FASTA)
    b.write_bytes(f">invented\n{SEQ[100_000:130_000]}\n".encode())
    opts = ["--seed", "4", "--json", "-q"] + (["--depth", "4"] if command == "survey" else ["--permutations", "99"])
    files = subprocess.run([*CLI, command, str(a), str(b), *opts], capture_output=True, text=True, env=_env())
    assert files.returncode in (0, 1), files.stderr
    script = f'exec "$@" <(cat "$A") <(cat "$B") {" ".join(opts)}'
    pipes = subprocess.run(["bash", "-c", script, "bash", *CLI, command], capture_output=True, text=True,
                           env=dict(_env(), A=str(a), B=str(b)))
    assert pipes.returncode == files.returncode, pipes.stderr
    if command == "survey":
        assert _json_without_paths(pipes.stdout) == _json_without_paths(files.stdout)
    else:
        got, want = json.loads(pipes.stdout), json.loads(files.stdout)
        assert [t["p_value"] for t in got["tests"]] == [t["p_value"] for t in want["tests"]]
        assert [t["statistic"] for t in got["tests"]] == [t["statistic"] for t in want["tests"]]


def test_survey_reads_a_fifo_given_by_path(tmp_path):
    b = tmp_path / "b.fa"
    b.write_bytes(f">invented\n{SEQ[100_000:130_000]}\n".encode())
    with fifo_with(tmp_path, SHORT_FASTA) as path:
        done = subprocess.run([*CLI, "survey", str(path), str(b), "--depth", "4", "--json", "-q", "--no-cache"],
                              capture_output=True, text=True, env=_env())
    assert done.returncode == 0, done.stderr
    doc = json.loads(done.stdout)
    assert [s["length"] for s in doc["sources"]] == [len(SHORT), 30_000]

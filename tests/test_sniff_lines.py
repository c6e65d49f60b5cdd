"""Line-oriented logs without a time header, junk inside text logs, and binaries, through the command line.

Real files nobody on this project wrote: the build and test logs Debian ships under /usr/share/doc
(gdb's DejaGnu check log, OpenJDK's jtreg output and summary, Python's pybench log), apt's term.log,
and their excerpts in reference/logs/ (provenance in reference/logs/README.md and PROVENANCE.md);
genomes from reference/ (PROVENANCE.md) and Debian kleborate-examples (benchmarks/genomes.py).
The expected format of each follows from its documented layout (cited per row): a DejaGnu or jtreg
log is lines of words ("PASS: gdb.base/x.exp: name", "Passed: path"), a genome is FASTA.
"""

from __future__ import annotations

import gzip
import json
import os
import random
import shutil
from pathlib import Path

import pytest

from _paths import LAMBDA, LOGS, REFERENCE, ROOT

DOC = Path("/usr/share/doc")
JDK = DOC / "openjdk-17-jre-headless" / "test-amd64"


def _have(path: Path) -> bool:
    return path.is_file() and os.access(path, os.R_OK)


def _json(run_cli, *args) -> dict:
    proc = run_cli(*args)
    assert proc.returncode == 0, proc.stderr
    return json.loads(proc.stdout)


def _read(run_cli, path) -> dict:
    """The read report of ``count --depth 1 --json`` (format auto, default alphabet dna)."""
    return _json(run_cli, "count", "--depth", "1", "--json", str(path))["inputs"][0]


def _mined(run_cli, path) -> dict:
    """``templates --json`` (always reads a log): the template table and each line's id."""
    return _json(run_cli, "templates", "--json", str(path))


# (file, where its layout is documented) -- each a log of lines of words without a time on most lines
TEXT_LOGS = [
    (LOGS / "gdb-check-excerpt.log", "DejaGnu summary lines 'PASS: file: name' (reference/logs/README.md)"),
    (LOGS / "jtreg-output-excerpt.log", "jtreg 'Passed: path' lines (reference/logs/README.md)"),
    (LOGS / "apt-term-excerpt.log", "dpkg terminal output copied by apt (reference/logs/README.md)"),
    (DOC / "gdb" / "check.log.gz", "Debian gdb package: the build's DejaGnu check log"),
    (JDK / "jtreg_output-hotspot.log.gz", "Debian openjdk-17 package: jtreg output of the build's tests"),
    (JDK / "jtreg-summary-hotspot.log", "Debian openjdk-17 package: jtreg summary"),
    (DOC / "python3.11" / "pybench.log", "Debian python3.11 package: one line of words"),
    (Path("/var/log/apt/term.log"), "this machine's apt term.log (dpkg terminal output)"),
]


@pytest.mark.parametrize("path,layout", TEXT_LOGS, ids=[p.name for p, _ in TEXT_LOGS])
def test_text_logs_are_read_as_logs_by_default(run_cli, path, layout):
    if not _have(path):
        pytest.skip(f"{path} is not on this machine")
    rep = _read(run_cli, path)
    assert rep["format"] == "log", (layout, rep["notes"])
    note = next(n for n in rep["notes"] if n.startswith("format log"))
    assert "line-oriented log" in note and "of its first characters are dna symbols" in note, note
    # the same templates, with the same counts, as the templates command (which always reads a log)
    mined = _mined(run_cli, path)
    auto = sorted((t["template"], t["count"]) for t in rep["templates"])
    assert auto == sorted((t["text"], t["count"]) for t in mined["templates"])
    assert rep["symbols"] == sum(i is not None for i in mined["lines"])


def test_the_note_reads_well_on_the_terminal(run_cli):
    # what a user sees: one 'read note:' line giving the reason, then the usual log caution
    proc = run_cli("count", "--depth", "1", str(LOGS / "apt-term-excerpt.log"))
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout + proc.stderr
    notes = [ln for ln in out.splitlines() if ln.startswith("read note: format log")]
    assert len(notes) == 1, out
    assert "line-oriented log, one template per line" in notes[0]
    assert "choose the text format and the learn alphabet" in notes[0]
    assert "no security guarantee" in out


# ------------------------------------------------------------------ genomes stay sequence
def _plain_lambda(tmp_path: Path) -> Path:
    """Phage lambda's bases without the '>' line: plain sequence text, 70 a line."""
    seq = "".join(ln for ln in gzip.decompress(LAMBDA.read_bytes()).decode().splitlines() if not ln.startswith(">"))
    path = tmp_path / "lambda.txt"
    path.write_text("\n".join(seq[i : i + 70] for i in range(0, len(seq), 70)) + "\n")
    return path


def test_genomes_stay_dna(run_cli, tmp_path, monkeypatch):
    monkeypatch.syspath_prepend(str(ROOT / "benchmarks"))
    from genomes import klebsiella  # Debian kleborate-examples, fetched when absent

    cases = [(LAMBDA, "fasta"), (REFERENCE / "chr17.hg19.part.fa", "fasta"), (_plain_lambda(tmp_path), "text")]
    cases += [(p, "fasta") for p in list(klebsiella().values())[:2]]
    for path, fmt in cases:
        rep = _read(run_cli, path)
        assert rep["format"] == fmt, (path, rep["notes"])
        assert "templates" not in rep
        assert rep["symbols"] >= 40_000
    # lambda: 48,502 bases (NCBI NC_001416; reference/PROVENANCE.md)
    assert _read(run_cli, LAMBDA)["symbols"] == 48502


# ------------------------------------------------------------------ junk inside a text log
DPKG = LOGS / "dpkg-excerpt.log"


def _templates_by_line(run_cli, path) -> list[str | None]:
    mined = _mined(run_cli, path)
    text = {t["id"]: t["text"] for t in mined["templates"]}
    return [None if i is None else text[i] for i in mined["lines"]]


@pytest.mark.parametrize("where", ["middle", "sniffed block", "inside a line"])
def test_nul_run_inside_a_dpkg_log_is_skipped_and_counted(run_cli, tmp_path, where):
    data = DPKG.read_bytes()
    at = {"middle": len(data) // 2, "sniffed block": 20_000, "inside a line": 20_000}[where]
    cut = data.index(b"\n", at) + 1 + (15 if where == "inside a line" else 0)
    path = tmp_path / "dpkg-nul.log"
    path.write_bytes(data[:cut] + b"\x00" * 4096 + data[cut:])
    # every line templated as in the original (NULs hold no line end: the line numbers are unchanged)
    assert _templates_by_line(run_cli, path) == _templates_by_line(run_cli, DPKG)
    for fmt in ("auto", "log"):
        rep = _json(run_cli, "count", "--depth", "1", "--json", "--format", fmt, str(path))["inputs"][0]
        assert rep["format"] == "log" and rep["junk_bytes_skipped"] == 4096
        assert "4096 NUL or binary junk bytes skipped" in rep["notes"]
    proc = run_cli("count", "--depth", "1", str(path))
    assert "read note: 4096 NUL or binary junk bytes skipped" in proc.stdout + proc.stderr


def test_block_of_random_junk_inside_a_log_is_left_out(run_cli, tmp_path):
    data = DPKG.read_bytes()
    cut = data.index(b"\n", 20_000) + 1
    first = data[:cut].count(b"\n") + 1  # line number where the junk starts
    junk = random.Random(5).randbytes(4096) + b"\n"
    path = tmp_path / "dpkg-junk.log"
    path.write_bytes(data[:cut] + junk + data[cut:])
    extra = junk.count(b"\n")
    got = _templates_by_line(run_cli, path)
    want = _templates_by_line(run_cli, DPKG)
    assert got[: first - 1] + got[first - 1 + extra :] == want  # the log's own lines, as in the original
    assert all(t is None for t in got[first - 1 : first - 1 + extra])  # the junk's lines give no symbol
    rep = _read(run_cli, path)
    assert rep["format"] == "log"
    note = next(n for n in rep["notes"] if "junk" in n)
    assert f"lines of binary junk left out (the first at line {first})" in note


def test_error_policy_refuses_a_log_with_junk(run_cli, tmp_path):
    data = DPKG.read_bytes()
    cut = data.index(b"\n", 20_000) + 1
    path = tmp_path / "dpkg-nul.log"
    path.write_bytes(data[:cut] + b"\x00" * 4096 + data[cut:])
    proc = run_cli("count", "--depth", "1", "--unknown", "error", str(path))
    assert proc.returncode == 2
    msg = proc.stderr.strip()
    assert "4096 NUL or binary junk bytes" in msg and "error policy" in msg
    assert len(msg.splitlines()) == 1 and "Traceback" not in msg
    assert run_cli("count", "--depth", "1", "--unknown", "skip", str(path)).returncode == 0


# ------------------------------------------------------------------ binaries are still refused
def _binaries(tmp_path: Path) -> list[Path]:
    rnd = tmp_path / "random.bin"
    rnd.write_bytes(random.Random(1).randbytes(50_000))
    cut = tmp_path / "cut.gz"
    cut.write_bytes(gzip.compress(DPKG.read_bytes())[2:])  # gzip without its magic: deflate data
    out = [rnd, cut]
    for p in (Path("/bin/ls"), Path("/usr/share/pixmaps/debian-logo.png")):  # an ELF executable, a PNG image
        if _have(p):
            out.append(Path(shutil.copy(p, tmp_path / p.name)))
    return out


def test_binaries_are_refused_in_one_sentence(run_cli, tmp_path):
    for path in _binaries(tmp_path):
        for args in (("count", "--depth", "1"), ("count", "--depth", "1", "--format", "log"), ("templates",)):
            proc = run_cli(*args, str(path))
            assert proc.returncode == 2, (path, args, proc.stdout[-300:])
            msg = proc.stderr.strip()
            assert "binary data" in msg and len(msg.splitlines()) == 1, (path, msg)


def test_sniff_block_with_junk_lines_stays_text():
    # library level: the share of junk lines decides, not the first NUL byte
    from fractalseq.sources.sniff import is_binary

    text = b"".join(b"2024-01-01 00:00:%02d start unit %d\n" % (i % 60, i) for i in range(300))
    assert not is_binary(text[:3000] + b"\x00" * 5 + text[3000:])
    assert not is_binary(text[:3000] + random.Random(2).randbytes(2000) + text[3000:])
    assert is_binary(b"ACGT\x00ACGT\n")  # the only line holds a NUL
    assert is_binary(random.Random(3).randbytes(4000) + text[:200])
    assert is_binary("na\u00efve caf\u00e9 text\n".encode("utf-16"))  # UTF-16: a NUL in every line


# ------------------------------------------------------------------ a pipe is still read once
@pytest.mark.parametrize("compress", [False, True], ids=["plain", "gzip"])
def test_headerless_log_through_a_fifo_is_read_once_as_a_log(tmp_path, compress):
    from test_pipes import fifo_with

    from fractalseq.sources import open_source, rawio

    path = LOGS / "apt-term-excerpt.log"
    data = path.read_bytes()
    want = open_source(path)
    with fifo_with(tmp_path, gzip.compress(data) if compress else data) as fifo:
        stream = open_source(fifo)
        got = stream.to_array()
        assert stream.report.extra["format"] == "log"
        assert any("read from a pipe (opened once)" in n for n in stream.report.notes)
        assert any("line-oriented log" in n for n in stream.report.notes)
    rawio.close_pipes()
    assert got.alphabet.symbols == want.alphabet.symbols
    assert got.codes.tolist() == want.to_array().codes.tolist()

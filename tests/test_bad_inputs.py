"""Bad inputs and bad arguments across every command: exit status 2, one sentence, nothing left behind.

The contract (DEVELOPERS.md, "Rules of the house"): a run refused for bad input or a bad
argument ends with exit status 2, prints exactly one sentence on standard error that names
the problem and the fix (``error: ...``), shows no traceback, and leaves no output file
(nor a ``*.part`` temporary, nor an empty output folder it created) behind; files that
existed before are untouched.

Every case runs in-process through :func:`fractalseq.cli.app.main` (fast: the imports are
paid once), and a subset, at least one per command, also runs as a real subprocess
(``python -m fractalseq.cli``) so that "no traceback" is checked on the real standard error
of a real process, including one case fed through a pipe on standard input.

Each case states what its sentence must say: a pattern for the problem and a pattern for
the fix.  The patterns are deliberately loose about wording but strict about content (the
offending value or file property, and the option or action that fixes it).

About "unreadable path": the suite may run as root, and ``chmod 000`` does not stop root
from reading a file, so unreadable paths are made as a path *beneath a regular file*
(``good.fa/x.fa``: the operating system refuses it for every user) and as a folder given
where a file is expected.
"""

from __future__ import annotations

import gzip
import io
import lzma
import os
import re
import shutil
import subprocess
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pytest
import zstandard

from fractalseq.cli.app import main

from _paths import ROOT
NON_UTF8_LOG = ROOT / "reference" / "logs" / "testcase-wrong-char.log"  # provenance: reference/logs/PROVENANCE.md


# ------------------------------------------------------------------ fixtures
def _fasta(name: str, text: str, width: int = 70) -> str:
    return f">{name} invented test sequence\n" + "\n".join(text[i : i + width] for i in range(0, len(text), width)) + "\n"


def _random_text(symbols: str, n: int, seed: int) -> str:
    rng = np.random.default_rng(seed)
    return "".join(np.array(list(symbols))[rng.integers(0, len(symbols), n)])


def _make_files(d: Path) -> None:
    """The bad (and a few good) files every case refers to, in one folder."""
    dna_text = _random_text("ACGT", 20_000, 1)
    good = _fasta("s1", dna_text)
    (d / "good.fa").write_text(good)
    (d / "short.fa").write_text(_fasta("s2", dna_text[:60]))
    (d / "prot.fa").write_text(_fasta("p1", _random_text("ACDEFGHIKLMNPQRSTVWY", 6_000, 2)))
    (d / "empty.fa").write_bytes(b"")
    (d / "binary.bin").write_bytes(np.random.default_rng(3).integers(0, 256, 4096, dtype=np.uint8).tobytes())
    # truncated archives: valid compressed data cut in the middle (the first block still decompresses)
    big = (good * 5).encode("ascii")
    for ext, data in (
        ("gz", gzip.compress(big)),
        ("xz", lzma.compress(big)),
        ("zst", zstandard.ZstdCompressor().compress(big)),
    ):
        (d / f"trunc.fa.{ext}").write_bytes(data[: len(data) // 2])
    reads = "".join(f"@r{i}\n{dna_text[i * 50:(i + 1) * 50]}\n+\n{'I' * 50}\n" for i in range(40))
    (d / "reads.fq").write_text(reads)
    (d / "unknown.fa").write_text(">u\nACGTACGTJJACGTACGTACGATCGACTAGCATCGAC\n")
    (d / "alln.fa").write_text(_fasta("n", "N" * 5_000))
    if not NON_UTF8_LOG.exists():
        raise AssertionError(f"{NON_UTF8_LOG} is missing; it is committed test data (reference/logs/PROVENANCE.md)")
    shutil.copy(NON_UTF8_LOG, d / "wrong-char.log")
    (d / "folder").mkdir()
    # outputs that exist before the run and must come out untouched
    (d / "existing.txt").write_text("keep\n")
    (d / "existing.png").write_bytes(b"an older picture\n")
    (d / "full").mkdir()
    (d / "full" / "keep.txt").write_text("keep\n")
    # model files: one learned on protein, one learned on DNA, and a truncated one
    from fractalseq.predict._predictor import CellPredictor
    from fractalseq.sources import open_source

    CellPredictor(max_depth=3).fit(open_source(d / "prot.fa", alphabet="protein")).save(d / "prot.npz")
    CellPredictor(max_depth=6).fit(open_source(d / "good.fa", alphabet="dna")).save(d / "dna.npz")
    data = (d / "dna.npz").read_bytes()
    (d / "trunc.npz").write_bytes(data[: len(data) // 2])
    shutil.copy(d / "dna.npz", d / "old-model.npz")
    # hostile paths: a symbolic link loop, a link to nothing, an output name that is a link loop
    os.symlink("loop-b.fa", d / "loop-a.fa")
    os.symlink("loop-a.fa", d / "loop-b.fa")
    os.symlink("nowhere.fa", d / "dangling.fa")
    os.symlink("loop-out-b.png", d / "loop-out.png")
    os.symlink("loop-out.png", d / "loop-out-b.png")
    (d / "one-symbol.txt").write_text("a" * 50_000)
    (d / "indir").mkdir()
    shutil.copy(d / "short.fa", d / "indir" / "in.fa")
    (d / "indir" / "notes.txt").write_text("an input folder whose files must survive\n")
    (d / "list-of-indir.txt").write_text("# the list file lies outside the folder its entry is in\nindir/in.fa\ngood.fa\n")


@pytest.fixture(scope="module")
def bad(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("bad")
    _make_files(d)
    return d


# --------------------------------------------------------------------- cases
@dataclass(frozen=True)
class Case:
    """One refused run.  ``{d}`` in arguments and paths is the fixture folder."""

    id: str
    argv: tuple[str, ...]
    problem: str  # regex (case-insensitive) the sentence must match: what is wrong
    fix: str  # regex (case-insensitive) the sentence must match: what to do
    absent: tuple[str, ...] = ()  # outputs the run must not leave behind
    unchanged: tuple[str, ...] = ()  # files that existed before and must keep their bytes
    stdin: bytes | None = None
    subprocess: bool = False  # also run as a real process
    extra: dict = field(default_factory=dict)


RATIO_FIX = r"\(0, 1\)|between 0 and 1|--ratio 0\.5"
MODEL_AGAIN = r"learn the model again|fractalseq learn"

CASES: list[Case] = [
    # ---- empty, binary, truncated, wrong format, unknown symbols, all-N, non-UTF-8
    Case("count-empty-file", ("count", "{d}/empty.fa"), r"empty\.fa is empty", r"give a file"),
    Case("count-binary-file", ("count", "{d}/binary.bin"), r"binary", r"check the file|bytes alphabet", subprocess=True),
    Case("count-truncated-gz", ("count", "{d}/trunc.fa.gz"), r"truncated.*gzip|gzip.*truncated", r"again"),
    Case("profile-truncated-xz", ("profile", "{d}/trunc.fa.xz", "--boot", "0", "--out", "{d}/out-prof-xz"),
         r"truncated.*xz|xz.*truncated", r"again", absent=("out-prof-xz",), subprocess=True),
    Case("scan-truncated-zst", ("scan", "{d}/trunc.fa.zst", "--window", "1000", "--out", "{d}/out-scan-zst"),
         r"truncated.*zstd|zstd.*truncated", r"again", absent=("out-scan-zst",)),
    Case("learn-truncated-gz", ("learn", "{d}/trunc.fa.gz", "-o", "{d}/out-trunc.npz"),
         r"truncated.*gzip|gzip.*truncated", r"again", absent=("out-trunc.npz",)),
    Case("count-fastq-declared-fasta", ("count", "--format", "fasta", "{d}/reads.fq"), r"FASTQ", r"fastq|auto"),
    Case("count-unknown-symbol-error-policy", ("count", "--unknown", "error", "{d}/unknown.fa"),
         r"'J'", r"break|skip|another alphabet"),
    Case("score-unknown-symbol-error-policy", ("score", "--online", "--unknown", "error", "{d}/unknown.fa"),
         r"'J'", r"break|skip|another alphabet"),
    Case("count-all-N", ("count", "{d}/alln.fa"), r"no (usable |dna )?symbols", r"check the file|alphabet"),
    Case("drift-all-N", ("drift", "{d}/good.fa", "{d}/alln.fa", "--out", "{d}/out-drift-alln"),
         r"no (usable |dna )?symbols", r"check the file|alphabet", absent=("out-drift-alln",)),
    Case("drift-all-N-process", ("drift", "{d}/good.fa", "{d}/alln.fa", "--out", "{d}/out-drift-alln2"),
         r"no (usable |dna )?symbols", r"check the file|alphabet", absent=("out-drift-alln2",), subprocess=True),
    # a log with a non-UTF-8 line is read (the line as Latin-1, counted in the read report): tests/test_miner.py
    # ---- paths that cannot be read
    Case("count-folder-as-input", ("count", "{d}/folder"), r"folder\b.*not a file|is a folder", r"give a file"),
    Case("render-missing-input", ("render", "{d}/missing.fa", "-o", "{d}/out-missing.png"),
         r"missing\.fa does not exist", r"check the path", absent=("out-missing.png",)),
    Case("profile-path-beneath-a-file", ("profile", "{d}/good.fa/x.fa", "--out", "{d}/out-prof-beneath"),
         r"x\.fa", r"check the path", absent=("out-prof-beneath",)),
    Case("survey-one-input-missing", ("survey", "{d}/good.fa", "{d}/missing.fa", "--out", "{d}/out-survey-missing"),
         r"missing\.fa does not exist", r"check the path", absent=("out-survey-missing",), subprocess=True),
    # ---- impossible parameters
    Case("count-depth-beyond-address", ("count", "--depth", "40", "{d}/good.fa"), r"40", r"32 or less"),
    Case("profile-depth-beyond-address", ("profile", "{d}/good.fa", "--depth", "40", "--boot", "0"), r"40", r"32 or less"),
    Case("learn-depth-beyond-address", ("learn", "{d}/good.fa", "--depth", "40", "-o", "{d}/out-deep.npz"),
         r"depth", r"0\.\.31|31 or less|or less", absent=("out-deep.npz",), subprocess=True),
    Case("count-depth-zero", ("count", "--depth", "0", "{d}/good.fa"), r"--depth", r"--help|at least|greater"),
    Case("render-ratio-zero", ("render", "{d}/good.fa", "-o", "{d}/out-r0.png", "--ratio", "0"),
         r"ratio|\bk\b", RATIO_FIX, absent=("out-r0.png",), subprocess=True),
    Case("profile-ratio-negative", ("profile", "{d}/good.fa", "--ratio", "-0.5", "--out", "{d}/out-prof-neg"),
         r"-0\.5", RATIO_FIX, absent=("out-prof-neg",)),
    Case("scan-ratio-above-one", ("scan", "{d}/good.fa", "--window", "1000", "--ratio", "1.5"), r"1\.5", RATIO_FIX),
    Case("survey-ratio-zero", ("survey", "{d}/good.fa", "{d}/short.fa", "--ratio", "0", "--out", "{d}/out-survey-r0"),
         r"ratio|\bk\b", RATIO_FIX, absent=("out-survey-r0",)),
    Case("drift-ratio-negative", ("drift", "{d}/good.fa", "{d}/good.fa", "--ratio", "-0.5"), r"-0\.5", RATIO_FIX),
    Case("profile-q-list-empty", ("profile", "{d}/good.fa", "--q", ""), r"--q list is empty|no orders", r"--q 0,1,2"),
    Case("profile-q-list-only-commas", ("profile", "{d}/good.fa", "--q", " , "), r"--q list is empty|no orders", r"--q 0,1,2"),
    Case("profile-q-not-a-number", ("profile", "{d}/good.fa", "--q", "0,abc"), r"'abc'", r"--q 0,1,2"),
    Case("scan-window-longer-than-stream", ("scan", "{d}/short.fa", "--window", "1000", "--out", "{d}/out-scan-long"),
         r"fewer than one window|shorter than", r"smaller window \(option --window\)", absent=("out-scan-long",), subprocess=True),
    Case("scan-negative-penalty", ("scan", "{d}/good.fa", "--window", "1000", "--penalty", "-1"), r"-1", r"non-negative|bic"),
    Case("drift-alpha-above-one", ("drift", "{d}/good.fa", "{d}/good.fa", "--alpha", "2"), r"2", r"between 0 and 1|\(0, 1\)"),
    Case("drift-stdin-twice", ("drift", "-", "-"), r"standard input", r"one batch at most|only once"),
    Case("survey-unknown-linkage", ("survey", "{d}/good.fa", "{d}/short.fa", "--linkage", "bogus"), r"'bogus'", r"average"),
    Case("count-unknown-alphabet", ("count", "-a", "klingon", "{d}/good.fa"), r"'klingon'", r"use one of|dna"),
    Case("count-unknown-format", ("count", "--format", "bogus", "{d}/good.fa"), r"'bogus'", r"use one of|fasta"),
    Case("count-unknown-option", ("count", "--bogus", "{d}/good.fa"), r"--bogus", r"--help"),
    Case("score-neither-model-nor-online", ("score", "{d}/good.fa"), r"--model|--online", r"give either|either"),
    # ---- model files
    Case("score-protein-model-on-dna", ("score", "{d}/good.fa", "--model", "{d}/prot.npz", "--alphabet", "dna"),
         r"protein", r"--alphabet protein|learn a model", subprocess=True),
    Case("next-context-outside-model-alphabet", ("next", "ACDEFW", "--model", "{d}/dna.npz"), r"'D'", r"use only|symbols"),
    Case("score-truncated-model", ("score", "{d}/good.fa", "--model", "{d}/trunc.npz"), r"trunc\.npz", MODEL_AGAIN),
    Case("next-truncated-model", ("next", "ACGT", "--model", "{d}/trunc.npz"), r"trunc\.npz", MODEL_AGAIN, subprocess=True),
    Case("next-model-is-a-log", ("next", "ACGT", "--model", "{d}/wrong-char.log"), r"wrong-char\.log", MODEL_AGAIN),
    Case("score-missing-model", ("score", "{d}/good.fa", "--model", "{d}/nope.npz"), r"nope\.npz does not exist", r"check the path|learn"),
    # ---- outputs
    Case("render-out-exists-without-force", ("render", "{d}/good.fa", "-o", "{d}/existing.png"),
         r"already exists", r"--force", unchanged=("existing.png",)),
    Case("count-save-exists-without-force", ("count", "{d}/good.fa", "--save", "{d}/existing.txt"),
         r"already exists", r"--force", unchanged=("existing.txt",)),
    Case("learn-out-exists-without-force", ("learn", "{d}/good.fa", "-o", "{d}/old-model.npz"),
         r"already exists", r"--force", unchanged=("old-model.npz",)),
    Case("profile-out-folder-not-empty", ("profile", "{d}/good.fa", "--boot", "0", "--out", "{d}/full"),
         r"already holds files", r"--force|another folder", unchanged=("full/keep.txt",)),
    Case("profile-out-folder-is-a-file", ("profile", "{d}/good.fa", "--out", "{d}/existing.txt"),
         r"is a file", r"another output folder", unchanged=("existing.txt",)),
    Case("survey-out-folder-is-a-file", ("survey", "{d}/good.fa", "{d}/short.fa", "--out", "{d}/existing.txt"),
         r"is a file", r"another output folder", unchanged=("existing.txt",)),
    Case("scan-out-folder-is-a-file", ("scan", "{d}/good.fa", "--window", "1000", "--out", "{d}/existing.txt"),
         r"is a file", r"another output folder", unchanged=("existing.txt",)),
    Case("drift-out-folder-is-a-file", ("drift", "{d}/good.fa", "{d}/good.fa", "--out", "{d}/existing.txt"),
         r"is a file", r"another output folder", unchanged=("existing.txt",)),
    Case("render-out-beneath-a-file", ("render", "{d}/good.fa", "-o", "{d}/existing.txt/x.png"),
         r"is a file", r"another", unchanged=("existing.txt",)),
    Case("learn-out-is-a-folder", ("learn", "{d}/good.fa", "-o", "{d}/folder"), r"is a folder", r"file name"),
    Case("demo-out-folder-is-a-file", ("demo", "--out", "{d}/existing.txt"),
         r"is a file", r"another output folder", unchanged=("existing.txt",), subprocess=True),
    Case("demo-out-folder-not-empty", ("demo", "--out", "{d}/full"),
         r"already holds files", r"--force|another folder", unchanged=("full/keep.txt",)),
    # ---- standard input
    Case("count-stdin-empty", ("count", "-"), r"empty", r"give|holds data", stdin=b""),
    Case("count-stdin-binary", ("count", "-"), r"binary", r"check|bytes alphabet",
         stdin=bytes(range(256)) * 8, subprocess=True),
    Case("profile-stdin-all-N", ("profile", "-", "--boot", "0"), r"no (usable |dna )?symbols", r"check|alphabet",
         stdin=b">n\n" + b"N" * 3000 + b"\n"),
    # ---- hostile paths: link loops, dangling links, devices, control characters (issue "nothing lost, nothing let in")
    Case("count-symlink-loop", ("count", "{d}/loop-a.fa"), r"loop-a\.fa is a symbolic link loop", r"point the link at a file",
         subprocess=True),
    Case("profile-symlink-loop", ("profile", "{d}/loop-a.fa", "--boot", "0", "--out", "{d}/out-loop"),
         r"symbolic link loop", r"point the link", absent=("out-loop",)),
    Case("survey-symlink-loop", ("survey", "{d}/good.fa", "{d}/loop-a.fa", "--out", "{d}/out-survey-loop"),
         r"loop-a\.fa is a symbolic link loop", r"point the link", absent=("out-survey-loop",)),
    Case("next-model-symlink-loop", ("next", "ACGT", "--model", "{d}/loop-a.fa"), r"symbolic link loop", r"point the link"),
    Case("templates-symlink-loop", ("templates", "{d}/loop-a.fa"), r"symbolic link loop", r"point the link", subprocess=True),
    Case("count-dangling-link", ("count", "{d}/dangling.fa"), r"symbolic link to nowhere\.fa, which does not exist",
         r"fix the link"),
    Case("count-dev-null", ("count", "/dev/null"), r"/dev/null is empty", r"give a file"),
    Case("render-dev-null", ("render", "/dev/null", "-o", "{d}/out-null.png"), r"/dev/null is empty", r"give a file",
         absent=("out-null.png",)),
    Case("count-save-over-a-device-even-with-force", ("count", "{d}/good.fa", "--save", "/dev/null", "--force"),
         r"/dev/null is a device", r"give a file name"),
    Case("learn-out-over-a-device-even-with-force", ("learn", "{d}/good.fa", "-o", "/dev/full", "--force"),
         r"/dev/full is a device", r"give a file name"),
    Case("render-out-is-a-link-loop", ("render", "{d}/good.fa", "-o", "{d}/loop-out.png", "--force"),
         r"symbolic link that leads nowhere", r"remove it|another file name"),
    Case("profile-out-beneath-a-device", ("profile", "{d}/good.fa", "--boot", "0", "--out", "/dev/null/report"),
         r"/dev/null is a file", r"another place for /dev/null/report"),
    Case("count-control-characters-in-a-missing-name", ("count", "{d}/ok\x1b]0;title\x07\x1b[2J.fa"),
         r"ok\\x1b\]0;title\\x07\\x1b\[2J\.fa does not exist", r"check the path"),
    Case("survey-empty-folder", ("survey", "{d}/folder"), r"holds no files", r"give a folder with inputs"),
    # ---- outputs that would replace an input, even with --force
    Case("count-save-over-its-own-input", ("count", "{d}/indir/in.fa", "--save", "{d}/indir/in.fa", "--force"),
         r"in\.fa is one of the inputs", r"another output file name", unchanged=("indir/in.fa",), subprocess=True),
    Case("learn-out-over-its-own-input", ("learn", "{d}/indir/in.fa", "-o", "{d}/indir/in.fa", "--force"),
         r"one of the inputs", r"another output file name", unchanged=("indir/in.fa",)),
    Case("profile-out-folder-holds-the-input", ("profile", "{d}/indir/in.fa", "--boot", "0", "--out", "{d}/indir", "--force"),
         r"holds the input .*in\.fa", r"another output folder", unchanged=("indir/in.fa", "indir/notes.txt")),
    Case("survey-out-folder-is-the-input-folder", ("survey", "{d}/indir", "{d}/good.fa", "--out", "{d}/indir", "--force"),
         r"holds the input", r"another output folder", unchanged=("indir/in.fa", "indir/notes.txt")),
    Case("survey-out-folder-holds-an-entry-of-the-list-file",
         ("survey", "--from-list", "{d}/list-of-indir.txt", "--out", "{d}/indir", "--force"),
         r"holds the input .*in\.fa", r"another output folder", unchanged=("indir/in.fa", "indir/notes.txt")),
    Case("scan-out-folder-holds-the-input", ("scan", "{d}/indir/in.fa", "--window", "20", "--out", "{d}/indir", "--force"),
         r"holds the input", r"another output folder", unchanged=("indir/in.fa", "indir/notes.txt")),
    # ---- sizes beyond memory, bounded before any work (what is allocated, which option sets it)
    Case("profile-boot-beyond-memory", ("profile", "{d}/good.fa", "--boot", "1000000000", "--out", "{d}/out-boot"),
         r"1000000000 bootstrap replicates .*memory", r"fewer replicates \(option --boot\)", absent=("out-boot",),
         subprocess=True),
    Case("drift-permutations-beyond-memory", ("drift", "{d}/good.fa", "{d}/good.fa", "--permutations", "1000000000000"),
         r"1000000000000 permutations .*memory", r"fewer permutations \(option --permutations\)", subprocess=True),
    Case("demo-length-beyond-memory", ("demo", "--length", "10000000000000", "--out", "{d}/out-demo-len"),
         r"10000000000000 bases .*memory", r"smaller length \(option --length\)", absent=("out-demo-len",),
         subprocess=True),
    Case("scan-window-beyond-any-input", ("scan", "{d}/good.fa", "--window", "1000000000000000000000"),
         r"fewer than one window", r"smaller window \(option --window\)"),
    Case("count-depth-of-22-digits", ("count", "--depth", "1000000000000000000000", "{d}/good.fa"),
         r"exceeds the address width", r"--depth 32 or less"),
    Case("drift-block-longer-than-the-batches", ("drift", "{d}/good.fa", "{d}/short.fa", "--block", "100000000000"),
         r"too few to permute", r"smaller|below the shorter batch.*--block"),
    # ---- impossible numbers (one rule each, on parsing) and inputs with a single symbol
    Case("render-negative-drop", ("render", "{d}/good.fa", "-o", "{d}/out-drop.png", "--drop", "-5"),
         r"--drop", r"greater than or equal to 0.*--help", absent=("out-drop.png",)),
    Case("render-size-below-eight", ("render", "{d}/good.fa", "-o", "{d}/out-size.png", "--size", "3"),
         r"--size", r"greater than or equal to 8.*--help", absent=("out-size.png",)),
    Case("count-negative-top", ("count", "--top", "-3", "{d}/good.fa"), r"--top", r"greater than or equal to 0.*--help"),
    Case("scan-one-symbol-input", ("scan", "{d}/one-symbol.txt", "-a", "learn", "--format", "text"),
         r"only 1 distinct symbol \('a'\)", r"at least two different symbols|fixed alphabet", subprocess=True),
    Case("drift-one-symbol-input", ("drift", "{d}/one-symbol.txt", "{d}/one-symbol.txt", "-a", "learn", "--format", "text"),
         r"only 1 distinct symbol", r"at least two different symbols|fixed alphabet"),
    Case("profile-one-symbol-input", ("profile", "{d}/one-symbol.txt", "-a", "learn", "--format", "text", "--boot", "0"),
         r"only 1 distinct symbol|fewer than 2 distinct symbols", r"at least two different symbols|fixed alphabet"),
]

#: Every command must have at least one case (and one run as a real process).
COMMANDS = ("count", "render", "profile", "learn", "score", "next", "survey", "drift", "scan", "demo", "templates")


def _fill(text: str, d: Path) -> str:
    return text.replace("{d}", str(d))


def _snapshot(d: Path, names) -> dict[str, bytes]:
    return {n: (d / n).read_bytes() for n in names}


def check_refusal(case: Case, d: Path, status: int, out: str, err: str, before: dict[str, bytes]) -> None:
    """The common assertions of every case."""
    where = f"{case.id}: stderr was {err!r}"
    assert status == 2, f"{case.id}: exit status {status}, expected 2; {where}"
    assert "Traceback" not in err and "Traceback" not in out, where
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, f"{case.id}: {len(lines)} lines on standard error, expected one sentence; {where}"
    line = lines[0]
    assert line.startswith("error: "), where
    assert line.endswith("."), where
    body = line[len("error: "):]
    # one sentence: no full stop followed by a new capitalised sentence inside
    assert not re.search(r"[.!?]\s+[A-Z]", body), f"{case.id}: more than one sentence; {where}"
    assert re.search(case.problem, body, re.IGNORECASE), f"{case.id}: does not name the problem /{case.problem}/; {where}"
    assert re.search(case.fix, body, re.IGNORECASE), f"{case.id}: does not name the fix /{case.fix}/; {where}"
    for name in case.absent:
        assert not (d / name).exists(), f"{case.id}: left {name} behind"
    for name, data in before.items():
        assert (d / name).read_bytes() == data, f"{case.id}: changed the existing {name}"
    parts = [p.name for p in d.rglob("*.part")]
    assert not parts, f"{case.id}: left temporary files {parts}"


def test_the_table_covers_every_command_and_is_large_enough():
    assert len(CASES) >= 60
    assert len({c.id for c in CASES}) == len(CASES)
    for command in COMMANDS:
        assert any(c.argv[0] == command for c in CASES), f"no bad-input case for {command}"
        assert any(c.argv[0] == command and c.subprocess for c in CASES), f"no subprocess case for {command}"


@pytest.mark.parametrize("case", CASES, ids=[c.id for c in CASES])
def test_refused_in_process(case: Case, bad: Path, capsys, monkeypatch):
    argv = [_fill(a, bad) for a in case.argv]
    before = _snapshot(bad, case.unchanged)
    if case.stdin is not None:
        monkeypatch.setattr(sys, "stdin", io.TextIOWrapper(io.BytesIO(case.stdin)))
    capsys.readouterr()
    status = main(argv)
    captured = capsys.readouterr()
    check_refusal(case, bad, status, captured.out, captured.err, before)


SUBPROCESS_CASES = [c for c in CASES if c.subprocess]


@pytest.mark.parametrize("case", SUBPROCESS_CASES, ids=[c.id for c in SUBPROCESS_CASES])
def test_refused_as_a_real_process(case: Case, bad: Path):
    argv = [_fill(a, bad) for a in case.argv]
    before = _snapshot(bad, case.unchanged)
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""), "COLUMNS": "100"}
    env.pop("FRACTALSEQ_DEBUG", None)
    proc = subprocess.run(
        [sys.executable, "-m", "fractalseq.cli", *argv],
        input=case.stdin if case.stdin is not None else b"",
        capture_output=True,
        cwd=bad,
        env=env,
        timeout=120,
    )
    check_refusal(
        case, bad, proc.returncode, proc.stdout.decode("utf-8", "replace"), proc.stderr.decode("utf-8", "replace"), before
    )


def test_an_internal_failure_is_not_disguised_as_a_usage_error(monkeypatch, capsys):
    """The other side of the contract: a bug is exit 3 with a request to report it, still without a traceback."""
    import fractalseq.cli.cmd_words as cmd_words

    def broken(*args, **kwargs):
        raise ZeroDivisionError("simulated bug")

    monkeypatch.setattr(cmd_words, "reader", broken)
    monkeypatch.delenv("FRACTALSEQ_DEBUG", raising=False)
    status = main(["count", "-q", str(ROOT / "reference" / "lambda_virus.fa.gz")])
    err = capsys.readouterr().err
    assert status == 3
    assert "Traceback" not in err
    assert "ZeroDivisionError" in err and "report" in err

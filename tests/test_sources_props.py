"""Property tests: the streamed readers agree with slow, obviously correct parsers.

Each example builds a random file (records, wrapping widths, CRLF, lower case,
runs of N, IUPAC codes, unknown bytes, compression), reads it with a small
chunk size, and compares codes, segment starts, drop counts and records with
a line-by-line pure-Python parser written here from the format rules.
"""

from __future__ import annotations

import bz2
import gzip
import lzma
import os
import tempfile
from collections import Counter

import numpy as np
import pytest
import zstandard
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq.errors import InputError
from fractalseq.sources import open_source

SETTINGS = settings(max_examples=int(os.environ.get("FS_EXAMPLES", "60")), deadline=None, suppress_health_check=[HealthCheck.too_slow])

_AMBIG = set("NRYKMSWBDHVX-")
COMPRESS = {
    "none": lambda b: b,
    "gzip": lambda b: gzip.compress(b, mtime=0),
    "bzip2": bz2.compress,
    "xz": lzma.compress,
    "zstd": lambda b: zstandard.ZstdCompressor().compress(b),
}


# ------------------------------------------------------------ slow parsers
def slow_symbols(lines, policy, out, where):
    """Apply the DNA alphabet and the policy to sequence lines (one character at a time)."""
    codes, starts, dropped, state = out
    for line_no, line in lines:
        for ch in line:
            if ch in " \t\r":
                continue
            up = ch.upper()
            if up in "ACGT":
                if state["pending"]:
                    starts.append(len(codes))
                    state["pending"] = False
                codes.append("ACGT".index(up))
                continue
            reason = f"ambiguous {up!r}" if up in _AMBIG else f"unknown {ch!r}"
            if policy == "error":
                raise ValueError(f"bad symbol at line {line_no} in {where}")
            dropped[reason] += 1
            if policy == "break":
                state["pending"] = True


def slow_fasta(text: str, policy: str):
    """FASTA by the rules: '>' at a line start opens a record, ';' starts a comment; other lines are sequence."""
    codes, starts, dropped = [], [], Counter()
    state = {"pending": True}
    records = []
    for line_no, line in enumerate(text.split("\n"), start=1):
        if line.startswith(";"):
            continue
        if line.startswith(">"):
            if records:
                records[-1][2] = len(codes) - records[-1][1]
            words = line[1:].split()
            records.append([words[0] if words else f"record {len(records) + 1}", len(codes), 0])
            state["pending"] = True
            continue
        slow_symbols([(line_no, line)], policy, (codes, starts, dropped, state), "fasta")
    if records:
        records[-1][2] = len(codes) - records[-1][1]
    return codes, starts, dropped, [tuple(r) for r in records]


def slow_fastq(reads, policy):
    """FASTQ from the generating reads (name, sequence): each read a new segment."""
    codes, starts, dropped = [], [], Counter()
    state = {"pending": True}
    records = []
    for name, seq in reads:
        state["pending"] = True
        start = len(codes)
        slow_symbols([(0, seq)], policy, (codes, starts, dropped, state), "fastq")
        records.append((name, start, len(codes) - start))
    return codes, starts, dropped, records


# --------------------------------------------------------------- strategies
SEQ_CHARS = "ACGTACGTACGTacgtNNNNnRYkmJ*. "
names = st.text(alphabet="abcdefghijklmnopqrstuvwxyz0123456789_.|", min_size=1, max_size=12)
seqs = st.lists(
    st.one_of(st.text(alphabet=SEQ_CHARS, max_size=40), st.integers(1, 30).map(lambda k: "N" * k)),
    max_size=6,
).map("".join)


@st.composite
def fasta_files(draw):
    records = draw(st.lists(st.tuples(names, st.text(alphabet=" desc", max_size=8), seqs), min_size=1, max_size=5))
    width = draw(st.integers(1, 80))
    crlf = draw(st.booleans())
    blank = draw(st.booleans())
    lines = []
    for name, desc, seq in records:
        lines.append(f">{name}{(' ' + desc) if desc.strip() else ''}")
        body = [seq[i : i + width] for i in range(0, len(seq), width)]
        if body and draw(st.booleans()):
            body.insert(draw(st.integers(0, len(body))), ";comment ACGT")
        lines.extend(body)
        if blank:
            lines.append("")
    eol = "\r\n" if crlf else "\n"
    text = eol.join(lines) + (eol if draw(st.booleans()) else "")
    return text


@st.composite
def fastq_files(draw):
    reads = draw(st.lists(st.tuples(names, st.text(alphabet="ACGTacgtNNRJ", max_size=50)), min_size=1, max_size=6))
    width = draw(st.integers(1, 60))
    quals = st.text(alphabet="!#+@5?IJ~", min_size=0, max_size=200)
    lines = []
    for name, seq in reads:
        q = (draw(quals) * 3 + "I" * len(seq))[: len(seq)]
        lines.append(f"@{name}")
        lines.extend(seq[i : i + width] for i in range(0, len(seq), width)) if seq else lines.append("")
        lines.append("+")
        lines.extend(q[i : i + width] for i in range(0, len(q), width)) if q else lines.append("")
    return "\n".join(lines) + "\n", reads


def _read(path, **kw):
    stream = open_source(path, **kw)
    arr = stream.to_array()
    rep = stream.report
    return arr, rep


def _write(folder, data: bytes, kind: str) -> str:
    path = os.path.join(folder, f"input.{kind}")
    with open(path, "wb") as fh:
        fh.write(COMPRESS[kind](data))
    return path


def _compare(text_bytes, expected, policy, kind, chunk, fmt):
    """Read the file and compare with the slow parser's (codes, starts, dropped, records)."""
    codes, starts, dropped, records = expected
    with tempfile.TemporaryDirectory() as folder:
        path = _write(folder, text_bytes, kind)
        if not codes:
            with pytest.raises(InputError, match="holds no"):
                _read(path, fmt=fmt, policy=policy, chunk_size=chunk)
            return
        arr, rep = _read(path, fmt=fmt, policy=policy, chunk_size=chunk)
    assert arr.codes.tolist() == codes
    assert arr.starts.tolist() == starts
    assert rep.dropped == dict(dropped)
    assert rep.symbols == len(codes)
    assert rep.segments == len(starts)
    assert [(r.name, r.start, r.length) for r in rep.records] == records


@SETTINGS
@given(
    text=fasta_files(),
    policy=st.sampled_from(["break", "skip", "error"]),
    kind=st.sampled_from(list(COMPRESS)),
    chunk=st.sampled_from([1, 2, 3, 7, 64, 1 << 16]),
)
def test_fasta_matches_slow_parser(text, policy, kind, chunk):
    try:
        expected = slow_fasta(text, policy)
    except ValueError:
        with tempfile.TemporaryDirectory() as folder:
            path = _write(folder, text.encode(), kind)
            with pytest.raises(InputError, match="error policy"):
                _read(path, fmt="fasta", policy=policy, chunk_size=chunk)
        return
    _compare(text.encode(), expected, policy, kind, chunk, "fasta")


@SETTINGS
@given(
    data=fastq_files(),
    policy=st.sampled_from(["break", "skip", "error"]),
    kind=st.sampled_from(["none", "gzip", "zstd"]),
    chunk=st.sampled_from([1, 5, 13, 1 << 16]),
)
def test_fastq_matches_slow_parser(data, policy, kind, chunk):
    text, reads = data
    try:
        expected = slow_fastq(reads, policy)
    except ValueError:
        with tempfile.TemporaryDirectory() as folder:
            path = _write(folder, text.encode(), kind)
            with pytest.raises(InputError, match="error policy"):
                _read(path, fmt="fastq", policy=policy, chunk_size=chunk)
        return
    _compare(text.encode(), expected, policy, kind, chunk, "fastq")


@SETTINGS
@given(text=fasta_files(), chunk=st.sampled_from([1, 4, 9, 1 << 16]))
def test_chunks_never_exceed_the_chunk_size(text, chunk):
    expected = slow_fasta(text, "break")
    if not expected[0]:
        return
    with tempfile.TemporaryDirectory() as folder:
        path = _write(folder, text.encode(), "none")
        chunks = list(open_source(path, fmt="fasta", chunk_size=chunk).chunks())
    assert max(len(c.codes) for c in chunks) <= chunk
    assert all(c.codes.dtype == np.uint8 and c.starts.dtype == np.int64 for c in chunks)
    assert sum(len(c.codes) for c in chunks) == len(expected[0])


@SETTINGS
@given(
    text=st.text(
        alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters="\x00"), min_size=1, max_size=300
    ),
    chunk=st.sampled_from([1, 2, 5, 1 << 16]),
)
def test_text_characters_match_python_iteration(text, chunk):
    # expected: every character except CR is a symbol, learned by count then code point
    kept = [c for c in text if c != "\r"]
    if not text.strip(" \t\r\n\x0b\x0c") or not kept:
        return  # blank input is refused (tested elsewhere)
    with tempfile.TemporaryDirectory() as folder:
        path = _write(folder, text.encode("utf-8"), "none")
        try:
            arr, rep = _read(path, fmt="text", alphabet="learn", chunk_size=chunk)
        except InputError as exc:  # only binary-looking control-character soup may be refused
            assert "binary" in str(exc)
            return
    counts = Counter(kept)
    order = sorted(counts, key=lambda c: (-counts[c], ord(c)))
    assert list(arr.alphabet.symbols) == order
    assert arr.alphabet.word(arr.codes) == "".join(kept)
    assert arr.starts.tolist() == [0]


@SETTINGS
@given(
    toks=st.lists(st.text(alphabet="abcxyzé→1", min_size=1, max_size=6), min_size=1, max_size=80),
    seps=st.lists(st.sampled_from([" ", "  ", "\n", "\t", "\r\n"]), min_size=80, max_size=80),
    chunk=st.sampled_from([1, 3, 8, 1 << 16]),
)
def test_tokens_match_str_split(toks, seps, chunk):
    text = "".join(t + s for t, s in zip(toks, seps))
    with tempfile.TemporaryDirectory() as folder:
        path = _write(folder, text.encode("utf-8"), "gzip")
        arr, _ = _read(path, fmt="tokens", chunk_size=chunk)
    counts = Counter(toks)
    assert list(arr.alphabet.symbols) == sorted(counts, key=lambda t: (-counts[t], tuple(map(ord, t))))
    assert arr.alphabet.decode(arr.codes) == toks


@SETTINGS
@given(
    seq=st.text(alphabet="ACGTNJ", min_size=1, max_size=200),
    chunk=st.sampled_from([1, 3, 1 << 16]),
)
def test_tokens_with_explicit_symbols_follow_the_policy(seq, chunk):
    toks = list(seq)
    with tempfile.TemporaryDirectory() as folder:
        path = _write(folder, " ".join(toks).encode(), "none")
        if not any(t in "ACGT" for t in toks):
            with pytest.raises(InputError):
                _read(path, fmt="tokens", alphabet="symbols:A,C,G,T", chunk_size=chunk)
            return
        arr, rep = _read(path, fmt="tokens", alphabet="symbols:A,C,G,T", policy="break", chunk_size=chunk)
    # slow: unknown tokens end the segment
    codes, starts, pending = [], [], True
    for t in toks:
        if t in "ACGT":
            if pending:
                starts.append(len(codes))
                pending = False
            codes.append("ACGT".index(t))
        else:
            pending = True
    assert arr.codes.tolist() == codes
    assert arr.starts.tolist() == starts
    assert rep.dropped == {f"unknown {t!r}": n for t, n in Counter(t for t in toks if t not in "ACGT").items()}


def test_learned_fasta_alphabet_is_ordered_by_count_then_code_point(tmp_path):
    text = ">r\nAAAcccGGGGttNN\n>s\nxxxxx\n"
    path = tmp_path / "l.fa"
    path.write_text(text)
    arr, _ = _read(path, fmt="fasta", alphabet="learn")
    # counts: G4 x5 A3 c3 N2 t2 -> by count, ties by code point (uppercase before lowercase)
    assert arr.alphabet.symbols == ("x", "G", "A", "c", "N", "t")
    assert arr.alphabet.word(arr.codes) == "AAAcccGGGGttNNxxxxx"
    assert arr.starts.tolist() == [0, 14]

"""Byte ranges read by the workers themselves add up to the one-pass read, byte for byte.

An uncompressed FASTA or text file split for workers is cut into byte ranges; each worker
finds the reader's state at its first byte (inside a header, a comment or a sequence line;
whether a segment starts there), reads its range and ``N - 1`` lookahead symbols past it.
The reference is the serial one-pass ``count`` (its JSON: every depth's counts, the ladder,
the reader's report with records and drops), itself checked against the standard library in
``tests/test_words.py``; short words are also checked against a plain ``collections.Counter``
over each record cut at its ambiguous and unknown symbols (common practice: a word never
spans an ``N``), and the symbols against the stdlib ``gzip`` module's decompression of a
real genome.
"""

from __future__ import annotations

import collections
import gzip
import os
import struct
import subprocess
import zlib

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq.errors import InputError
from fractalseq.io._outputs import to_json
from fractalseq.jobs._files import count_files
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.sources import ranges as ranges_module
from fractalseq.sources.ranges import plan_ranges
from fractalseq.words._pieces import read_piece, source_pieces

from _inprocess import InProcess
from _paths import CLI, LAMBDA, ROOT


_SEQ = "ACGTACGTACGTacgtNnRYXx-*"
#: How far a cut may move to the next line start: 0 cuts exactly at the even points (inside headers, comments,
#: sequence lines, between a CR and its LF); the default moves every cut of a small file to a line start.
_SEARCH = st.sampled_from([0, 0, 1, 5, ranges_module.CUT_SEARCH])


@st.composite
def fasta_texts(draw) -> str:
    """FASTA layouts: line widths (wrapped or not), many records, N runs, lowercase, comments, CRLF, blank lines."""
    nl = draw(st.sampled_from(["\n", "\r\n"]))
    width = draw(st.sampled_from([1, 3, 7, 60, 80, 10_000]))
    out = []
    if draw(st.booleans()):
        out.append("\ufeff")  # a byte-order mark, which the reader skips
    for r in range(draw(st.integers(1, 12))):
        name = draw(st.text(alphabet="abcXYZ_0123 .|", min_size=0, max_size=12))
        if draw(st.integers(0, 6)) == 0:
            name = "long" + "h" * draw(st.integers(400, 700))  # longer than the 512 bytes kept for a name
        out.append(f">{name}{nl}")
        if draw(st.integers(0, 5)) == 0:
            out.append(f";comment {r}{nl}")
        seq = draw(st.text(alphabet=_SEQ, min_size=0, max_size=400))
        if seq and draw(st.booleans()):
            at = draw(st.integers(0, len(seq)))
            seq = seq[:at] + "N" * draw(st.integers(1, 50)) + seq[at:]  # an N run
        lines = [seq[i : i + width] for i in range(0, len(seq), width)]
        if lines and draw(st.integers(0, 4)) == 0:
            lines.insert(draw(st.integers(0, len(lines))), "")  # a blank line inside
        out.append(nl.join(lines) + (nl if lines else ""))
    text = "".join(out)
    if draw(st.booleans()):
        text = text.rstrip("\r\n")  # no line end at the end of the file
    return text


def _summary_json(path, depth, reader, engine=None, piece=None) -> str:
    return to_json(count_files([str(path)], depth, reader, engine=engine, piece=piece).to_dict())


def _naive(text: str, n: int, upper: bool = True) -> collections.Counter:
    """Words of length ``n`` inside each record, cut at every byte that is not A, C, G or T."""
    c: collections.Counter = collections.Counter()
    lines = text.lstrip("\ufeff").replace("\r", "").split("\n")
    records, cur = [], []
    for line in lines:
        if line.startswith(">"):
            records.append("".join(cur))
            cur = []
        elif not line.startswith(";"):
            cur.append(line.upper() if upper else line)
    records.append("".join(cur))
    for rec in records:
        for part in "".join(ch if ch in "ACGT" else " " for ch in rec).split():
            for i in range(len(part) - n + 1):
                c[part[i : i + n]] += 1
    return c


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(text=fasta_texts(), depth=st.integers(1, 7), policy=st.sampled_from(["break", "break", "skip"]), search=_SEARCH,
       data=st.data())
def test_ranges_of_fasta_layouts_give_the_serial_count_json(tmp_path, monkeypatch, text, depth, policy, search, data):
    monkeypatch.setattr(ranges_module, "CUT_SEARCH", search)
    path = tmp_path / "x.fa"
    path.write_bytes(text.encode())
    reader = ReaderOptions(fmt="fasta", policy=policy)
    try:
        serial = _summary_json(path, depth, reader)
    except InputError as exc:  # no symbol at all: the split read must say the same sentence
        with pytest.raises(InputError) as split_exc:
            _summary_json(path, depth, reader, InProcess(), piece=7)
        assert str(split_exc.value) == str(exc)
        return
    size = path.stat().st_size
    piece = data.draw(st.integers(1, size + 3), label="piece bytes")
    assert _summary_json(path, depth, reader, InProcess(), piece=piece) == serial  # counts, ladder, report: same bytes
    if policy == "skip":
        return  # the naive words below cut at every N: the break policy's rule
    split = count_files([str(path)], depth, reader, engine=InProcess(), piece=piece)
    n = min(depth, 3)
    w, c = split.counts.words(n)
    got = {"".join("ACGT"[(int(x) >> (2 * (n - 1 - i))) & 3] for i in range(n)): int(k) for x, k in zip(w, c) if k}
    assert got == dict(_naive(text, n))


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=fasta_texts(), policy=st.sampled_from(["break", "skip"]), depth=st.integers(1, 6), search=_SEARCH, data=st.data())
def test_byte_ranges_hold_the_symbols_and_segments_of_the_one_pass_read(tmp_path, monkeypatch, text, policy, depth, search, data):
    monkeypatch.setattr(ranges_module, "CUT_SEARCH", search)
    path = tmp_path / "y.fa"
    path.write_bytes(text.encode())
    reader = ReaderOptions(fmt="fasta", policy=policy)
    whole = reader.open(path)
    try:
        arr = whole.to_array()
    except InputError:
        return
    piece = data.draw(st.integers(1, path.stat().st_size + 3), label="piece bytes")
    codes, starts, parts, offset = [], [], [], 0
    for item in source_pieces(reader.open(path), piece, depth - 1):
        p, part = read_piece(item)
        assert p.offset == -1 and part is not None and part.symbols == p.core
        codes.append(p.codes[: p.core])
        starts.append(p.starts[p.starts < p.core] + offset)
        following = arr.codes[offset + p.core : offset + p.core + depth - 1]
        assert np.array_equal(p.codes[p.core :], following)  # the lookahead is the next symbols of the file
        offset += p.core
        parts.append(part)
    assert np.array_equal(np.concatenate(codes), arr.codes)
    assert np.array_equal(np.concatenate(starts), arr.starts)  # a segment starts at a range's first symbol exactly when it does


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=st.text(alphabet="ACGTNacgtn\n X", min_size=0, max_size=600), policy=st.sampled_from(["break", "skip"]),
       depth=st.integers(1, 6), data=st.data())
def test_ranges_of_plain_text_give_the_serial_count_json(tmp_path, body, policy, depth, data):
    path = tmp_path / "z.txt"
    path.write_bytes(body.encode())
    reader = ReaderOptions(fmt="text", policy=policy)
    try:
        serial = _summary_json(path, depth, reader)
    except InputError:
        return
    piece = data.draw(st.integers(1, len(body) + 3), label="piece bytes")
    assert _summary_json(path, depth, reader, InProcess(), piece=piece) == serial


def test_a_long_unwrapped_record_is_cut_inside_its_line_and_a_header_inside_a_range(tmp_path):
    rng = np.random.default_rng(5)
    seq = "".join(np.array(list("ACGTN"))[rng.choice(5, 300_000, p=[0.24, 0.24, 0.24, 0.24, 0.04])])
    path = tmp_path / "u.fa"
    path.write_text(">one unwrapped\n" + seq + "\n>" + "h" * 200_000 + " a long header\n" + seq[::-1] + "\n")
    reader = ReaderOptions()
    stream = reader.open(path)
    cuts = [r.start for r in plan_ranges(stream.byte_reader, 70_000, 9)]
    data = path.read_bytes()
    assert any(data[c - 1 : c] != b"\n" for c in cuts[1:])  # no line end near: cut inside the line
    header = data.index(b">h")
    assert any(header < c < data.index(b"\n", header) for c in cuts)  # a range begins inside the header line
    assert _summary_json(path, 10, reader, InProcess(), piece=70_000) == _summary_json(path, 10, reader)


def _bgzf(data: bytes, block: int) -> bytes:
    """BGZF by hand: gzip members of at most ``block`` input bytes, each with the ``BC`` extra field giving its
    size minus one, then the empty end-of-file block (SAM/BAM format specification, section 4.1; from memory)."""
    out = []
    for i in range(0, len(data), block):
        chunk = data[i : i + block]
        comp = zlib.compressobj(6, zlib.DEFLATED, -15)
        body = comp.compress(chunk) + comp.flush()
        size = 12 + 6 + len(body) + 8  # header with XLEN, the BC subfield, deflate data, CRC32 and ISIZE
        head = b"\x1f\x8b\x08\x04" + b"\x00" * 4 + b"\x00\xff" + struct.pack("<H", 6) + b"BC" + struct.pack("<HH", 2, size - 1)
        out.append(head + body + struct.pack("<II", zlib.crc32(chunk), len(chunk)))
    empty = zlib.compressobj(6, zlib.DEFLATED, -15)
    body = empty.compress(b"") + empty.flush()
    size = 12 + 6 + len(body) + 8
    out.append(b"\x1f\x8b\x08\x04" + b"\x00" * 4 + b"\x00\xff" + struct.pack("<H", 6) + b"BC" + struct.pack("<HH", 2, size - 1)
               + body + struct.pack("<II", 0, 0))
    return b"".join(out)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=fasta_texts(), block=st.sampled_from([5, 40, 300, 4096]), depth=st.integers(1, 6), search=_SEARCH, data=st.data())
def test_ranges_of_bgzf_fasta_give_the_serial_count_json(tmp_path, monkeypatch, text, block, depth, search, data):
    monkeypatch.setattr(ranges_module, "CUT_SEARCH", search)
    raw = text.encode()
    packed = _bgzf(raw, block)
    assert gzip.decompress(packed) == raw  # the standard library reads the blocks as one gzip file
    path = tmp_path / "x.fa.gz"
    path.write_bytes(packed)
    reader = ReaderOptions(fmt="fasta")
    try:
        serial = _summary_json(path, depth, reader)
    except InputError:
        return
    assert reader.open(path).byte_reader is not None  # read in ranges, not by the parent
    piece = data.draw(st.integers(1, len(raw) + 3), label="piece bytes")
    assert _summary_json(path, depth, reader, InProcess(), piece=piece) == serial


def test_a_damaged_bgzf_block_is_refused_in_one_sentence(tmp_path):
    rng = np.random.default_rng(3)
    raw = (">a\n" + "".join(np.array(list("ACGT"))[rng.integers(0, 4, 200_000)]) + "\n").encode()
    packed = bytearray(_bgzf(raw, 4096))
    packed[len(packed) - 28 - 300] ^= 0xFF  # inside the last data block (beyond the 64 KiB read to sniff the format)
    path = tmp_path / "d.fa.gz"
    path.write_bytes(bytes(packed))
    stream = ReaderOptions(fmt="fasta").open(path)
    assert stream.byte_reader is not None
    with pytest.raises(InputError, match="damaged gzip"):
        for item in source_pieces(stream, 300, 3):
            read_piece(item)


def test_compressed_input_the_error_policy_and_fastq_are_read_by_the_parent(tmp_path):
    plain = tmp_path / "a.fa"
    plain.write_text(">a\nACGTNACGT\n")
    gz = tmp_path / "a.fa.gz"
    gz.write_bytes(gzip.compress(plain.read_bytes()))
    fq = tmp_path / "a.fq"
    fq.write_text("@r\nACGT\n+\nIIII\n")
    assert ReaderOptions().open(plain).byte_reader is not None
    assert ReaderOptions().open(gz).byte_reader is None
    assert ReaderOptions(policy="error").open(plain).byte_reader is None
    assert ReaderOptions().open(fq).byte_reader is None
    assert _summary_json(gz, 3, ReaderOptions(), InProcess(), piece=4) == _summary_json(gz, 3, ReaderOptions())


def test_a_file_changed_after_it_was_opened_is_refused_in_one_sentence(tmp_path):
    path = tmp_path / "c.fa"
    path.write_text(">a\n" + "ACGT" * 100 + "\n")
    stream = ReaderOptions().open(path)
    ranges = plan_ranges(stream.byte_reader, 100, 3)
    with open(path, "a") as fh:
        fh.write("ACGT\n")
    with pytest.raises(InputError, match="changed while it was being read"):
        read_piece(ranges[0])


def test_lambda_genome_in_ranges_equals_the_serial_count(tmp_path):
    # Enterobacteria phage lambda (reference/PROVENANCE.md), decompressed by the standard library's gzip
    path = tmp_path / "lambda.fa"
    raw = gzip.decompress(LAMBDA.read_bytes())
    path.write_bytes(raw)
    text = raw.decode()
    letters = sum(ch in "ACGTacgt" for line in text.splitlines() if not line.startswith(">") for ch in line)
    for piece in (997, 4_096, 20_000):
        split = count_files([str(path)], 8, ReaderOptions(), engine=InProcess(), piece=piece)
        assert split.length == letters  # every A, C, G, T of the file, counted once
        assert split.length == 48_502  # the lambda genome NC_001416 is 48,502 bp long (from memory)
        assert to_json(split.to_dict()) == _summary_json(path, 8, ReaderOptions())
    w, c = split.counts.words(2)
    got = {"ACGT"[int(x) >> 2] + "ACGT"[int(x) & 3]: int(k) for x, k in zip(w, c) if k}
    assert got == dict(_naive(text, 2))
    packed = tmp_path / "lambda.fa.gz"
    packed.write_bytes(_bgzf(raw, 8_192))  # seven BGZF blocks of 8 KiB
    assert ReaderOptions().open(packed).byte_reader is not None
    bgzf_split = count_files([str(packed)], 8, ReaderOptions(), engine=InProcess(), piece=5_000)
    assert to_json(bgzf_split.to_dict()) == _summary_json(packed, 8, ReaderOptions())
    assert bgzf_split.counts.ladder() == split.counts.ladder()
    for depth in (8, 14):  # a dense and a sparse table: the saved counts are the same bytes as a serial count's
        serial = count_files([str(path)], depth, ReaderOptions()).counts.save(tmp_path / f"s{depth}.npz")
        split = count_files([str(path)], depth, ReaderOptions(), engine=InProcess(), piece=9_000).counts.save(tmp_path / f"p{depth}.npz")
        assert split.read_bytes() == serial.read_bytes()


@pytest.mark.slow
def test_count_command_with_two_workers_on_an_unwrapped_genome_prints_the_serial_bytes(tmp_path):
    rng = np.random.default_rng(11)
    seq = "".join(np.array(list("ACGTacgtN"))[rng.integers(0, 9, 400_001)])
    path = tmp_path / "g.fa"
    path.write_text(">chr1 invented\n" + seq + "\n>chr2\n" + "\n".join(seq[i : i + 61] for i in range(0, 90_000, 61)) + "\n")
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    base = [*CLI, "count", str(path), "--depth", "11", "--json", "--top", "4"]
    serial = subprocess.run(base, capture_output=True, text=True, timeout=300, env=env)
    split = subprocess.run([*base, "--workers", "2"], capture_output=True, text=True, timeout=300, env=env)
    assert serial.returncode == split.returncode == 0, split.stderr
    assert split.stdout == serial.stdout

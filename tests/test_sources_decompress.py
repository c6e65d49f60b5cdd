"""Transparent decompression: recognised by content, checked for truncation and damage.

The reference decompressors are the standard library's gzip, bz2 and lzma
modules and the zstandard package's one-shot decompress.
"""

from __future__ import annotations

import bz2
import gzip
import io
import lzma
import random
import re
import sys

import numpy as np
import pytest
import zstandard

from fractalseq.errors import InputError
from fractalseq.sources import open_source
from fractalseq.sources.rawio import ByteSource, locate

from _paths import REFERENCE as REF
CHR17 = REF / "chr17.hg19.part.fa"

COMPRESSORS = {
    "gzip": lambda b: gzip.compress(b, mtime=0),
    "bzip2": bz2.compress,
    "xz": lzma.compress,
    "zstd": lambda b: zstandard.ZstdCompressor(write_checksum=True).compress(b),
}
DECOMPRESSORS = {
    "gzip": gzip.decompress,
    "bzip2": bz2.decompress,
    "xz": lzma.decompress,
    "zstd": lambda b: zstandard.ZstdDecompressor().decompress(b, max_output_size=1 << 26),
}


def payload() -> bytes:
    """The chr17 fragment wrapped at 60 columns with a second record: ~41 kB of FASTA."""
    text = CHR17.read_text()
    seq = "".join(text.splitlines()[1:])
    wrapped = "\n".join(seq[i : i + 60] for i in range(0, len(seq), 60))
    return f">chr17 part\n{wrapped}\n>tail\n{seq[:777]}\n".encode()


def all_bytes(path, block=997) -> bytes:
    with ByteSource(locate(path)) as src:
        return b"".join(src.blocks(block))


@pytest.fixture(scope="module")
def plain_codes(tmp_path_factory):
    path = tmp_path_factory.mktemp("plain") / "p.fa"
    path.write_bytes(payload())
    arr = open_source(path).to_array()
    return arr


@pytest.mark.parametrize("kind", list(COMPRESSORS))
def test_each_compression_reads_like_the_plain_file(kind, tmp_path, plain_codes):
    data = COMPRESSORS[kind](payload())
    path = tmp_path / "named_without_extension"  # detection is by content, never by name
    path.write_bytes(data)
    assert locate(path).compression == kind
    # the decompressed bytes equal the reference decompressor's output
    assert all_bytes(path) == DECOMPRESSORS[kind](data) == payload()
    stream = open_source(path, chunk_size=4093)
    arr = stream.to_array()
    assert np.array_equal(arr.codes, plain_codes.codes)
    assert np.array_equal(arr.starts, plain_codes.starts)
    assert stream.report.extra["compression"] == kind
    assert [r.length for r in stream.report.records] == [40000, 777]


@pytest.mark.parametrize("kind", list(COMPRESSORS))
def test_concatenated_members_are_all_read(kind, tmp_path):
    a, b = b">a\nACGT\n", b">b\nGGCC\n"
    path = tmp_path / f"two.{kind}"
    path.write_bytes(COMPRESSORS[kind](a) + COMPRESSORS[kind](b))
    assert all_bytes(path, block=3) == DECOMPRESSORS[kind](COMPRESSORS[kind](a)) + b
    arr = open_source(path).to_array()
    assert arr.alphabet.word(arr.codes) == "ACGTGGCC"
    assert arr.starts.tolist() == [0, 4]


def test_a_gz_name_on_plain_content_is_read_plain(tmp_path):
    path = tmp_path / "liar.fa.gz"
    path.write_bytes(b">x\nACGT\n")
    assert locate(path).compression is None
    assert open_source(path).to_array().codes.tolist() == [0, 1, 2, 3]


@pytest.mark.parametrize("kind", list(COMPRESSORS))
@pytest.mark.parametrize("keep", [0.999, 0.5, 0.1])
def test_truncated_archives_are_refused(kind, keep, tmp_path):
    data = COMPRESSORS[kind](payload())
    cut = max(12, int(len(data) * keep))
    assert cut < len(data)
    path = tmp_path / "cut"
    path.write_bytes(data[:cut])
    with pytest.raises(InputError) as info:
        open_source(path).to_array()
    msg = str(info.value)
    assert f"is a truncated or damaged {kind} file" in msg
    assert msg.endswith(".") and "\n" not in msg
    assert re.search(r"[.;]\s+[A-Z]", msg[:-1]) is None


@pytest.mark.parametrize("kind", list(COMPRESSORS))
def test_damaged_archives_are_refused(kind, tmp_path):
    data = bytearray(COMPRESSORS[kind](payload()))
    # the standard decompressors agree that flipping these bytes damages the archive
    rng = random.Random(3)
    for pos in rng.sample(range(len(data) // 4, len(data) - 16), 3):
        data[pos] ^= 0x5A
    with pytest.raises(Exception):
        DECOMPRESSORS[kind](bytes(data))
    path = tmp_path / "damaged"
    path.write_bytes(bytes(data))
    with pytest.raises(InputError, match=f"truncated or damaged {kind} file"):
        open_source(path).to_array()


def test_zstd_reader_matches_the_reference_with_tiny_reads(tmp_path):
    rng = np.random.default_rng(5)
    raw = rng.integers(0, 4, 300_000).astype(np.uint8)
    data = np.array(list(b"ACGT"), dtype=np.uint8)[raw].tobytes()
    comp = zstandard.ZstdCompressor(level=3).compress(data)
    path = tmp_path / "seq.zst"
    path.write_bytes(comp)
    assert all_bytes(path, block=7) == data
    assert all_bytes(path, block=65536) == zstandard.ZstdDecompressor().decompress(comp)


def test_compressed_standard_input(monkeypatch):
    class FakeStdin:
        buffer = io.BytesIO(lzma.compress(b"@r\nACGT\n+\nIIII\n"))

    monkeypatch.setattr(sys, "stdin", FakeStdin())
    stream = open_source("-")
    arr = stream.to_array()
    assert arr.codes.tolist() == [0, 1, 2, 3]
    assert stream.report.extra["compression"] == "xz" and stream.report.extra["format"] == "fastq"


def test_truncated_stdin_gzip(monkeypatch):
    class FakeStdin:
        buffer = io.BytesIO(gzip.compress(payload())[:-10])

    monkeypatch.setattr(sys, "stdin", FakeStdin())
    with pytest.raises(InputError, match="^- is a truncated or damaged gzip file"):
        open_source("-").to_array()

"""Input readers: reference genomes, formats, standard input and bad inputs.

Genome facts come from REFERENCE-CHECKS.md section G; files and their
provenance are in reference/PROVENANCE.md.
"""

from __future__ import annotations

import gzip
import hashlib
import io
import random
import re
import sys
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

from fractalseq.alphabet import Alphabet, protein
from fractalseq.errors import InputError, ParameterError
from fractalseq.sources import detect_format, open_source

from _paths import LAMBDA
from _paths import REFERENCE as REF
CHR17 = REF / "chr17.hg19.part.fa"


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def one_sentence(message: str) -> None:
    """A user-facing error: one line, one sentence, ending with a full stop."""
    assert "\n" not in message
    assert message.endswith(".")
    assert re.search(r"[.;!?]\s+[A-Z]", message[:-1]) is None, message


def raises_one_sentence(exc_type, func, *args, match: str | None = None, **kwargs) -> str:
    with pytest.raises(exc_type) as info:
        out = func(*args, **kwargs)
        if hasattr(out, "to_array"):
            out.to_array()
    message = str(info.value)
    one_sentence(message)
    if match is not None:
        assert re.search(match, message), message
    return message


def read(path, **kw):
    stream = open_source(path, **kw)
    return stream.to_array(), stream.report


# ---------------------------------------------------------------- genomes
def test_lambda_genome_length_and_composition():
    # The committed file must be the one described in reference/PROVENANCE.md.
    assert sha256(LAMBDA) == "08fe207fcb4bbe47e80cc7469e68d1f1d8d497a836fe1c09f5a9734d2e4cd9e0"
    arr, rep = read(LAMBDA)
    # Sanger et al. 1982, J. Mol. Biol. 162:729-773: "48,502 base-pairs" (REFERENCE-CHECKS G1, confirmed).
    assert len(arr) == 48502
    # Composition A 12334, C 11362, G 12820, T 11986 (REFERENCE-CHECKS G1, computed pin).
    assert np.bincount(arr.codes, minlength=4).tolist() == [12334, 11362, 12820, 11986]
    # Independent count with the standard library's gzip and str.count.
    text = gzip.decompress(LAMBDA.read_bytes()).decode("ascii")
    seq = "".join(line for line in text.splitlines() if not line.startswith(">")).upper()
    assert [seq.count(b) for b in "ACGT"] == [12334, 11362, 12820, 11986]
    assert arr.alphabet.word(arr.codes[:20]) == seq[:20]
    assert rep.records[0].name == "gi|9626243|ref|NC_001416.1|"
    assert (rep.records[0].start, rep.records[0].length) == (0, 48502)
    assert rep.segments == 1 and rep.dropped == {}
    assert rep.extra["compression"] == "gzip" and rep.extra["format"] == "fasta"


def test_chr17_fragment_composition_and_soft_masking():
    assert sha256(CHR17) == "3627f99f5cd6fa6a9e1a4e0494e64a9443871e0167fc6767b23cde73ca4030c1"
    arr, rep = read(CHR17)
    # REFERENCE-CHECKS G3 (computed pin): A 8934, C 11043, G 11005, T 9018 over 40,000 bp.
    assert np.bincount(arr.codes, minlength=4).tolist() == [8934, 11043, 11005, 9018]
    assert rep.records[0].name == "chr17" and rep.records[0].length == 40000
    # A case-sensitive learned alphabet separates soft-masked letters: 17,395 lower-case (G3, computed pin).
    learned, _ = read(CHR17, alphabet="learn")
    counts = Counter(dict(zip(learned.alphabet.symbols, np.bincount(learned.codes).tolist())))
    assert sum(n for s, n in counts.items() if s.islower()) == 17395
    assert sorted(learned.alphabet.symbols) == sorted("ACGTacgt")
    # Learned order: decreasing count, ties by code point.
    ordered = [counts[s] for s in learned.alphabet.symbols]
    assert ordered == sorted(ordered, reverse=True)


def test_streams_can_be_read_twice_with_the_same_result():
    stream = open_source(LAMBDA, chunk_size=5000)
    first = [c.codes.copy() for c in stream.chunks()]
    second = [c.codes for c in stream.chunks()]
    assert len(first) == len(second) > 1
    assert all(np.array_equal(a, b) for a, b in zip(first, second))
    assert all(len(c) <= 5000 for c in first)


# ------------------------------------------------------------------ formats
def test_fasta_records_segments_and_policies(tmp_path):
    path = tmp_path / "x.fa"
    path.write_bytes(b">one first\r\nACGTNNNNac\r\ngtRYA\r\n>two\r\n\r\n>three\nJJggA\n")
    stream = open_source(path, name="sample x")
    arr, rep = stream.to_array(), stream.report
    assert stream.name == arr.name == "sample x"
    assert arr.alphabet.word(arr.codes) == "ACGTACGTAGGA"
    # one break for the N run, one for the R Y pair, one per record; the empty record adds none
    assert arr.starts.tolist() == [0, 4, 8, 9]
    assert rep.dropped == {"ambiguous 'N'": 4, "ambiguous 'R'": 1, "ambiguous 'Y'": 1, "unknown 'J'": 2}
    assert [(r.name, r.start, r.length) for r in rep.records] == [("one", 0, 9), ("two", 9, 0), ("three", 9, 3)]
    skip, srep = read(path, policy="skip")
    assert skip.alphabet.word(skip.codes) == "ACGTACGTAGGA"
    assert skip.starts.tolist() == [0, 9]  # records still start segments
    assert srep.dropped == rep.dropped
    msg = raises_one_sentence(InputError, open_source, path, policy="error", match="line 2")
    assert "'N'" in msg and "record one" in msg


def test_fasta_error_policy_names_unknown_symbol_and_record(tmp_path):
    path = tmp_path / "u.fa"
    path.write_text(">a\nACGT\n>b\nAC\nGJT\n")
    msg = raises_one_sentence(InputError, open_source, path, policy="error")
    assert "unknown symbol 'J'" in msg and "line 5" in msg and "record b" in msg


def test_fastq_reads_are_records_and_quality_is_ignored(tmp_path):
    path = tmp_path / "r.fq"
    # the second read's quality line starts with '@' and the third with '+'
    path.write_text("@r1 x\nACGT\n+\nIIII\n@r2\nGGNA\n+r2\n@@@@\n@r3\nTT\n+\n+I\n")
    arr, rep = read(path)
    assert detect_format(path) == "fastq"
    assert arr.alphabet.word(arr.codes) == "ACGTGGATT"
    assert arr.starts.tolist() == [0, 4, 6, 7]
    assert [(r.name, r.start, r.length) for r in rep.records] == [("r1", 0, 4), ("r2", 4, 3), ("r3", 7, 2)]
    assert rep.extra["reads_total"] == 3


def test_fastq_damage_is_reported(tmp_path):
    short = tmp_path / "short.fq"
    short.write_text("@r1\nACGT\n+\nII")
    raises_one_sentence(InputError, open_source, short, match="truncated")
    long = tmp_path / "long.fq"
    long.write_text("@r1\nACGT\n+\nIIIII\n")
    raises_one_sentence(InputError, open_source, long, match="longer than its sequence")
    stray = tmp_path / "stray.fq"
    stray.write_text("@r1\nACGT\n+\nIIII\nACGT\n")
    raises_one_sentence(InputError, open_source, stray, fmt="fastq", match="line 5")


def test_protein_and_rna_alphabets(tmp_path):
    path = tmp_path / "p.fa"
    path.write_text(">p1\nMKV*XLLB\nmkw\n")
    arr, rep = read(path, alphabet="protein")
    assert arr.alphabet.word(arr.codes) == "MKVLLMKW"
    assert rep.dropped == {"ambiguous '*'": 1, "ambiguous 'X'": 1, "ambiguous 'B'": 1}
    assert arr.starts.tolist() == [0, 3, 5]
    assert arr.alphabet.same_symbols(protein())
    rna = tmp_path / "r.txt"
    rna.write_text("ACGU\nacgu\nT\n")
    arr, rep = read(rna, alphabet="rna")
    assert arr.alphabet.word(arr.codes) == "ACGUACGU" and rep.dropped == {"unknown 'T'": 1}


def test_plain_sequence_text_and_explicit_symbols(tmp_path):
    path = tmp_path / "s.txt"
    path.write_text("ACGT ACGT\nTTNA\n")
    assert detect_format(path) == "text"
    arr, _ = read(path)
    assert arr.alphabet.word(arr.codes) == "ACGTACGTTTA" and arr.starts.tolist() == [0, 10]
    arr, rep = read(path, alphabet="symbols:AT")
    assert arr.alphabet.word(arr.codes) == "ATATTTA"
    assert rep.dropped == {"unknown 'C'": 2, "unknown 'G'": 2, "unknown 'N'": 1}
    custom = Alphabet("two", ("A", "T"))
    assert read(path, alphabet=custom)[0].codes.tolist() == arr.codes.tolist()


def test_text_characters_with_learned_alphabet_keep_spaces_and_line_ends(tmp_path):
    path = tmp_path / "t.txt"
    path.write_bytes("ab ba\r\nçé\n".encode("utf-8"))
    arr, _ = read(path, fmt="text", alphabet="learn")
    assert arr.alphabet.word(arr.codes) == "ab ba\nçé\n"
    assert set(arr.alphabet.symbols) == set("ab \nçé")
    # counts: line end, a, b twice; space, ç, é once; ties by code point
    assert arr.alphabet.symbols == ("\n", "a", "b", " ", "ç", "é")


def test_bytes_alphabet_reads_binary_data(tmp_path):
    data = random.Random(7).randbytes(5000)
    path = tmp_path / "blob.bin"
    path.write_bytes(data)
    arr, _ = read(path, fmt="text", alphabet="bytes")
    assert arr.codes.tolist() == list(data)
    # the same bytes are refused as text when an ordinary alphabet is asked for
    raises_one_sentence(InputError, open_source, path, alphabet="learn", match="binary")


def test_tokens_alphabet_larger_than_a_byte(tmp_path):
    words = [f"w{i}" for i in range(300)]
    path = tmp_path / "w.txt"
    path.write_text(" ".join(words + words[:10]) + "\n")
    arr, _ = read(path, fmt="tokens")
    assert arr.alphabet.size == 300 and arr.codes.dtype == np.uint32
    assert arr.alphabet.decode(arr.codes) == words + words[:10]
    assert arr.alphabet.symbols[:10] == tuple(sorted(words[:10]))  # the repeated ones come first


def test_standard_input_is_read_once_and_served_twice(monkeypatch):
    payload = gzip.compress(b">s\nACGTTT\n>t\nGG\n")

    class FakeStdin:
        buffer = io.BytesIO(payload)

    monkeypatch.setattr(sys, "stdin", FakeStdin())
    stream = open_source("-", alphabet="learn")  # learning needs a first pass over the data
    assert stream.name == "-"
    arr = stream.to_array()
    assert arr.alphabet.word(arr.codes) == "ACGTTTGG" and arr.starts.tolist() == [0, 6]
    assert stream.to_array().codes.tolist() == arr.codes.tolist()
    assert "read from standard input (held in memory)" in stream.report.notes


def test_byte_order_mark_is_ignored(tmp_path):
    path = tmp_path / "bom.fa"
    path.write_bytes(b"\xef\xbb\xbf>x\nACGT\n")
    assert detect_format(path) == "fasta"
    assert read(path)[0].codes.tolist() == [0, 1, 2, 3]


def test_auto_detection_rules(tmp_path):
    log = tmp_path / "a.log"
    log.write_text("2024-01-01T00:00:00Z start id=3\n2024-01-01T00:00:05Z stop id=4\n")
    csv = tmp_path / "a.csv"
    csv.write_text("t,v\n1,0.5\n2,0.25\n")
    words = tmp_path / "a.txt"
    words.write_text("just some words here\nand more words\n")
    assert detect_format(log, "learn") == "log"
    assert detect_format(csv, "learn") == "numeric"
    assert detect_format(words, "learn") == "text"
    # a log whose lines start with '@' (TAI64N stamps) is not FASTQ
    tai = tmp_path / "tai.log"
    tai.write_text("@400000004c91b044077a9e94 login: user=<a@b.c>\n@400000004c91b044077a9e95 logout\n+done\n")
    assert detect_format(tai, "learn") == "log"
    # with the default dna alphabet a log is read as a log (its templates), not as garbage sequence
    assert detect_format(log) == "log"
    assert open_source(log).alphabet.name != "dna"
    # ... while a dna Alphabet given as an object (a model's) does not follow: the log is refused
    from fractalseq.alphabet import resolve

    raises_one_sentence(InputError, open_source, log, alphabet=resolve("dna"), match="does not look like dna")


# --------------------------------------------------------------- bad inputs
def test_empty_and_blank_files(tmp_path):
    empty = tmp_path / "empty.fa"
    empty.write_bytes(b"")
    raises_one_sentence(InputError, open_source, empty, match="is empty")
    gz_empty = tmp_path / "empty.gz"
    gz_empty.write_bytes(gzip.compress(b""))
    raises_one_sentence(InputError, open_source, gz_empty, match="is empty")
    blank = tmp_path / "blank.txt"
    blank.write_text("\n  \n\t\n")
    raises_one_sentence(InputError, open_source, blank, match="only blank lines")


def test_no_symbols_at_all(tmp_path):
    path = tmp_path / "n.fa"
    path.write_text(">a\n" + "N" * 500 + "\n>b\nnnnn\n")
    msg = raises_one_sentence(InputError, open_source, path, match="holds no dna symbols")
    assert "ambiguous 'N' x504" in msg
    headers = tmp_path / "h.fa"
    headers.write_text(">a\n>b\n")
    raises_one_sentence(InputError, open_source, headers, match="holds no symbols")


def test_binary_garbage(tmp_path):
    path = tmp_path / "garbage.fa"
    path.write_bytes(random.Random(1).randbytes(3000))
    raises_one_sentence(InputError, open_source, path, match="binary")
    raises_one_sentence(InputError, open_source, path, fmt="fasta", match="binary")
    nul = tmp_path / "nul.txt"
    nul.write_bytes(b"ACGT\x00ACGT\n")
    raises_one_sentence(InputError, open_source, nul, match="binary")


def test_declared_format_must_match(tmp_path):
    fq = tmp_path / "reads.fa"
    fq.write_text("@r1\nACGT\n+\nIIII\n")
    raises_one_sentence(InputError, open_source, fq, fmt="fasta", match="is FASTQ")
    plain = tmp_path / "plain.fa"
    plain.write_text("ACGT\n")
    raises_one_sentence(InputError, open_source, plain, fmt="fasta", match="not FASTA")
    fa = tmp_path / "seq.fq"
    fa.write_text(">a\nACGT\n")
    raises_one_sentence(InputError, open_source, fa, fmt="fastq", match="is FASTA")


def test_paths_that_cannot_be_read(tmp_path):
    raises_one_sentence(InputError, open_source, tmp_path, match="is a folder")
    raises_one_sentence(InputError, open_source, tmp_path / "missing.fa", match="does not exist")
    zipped = tmp_path / "a.zip"
    zipped.write_bytes(b"PK\x03\x04" + b"\x00" * 40)
    raises_one_sentence(InputError, open_source, zipped, match="zip archive")


def test_non_utf8_text_is_refused_with_the_fix(tmp_path):
    path = tmp_path / "latin1.txt"
    path.write_bytes("caf\u00e9 cr\u00e8me\n".encode("latin-1"))
    raises_one_sentence(InputError, open_source, path, fmt="text", alphabet="learn", match="not valid UTF-8")
    raises_one_sentence(InputError, open_source, path, fmt="tokens", match="line 1 is not valid UTF-8")


def test_impossible_parameters(tmp_path):
    path = tmp_path / "x.fa"
    path.write_text(">a\nACGT\n")
    raises_one_sentence(ParameterError, open_source, path, fmt="genbank", match="not known")
    raises_one_sentence(ParameterError, open_source, path, policy="ignore", match="break, skip, error")
    raises_one_sentence(ParameterError, open_source, path, chunk_size=0, match="chunk size")
    raises_one_sentence(ParameterError, open_source, path, alphabet="klingon", match="not known")
    raises_one_sentence(ParameterError, open_source, path, alphabet=Alphabet("w", ("AC", "GT")), match="longer than one")

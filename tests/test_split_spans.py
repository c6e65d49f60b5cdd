"""Spans of a file read by the workers themselves are the very pieces the parent would ship.

Fitted ``score`` and ``scan`` cut a source at fixed global symbol positions.  When the
workers read the file themselves, an offset pass counts the symbols of every byte range
(with a mark every ``MARK_BLOCK`` bytes) and the parent turns the counts into spans; a
worker reads its span from the last mark before it.  The reference is the one-pass read
of the whole file cut by ``iter_pieces`` (the shipped route, itself checked in
``tests/test_engine.py`` and ``tests/test_count_ranges.py``): every piece must have the
same codes, segment starts, core, offset, final flag and index, over hypothesis-drawn FASTA
layouts (wrapped and unwrapped lines, CRLF, comments, N runs, long headers, a byte-order
mark), plain text, BGZF copies of them (checked against the standard library's ``gzip``), piece sizes,
overlaps, range sizes and mark spacings.  The read report of the offset pass must equal
the one-pass read's.  Data: invented FASTA (a scenario of our own) and the lambda phage
genome (``reference/PROVENANCE.md``).
"""

from __future__ import annotations

import gzip
import pickle

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq.errors import InputError
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.runner import Engine
from fractalseq.sources import ranges as ranges_module
from fractalseq.words import _piece_source as PS
from fractalseq.words._pieces import iter_pieces

from _paths import LAMBDA
from test_count_ranges import _SEARCH, _bgzf, fasta_texts


class _Now:
    def __init__(self, value):
        self._value = value

    def result(self):
        return self._value


class Pickling(Engine):
    """Runs each task in this process through pickle (as a worker gets it), counting the bytes sent."""

    name = "pickling"

    def __init__(self, workers: int = 2) -> None:
        self.workers = workers
        self.sent = 0

    def submit(self, func, item):
        data = pickle.dumps(item)
        self.sent += len(data)
        return _Now(pickle.loads(pickle.dumps(func(pickle.loads(data)))))

    def wait_first(self, futures):
        return futures


def _same_pieces(path, reader: ReaderOptions, chunk: int, overlap: int, workers: int) -> int:
    """Check the spans against the shipped pieces; return how many pieces there were."""
    try:
        arr = reader.open(path).to_array()
        shipped = list(iter_pieces(arr, chunk, overlap))
    except InputError as exc:  # no symbol: the offset pass says the one-pass reader's sentence
        with pytest.raises(InputError) as split_exc:
            stream = reader.open(path)  # (an empty file is refused on opening)
            PS.worker_pieces(stream, chunk, overlap, Pickling(workers), stream.byte_reader)
        assert str(split_exc.value) == str(exc)
        return 0
    stream = reader.open(path)
    assert stream.byte_reader is not None
    eng = Pickling(workers)
    spans = list(PS.worker_pieces(stream, chunk, overlap, eng, stream.byte_reader))
    assert all(isinstance(s, PS.SymbolSpan) for s in spans)
    got = [PS.span_piece(pickle.loads(pickle.dumps(s))) for s in spans]
    assert len(got) == len(shipped)
    for a, b in zip(got, shipped):
        assert a.codes.dtype == b.codes.dtype and np.array_equal(a.codes, b.codes)
        assert np.array_equal(a.starts, b.starts)
        assert (a.core, a.offset, a.final, a.index) == (b.core, b.offset, b.final, b.index)
    assert stream.report.to_dict() == arr.report.to_dict()  # records, drops, notes: the one-pass read's report
    return len(got)


@settings(max_examples=80, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(text=fasta_texts(), policy=st.sampled_from(["break", "break", "skip"]), search=_SEARCH,
       mark=st.sampled_from([1, 2, 7, 64, 1 << 20]), workers=st.integers(1, 5), data=st.data())
def test_spans_of_fasta_layouts_are_the_shipped_pieces(tmp_path, monkeypatch, text, policy, search, mark, workers, data):
    monkeypatch.setattr(ranges_module, "CUT_SEARCH", search)
    monkeypatch.setattr(PS, "MARK_BLOCK", mark)
    monkeypatch.setattr(PS, "RANGE_MIN", 1)  # ranges of size / workers bytes, however small the file
    path = tmp_path / "x.fa"
    path.write_bytes(text.encode())
    chunk = data.draw(st.integers(1, len(text) + 3), label="piece symbols")
    overlap = data.draw(st.integers(0, 40), label="overlap")
    _same_pieces(path, ReaderOptions(fmt="fasta", policy=policy), chunk, overlap, workers)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=fasta_texts(), block=st.sampled_from([5, 40, 300]), mark=st.sampled_from([3, 50, 1 << 20]), data=st.data())
def test_spans_of_bgzf_fasta_are_the_shipped_pieces(tmp_path, monkeypatch, text, block, mark, data):
    monkeypatch.setattr(PS, "MARK_BLOCK", mark)
    monkeypatch.setattr(PS, "RANGE_MIN", 1)
    raw = text.encode()
    packed = _bgzf(raw, block)
    assert gzip.decompress(packed) == raw  # the standard library reads the blocks as one gzip file
    path = tmp_path / "x.fa.gz"
    path.write_bytes(packed)
    chunk = data.draw(st.integers(1, len(raw) + 3), label="piece symbols")
    _same_pieces(path, ReaderOptions(fmt="fasta"), chunk, data.draw(st.integers(0, 12), label="overlap"), 3)


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(body=st.text(alphabet="ACGTNacgtn\n X", min_size=0, max_size=600), policy=st.sampled_from(["break", "skip"]),
       mark=st.sampled_from([1, 5, 1 << 20]), data=st.data())
def test_spans_of_plain_text_are_the_shipped_pieces(tmp_path, monkeypatch, body, policy, mark, data):
    monkeypatch.setattr(PS, "MARK_BLOCK", mark)
    monkeypatch.setattr(PS, "RANGE_MIN", 1)
    path = tmp_path / "z.txt"
    path.write_bytes(body.encode())
    chunk = data.draw(st.integers(1, len(body) + 3), label="piece symbols")
    _same_pieces(path, ReaderOptions(fmt="text", policy=policy), chunk, data.draw(st.integers(0, 9), label="overlap"), 2)


def test_lambda_spans_are_the_shipped_pieces_and_carry_no_symbol(tmp_path, monkeypatch):
    # Enterobacteria phage lambda (reference/PROVENANCE.md), decompressed by the standard library's gzip
    path = tmp_path / "lambda.fa"
    path.write_bytes(gzip.decompress(LAMBDA.read_bytes()))
    monkeypatch.setattr(PS, "MARK_BLOCK", 4_096)
    monkeypatch.setattr(PS, "RANGE_MIN", 1)
    assert _same_pieces(path, ReaderOptions(), 4_099, 12, 2) == 12  # 48,502 bp in pieces of 4,099 (from memory: NC_001416)
    stream = ReaderOptions().open(path)
    eng = Pickling(2)
    spans = list(PS.worker_pieces(stream, 4_099, 12, eng, stream.byte_reader))
    # what the parent sends per span is a description, not the symbols: far below the 4,111 symbols it names
    assert max(len(pickle.dumps(s)) for s in spans) < 4_111 // 4
    assert sum(s.length for s in spans) == 48_502 + 12 * (len(spans) - 1)


def test_a_file_changed_after_the_offset_pass_is_refused_in_one_sentence(tmp_path):
    path = tmp_path / "c.fa"
    path.write_text(">a\n" + "ACGT" * 100 + "\n")
    stream = ReaderOptions().open(path)
    spans = list(PS.worker_pieces(stream, 50, 3, Pickling(2), stream.byte_reader))
    path.write_text(">a\n" + "ACGT" * 10 + "\n")
    with pytest.raises(InputError, match="changed while it was being read"):
        PS.span_piece(spans[-1])

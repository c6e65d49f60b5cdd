"""``scan`` with its windows counted in pieces of whole windows on worker processes: the serial bytes.

Checks: the per-window word counts of any piece size against a plain
``collections.Counter`` of each window's words (Python standard library; common
practice: a word lies inside its window and never spans a segment break), the
running ``sum c ln c`` against ``math.fsum`` over the Counter, and whole scan documents
of a processes engine against the serial run with the same piece size, also when the
workers read their pieces and the predictor's whole stream from the file themselves (every
FASTA layout of ``tests/test_count_ranges.py``: the serial and the shipped bytes).  Data:
invented random streams and FASTA (a scenario of our own) and the dpkg log excerpt
(``reference/logs/README.md``).
"""

from __future__ import annotations

import collections
import gzip
import math
import os
import subprocess

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.compare._scan_pieces import split_window_counts
from fractalseq.errors import InputError, ParameterError
from fractalseq.jobs._engines import ProcessEngine
from fractalseq.jobs._files import scan_file
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.stream import from_codes

from _paths import CLI, LAMBDA, LOGS, ROOT
from test_count_ranges import fasta_texts
from test_split_spans import Pickling


@pytest.fixture(scope="module")
def engine():
    with ProcessEngine(2) as eng:
        yield eng


def _naive(codes, starts, depth, window, step):
    """Per window: words, distinct words, distinct contexts, sum c ln c of words and of contexts."""
    seg = np.zeros(codes.size, np.int64)
    seg[np.asarray(starts, np.int64)] = 1
    seg = np.cumsum(seg)  # segment number of each position
    out = []
    for s in range(0, codes.size - window + 1, step):
        words = collections.Counter()
        for i in range(s, s + window - depth + 1):
            if seg[i] == seg[i + depth - 1]:
                words[tuple(codes[i : i + depth].tolist())] += 1
        ctx = collections.Counter()
        for w, c in words.items():
            ctx[w[:-1]] += c
        out.append((sum(words.values()), len(words), len(ctx),
                    math.fsum(c * math.log(c) for c in words.values()), math.fsum(c * math.log(c) for c in ctx.values())))
    return out


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 10_000), depth=st.integers(1, 4), window=st.integers(5, 60), step_frac=st.integers(1, 4),
       piece=st.integers(1, 300), length=st.integers(60, 600))
def test_window_counts_in_pieces_match_a_counter(seed, depth, window, step_frac, piece, length):
    rng = np.random.default_rng(seed)
    codes = rng.integers(0, 4, length)
    codes[length // 3 : length // 3 + 20] = 0  # a low-complexity run
    starts = np.unique(np.concatenate([[0], rng.integers(0, length, 2)]))
    arr = from_codes(al.dna(), codes, starts)
    depth = min(depth, window - 1)
    step = max(1, window * step_frac // 4)
    N, Kw, Kc, Sw, Sc = split_window_counts(arr, depth, window, step, piece=piece)
    ref = _naive(codes, starts, depth, window, step)
    assert N.tolist() == [r[0] for r in ref]
    assert Kw.tolist() == [r[1] for r in ref]
    assert Kc.tolist() == [r[2] for r in ref]
    assert np.allclose(Sw, [r[3] for r in ref], rtol=1e-12, atol=1e-9)
    assert np.allclose(Sc, [r[4] for r in ref], rtol=1e-12, atol=1e-9)


def _fasta(seed: int, length: int) -> str:
    rng = np.random.default_rng(seed)
    seq = np.array(list("ACGT"))[rng.integers(0, 4, length)]
    seq[length // 2 : length // 2 + 3_000] = np.tile(list("CAG"), 1_000)  # a low-complexity region
    text = "".join(seq)
    return f">a invented\n{text[: length // 3]}\n>b invented\n{text[length // 3 :]}\n"


@settings(max_examples=6, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 1_000), piece=st.integers(500, 20_000))
def test_scan_on_processes_equals_serial(tmp_path, engine, seed, piece):
    path = tmp_path / f"s{seed}.fa"
    path.write_text(_fasta(seed, 40_000))
    serial = scan_file(str(path), 2_000, 500, piece=piece)
    split = scan_file(str(path), 2_000, 500, piece=piece, engine=engine)
    assert split.to_json() == serial.to_json()
    # the CAG run (positions 20,000-23,000 of the sequence) is found as a low-complexity region
    assert any(r["start"] <= 21_000 and r["end"] >= 22_000 for r in serial.to_dict()["low_complexity"])


def test_log_scan_on_processes_equals_serial(engine):
    read = ReaderOptions(fmt="log")
    serial = scan_file(str(LOGS / "dpkg-excerpt.log"), reader=read, piece=97)
    split = scan_file(str(LOGS / "dpkg-excerpt.log"), reader=read, piece=97, engine=engine)
    assert split.to_json() == serial.to_json()
    assert serial.unit == "line"


def test_bad_piece_is_one_sentence():
    with pytest.raises(ParameterError) as err:
        scan_file(str(LOGS / "dpkg-excerpt.log"), piece=0)
    assert err.value.parameter == "piece"


@pytest.mark.slow
def test_scan_command_with_workers_prints_the_serial_bytes(tmp_path):
    path = tmp_path / "g.fa"
    path.write_text(_fasta(5, 60_000))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    base = [*CLI, "scan", str(path), "--window", "3000", "--json", "--piece", "8191"]
    serial = subprocess.run(base, capture_output=True, text=True, timeout=300, env=env)
    split = subprocess.run([*base, "--workers", "2"], capture_output=True, text=True, timeout=300, env=env)
    assert serial.returncode == split.returncode == 0, split.stderr
    assert split.stdout == serial.stdout


# ------------------------------------------------------------------ workers reading their own spans of the file
def _long_record(data) -> str:
    """An invented record of a few hundred to a few thousand symbols (wrapped or not) before the drawn layout."""
    rng = np.random.default_rng(data.draw(st.integers(0, 10_000), label="seed"))
    seq = "".join(np.array(list("ACGTN"))[rng.integers(0, 5, data.draw(st.integers(200, 3_000), label="length"))])
    width = data.draw(st.sampled_from([7, 60, 10_000]), label="width")
    return ">long invented\n" + "\n".join(seq[i : i + width] for i in range(0, len(seq), width)) + "\n"


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(text=fasta_texts(), data=st.data())
def test_scan_of_spans_read_by_the_workers_equals_serial_and_shipped(tmp_path, monkeypatch, text, data):
    """Every FASTA layout: window pieces and the predictor's whole stream read by the workers, the serial bytes."""
    from fractalseq.compare import _scan_pieces
    from fractalseq.words import _piece_source

    monkeypatch.setattr(_piece_source, "MARK_BLOCK", data.draw(st.sampled_from([1, 13, 1 << 20]), label="mark bytes"))
    monkeypatch.setattr(_piece_source, "RANGE_MIN", 1)
    path = tmp_path / "x.fa"
    path.write_bytes((_long_record(data) + text.lstrip("\ufeff")).encode())
    read = ReaderOptions(fmt="fasta")
    try:
        n = len(read.read(path))
    except InputError:
        return  # no symbol: nothing to scan (the reader's sentence, before any piece)
    if n < 16:
        return
    window = data.draw(st.integers(2, n // 4), label="window")
    step = data.draw(st.integers(1, window), label="step")
    piece = data.draw(st.integers(1, n + 3), label="piece symbols")

    def doc(engine=None):
        try:
            return scan_file(str(path), window, step, 1, reader=read, piece=piece, engine=engine).to_json()
        except ParameterError as exc:  # too few windows for this layout: the same sentence on every route
            return str(exc)

    serial = doc()
    ranged = doc(Pickling(data.draw(st.integers(1, 4), label="workers")))
    monkeypatch.setattr(_scan_pieces, "ranged", lambda engine, reader: None)  # today's shipped route
    shipped = doc(Pickling(2))
    assert ranged == serial and shipped == serial


def test_scan_of_an_uncompressed_genome_on_processes_reads_spans(tmp_path, engine):
    """The lambda phage genome (reference/PROVENANCE.md) as a plain file: the workers read it, the serial bytes."""
    path = tmp_path / "lambda.fa"
    path.write_bytes(gzip.decompress(LAMBDA.read_bytes()))  # the standard library's gzip
    assert ReaderOptions().open(path).byte_reader is not None
    serial = scan_file(str(path), 4_000, 1_000, piece=7_001)
    split = scan_file(str(path), 4_000, 1_000, piece=7_001, engine=engine)
    assert split.to_json() == serial.to_json()
    assert serial.length == 48_502  # lambda phage: 48,502 bp (GenBank J02459, from memory)

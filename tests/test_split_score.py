"""Fitted ``score`` of one source cut into pieces: the same symbols scored with the same histories on every engine.

Each piece after the first replays the end of the previous one to rebuild the
history; the checks are that every symbol's surprisal is the same float32 bits
whatever the piece size (so no context is lost at a piece edge), that the
integer tallies (symbols, top-1/top-3 hits, calibration bins) are equal, that
the total is the correctly rounded sum of the surprisals (``math.fsum``, Python
standard library, within the float32 rounding of the stored surprisals), and
that a processes engine prints the serial bytes for the same piece size, also when
the workers read their own spans of an uncompressed file after an offset pass (every
FASTA layout of ``tests/test_count_ranges.py``: the serial and the shipped bytes).  Data:
invented random FASTA (a scenario of our own) and the lambda phage genome
(``reference/PROVENANCE.md``).
"""

from __future__ import annotations

import gzip
import math
import os
import subprocess

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.errors import InputError, ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.jobs import learn_files, score_files
from fractalseq.jobs._engines import ProcessEngine
from fractalseq.predict._kernel_tools import CALIB_BINS
from fractalseq.predict._predictor import CellPredictor
from fractalseq.sources import open_source
from fractalseq.stream import from_codes

from _paths import CLI, LAMBDA, ROOT
from test_count_ranges import fasta_texts
from test_split_scan import _long_record
from test_split_spans import Pickling


@pytest.fixture(scope="module")
def engine():
    with ProcessEngine(2) as eng:
        yield eng


@pytest.fixture(scope="module")
def lambda_model(tmp_path_factory):
    path = tmp_path_factory.mktemp("model") / "lambda.npz"
    learn_files([str(LAMBDA)], out=path, params={"max_depth": 12})
    return path


def _fasta(seed: int, records: int, length: int) -> str:
    """Invented records with a repeat and runs of N (which break segments)."""
    rng = np.random.default_rng(seed)
    out = []
    for r in range(records):
        seq = np.array(list("ACGT"))[rng.integers(0, 4, int(rng.integers(20, length)))]
        if seq.size > 400:
            seq[200:400] = seq[:200]  # a repeat the deep cells recognise
        if seq.size > 10:
            for at in rng.integers(0, seq.size, 2):
                seq[at : at + int(rng.integers(1, 4))] = "N"
        out.append(f">r{r} invented\n" + "".join(seq))
    return "\n".join(out) + "\n"


def _model(seed: int) -> CellPredictor:
    rng = np.random.default_rng(seed)
    train = rng.integers(0, 4, 30_000)
    train[10_000:12_000] = train[:2_000]
    return CellPredictor(max_depth=9).fit(from_codes(al.dna(), train))


@settings(max_examples=20, deadline=None)
@given(seed=st.integers(0, 1000), piece=st.integers(20, 3_000), window=st.integers(1, 2_000))
def test_every_symbol_keeps_its_history_across_piece_edges(seed, piece, window):
    model = _model(seed % 7)
    rng = np.random.default_rng(seed)
    codes = rng.integers(0, 4, int(rng.integers(1, 6_000)))
    starts = np.unique(np.concatenate([[0], rng.integers(0, codes.size, 3)]))
    src = from_codes(al.dna(), codes, starts)
    one = model.evaluate(src, window=window, keep_surprisal=True, piece=1 << 24)
    cut = model.evaluate(src, window=window, keep_surprisal=True, piece=piece)
    assert np.array_equal(one.surprisal.view(np.uint32), cut.surprisal.view(np.uint32))  # every symbol: the same bits
    assert cut.length == one.length == codes.size
    assert (cut.top1_accuracy, cut.top3_accuracy) == (one.top1_accuracy, one.top3_accuracy)  # integer hits over the same n
    assert [b.symbols for b in cut.calibration] == [b.symbols for b in one.calibration]
    assert sum(b.symbols for b in cut.calibration) == codes.size and len(cut.calibration) == CALIB_BINS
    # the total (float64 running sums of nats) against the correctly rounded sum of the float32 surprisals
    # (math.fsum, Python standard library): they differ by the float32 rounding of each symbol only
    exact = math.fsum(cut.surprisal.astype(np.float64).tolist())
    assert math.isclose(cut.total_bits, exact, rel_tol=1e-6)
    # windows: one per `window` symbols, each the sum of its symbols' surprisals
    n_win = -(-codes.size // window)
    assert cut.window_bits.size == n_win
    ref = [math.fsum(cut.surprisal[i : i + window].astype(np.float64).tolist()) for i in range(0, codes.size, window)]
    assert np.allclose(cut.window_bits, ref, rtol=1e-12, atol=1e-9)
    # the Markov baseline comes from exact counts of the pieces: the same as one piece
    assert cut.baselines["markov"] == one.baselines["markov"]


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 10_000), records=st.integers(1, 5), piece=st.integers(30, 5_000))
def test_split_score_on_processes_equals_serial(tmp_path, engine, seed, records, piece):
    path = tmp_path / f"q{seed}.fa"
    path.write_text(_fasta(seed, records, 4_000))
    model = tmp_path / f"m{seed}.npz"
    if not model.exists():
        learn_files([str(path)], out=model, params={"max_depth": 8})
    serial = score_files([str(path)], str(model), window=500, piece=piece, baselines="all")
    split = score_files([str(path)], str(model), window=500, piece=piece, baselines="all", engine=engine)
    assert to_json(split.to_dict()) == to_json(serial.to_dict())  # every float to the last bit, records, windows, baselines


def test_lambda_scored_in_pieces_on_processes(engine, lambda_model):
    """The lambda phage genome (real data) scored by a model of itself: pieces on workers, same bytes as serial."""
    serial = score_files([str(LAMBDA)], str(lambda_model), window=5_000, piece=4_099)
    split = score_files([str(LAMBDA)], str(lambda_model), window=5_000, piece=4_099, engine=engine)
    assert to_json(split.to_dict()) == to_json(serial.to_dict())
    whole = CellPredictor.load(lambda_model).evaluate(open_source(str(LAMBDA)), window=5_000, keep_surprisal=True)
    cut = CellPredictor.load(lambda_model).evaluate(open_source(str(LAMBDA)), window=5_000, keep_surprisal=True, piece=4_099)
    assert np.array_equal(whole.surprisal, cut.surprisal)
    assert serial.sources[0].length == 48_502  # lambda phage: 48,502 bp (GenBank J02459, from memory)
    # a model of the sequence itself codes it below log2(4) = 2 bits, the uniform code (common practice)
    assert serial.bits_per_symbol < 2.0


def test_online_scoring_refuses_an_engine(engine):
    with pytest.raises(ParameterError) as err:
        score_files([str(LAMBDA)], online=True, engine=engine)
    assert err.value.parameter == "engine"


def test_bad_piece_is_one_sentence(lambda_model):
    with pytest.raises(ParameterError) as err:
        score_files([str(LAMBDA)], str(lambda_model), piece=0)
    assert err.value.parameter == "piece"


@pytest.mark.slow
def test_score_command_with_workers_prints_the_serial_bytes(tmp_path, lambda_model):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    base = [*CLI, "score", str(LAMBDA), "--model", str(lambda_model), "--json", "--piece", "10007", "--baselines", "all"]
    serial = subprocess.run(base, capture_output=True, text=True, timeout=300, env=env)
    split = subprocess.run([*base, "--workers", "2"], capture_output=True, text=True, timeout=300, env=env)
    assert serial.returncode == split.returncode == 0, split.stderr
    assert split.stdout == serial.stdout


# ------------------------------------------------------------------ online, per record
def test_online_per_record_on_processes_equals_serial_and_each_record_alone(tmp_path, engine):
    rng = np.random.default_rng(3)
    recs = ["".join(np.array(list("ACGT"))[rng.integers(0, 4, n)]) for n in (3_000, 50, 7_000)]
    recs.append(recs[2])  # the last record repeats the third
    path = tmp_path / "multi.fa"
    path.write_text("".join(f">r{i} invented\n{s}\n" for i, s in enumerate(recs)))
    serial = score_files([str(path)], online=True, per_record=True, window=1_000)
    split = score_files([str(path)], online=True, per_record=True, window=1_000, engine=engine)
    assert to_json(split.to_dict()) == to_json(serial.to_dict())
    assert [s.name for s in serial.sources] == [f"{path}:r{i}" for i in range(4)]
    for i, s in enumerate(recs):  # each record scores as the same record written to a file of its own
        alone = tmp_path / f"r{i}.fa"
        alone.write_text(f">r{i} invented\n{s}\n")
        one = score_files([str(alone)], online=True, window=1_000).sources[0]
        assert serial.sources[i].total_bits == one.total_bits and serial.sources[i].length == len(s)
    assert serial.total_bits == sum(s.total_bits for s in serial.sources)
    # one stream: the repeated record is predicted from the model the earlier records taught, so the file
    # codes shorter than the sum of fresh starts (both are upper bounds; the per-record one is the larger)
    whole = score_files([str(path)], online=True, window=1_000)
    assert whole.total_bits < serial.total_bits
    assert whole.length == serial.length


@pytest.mark.slow
def test_score_online_per_record_command_with_workers(tmp_path):
    path = tmp_path / "m.fa"
    path.write_text(_fasta(11, 4, 6_000))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    base = [*CLI, "score", str(path), "--online", "--per-record", "--json"]
    serial = subprocess.run(base, capture_output=True, text=True, timeout=300, env=env)
    split = subprocess.run([*base, "--workers", "2"], capture_output=True, text=True, timeout=300, env=env)
    assert serial.returncode == split.returncode == 0, split.stderr
    assert split.stdout == serial.stdout
    refused = subprocess.run([*CLI, "score", str(path), "--online", "--workers", "2"], capture_output=True, text=True, timeout=300, env=env)
    assert refused.returncode == 2 and "Traceback" not in refused.stderr and "per record" in refused.stderr


def test_a_worker_refuses_a_model_file_that_changed(lambda_model, tmp_path):
    from fractalseq.errors import InputError
    from fractalseq.predict._split_score import ModelHandle, file_key, handle_model

    key = file_key(lambda_model)
    got = handle_model(ModelHandle(str(lambda_model), key, kind=CellPredictor))
    assert got.n_cells_ == CellPredictor.load(lambda_model).n_cells_
    stale = (key[0], key[1] + 1, key[2])  # the size the parent saw differs from the file's now
    with pytest.raises(InputError):
        handle_model(ModelHandle(str(lambda_model), stale, kind=CellPredictor))


# ------------------------------------------------------------------ workers reading their own spans of the file
@pytest.fixture(scope="module")
def small_model(tmp_path_factory):
    folder = tmp_path_factory.mktemp("spans")
    train = folder / "train.fa"
    train.write_text(_fasta(99, 4, 3_000))
    path = folder / "m.npz"
    learn_files([str(train)], out=path, params={"max_depth": 7})
    return path


def _score_json(path, model, piece, engine=None) -> str:
    return to_json(score_files([str(path)], str(model), window=97, piece=piece, baselines="markov", engine=engine).to_dict())


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(text=fasta_texts(), policy=st.sampled_from(["break", "skip"]), data=st.data())
def test_score_of_spans_read_by_the_workers_equals_serial_and_shipped(tmp_path, monkeypatch, small_model, text, policy, data):
    """Every FASTA layout: the offset pass, then spans read by the workers, print the serial and the shipped bytes."""
    from fractalseq.predict import _split_score
    from fractalseq.words import _piece_source

    monkeypatch.setattr(_piece_source, "MARK_BLOCK", data.draw(st.sampled_from([1, 9, 1 << 20]), label="mark bytes"))
    monkeypatch.setattr(_piece_source, "RANGE_MIN", 1)
    path = tmp_path / "x.fa"
    if data.draw(st.booleans(), label="long record first"):
        text = _long_record(data) + text.lstrip("\ufeff")
    path.write_bytes(text.encode())
    piece = data.draw(st.integers(1, len(text) + 3), label="piece symbols")
    eng = Pickling(data.draw(st.integers(1, 4), label="workers"))
    try:
        serial = _score_json(path, small_model, piece)
    except InputError as exc:  # no symbol: the same sentence
        with pytest.raises(InputError) as split_exc:
            _score_json(path, small_model, piece, eng)
        assert str(split_exc.value) == str(exc)
        return
    ranged = _score_json(path, small_model, piece, eng)
    monkeypatch.setattr(_split_score, "ranged_reader", lambda source: None)  # today's shipped route
    shipped = _score_json(path, small_model, piece, Pickling(2))
    assert ranged == serial and shipped == serial  # every float to the last bit, records, windows, Markov baseline


def test_lambda_scored_from_spans_on_processes(engine, lambda_model, tmp_path):
    """The lambda phage genome (real data) as an uncompressed file: workers read their spans, the serial bytes."""
    path = tmp_path / "lambda.fa"
    path.write_bytes(gzip.decompress(LAMBDA.read_bytes()))  # the standard library's gzip
    serial = score_files([str(path)], str(lambda_model), window=5_000, piece=4_099)
    split = score_files([str(path)], str(lambda_model), window=5_000, piece=4_099, engine=engine)
    assert to_json(split.to_dict()) == to_json(serial.to_dict())
    gz = score_files([str(LAMBDA)], str(lambda_model), window=5_000, piece=4_099, engine=engine)  # gzip: shipped
    assert gz.sources[0].total_bits == serial.sources[0].total_bits
    assert serial.sources[0].length == 48_502  # lambda phage: 48,502 bp (GenBank J02459, from memory)

"""A profile run on an engine (word counts in pieces, one bootstrap task per depth, the predictor and
the prefix's consistency table beside them) gives the document of the in-process profile, byte for byte.

The reference is the in-process profile itself (the code path every other profile test checks
against outside facts); what is tested here is that splitting the work changes nothing: integer
counts exactly and every float to the last bit, for any piece size, chunk size and item budget.
"""

from __future__ import annotations

import json
import os
import pickle
import subprocess

import numpy as np
import pytest
from hypothesis import Phase, given, settings
from hypothesis import strategies as st

from fractalseq import alphabet as al
from fractalseq.resampling import _replicates as rp
from fractalseq.resampling import _streamed as sr
from fractalseq.resampling import _word_labels as wl
from fractalseq.resampling._options import Resampling
from fractalseq.runner import Engine, SerialEngine
from fractalseq.stream import SymbolArray

from _paths import CLI, LAMBDA, LOGS, ROOT


class _PickledInProcess(Engine):
    """Runs each task here, on a pickled copy of its argument, and hands back a pickled copy of the result.

    It is not the serial engine, so the profile takes its engine path (tasks, merge in order); the
    round trip through pickle is what a worker process gets and returns.
    """

    name = "in-process (pickled)"
    workers = 2

    def __init__(self) -> None:
        self.tasks: list[str] = []

    def submit(self, func, item):
        from fractalseq.runner import _Done

        self.tasks.append(func.__name__)
        return _Done(pickle.loads(pickle.dumps(func(pickle.loads(pickle.dumps(item))))))

    def wait_first(self, futures):
        return futures


def _stream(T: int, seed: int, starts=(0,)) -> SymbolArray:
    """An order-2 Markov stream over ACGT with sticky transitions (invented, for tests)."""
    rng = np.random.default_rng(seed)
    P = rng.dirichlet(np.ones(4) * 0.7, size=16)
    cum = P.cumsum(axis=1)
    u = rng.random(T)
    codes = np.empty(T, np.uint8)
    s = 0
    for t in range(T):
        c = min(int(np.searchsorted(cum[s], u[t])), 3)
        codes[t] = c
        s = (s * 4 + c) & 15
    return SymbolArray(al.dna(), codes, np.array(sorted(set(starts) | {0}), dtype=np.int64))


def _doc(arr, engine=None, piece=None, **kw) -> str:
    from fractalseq.jobs._profile import profile_source

    kw.setdefault("resampling", Resampling(n_boot=30, seed=5))
    d = profile_source(arr, engine=engine, piece=piece, image=False, **kw).to_dict()
    d.pop("timings", None)
    return json.dumps(d, sort_keys=True, default=str)


ARR = _stream(24_000, 3, starts=(0, 5_000, 5_001, 17_000))
BASE = {}


def _base(key, arr, **kw) -> str:
    if key not in BASE:
        BASE[key] = _doc(arr, **kw)
    return BASE[key]


@settings(max_examples=8, deadline=None, phases=(Phase.explicit, Phase.reuse, Phase.generate))
@given(piece=st.integers(500, 30_000), chunk=st.sampled_from([500, 1_234, 1 << 22]),
       budget=st.sampled_from([37, 1 << 24]))
def test_engine_profile_equals_in_process_for_any_piece_chunk_and_budget(piece, chunk, budget):
    """Multi-segment stream, tiny chunks and item budgets, any piece size: the document of the
    in-process profile with the same chunk constants (with several chunks the Politis-White value
    itself moves in its last bits, see tests/test_streamed_profile.py), and the consistency table
    of the prefix (beyond ``consistency_max_length``) taken from its task."""
    old = (wl.STREAM_CHUNK, sr.ITEM_BUDGET, sr.streamed_replicate_spectra.__defaults__)
    try:
        wl.STREAM_CHUNK, sr.ITEM_BUDGET = chunk, budget
        sr.streamed_replicate_spectra.__defaults__ = (rp.DEFAULT_CAP, budget)
        base = _base(("multi", chunk, budget), ARR, consistency_max_length=6_000)
        eng = _PickledInProcess()
        got = _doc(ARR, eng, piece, consistency_max_length=6_000)
    finally:
        wl.STREAM_CHUNK, sr.ITEM_BUDGET, sr.streamed_replicate_spectra.__defaults__ = old
    assert got == base
    assert {"count_piece", "depth_level_task", "predictor_task", "consistency_task"} <= set(eng.tasks)
    assert "depth_spectra_task" not in eng.tasks  # the rate intervals' depths were made beside the spectrum's
    assert eng.tasks.count("count_piece") >= -(-len(ARR) // piece)  # every piece counted on the engine


def test_serial_engine_takes_the_in_process_path():
    """``engine=SerialEngine()`` is the in-process profile (no task is shipped)."""
    assert _doc(ARR, SerialEngine(), consistency_max_length=6_000) == _base(("multi", wl.STREAM_CHUNK, sr.ITEM_BUDGET), ARR,
                                                                          consistency_max_length=6_000)


def test_quick_no_bootstrap_and_no_piece_profiles_on_an_engine():
    """Quick mode (no bootstrap, no consistency table), no piece size and ``n_boot=0`` give the in-process documents."""
    arr = _stream(9_000, 8)
    assert _doc(arr, _PickledInProcess(), 700, quick=True) == _doc(arr, quick=True)
    eng = _PickledInProcess()  # no piece size: the counts are made here, the rest on the engine
    assert _doc(arr, eng) == _doc(arr)
    assert "count_piece" not in eng.tasks and {"depth_level_task", "predictor_task"} <= set(eng.tasks)
    none = Resampling(n_boot=0, seed=1)
    assert _doc(arr, _PickledInProcess(), 2_000, resampling=none) == _doc(arr, resampling=none)
    eng = _PickledInProcess()  # overlapping maps: the geometric spectrum, then the rate intervals' own depth tasks
    assert _doc(arr, eng, ratio=0.6) == _doc(arr, ratio=0.6)
    assert "depth_spectra_task" in eng.tasks and "depth_level_task" not in eng.tasks


def test_real_genome_and_real_log_on_an_engine():
    """The lambda phage genome (reference/lambda_virus.fa.gz, provenance in reference/PROVENANCE.md)
    and a dpkg log excerpt (reference/logs/, read as event templates): the same documents."""
    import fractalseq as fs

    genome = fs.open_source(str(LAMBDA)).to_array()
    assert _doc(genome, _PickledInProcess(), 10_000) == _doc(genome)
    log = fs.open_source(str(LOGS / "dpkg-excerpt.log")).to_array()
    assert log.alphabet.name == "templates"
    assert _doc(log, _PickledInProcess(), 300) == _doc(log)


def test_process_engine_profile_equals_serial():
    """Two spawned worker processes (default chunk constants there): the same document."""
    from fractalseq.jobs._engines import ProcessEngine

    arr = _stream(12_000, 21, starts=(0, 7_000))
    with ProcessEngine(2) as eng:
        got = _doc(arr, eng, 4_000, consistency_max_length=5_000)
    assert got == _doc(arr, consistency_max_length=5_000)


def test_bad_piece_is_one_sentence():
    from fractalseq.errors import ParameterError

    with pytest.raises(ParameterError) as exc:
        _doc(_stream(500, 1), _PickledInProcess(), 0)
    assert exc.value.parameter == "piece"


@pytest.mark.slow
def test_cli_profile_with_two_workers_gives_the_serial_bytes(tmp_path):
    """``profile --json`` with ``--workers 2`` (and a small ``--piece``) prints the serial bytes; an
    invented two-record FASTA."""
    letters = np.frombuffer(b"ACGT", np.uint8)
    a, b = _stream(7_000, 31).codes, _stream(5_000, 32).codes
    path = tmp_path / "two.fa"
    path.write_text(f">one invented\n{letters[a].tobytes().decode()}\n>two invented\n{letters[b].tobytes().decode()}\n")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    base = [*CLI, "profile", str(path), "--json", "--quiet", "--boot", "20"]
    serial = subprocess.run(base, capture_output=True, env=env, timeout=600)
    split = subprocess.run([*base, "--workers", "2", "--piece", "3000"], capture_output=True, env=env, timeout=600)
    assert serial.returncode == 0 and split.returncode == 0, split.stderr.decode()[-2000:]
    assert split.stdout == serial.stdout
    assert json.loads(serial.stdout)["sources"][0]["length"] == 12_000
    bad = subprocess.run([*base, "--piece", "0"], capture_output=True, env=env, timeout=600)
    assert bad.returncode == 2


# ------------------------------------------------------------ the levels' batch sums from the depth tasks
@settings(max_examples=12, deadline=None)
@given(seed=st.integers(0, 10_000), chunk=st.integers(50, 5_000), block=st.sampled_from([1, 7, 4096]),
       values=st.booleans(), batch=st.integers(3, 60))
def test_level_batch_sums_give_the_in_process_covariance_bit_for_bit(seed, chunk, block, values, batch):
    """Each level's batch sums made by its own task (one labelling), joined in the parent, are the
    in-process streamed covariance to the last bit, for any chunk size, accumulator block and keying of
    the influence rows; and that covariance is the batch-means covariance recomputed with plain numpy
    (``np.bincount`` per batch of ``box_influence``, ``np.cov``; Carlstein 1986, Ann. Statist. 14:1171)
    to rounding."""
    from fractalseq.dimensions import _batch_covariance as bc
    from fractalseq.dimensions import _level_variance as lv

    arr = _stream(3_000, seed, starts=(0, 1_100))
    qs = np.array([-1.0, 0.0, 0.5, 1.0, 2.0, 3.0])
    old = (bc.COV_BLOCK, lv.VALUE_ROWS)
    try:
        bc.COV_BLOCK, lv.VALUE_ROWS = block, (old[1] if values else 0)
        idx = [wl.WordIndex(arr, n, chunk=chunk) for n in (1, 3, 6, 9)]
        counts = [i.counts() for i in idx]
        inproc = lv.streamed_batch_covariance(len(arr), batch, [(i.labels, c) for i, c in zip(idx, counts)], qs,
                                              chunk=chunk)
        sums = [lv.level_batch_sums(len(arr), batch, i.chunks, c, qs) for i, c in zip(idx, counts)]
        joined = lv.covariance_from_level_sums(sums, np.array([float(np.sum(c)) for c in counts]))
    finally:
        bc.COV_BLOCK, lv.VALUE_ROWS = old
    assert inproc.tobytes() == joined.tobytes()
    B = -(-len(arr) // batch)
    ref = np.empty_like(joined)
    rows = []
    for n, c in zip((1, 3, 6, 9), counts):
        labels, _ = wl.word_labels(arr, n)
        keep = labels >= 0
        g = lv.box_influence(c, qs)
        pos = np.flatnonzero(keep)
        rows.append(np.stack([np.bincount(pos // batch, weights=g[labels[keep], j], minlength=B) for j in range(qs.size)], 1)
                    / float(c.sum()))
    for j in range(qs.size):
        ref[j] = B * np.cov(np.stack([r[:, j] for r in rows]), ddof=1)
    np.testing.assert_allclose(joined, ref, rtol=1e-9, atol=1e-15)


def test_too_many_batch_sums_fall_back_to_labelling_in_the_parent(monkeypatch):
    """Beyond ``MAPPED_BATCH_CELLS`` the tasks send no batch sums and the parent labels the depths for the
    covariance itself: the same document."""
    from fractalseq.dimensions import _spectrum_tasks as tk

    arr = _stream(9_000, 13, starts=(0, 4_000))
    base = _doc(arr)
    sent = []
    real = tk.level_batch_sums
    monkeypatch.setattr(tk, "level_batch_sums", lambda *a: sent.append(1) or real(*a))
    monkeypatch.setattr(tk, "MAPPED_BATCH_CELLS", 0)
    eng = _PickledInProcess()
    assert _doc(arr, eng) == base
    assert "depth_level_task" in eng.tasks and not sent
    monkeypatch.setattr(tk, "MAPPED_BATCH_CELLS", 1 << 27)
    assert _doc(arr, _PickledInProcess()) == base and sent


# ------------------------------------------------------------ the stream read by the workers from its file
class _Measuring(_PickledInProcess):
    """:class:`_PickledInProcess` that also keeps the pickled size of each task's argument."""

    def __init__(self) -> None:
        super().__init__()
        self.sizes: dict[str, int] = {}

    def submit(self, func, item):
        self.sizes[func.__name__] = max(self.sizes.get(func.__name__, 0), len(pickle.dumps(item)))
        return super().submit(func, item)


def _fasta(path, parts) -> None:
    letters = np.frombuffer(b"ACGT", np.uint8)
    path.write_text("".join(f">rec{i} invented\n{letters[p.codes].tobytes().decode()}\n" for i, p in enumerate(parts)))


def test_a_stream_read_from_a_file_is_read_by_the_workers_not_shipped(tmp_path):
    """An invented two-record FASTA read whole: every task gets the file's path and checksum (a few hundred
    bytes, not the 20,000 symbols), each worker reads the file once, and the document is the in-process one.
    A record cut from it, or a stream built in memory, is shipped as before."""
    from fractalseq.sources import open_source
    from fractalseq.words import _worker_stream as ws

    path = tmp_path / "two.fa"
    _fasta(path, [_stream(12_000, 41), _stream(8_000, 42)])
    arr = open_source(str(path)).to_array()
    assert arr.reread is not None and len(arr) == 20_000
    eng = _Measuring()
    ws._READ.clear()
    got = _doc(arr, eng, consistency_max_length=6_000)
    assert got == _doc(arr, consistency_max_length=6_000)
    assert {"depth_level_task", "predictor_task", "consistency_task"} <= set(eng.sizes)
    assert max(eng.sizes.values()) < 2_000, eng.sizes
    assert isinstance(ws.stream_for_workers(arr), ws.StreamFile)
    assert isinstance(ws.stream_for_workers(arr.slice(0, 12_000)), SymbolArray)
    assert isinstance(ws.stream_for_workers(_stream(500, 1)), SymbolArray)


def test_a_file_changed_under_the_workers_is_one_sentence(tmp_path):
    """A worker that finds other symbols in the file than the parent read refuses (InputError), never a wrong result."""
    from fractalseq.errors import InputError
    from fractalseq.sources import open_source
    from fractalseq.words import _worker_stream as ws

    path = tmp_path / "one.fa"
    _fasta(path, [_stream(3_000, 51)])
    arr = open_source(str(path)).to_array()
    handle = ws.stream_for_workers(arr)
    ws._READ.clear()
    assert ws.worker_stream(handle).codes.tobytes() == arr.codes.tobytes()
    _fasta(path, [_stream(3_000, 52)])
    ws._READ.clear()
    with pytest.raises(InputError, match="changed while"):
        ws.worker_stream(handle)


def test_process_engine_reads_the_file_in_each_worker(tmp_path):
    """Two spawned worker processes reading an invented FASTA themselves: the in-process document."""
    from fractalseq.jobs._engines import ProcessEngine
    from fractalseq.sources import open_source

    path = tmp_path / "proc.fa"
    _fasta(path, [_stream(7_000, 61), _stream(6_000, 62)])
    arr = open_source(str(path)).to_array()
    with ProcessEngine(2) as eng:
        got = _doc(arr, eng, consistency_max_length=5_000)
    assert got == _doc(arr, consistency_max_length=5_000)


@pytest.mark.slow
def test_dask_local_cluster_and_scheduler_address_give_the_in_process_document(tmp_path):
    """A real local Dask cluster (two worker processes), used as an engine of its own and through its
    scheduler's address: the in-process documents, for a stream read from a file (the workers read it)
    and for one built in memory (shipped)."""
    pytest.importorskip("distributed")
    from dask.distributed import LocalCluster

    from fractalseq.jobs._engines import DaskEngine
    from fractalseq.sources import open_source

    path = tmp_path / "dask.fa"
    _fasta(path, [_stream(9_000, 71), _stream(5_000, 72)])
    arr = open_source(str(path)).to_array()
    mem = _stream(8_000, 73, starts=(0, 3_000))
    base_file, base_mem = _doc(arr, consistency_max_length=5_000), _doc(mem)
    cluster = LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None, silence_logs=50)
    try:
        with DaskEngine(workers=2) as eng:
            assert _doc(arr, eng, consistency_max_length=5_000) == base_file
        with DaskEngine(address=cluster.scheduler_address) as eng:
            assert _doc(arr, eng, consistency_max_length=5_000) == base_file
            assert _doc(mem, eng) == base_mem
    finally:
        cluster.close()

"""A real local Dask cluster (two worker processes) gives the serial engine's numbers exactly."""

from __future__ import annotations

import os
import signal
import time

import numpy as np
import pytest

from fractalseq.alphabet import dna
from fractalseq.compare._drift import DriftOptions, drift_test
from fractalseq.jobs._engines import DaskEngine
from fractalseq.runner import SerialEngine
from fractalseq.words._pieces import count_words_split
from fractalseq.datasets._markov import simulate_markov
from fractalseq.stream import SymbolArray, from_codes
from fractalseq.jobs._survey import SurveyOptions, expand_inputs, run_survey
from fractalseq.words._counts import count_words

from _paths import LAMBDA

#: Whole processes or many of them: part of every CI run; skip in a quick loop with -m 'not slow'.
pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def client():
    from dask.distributed import Client, LocalCluster

    cluster = LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None, silence_logs=50)
    c = Client(cluster)
    yield c
    c.close()
    cluster.close()


@pytest.fixture(scope="module")
def sources(tmp_path_factory):
    d = tmp_path_factory.mktemp("dask_sources")
    paths = [LAMBDA]
    for i in range(5):
        P = np.random.default_rng(i % 3).dirichlet(np.full(4, 2.0), size=4)  # invented chains
        x = simulate_markov(P, 25_000, seed=40 + i)
        p = d / f"chain{i}.fa"
        p.write_text(f">chain{i} invented\n" + "".join("ACGT"[c] for c in x) + "\n")
        paths.append(p)
    return expand_inputs([str(p) for p in paths])


def test_counts_on_dask_equal_serial(client):
    rng = np.random.default_rng(1)
    arr = SymbolArray(dna(), rng.integers(0, 4, 300_000).astype(np.uint8), [0, 5, 99_999, 250_000], "x")
    whole = count_words(arr, 9)
    with DaskEngine(client=client) as eng:
        split = count_words_split(arr.as_stream(chunk_size=40_000), 9, eng, chunk=70_000)
    for d in range(1, 10):
        assert np.array_equal(whole.words(d)[0], split.words(d)[0])
        assert np.array_equal(whole.words(d)[1], split.words(d)[1])  # integer counts: exactly


def test_survey_on_dask_equals_serial_to_the_last_bit(client, sources):
    opts = SurveyOptions(seed=3)
    serial = run_survey(sources, opts, SerialEngine())
    with DaskEngine(client=client) as eng:
        dask = run_survey(sources, opts, eng)
    assert dask.to_json() == serial.to_json()  # floating figures identical (same seed), JSON bytes equal


def test_drift_on_dask_equals_serial(client):
    P = np.random.default_rng(20240611).dirichlet(np.full(4, 5.0), size=16)
    base = [from_codes(dna(), simulate_markov(P, 60_000, seed=s, order=2), name=f"b{s}") for s in (1, 2)]
    new = [from_codes(dna(), simulate_markov(P, 80_000, seed=3, order=2), name="n")]
    opts = DriftOptions(seed=5, permutations=199)
    serial = drift_test(base, new, opts)
    with DaskEngine(client=client) as eng:
        dask = drift_test(base, new, opts, eng)
    assert dask.to_json() == serial.to_json()


def test_killing_a_worker_mid_survey_still_gives_the_complete_equal_result(client, sources):
    opts = SurveyOptions(seed=8)
    serial = run_survey(sources, opts, SerialEngine())
    killed: list[int] = []

    def on_event(event, i, spec):
        if event == "done" and not killed:
            busy = [addr for addr, keys in client.processing().items() if keys]
            pids = client.run(os.getpid)
            if busy:
                pid = pids[busy[0]]
                os.kill(pid, signal.SIGKILL)  # the nanny restarts it; its task is rescheduled
                killed.append(pid)

    with DaskEngine(client=client) as eng:
        dask = run_survey(sources, opts, eng, progress=on_event)
    assert killed, "no worker was busy when the first source finished"
    time.sleep(0.5)
    with pytest.raises(ProcessLookupError):
        os.kill(killed[0], 0)
    assert len(dask.sources) == len(sources)
    assert dask.to_json() == serial.to_json()

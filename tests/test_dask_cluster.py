"""A Dask cluster started from the command line, as on real machines, gives the serial answer.

The test starts ``dask scheduler`` and two ``dask worker`` processes (the general-purpose Dask
commands of the venv), runs ``fractalseq survey``, a piece-split ``fractalseq count`` and a count split by
address (``--scheduler`` without ``--piece``) through ``--scheduler tcp://...`` and kills one worker in
the middle of each run.  The kill lands at a
controlled point, never by timing: the doomed worker is started with
``FRACTALSEQ_PAUSE_AT=survey.task:1`` (or ``count.piece:1``, ``count.slice:1``), so it stops inside the first task it
is given and can never finish one; the test waits until the scheduler shows it holding a task,
then kills it with SIGKILL (it runs without a nanny, so nothing restarts it).  The scheduler hands
its task to the other worker; the JSON must equal the serial run's byte for byte.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from fractalseq.datasets._markov import simulate_markov
from fractalseq.errors import ParameterError
from fractalseq.io._outputs import to_json
from fractalseq.jobs._files import count_files, survey_files
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.jobs._survey import SurveyOptions
from fractalseq.jobs._scheduler import parse_address, probe_scheduler

from _paths import CLI, ROOT

pytestmark = pytest.mark.slow

DASK = str(Path(sys.executable).parent / "dask")
ENV = {**os.environ, "PYTHONPATH": str(ROOT)}
ENV.pop("FRACTALSEQ_PAUSE_AT", None)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait(predicate, what: str, limit: float = 60.0):
    """Poll ``predicate`` until it is true (a generous limit guards against a hang, not a time check)."""
    end = time.monotonic() + limit
    while time.monotonic() < end:
        value = predicate()
        if value:
            return value
        time.sleep(0.2)
    raise AssertionError(f"gave up waiting for {what}")


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    logs = tmp_path_factory.mktemp("cluster_logs")
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    procs: list[subprocess.Popen] = []

    def start(args, name, extra_env=None):
        log = open(logs / f"{name}.log", "wb")
        p = subprocess.Popen([DASK, *args], env={**ENV, **(extra_env or {})}, stdout=log, stderr=subprocess.STDOUT,
                             start_new_session=True)
        procs.append(p)
        return p

    start(["scheduler", "--host", "127.0.0.1", "--port", str(port), "--no-dashboard"], "scheduler")

    def up():
        try:
            probe_scheduler(parse_address(address), timeout=2)
            return True
        except ParameterError:
            return False

    _wait(up, "the scheduler")
    start(["worker", address, "--nworkers", "1", "--nthreads", "1", "--no-dashboard", "--name", "steady"], "steady")
    from distributed import Client

    client = Client(address, timeout="20s")

    def add_doomed(pause: str) -> subprocess.Popen:
        p = start(["worker", address, "--nthreads", "1", "--no-nanny", "--no-dashboard", "--name", f"doomed-{pause}"],
                  f"doomed-{pause.replace(':', '-')}", {"FRACTALSEQ_PAUSE_AT": pause})
        _wait(lambda: any(w.get("name") == f"doomed-{pause}" for w in client.scheduler_info()["workers"].values()), "the doomed worker")
        return p

    _wait(lambda: any(w.get("name") == "steady" for w in client.scheduler_info()["workers"].values()), "the steady worker")
    yield address, client, add_doomed
    client.close()
    for p in reversed(procs):  # each was started in its own session: its group holds it and its children
        if p.poll() is None:
            os.killpg(p.pid, signal.SIGKILL)
    for p in procs:
        p.wait(timeout=20)


def _kill_when_busy(client, worker: subprocess.Popen, name: str) -> None:
    """Wait until the scheduler shows ``name`` holding a task (it is paused inside it), then SIGKILL it."""
    def busy():
        info = client.scheduler_info()["workers"]
        addr = next((a for a, w in info.items() if w.get("name") == name), None)
        return addr is not None and bool(client.processing().get(addr))

    _wait(busy, f"{name} to take a task")
    os.kill(worker.pid, signal.SIGKILL)
    worker.wait(timeout=20)


def _fasta(path: Path, seed: int, n: int) -> Path:
    P = np.random.default_rng(seed % 3).dirichlet(np.full(4, 2.0), size=4)  # invented chains
    x = simulate_markov(P, n, seed=100 + seed)
    path.write_text(f">c{seed} invented\n" + "".join("ACGT"[c] for c in x) + "\n")
    return path


def test_survey_and_split_count_through_an_external_cluster_survive_a_killed_worker(cluster, tmp_path):
    """A survey, a count split by position and a count split by address, each losing a worker mid-task."""
    address, client, add_doomed = cluster
    files = [str(_fasta(tmp_path / f"c{i}.fa", i, 8_000)) for i in range(3)]
    survey = [*CLI, "survey", *files, "--json", "--no-cache", "--quiet", "--seed", "3"]
    serial = survey_files(files, SurveyOptions(seed=3)).to_json()  # what the serial command prints

    doomed = add_doomed("survey.task:1")
    run = subprocess.Popen([*survey, "--scheduler", address], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)
    _kill_when_busy(client, doomed, "doomed-survey.task:1")
    out, err = run.communicate(timeout=300)
    assert run.returncode == 0, err
    assert out == serial  # every figure to the last bit, the same bytes

    big = str(_fasta(tmp_path / "big.fa", 7, 200_000))
    count = [*CLI, "count", big, "--depth", "10", "--json", "--quiet", "--top", "5"]
    serial = to_json(count_files([big], 10, ReaderOptions(), top=5).to_dict())
    doomed = add_doomed("count.piece:1")
    run = subprocess.Popen([*count, "--scheduler", address, "--piece", "30000"], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                           text=True, env=ENV)
    _kill_when_busy(client, doomed, "doomed-count.piece:1")
    out, err = run.communicate(timeout=300)
    assert run.returncode == 0, err
    assert out == serial

    # without --piece the words are cut into one slice per worker, each worker reading the whole file itself
    doomed = add_doomed("count.slice:1")
    run = subprocess.Popen([*count, "--scheduler", address], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=ENV)
    _kill_when_busy(client, doomed, "doomed-count.slice:1")
    out, err = run.communicate(timeout=300)
    assert run.returncode == 0, err
    assert out == serial

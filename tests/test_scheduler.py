"""Scheduler addresses and local worker counts: refused quickly, in one sentence, never a hang.

The hostile cases are real: a port nobody listens on (a socket bound, then closed) and a
port where a standard-library HTTP server (``http.server`` in a thread) listens and
waits for a request.  No timing is asserted; every subprocess carries a generous timeout
so that a hang fails the test instead of blocking the run.
"""

from __future__ import annotations

import http.server
import os
import socket
import subprocess
import threading

import pytest

from fractalseq.errors import ParameterError
from fractalseq.jobs._engines import make_engine, max_local_workers
from fractalseq.jobs._scheduler import parse_address, probe_scheduler

from _paths import CLI, LAMBDA, ROOT


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]  # closed again: connecting to it is refused


@pytest.fixture(scope="module")
def http_port():
    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), http.server.SimpleHTTPRequestHandler)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield server.server_address[1]
    server.shutdown()
    server.server_close()


def test_addresses_parsed_and_defaults_filled():
    assert parse_address("tcp://10.0.0.5:8786").url == "tcp://10.0.0.5:8786"
    assert parse_address("node7:9000").url == "tcp://node7:9000"  # no scheme means tcp://
    assert parse_address("tcp://node7").port == 8786  # Dask's default port (common practice)
    assert parse_address("tls://[::1]:8786").host == "[::1]"


@pytest.mark.parametrize(
    "text, pattern",
    [
        ("not an address", "not of the form tcp://HOST:PORT"),
        ("udp://h:1", "scheme udp://"),
        ("tcp://h:99999", "outside 1..65535"),
        ("tcp://h:0", "outside 1..65535"),
        ("tcp://:8786", "not of the form"),
    ],
)
def test_malformed_addresses_are_one_sentence(text, pattern):
    with pytest.raises(ParameterError, match=pattern) as info:
        make_engine("dask", None, text)
    assert info.value.parameter == "address" and str(info.value).count(";") == 1


def test_refused_port_and_foreign_server_are_named(http_port):
    with pytest.raises(ParameterError, match="connection refused"):
        probe_scheduler(parse_address(f"tcp://127.0.0.1:{_free_port()}"), timeout=5)
    with pytest.raises(ParameterError, match="not a Dask scheduler"):
        probe_scheduler(parse_address(f"tcp://127.0.0.1:{http_port}"), timeout=0.5)
    with pytest.raises(ParameterError, match="between 0 and 3600"):
        probe_scheduler(parse_address(f"tcp://127.0.0.1:{http_port}"), timeout=0)


def test_too_many_local_workers_refused_before_any_process_starts():
    cap = max_local_workers()
    assert cap == 4 * (os.cpu_count() or 1)
    for kind in ("processes", "dask"):
        with pytest.raises(ParameterError, match=f"at most 4 per core, {cap} here") as info:
            make_engine(kind, cap + 1)
        assert info.value.parameter == "workers"


@pytest.mark.slow
def test_cli_refuses_bad_schedulers_in_one_sentence(http_port):
    cases = [
        (["--scheduler", "not an address"], "not of the form"),
        (["--scheduler", f"tcp://127.0.0.1:{_free_port()}"], "connection refused"),
        (["--scheduler", f"tcp://127.0.0.1:{http_port}", "--connect-timeout", "1"], "not a Dask scheduler"),
        (["--engine", "dask", "--workers", "10000"], "at most 4 per core"),
        (["--workers", "10000"], "at most 4 per core"),
    ]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    for extra, pattern in cases:
        run = subprocess.run([*CLI, "survey", str(LAMBDA), "--quiet", *extra], capture_output=True, text=True, timeout=120, env=env, cwd=ROOT)
        assert run.returncode == 2, (extra, run.stderr)
        lines = run.stderr.strip().splitlines()
        assert len(lines) == 1 and lines[0].startswith("error: ") and pattern in lines[0], (extra, run.stderr)
        assert "Traceback" not in run.stderr

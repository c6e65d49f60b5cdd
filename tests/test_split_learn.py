"""``learn`` with its words counted in pieces on worker processes writes the serial model file, byte for byte.

The pieces overlap by the counting depth minus one and each counts the words that
start in it (the split count itself is checked against a standard-library recount in
``tests/test_count_split.py``); the fit runs in the parent on the merged counts.
Data: invented random FASTA (a scenario of our own), the lambda phage genome and
the dpkg log excerpt (``reference/PROVENANCE.md``, ``reference/logs/README.md``).
"""

from __future__ import annotations

import collections
import gzip
import os
import subprocess

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq.errors import ParameterError
from fractalseq.jobs import learn_files
from fractalseq.jobs._engines import ProcessEngine

from _paths import CLI, LAMBDA, LOGS, ROOT


@pytest.fixture(scope="module")
def engine():
    with ProcessEngine(2) as eng:
        yield eng


def _fasta(seed: int, records: int, length: int) -> str:
    rng = np.random.default_rng(seed)
    out = []
    for r in range(records):
        seq = np.array(list("ACGT"))[rng.integers(0, 4, int(rng.integers(1, length)))]
        if seq.size > 10:
            for at in rng.integers(0, seq.size, 2):
                seq[at : at + int(rng.integers(1, 4))] = "N"
        out.append(f">r{r} invented\n" + "".join(seq))
    return "\n".join(out) + "\n"


@settings(max_examples=10, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 10_000), records=st.integers(1, 4), piece=st.integers(50, 5_000), depth=st.integers(2, 12))
def test_split_learn_writes_the_serial_model_file(tmp_path, engine, seed, records, piece, depth):
    path = tmp_path / f"t{seed}.fa"
    path.write_text(_fasta(seed, records, 5_000))
    a, b = tmp_path / f"a{seed}.npz", tmp_path / f"b{seed}.npz"
    serial = learn_files([str(path)], out=a, force=True, params={"max_depth": depth})
    split = learn_files([str(path)], out=b, force=True, params={"max_depth": depth}, engine=engine, piece=piece)
    assert a.read_bytes() == b.read_bytes()
    assert {**split.to_dict(), "model": None} == {**serial.to_dict(), "model": None}
    # the depth-1 cells hold the symbol counts of both strands: a Counter over the records (common practice:
    # ambiguous symbols break words, so they are simply left out of a single-symbol count)
    text = "".join(r.split("\n", 1)[1] for r in path.read_text().split(">")[1:]).replace("\n", "").replace("N", "")
    c = collections.Counter(text)
    forward = [c[s] for s in "ACGT"]
    both = [f + r for f, r in zip(forward, forward[::-1])]  # complement of A,C,G,T is T,G,C,A
    t0 = split.predictor.counts_[0]
    got = np.zeros(4, np.int64)
    got[t0.syms.astype(np.int64)] = t0.counts
    assert got.tolist() == both


def test_lambda_and_a_log_learned_on_processes(tmp_path, engine):
    for src, params in ((LAMBDA, {"max_depth": 16}), (LOGS / "dpkg-excerpt.log", {})):
        a, b = tmp_path / "a.npz", tmp_path / "b.npz"
        learn_files([str(src)], out=a, force=True, params=params)
        learn_files([str(src)], out=b, force=True, params=params, engine=engine, piece=1_009)
        assert a.read_bytes() == b.read_bytes(), src.name
    with gzip.open(LAMBDA, "rt") as fh:  # lambda phage: 48,502 bp (GenBank J02459, from memory)
        assert sum(len(line.strip()) for line in fh if not line.startswith(">")) == 48_502


def test_bad_piece_is_one_sentence(tmp_path, engine):
    with pytest.raises(ParameterError) as err:
        learn_files([str(LAMBDA)], out=tmp_path / "m.npz", engine=engine, piece=-3)
    assert err.value.parameter == "piece"


@pytest.mark.slow
def test_learn_command_with_workers_writes_the_serial_bytes(tmp_path):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    base = [*CLI, "learn", str(LAMBDA), "--depth", "14", "--json", "-q"]
    serial = subprocess.run([*base, "-o", str(tmp_path / "a.npz")], capture_output=True, text=True, timeout=300, env=env)
    split = subprocess.run([*base, "-o", str(tmp_path / "b.npz"), "--workers", "2", "--piece", "7001"],
                           capture_output=True, text=True, timeout=300, env=env)
    assert serial.returncode == split.returncode == 0, split.stderr
    assert split.stdout.replace("b.npz", "a.npz") == serial.stdout
    assert (tmp_path / "a.npz").read_bytes() == (tmp_path / "b.npz").read_bytes()

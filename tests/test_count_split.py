"""``count`` of a source split into pieces on worker processes equals the serial one-pass count.

The pieces overlap by N-1 symbols and each counts the words that start in it; the
reference is the serial streamed count (itself checked against the standard library in
``tests/test_words.py``) and, for short words, a plain ``collections.Counter`` over
every record cut at its ambiguous symbols (common practice: a word never spans an N).
"""

from __future__ import annotations

import os
import subprocess

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq.io._outputs import to_json
from fractalseq.jobs._engines import ProcessEngine
from fractalseq.jobs._files import count_files
from fractalseq.jobs._inputs import ReaderOptions

from _inprocess import fasta_word_counts
from _paths import CLI, ROOT


@pytest.fixture(scope="module")
def engine():
    with ProcessEngine(2) as eng:
        yield eng


def _fasta(seed: int, records: int, length: int) -> str:
    rng = np.random.default_rng(seed)
    out = []
    for r in range(records):
        seq = np.array(list("ACGT"))[rng.integers(0, 4, int(rng.integers(1, length)))]
        if seq.size > 10:  # a few ambiguous runs that break segments
            for at in rng.integers(0, seq.size, 3):
                seq[at : at + int(rng.integers(1, 4))] = "N"
        text = "".join(seq)
        out.append(f">r{r} invented\n" + "\n".join(text[i : i + 60] for i in range(0, len(text), 60)))
    return "\n".join(out) + "\n"


@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 10_000), records=st.integers(1, 6), depth=st.integers(1, 10), piece=st.integers(200, 6_000))
def test_split_count_on_processes_equals_serial(tmp_path, engine, seed, records, depth, piece):
    path = tmp_path / f"x{seed}.fa"
    text = _fasta(seed, records, 4_000)
    path.write_text(text)
    serial = count_files([str(path)], depth, ReaderOptions())
    split = count_files([str(path)], depth, ReaderOptions(), engine=engine, piece=piece)
    assert to_json(split.to_dict()) == to_json(serial.to_dict())  # every count, the ladder, the reader's report: the same bytes
    for d in range(1, depth + 1):
        for a, b in zip(serial.counts.words(d), split.counts.words(d)):
            assert np.array_equal(a, b)
    n = min(depth, 3)
    w, c = split.counts.words(n)
    got = {"".join("ACGT"[(int(x) >> (2 * (n - 1 - i))) & 3] for i in range(n)): int(k) for x, k in zip(w, c) if k}
    assert got == dict(fasta_word_counts(text, n))


@pytest.mark.slow
def test_count_command_with_workers_prints_the_serial_bytes(tmp_path):
    path = tmp_path / "g.fa"
    path.write_text(_fasta(7, 3, 30_000))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    base = [*CLI, "count", str(path), "--depth", "12", "--json", "--top", "5"]
    serial = subprocess.run(base, capture_output=True, text=True, timeout=300, env=env)
    split = subprocess.run([*base, "--workers", "2", "--piece", "9999"], capture_output=True, text=True, timeout=300, env=env)
    assert serial.returncode == split.returncode == 0, split.stderr
    assert split.stdout == serial.stdout

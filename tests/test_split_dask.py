"""``learn``, fitted ``score``, ``score --online --per-record`` and ``scan`` of one source on a real local
Dask cluster (two worker processes): the serial bytes, for the gzip genome (the parent sends the pieces) and
for an uncompressed copy (the workers read their own spans of it).

A Dask worker gets the fitted model itself (not the file path: a worker may sit on another machine).
Data: the lambda phage genome (``reference/PROVENANCE.md``) and invented records (a scenario of our own).
"""

from __future__ import annotations

import gzip

import numpy as np
import pytest

from fractalseq.io._outputs import to_json
from fractalseq.jobs import learn_files, score_files
from fractalseq.jobs._engines import DaskEngine
from fractalseq.jobs._files import scan_file

from _paths import LAMBDA

pytestmark = pytest.mark.slow

pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def client():
    from dask.distributed import Client, LocalCluster

    cluster = LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None, silence_logs=50)
    c = Client(cluster)
    yield c
    c.close()
    cluster.close()


def test_learn_score_and_scan_on_dask_equal_serial(client, tmp_path):
    a, b = tmp_path / "a.npz", tmp_path / "b.npz"
    learn_files([str(LAMBDA)], out=a, params={"max_depth": 12})
    with DaskEngine(client=client) as eng:
        learn_files([str(LAMBDA)], out=b, params={"max_depth": 12}, engine=eng, piece=9_001)
        fitted = score_files([str(LAMBDA)], str(a), window=4_000, piece=6_007, engine=eng)
        scanned = scan_file(str(LAMBDA), 4_000, 1_000, piece=7_919, engine=eng)
        rng = np.random.default_rng(2)
        multi = tmp_path / "multi.fa"
        multi.write_text("".join(f">r{i} invented\n{''.join(np.array(list('ACGT'))[rng.integers(0, 4, 3_000)])}\n" for i in range(3)))
        online = score_files([str(multi)], online=True, per_record=True, window=1_000, engine=eng)
        plain = tmp_path / "lambda.fa"  # uncompressed (the standard library's gzip): the workers read their own spans
        plain.write_bytes(gzip.decompress(LAMBDA.read_bytes()))
        fitted_plain = score_files([str(plain)], str(a), window=4_000, piece=6_007, engine=eng)
        scanned_plain = scan_file(str(plain), 4_000, 1_000, piece=7_919, engine=eng)
    assert a.read_bytes() == b.read_bytes()
    assert to_json(fitted.to_dict()) == to_json(score_files([str(LAMBDA)], str(a), window=4_000, piece=6_007).to_dict())
    assert scanned.to_json() == scan_file(str(LAMBDA), 4_000, 1_000, piece=7_919).to_json()
    assert to_json(fitted_plain.to_dict()) == to_json(score_files([str(plain)], str(a), window=4_000, piece=6_007).to_dict())
    assert scanned_plain.to_json() == scan_file(str(plain), 4_000, 1_000, piece=7_919).to_json()
    assert to_json(online.to_dict()) == to_json(score_files([str(multi)], online=True, per_record=True, window=1_000).to_dict())

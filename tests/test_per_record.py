"""``--per-record``: every record of an input is a source of its own.

The reference is the definition: the same record written to a file of its own and
profiled, surveyed or tested as that file.  Every number must be equal (JSON numbers
identical); only the name and the reader's drop counts (kept per input) may differ.
The records are invented Markov chains (seeded), one with an ambiguous run.
"""

from __future__ import annotations

import json
import os
import subprocess

import numpy as np
import pytest

from fractalseq.compare._drift import DriftOptions
from fractalseq.datasets._markov import simulate_markov
from fractalseq.io._outputs import to_json
from fractalseq.jobs._files import drift_files, survey_files
from fractalseq.jobs._records import DROPS_NOTE, record_arrays
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.jobs._survey import SurveyOptions

from _paths import CLI, ROOT

LENGTHS = (6_000, 9_000, 4_000)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("records")
    recs = []
    for i, n in enumerate(LENGTHS):
        P = np.random.default_rng(i).dirichlet(np.full(4, 2.0), size=4)
        s = "".join("ACGT"[c] for c in simulate_markov(P, n, seed=i))
        if i == 1:
            s = s[:3000] + "NNNN" + s[3000:]
        recs.append((f"c{i}", s))
    multi = d / "multi.fa"
    multi.write_text("".join(f">{name} invented contig\n{s[:5000]}\n{s[5000:]}\n" for name, s in recs))
    singles = []
    for name, s in recs:
        p = d / f"{name}.fa"
        p.write_text(f">{name} invented contig\n{s}\n")
        singles.append(p)
    return multi, singles


def _numbers(doc: dict) -> dict:
    """A profile document without what names the input or the reader's per-input drop counts."""
    return {k: v for k, v in doc.items() if k not in ("name", "read", "input")}


def test_records_become_arrays_with_their_own_symbols(files):
    multi, singles = files
    parts = list(record_arrays(ReaderOptions().read(str(multi)), "multi.fa"))
    assert [p.name for p in parts] == ["multi.fa:c0", "multi.fa:c1", "multi.fa:c2"]
    for part, single in zip(parts, singles):
        own = ReaderOptions().read(str(single))
        assert np.array_equal(part.codes, own.codes) and np.array_equal(part.starts, own.starts)
    assert DROPS_NOTE in parts[1].report.notes


@pytest.mark.slow
def test_profile_per_record_equals_each_record_as_a_file(files):
    multi, singles = files
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    common = ["--json", "--boot", "20", "--seed", "4", "--quiet"]
    a = subprocess.run([*CLI, "profile", str(multi), "--per-record", *common], capture_output=True, text=True, env=env, timeout=600)
    b = subprocess.run([*CLI, "profile", *map(str, singles), *common], capture_output=True, text=True, env=env, timeout=600)
    assert a.returncode == b.returncode == 0, a.stderr + b.stderr
    da, db = json.loads(a.stdout), json.loads(b.stdout)
    pa, pb = da.pop("sources"), db.pop("sources")
    assert [p["name"] for p in pa] == [f"{multi}:c{i}" for i in range(3)]
    assert da == db  # parameters, caution, version
    assert [_numbers(p) for p in pa] == [_numbers(p) for p in pb]
    assert [p["length"] for p in pa] == [p["length"] for p in pb] == list(LENGTHS)


def test_survey_per_record_equals_the_records_as_files(files):
    multi, singles = files
    opts = SurveyOptions(seed=2)
    per = survey_files([str(multi)], opts, per_record=True).to_dict()
    own = survey_files([str(s) for s in singles], opts).to_dict()
    assert per["distances"]["names"] == ["multi.fa:c0", "multi.fa:c1", "multi.fa:c2"]
    for key in ("matrix", "spectrum", "depth", "clustering"):
        assert to_json(per["distances"][key]) == to_json(own["distances"][key]), key  # NaN compared as text
    for sa, sb in zip(per["sources"], own["sources"]):
        assert to_json(_numbers(sa["profile"])) == to_json(_numbers(sb["profile"]))
        for f in ("length", "D0", "D1", "D2", "entropy_rate_bits", "predictor_bits_per_symbol"):
            assert to_json(sa[f]) == to_json(sb[f])


def test_drift_per_record_equals_the_records_as_inputs(files):
    multi, singles = files
    opts = DriftOptions(seed=1, permutations=99, depth=2)
    per = drift_files(str(multi), str(singles[0]), opts, per_record=True).to_dict()
    own = drift_files([str(s) for s in singles], str(singles[0]), opts).to_dict()
    assert per["baseline"]["inputs"] == [f"{multi.name}:c{i}" for i in range(3)]
    per["baseline"].pop("inputs"), own["baseline"].pop("inputs")
    per["new"].pop("inputs"), own["new"].pop("inputs")
    assert to_json(per) == to_json(own)


def test_per_record_of_a_file_without_records_is_the_file(tmp_path):
    p = tmp_path / "plain.txt"
    p.write_text("ACGT" * 500)
    arr = ReaderOptions(fmt="text").read(str(p))
    parts = list(record_arrays(arr, "plain.txt"))
    assert len(parts) == 1 and np.array_equal(parts[0].codes, arr.codes)

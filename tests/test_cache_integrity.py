"""The survey cache checks every entry: a hand-edited or damaged entry is recomputed with a note."""

from __future__ import annotations

import json

import numpy as np
import pytest

from fractalseq.cli.app import main
from fractalseq.datasets._markov import simulate_markov
from fractalseq.io._cache import ResultCache
from fractalseq.jobs._survey import SurveyOptions, run_survey
from fractalseq.jobs._sources import expand_inputs


def _write_sources(tmp_path, n=2):
    paths = []
    for i in range(n):
        p = tmp_path / f"s{i}.txt"
        chain = np.random.default_rng(i).dirichlet(np.full(4, 2.0), size=4)  # invented test data
        p.write_text("".join("ACGT"[c] for c in simulate_markov(chain, 1500, seed=i + 1)) + "\n")
        paths.append(p)
    return paths


def _entries(folder):
    return sorted(folder.rglob("*.json"))


def test_an_entry_round_trips_and_every_kind_of_damage_is_named(tmp_path):
    cache = ResultCache(tmp_path / "c")
    key = "ab" * 32
    cache.put(key, {"length": 10, "x": [1.5, None]}, {"counts": np.arange(5, dtype=np.int64)})
    (results, arrays), problem = cache.lookup(key)
    assert problem is None and results == {"length": 10, "x": [1.5, None]}
    np.testing.assert_array_equal(arrays["counts"], np.arange(5))
    jpath, npath = cache._paths(key)

    entry = json.loads(jpath.read_text())
    entry["results"]["length"] = 999999999  # a hand edit that keeps the JSON valid
    jpath.write_text(json.dumps(entry))
    assert cache.lookup(key) == (None, "its JSON fails its checksum")
    jpath.write_text("{not json")
    assert cache.lookup(key) == (None, "its JSON cannot be read")

    cache.put(key, {"length": 10}, {"counts": np.arange(5, dtype=np.int64)})
    blob = bytearray(npath.read_bytes())
    blob[len(blob) // 2] ^= 0xFF
    npath.write_bytes(bytes(blob))
    assert cache.lookup(key) == (None, "its arrays file fails its checksum")
    assert cache.lookup("cd" * 32) == (None, None)  # simply absent: no note


def test_arrays_with_a_matching_file_checksum_are_still_read_through_the_checked_container(tmp_path):
    """An arrays file replaced by a plain numpy archive (its file checksum refitted in a re-signed JSON) is refused."""
    import hashlib

    from fractalseq.io._outputs import compact_json

    cache = ResultCache(tmp_path / "c")
    key = "ef" * 32
    cache.put(key, {"length": 5}, {"counts": np.arange(5, dtype=np.int64)})
    jpath, npath = cache._paths(key)
    with open(npath, "wb") as fh:
        np.savez(fh, counts=np.arange(5, dtype=np.int64), extra=np.zeros(3))
    entry = json.loads(jpath.read_text())
    entry["arrays_sha256"] = hashlib.sha256(npath.read_bytes()).hexdigest()
    body = {k: v for k, v in entry.items() if k != "entry_sha256"}
    entry["entry_sha256"] = hashlib.sha256(compact_json(body).encode()).hexdigest()
    jpath.write_text(compact_json(entry))
    assert cache.lookup(key) == (None, "its arrays file is damaged")


def test_an_edited_length_is_recomputed_with_a_note_and_equals_an_uncached_run(tmp_path):
    paths = _write_sources(tmp_path)
    specs = expand_inputs([str(p) for p in paths])
    opts = SurveyOptions(depth=5, seed=2)
    reference = run_survey(specs, opts)
    cache = ResultCache(tmp_path / "cache")
    run_survey(specs, opts, cache=cache)
    edited = _entries(tmp_path / "cache")[0]
    entry = json.loads(edited.read_text())
    entry["results"]["counts_header"]["length"] = 999999999
    edited.write_text(json.dumps(entry, indent=2, sort_keys=True))

    events = []
    rerun = run_survey(specs, opts, cache=cache, progress=lambda e, i, s: events.append(e))
    assert sorted(events) == ["cached", "done", "queued"]  # one entry reused, the edited one recomputed
    assert len(rerun.cache_notes) == 1 and "its JSON fails its checksum" in rerun.cache_notes[0]
    assert rerun.to_json() == reference.to_json()


def test_the_command_line_prints_the_note(tmp_path, capsys):
    paths = _write_sources(tmp_path)
    out = tmp_path / "out"
    args = ["survey", *map(str, paths), "--depth", "5", "--seed", "2", "-q", "--json"]
    assert main([*args, "--out", str(out)]) == 0
    first = capsys.readouterr().out
    edited = _entries(out / ".cache")[0]
    entry = json.loads(edited.read_text())
    entry["results"]["counts_header"]["length"] = 999999999
    edited.write_text(json.dumps(entry))
    assert main([*args, "--out", str(out), "--force"]) == 0
    captured = capsys.readouterr()
    err = " ".join(captured.err.split())  # the console may wrap the line
    assert any(f"the cached entry of {p.name} was not used (its JSON fails its checksum); it was recomputed" in err
               for p in paths)
    assert captured.out == first


@pytest.mark.parametrize("field", ["key", "arrays_sha256"])
def test_a_valid_looking_json_whose_fields_changed_is_refused(tmp_path, field):
    cache = ResultCache(tmp_path / "c")
    key = "12" * 32
    cache.put(key, {"length": 3}, {"a": np.ones(2)})
    jpath, _ = cache._paths(key)
    entry = json.loads(jpath.read_text())
    entry[field] = "0" * 64
    jpath.write_text(json.dumps(entry))
    assert cache.lookup(key) == (None, "its JSON fails its checksum")

"""Map-then-merge engines, split counting and the per-source cache."""

from __future__ import annotations

import collections
import sys

import numpy as np
import pytest

from fractalseq.alphabet import dna
from fractalseq.io._cache import ResultCache, cache_key
from fractalseq.jobs._engines import DASK_MISSING, ProcessEngine, import_dask, make_engine
from fractalseq.runner import SerialEngine
from fractalseq.words._pieces import count_words_split, iter_pieces
from fractalseq.errors import ParameterError
from fractalseq.stream import SymbolArray
from fractalseq.words._counts import count_words


def _random_array(rng, n, nstarts):
    codes = rng.integers(0, 4, n).astype(np.uint8)
    starts = np.sort(rng.choice(n, size=nstarts, replace=True)) if n else np.zeros(0, np.int64)
    return SymbolArray(dna(), codes, starts, "x")


def _naive_counts(arr: SymbolArray, n: int) -> collections.Counter:
    """Reference count with the standard library: every n-word inside a segment."""
    out: collections.Counter = collections.Counter()
    for seg in arr.segments():
        s = seg.tolist()
        for i in range(len(s) - n + 1):
            out[tuple(s[i : i + n])] += 1
    return out


def _as_counter(wc, n):
    w, c = wc.words(n)
    bits = wc.bits
    return collections.Counter({tuple((int(a) >> (bits * (n - 1 - i))) & 3 for i in range(n)): int(k) for a, k in zip(w, c)})


def test_split_counts_equal_whole_counts_and_stdlib_reference():
    # pieces overlapping by N-1 symbols: no word lost, none counted twice
    rng = np.random.default_rng(11)
    for trial in range(120):
        n = int(rng.integers(1, 400))
        arr = _random_array(rng, n, int(rng.integers(0, 8)))
        depth = int(rng.integers(1, 9))
        chunk = int(rng.integers(1, 60))
        whole = count_words(arr, depth)
        split = count_words_split(arr.as_stream(chunk_size=int(rng.integers(1, 70))), depth, chunk=chunk)
        assert (split.length, split.segments) == (whole.length, whole.segments)
        for d in range(1, depth + 1):
            wa, ca = whole.words(d)
            wb, cb = split.words(d)
            assert np.array_equal(wa, wb) and np.array_equal(ca, cb), (trial, d)
        assert np.array_equal(whole.tail_count, split.tail_count)
        if trial % 10 == 0:
            d = min(depth, 3)
            assert _as_counter(split, d) == _naive_counts(arr, d)


def test_pieces_cover_the_source_once():
    rng = np.random.default_rng(3)
    arr = _random_array(rng, 1000, 5)
    pieces = list(iter_pieces(arr.as_stream(chunk_size=77), 100, 4))
    assert sum(p.core for p in pieces) == 1000
    assert [p.offset for p in pieces] == list(range(0, 1000, 100))[: len(pieces)]
    assert pieces[-1].final and not any(p.final for p in pieces[:-1])
    for p in pieces[:-1]:
        assert np.array_equal(p.codes, arr.codes[p.offset : p.offset + 104])


def test_process_engine_matches_serial_exactly():
    rng = np.random.default_rng(5)
    arr = _random_array(rng, 200_000, 20)
    serial = count_words_split(arr, 10, SerialEngine(), chunk=30_000)
    with ProcessEngine(2) as eng:
        par = count_words_split(arr.as_stream(chunk_size=25_000), 10, eng, chunk=30_000)
        assert eng.map(abs, [-3, 2, -1]) == [3, 2, 1]  # results come back in item order
    for d in range(1, 11):
        assert np.array_equal(serial.words(d)[1], par.words(d)[1])
        assert np.array_equal(serial.words(d)[0], par.words(d)[0])


def test_make_engine_rules_and_errors():
    assert make_engine().name == "serial"
    assert make_engine(None, 2).name == "processes"
    with pytest.raises(ParameterError, match="not known"):
        make_engine("threads")
    with pytest.raises(ParameterError, match="only applies to the dask engine"):
        make_engine("processes", 2, "tcp://127.0.0.1:1")
    with pytest.raises(ParameterError, match="positive whole number"):
        make_engine("processes", 0)


def test_missing_dask_is_one_clear_sentence(monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import fails as if not installed
    with pytest.raises(ParameterError) as info:
        import_dask()
    msg = str(info.value)
    assert msg == DASK_MISSING
    assert "pip install 'fractalseq[cluster]'" in msg and msg.count(".") == 1 and msg.endswith(".")
    with pytest.raises(ParameterError, match="fractalseq\\[cluster\\]"):
        make_engine("dask", 2)


def test_cache_round_trip_key_and_damage(tmp_path):
    cache = ResultCache(tmp_path / "c")
    key = cache_key("file:abc", {"depth": 3})
    assert key != cache_key("file:abc", {"depth": 4}) != cache_key("file:abd", {"depth": 3})
    assert cache.get(key) is None
    cache.put(key, {"x": 1.5, "name": "a"}, {"w": np.arange(5, dtype=np.uint64)})
    res, arrays = cache.get(key)
    assert res == {"x": 1.5, "name": "a"} and np.array_equal(arrays["w"], np.arange(5))
    npz = next((tmp_path / "c").rglob("*.npz"))
    npz.write_bytes(npz.read_bytes()[:-3] + b"xyz")  # damaged arrays: treated as absent
    assert cache.get(key) is None
    assert ResultCache(None).get(key) is None


def test_process_workers_run_single_threaded_and_the_parent_keeps_its_settings():
    """Worker processes get one numba/BLAS thread each (the pool is the parallelism); the parent is unchanged."""
    import os

    from fractalseq.jobs._engines import THREAD_VARIABLES, ProcessEngine

    before = {k: os.environ.get(k) for k in THREAD_VARIABLES}
    with ProcessEngine(1) as eng:
        got = [eng.submit(os.getenv, k).result(timeout=120) for k in THREAD_VARIABLES]
    assert got == ["1"] * len(THREAD_VARIABLES)
    assert {k: os.environ.get(k) for k in THREAD_VARIABLES} == before

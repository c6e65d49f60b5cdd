"""Sliding-window scan and change points."""

from __future__ import annotations

import collections
import json
import math
import subprocess

import numpy as np
import pytest

from fractalseq.alphabet import dna
from fractalseq.compare._changepoint import noise_scale, pelt, segment_series
from fractalseq.compare._scan import scan_stream, window_counts
from fractalseq.stream import SymbolArray, from_codes

from _paths import CLI


def test_window_counts_match_a_stdlib_recount():
    rng = np.random.default_rng(0)
    codes = rng.integers(0, 4, 3000).astype(np.uint8)
    arr = SymbolArray(dna(), codes, [0, 410, 411, 1999], "x")
    depth, window, step = 3, 257, 61
    nw = (len(arr) - window) // step + 1
    N, Kw, Kc, Sw, Sc = window_counts(arr.codes, arr.starts, depth, 2, window, step, nw)
    seg_of = np.searchsorted(arr.starts, np.arange(len(arr)), side="right") - 1
    for j in range(nw):
        s = j * step
        words = collections.Counter()
        for p in range(s, s + window - depth + 1):
            if seg_of[p] == seg_of[p + depth - 1]:
                words[tuple(codes[p : p + depth])] += 1
        ctx = collections.Counter()
        for w, c in words.items():
            ctx[w[:-1]] += c
        assert N[j] == sum(words.values()) and Kw[j] == len(words) and Kc[j] == len(ctx)
        assert Sw[j] == pytest.approx(sum(c * math.log(c) for c in words.values()), abs=1e-8)
        assert Sc[j] == pytest.approx(sum(c * math.log(c) for c in ctx.values()), abs=1e-8)


def _brute_force(x, penalty, min_size):
    """Optimal partitioning by exhaustive dynamic programming (Jackson et al. 2005), O(n^2)."""
    n = len(x)
    best = [0.0] + [math.inf] * n
    arg = [0] * (n + 1)
    best[0] = -penalty
    for t in range(1, n + 1):
        for s in range(0, t - min_size + 1):
            if s != 0 and s < min_size:
                continue
            seg = x[s:t]
            v = best[s] + float(((seg - seg.mean()) ** 2).sum()) + penalty
            if v < best[t]:
                best[t], arg[t] = v, s
    cuts, t = [], n
    while t > 0:
        if arg[t] > 0:
            cuts.append(arg[t])
        t = arg[t]
    return sorted(cuts)


def test_pelt_equals_exhaustive_optimal_partitioning():
    rng = np.random.default_rng(1)
    for trial in range(15):
        levels = rng.normal(0, 3, 4)
        x = np.concatenate([rng.normal(m, 1, int(rng.integers(5, 30))) for m in levels])
        for min_size in (1, 3):
            pen = 2 * math.log(len(x))
            assert pelt(x, pen, min_size) == _brute_force(x, pen, min_size)


def test_noise_scale_is_a_standard_deviation():
    rng = np.random.default_rng(2)
    x = rng.normal(5.0, 2.0, 20_000)
    assert noise_scale(x) == pytest.approx(2.0, rel=0.03)  # MAD/0.6745 of differences / sqrt 2
    steps = np.concatenate([np.zeros(500), np.full(500, 10.0)]) + rng.normal(0, 1, 1000)
    seg = segment_series({"a": steps})
    assert seg.breaks == [500]


def _genome_with_repeat(seed, pos=41_234, unit=23, copies=150, n=100_000):
    rng = np.random.default_rng(seed)
    codes = rng.integers(0, 4, n).astype(np.uint8)
    rep = np.tile(rng.integers(0, 4, unit).astype(np.uint8), copies)
    return from_codes(dna(), np.concatenate([codes[:pos], rep, codes[pos:]]), name="synthetic"), pos, pos + rep.size


@pytest.mark.parametrize("seed,unit,copies,window", [(0, 23, 150, 1000), (1, 7, 600, 1000), (2, 41, 120, 2000)])
def test_tandem_repeat_interval_found_within_one_window(seed, unit, copies, window):
    # invented sequence: uniform random DNA with one inserted tandem repeat
    arr, lo, hi = _genome_with_repeat(seed, unit=unit, copies=copies)
    res = scan_stream(arr, window, window // 4)
    assert len(res.low_complexity) == 1
    region = res.low_complexity[0]
    assert abs(region["start"] - lo) <= window and abs(region["end"] - hi) <= window
    outside = np.median(res.series["entropy_rate"])
    assert outside > 1.9  # uniform random DNA: close to 2 bits per symbol
    assert region["entropy_rate"] < outside - 0.15  # the repeat is more predictable


def test_random_sequence_has_no_low_complexity_region():
    rng = np.random.default_rng(9)
    arr = from_codes(dna(), rng.integers(0, 4, 120_000).astype(np.uint8), name="random")
    res = scan_stream(arr, 2000, 500)
    assert res.low_complexity == ()
    assert len(res.intervals) <= 2


def test_cli_scan_json_contract_and_determinism(tmp_path):
    arr, lo, hi = _genome_with_repeat(3, n=60_000, pos=20_000)
    fa = tmp_path / "s.fa"
    fa.write_text(">s\n" + "".join("ACGT"[c] for c in arr.codes) + "\n")
    args = CLI + ["scan", str(fa), "--window", "1000", "--step", "250", "--json", "-q"]
    a = subprocess.run(args, capture_output=True, text=True)
    b = subprocess.run(args, capture_output=True, text=True)
    assert a.returncode == 0, a.stderr
    assert a.stdout == b.stdout
    data = json.loads(a.stdout)
    assert {"windows", "change_points", "intervals", "low_complexity"} <= set(data)
    assert len(data["windows"]["start"]) == len(data["windows"]["entropy_rate"]) == (len(arr) - 1000) // 250 + 1
    assert "PELT" in data["change_points"]["method"] and data["change_points"]["penalty_rule"].startswith("BIC")
    (region,) = data["low_complexity"]
    assert abs(region["start"] - lo) <= 1000 and abs(region["end"] - hi) <= 1000
    out = tmp_path / "o"
    c = subprocess.run(CLI + ["scan", str(fa), "--window", "1000", "--out", str(out), "-q"], capture_output=True, text=True)
    assert c.returncode == 0, c.stderr
    assert {p.name for p in out.iterdir()} == {"scan.json", "scan.csv", "scan.png", "scan.html"}
    again = subprocess.run(CLI + ["scan", str(fa), "--window", "1000", "--out", str(out), "-q"], capture_output=True, text=True)
    assert again.returncode == 2 and "--force" in again.stderr
    short = subprocess.run(CLI + ["scan", str(fa), "--window", "100000", "-q"], capture_output=True, text=True)
    assert short.returncode == 2 and "use a smaller window (option --window)." in short.stderr


def test_result_is_frozen_and_keeps_the_documented_json_keys():
    """The ``scan --json`` document keeps the keys of its contract (README, "JSON contract (scan --json)")
    now that it is generated from the result's fields; per-window arrays stay out of the top level."""
    import dataclasses

    arr, lo, hi = _genome_with_repeat(3, n=20_000, pos=8_000, copies=80)
    res = scan_stream(arr, 1000, 250)
    d = res.to_dict()
    assert set(d) == {"command", "fractalseq", "caution", "name", "length", "window", "step", "depth", "ratio",
                      "figures", "windows", "change_points", "intervals", "low_complexity", "records", "notes", "read_notes", "unit"}
    assert set(d["figures"]) == {"entropy_rate", "D0", "surprise"}
    assert set(d["windows"]) == {"start", *res.series}
    assert d["windows"]["start"] == res.starts.tolist()
    assert set(d["change_points"]) == {"method", "penalty", "penalty_rule", "breaks", "noise", "positions"}
    assert d["change_points"]["positions"] == res.change_positions()
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.window = 5


def test_errors_name_the_parameter():
    from fractalseq.errors import ParameterError

    arr, _, _ = _genome_with_repeat(4, n=3000, pos=1000, copies=10)
    for kwargs, name in (({"window": 1}, "window"), ({"window": 100, "step": 101}, "step"),
                         ({"window": 100, "ratio": 1.5}, "ratio"), ({"window": 10_000}, "window"),
                         ({"window": 100, "depth": 100}, "depth")):
        with pytest.raises(ParameterError) as err:
            scan_stream(arr, **kwargs)
        assert err.value.parameter == name and "--" not in str(err.value)


def _logistic_csv(path, n: int, x0: float = 0.4) -> None:
    x, rows = x0, ["x"]
    for _ in range(n):
        x = 4.0 * x * (1.0 - x)
        rows.append(repr(x))
    path.write_text("\n".join(rows) + "\n")


@pytest.mark.parametrize("delay", [1, 2])
def test_scan_of_ordinal_patterns_reports_a_per_step_rate(tmp_path, delay):
    # The pattern stream of the logistic map at r = 4 is a factor of the map, so its entropy rate per step is at
    # most the map's Kolmogorov-Sinai entropy, 1 bit (Bandt, Keller & Pompe 2002, Nonlinearity 15:1595, from
    # memory); a single pattern of order 3 carries up to log2 3! = 2.58 bits, so a scan that read the entropy
    # of single patterns (depth 1) would report about 2.3 bits here.
    path = tmp_path / "logistic.csv"
    _logistic_csv(path, 20_000)
    run = subprocess.run([*CLI, "scan", str(path), "--format", "numeric", "--ordinal", "3", "--delay", str(delay),
                          "--window", "4000", "--json", "-q"], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    doc = json.loads(run.stdout)
    assert doc["depth"] >= delay + 1
    rates = [iv["entropy_rate"] for iv in doc["intervals"]]
    assert rates and max(rates) <= 1.05, rates


def test_automatic_depth_of_a_log_scan_comes_from_the_observed_words():
    """dpkg's log (reference/logs/dpkg-excerpt.log, real, provenance in reference/logs/README.md): 12 templates.

    The fixed rule A^n x 20 <= window stops at n = 1 for a 150-line window (12^2 x 20 = 2880), which made the
    entropy-rate figure the entropy of single templates (about 2.4 bits on this log, while the log repeats one
    install cycle per package).  The depth now follows the words the windows hold (recounted here with
    collections.Counter), and the figure stays below an outside upper bound: the bits per line of the template
    stream compressed by stdlib lzma/bz2/zlib (a compressor's rate bounds the entropy rate of a stationary
    source from above in the limit: common practice; the bound is of the whole log, windows hold parts of it).
    """
    import bz2
    import lzma
    import zlib

    from fractalseq.sources import open_source

    from test_miner import LOGS

    path = LOGS / "dpkg-excerpt.log"
    run = subprocess.run([*CLI, "scan", str(path), "--json", "-q"], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    doc = json.loads(run.stdout)
    codes = open_source(path, fmt="log", alphabet="learn").to_array().codes.tolist()
    window, step = doc["window"], doc["step"]
    starts = range(0, len(codes) - window + 1, step)

    def held(n: int) -> bool:  # the median window sees its distinct n-words 20 times on average
        ok = 0
        for s in starts:
            words = collections.Counter(tuple(codes[p : p + n]) for p in range(s, s + window - n + 1))
            ok += 20 * len(words) <= sum(words.values())
        return 2 * ok >= len(starts)

    expect = 1
    while held(expect + 1):
        expect += 1
    assert expect > 1 and doc["depth"] == expect
    raw = bytes(codes)
    bound = min(8 * len(c(raw)) / len(raw) for c in (lzma.compress, lambda b: bz2.compress(b, 9), lambda b: zlib.compress(b, 9)))
    rates = doc["windows"]["entropy_rate"]
    assert float(np.median(rates)) <= bound < 1.0

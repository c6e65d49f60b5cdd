"""Short measured series: the block length the counts support, rates held to their own bounds, tables without raw values.

Real series (reference/PROVENANCE.md, "timeseries/"): yearly sunspot numbers 1700-2008 (309 values) and weekly
CO2 at Mauna Loa 1958-2001 (2,284 weeks, 59 missing), both public domain, as shipped in statsmodels 0.15.0.
"""

from __future__ import annotations

import csv
import hashlib
import math
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from fractalseq import alphabet as al
from fractalseq.cli.app import main
from fractalseq.entropy import permutation_entropy
from fractalseq.entropy._bounds import hold_to_bounds
from fractalseq.entropy._depth import evidence_depth
from fractalseq.entropy._estimators import EntropyEstimate, choose_depth
from fractalseq.jobs._profile import profile_source
from fractalseq.sources import open_source
from fractalseq.resampling import Resampling
from fractalseq.stream import SymbolArray
from fractalseq.words._counts import count_words

SERIES = Path(__file__).resolve().parents[1] / "reference" / "timeseries"
SUNSPOTS = SERIES / "sunspots_yearly.csv"
CO2 = SERIES / "co2_mauna_loa_weekly.csv"
SHA256 = {
    SUNSPOTS: "f67889b1d9002cd5227f0e0ef54e35b419cdd85a31279adef6f73fb41e5c0a9b",
    CO2: "16695fa2786e53414e5a6b54767a3fdf5de99cfbc68617f69d1362d92776a92f",
}
COLUMN = {SUNSPOTS: "SUNACTIVITY", CO2: "co2"}


def values(path: Path) -> np.ndarray:
    """The series read with the csv module (stdlib); an empty field is missing."""
    col = COLUMN[path]
    with open(path, newline="") as fh:
        return np.array([float(r[col]) if r[col].strip() else np.nan for r in csv.DictReader(fh)])


def test_reference_files_are_the_committed_bytes():
    for path, digest in SHA256.items():
        assert hashlib.sha256(path.read_bytes()).hexdigest() == digest, path.name
    assert values(SUNSPOTS).size == 309  # 1700..2008, one value a year
    co2 = values(CO2)
    assert co2.size == 2284 and int(np.isnan(co2).sum()) == 59


def test_missing_values_break_the_series_not_the_reader():
    co2 = values(CO2)
    arr = open_source(CO2, fmt="numeric", column="co2", bins=4).to_array()
    assert len(arr) == 2284 - 59
    # runs of present values, counted with the stdlib: each is one segment
    runs = sum(1 for i, v in enumerate(co2) if not math.isnan(v) and (i == 0 or math.isnan(co2[i - 1])))
    assert len(arr.segment_bounds) == runs
    assert arr.report.extra["numeric"]["missing"] == 59


@pytest.mark.parametrize("path", [SUNSPOTS, CO2], ids=["sunspots", "co2"])
def test_permutation_entropy_of_the_real_series(path):
    # the plug-in permutation entropy (Bandt & Pompe 2002) by an independent route: sorted() windows, scipy's entropy
    x = values(path)
    for m in (3, 4):
        pats = Counter()
        for t in range(x.size - m + 1):
            w = x[t : t + m]
            if not np.isnan(w).any():
                pats[tuple(sorted(range(m), key=lambda j: w[j]))] += 1
        expect = scipy.stats.entropy(list(pats.values()), base=2)
        pe = permutation_entropy(x, m, n_boot=100, seed=0)
        assert pe.bits == pytest.approx(expect, abs=1e-12)
        assert pe.distinct == len(pats)
        assert 0.0 < pe.normalized < 1.0
        assert pe.conditional_bits <= math.log2(m) + 1e-12  # a pattern has at most m successors


def _upper(rates: dict, limit: float) -> float:
    return min([limit] + [r["estimate"] for r in rates.values() if r["kind"] == "upper bound"])


CASES = [(SUNSPOTS, {"ordinal": 3}), (SUNSPOTS, {"ordinal": 4}), (SUNSPOTS, {"bins": 4}), (SUNSPOTS, {"bins": 8}),
         (CO2, {"ordinal": 3}), (CO2, {"ordinal": 4}), (CO2, {"bins": 4}), (CO2, {"bins": 8})]


@pytest.fixture(scope="module")
def real_profiles() -> list[tuple[str, dict, dict]]:
    out = []
    for path, kw in CASES:
        arr = open_source(path, fmt="numeric", column=COLUMN[path], **kw).to_array()
        out.append((path.name, kw, profile_source(arr, image=False, resampling=Resampling(n_boot=40, seed=1)).to_dict()))
    return out


def test_real_series_rates_are_held_to_their_own_bounds(real_profiles):
    used_bound = 0
    for name, kw, d in real_profiles:
        rates = d["entropy_rate_bits"]
        m = kw.get("ordinal", 0)
        # the largest rate: log2 A, or log2 m per step for ordinal patterns (at most m successors)
        limit = math.log2(m) if m else math.log2(d["alphabet_size"])
        top = _upper(rates, limit)
        for key, r in rates.items():
            inside = 0.0 <= r["estimate"] <= (limit if r["kind"] == "upper bound" else top) + 1e-9
            assert r["within_bounds"] is inside, (name, kw, key, r["estimate"], top)
        use = d["rate_to_use"]
        assert 0.0 <= use["estimate"] <= top + 1e-12, (name, kw)
        g = rates["grassberger"]
        if g["within_bounds"]:
            assert use["estimator"] == "grassberger" and use["estimate"] == g["estimate"]
        else:
            used_bound += 1
            assert use["kind"] == "upper bound" and use["estimate"] == pytest.approx(top, abs=1e-12)
            assert any(n.startswith("entropy rate: ") and "exceeds" in n for n in d["notes"]), d["notes"]
        if m:
            assert g["depth"] >= 1, (name, kw)  # a per-step rate of patterns, never the single-pattern entropy
            assert d["permutation_entropy"]["order"] == m
        else:
            assert d["permutation_entropy"] is None
    # the bound branch is exercised: 309 sunspot years in 8 bins cannot support pairs of symbols, and the
    # single-symbol entropy (3.02 bits) is above the online predictor's code length (2.44 bits)
    assert used_bound >= 1


def test_block_length_is_the_deepest_the_counts_support(real_profiles):
    # recount the words of the chosen depth with the stdlib: observed words seen >= 20 times on average,
    # and the fixed rule A^(n+1) <= length/100 (Grassberger's rule of thumb) never goes deeper
    for (path, kw), (_, _, d) in zip(CASES, real_profiles):
        arr = open_source(path, fmt="numeric", column=COLUMN[path], **kw).to_array()
        n = d["entropy_rate_bits"]["grassberger"]["depth"]
        fixed, _ = choose_depth(len(arr), arr.alphabet.size, offset=1)
        assert n >= min(fixed, d["depth"] - 1)

        def words(k: int) -> Counter:
            c = Counter()
            for a, b in arr.segment_bounds:
                s = arr.codes[a:b].tolist()
                c.update(tuple(s[i : i + k]) for i in range(len(s) - k + 1))
            return c

        if d["entropy_rate_bits"]["grassberger"]["reliable"]:
            w = words(n + 1)
            assert len(w) * 20 <= sum(w.values()), (path.name, kw, n)
            if n + 2 <= d["depth"]:
                w2 = words(n + 2)
                assert len(w2) * 20 > sum(w2.values()), (path.name, kw, n)


def test_source_with_daily_memory_is_read_deep_enough():
    # An invented day of 48 half-hour load levels (4 levels), repeated for 12 weeks: a periodic source, rate 0.
    # The fixed rule stops at n = 1 (4^2 <= 4032/100), where H(2) - H(1) is large; the counts support far more.
    day = np.random.default_rng(7).integers(0, 4, 48)
    arr = SymbolArray(al.from_symbols("0123"), np.tile(day, 84).astype(np.uint8), np.array([0]), name="invented-load")
    fixed, _ = choose_depth(len(arr), 4, offset=1)
    assert fixed == 1
    d = profile_source(arr, image=False, resampling=Resampling.none()).to_dict()
    g = d["entropy_rate_bits"]["grassberger"]
    assert g["depth"] > fixed and abs(g["estimate"]) < 0.01
    # forced to the shallow depth, the estimate lies above the online code length: the bound is the figure to use
    d2 = profile_source(arr, image=False, depth=2, resampling=Resampling.none()).to_dict()
    g2, bound = d2["entropy_rate_bits"]["grassberger"], d2["entropy_rate_bits"]["online_predictor"]
    assert g2["estimate"] > bound["estimate"] and g2["within_bounds"] is False
    assert d2["rate_to_use"]["estimator"] in ("online_predictor", "compressors")
    assert d2["rate_to_use"]["estimate"] <= bound["estimate"]


def test_evidence_depth_of_iid_symbols():
    # i.i.d. uniform symbols over 4 letters, 40,000 of them: all 4^k words occur, each about 40,000/4^k times, so
    # the words are seen 20 times on average up to k = 7 (4^7 = 16384 -> 2.4 times: no; 4^6 = 4096 -> 9.8: no;
    # 4^5 = 1024 -> 39: yes): n = k - 1 = 4, deeper than the fixed rule's n = 3 (4^4 = 256 <= 400)
    codes = np.random.default_rng(3).integers(0, 4, 40_000).astype(np.uint8)
    arr = SymbolArray(al.from_symbols("ACGT"), codes, np.array([0]), name="iid")
    ev = evidence_depth(count_words(arr, 8))
    assert (ev.depth, ev.fixed_rule_depth, ev.supported) == (4, 3, True)


def test_hold_to_bounds_picks_the_bound_when_an_estimate_exceeds_it():
    def est(v, kind):
        return kind, EntropyEstimate(quantity="entropy rate", method="x", estimate=v)

    rates = {"grassberger": est(0.60, "estimate"), "compressors": est(0.55, "upper bound"),
             "online_predictor": est(0.45, "upper bound"), "lz76": est(0.50, "estimate")}
    c = hold_to_bounds(rates, 2.0)
    assert (c.estimator, c.estimate, c.upper_bound_by) == ("online_predictor", 0.45, "online_predictor")
    assert c.within == {"grassberger": False, "compressors": True, "online_predictor": True, "lz76": False}
    rates["grassberger"] = est(0.40, "estimate")
    assert hold_to_bounds(rates, 2.0).estimator == "grassberger"


def test_cli_table_shows_per_step_rates_and_no_raw_values(capsys):
    status = main(["profile", str(SUNSPOTS), "--format", "numeric", "--column", "SUNACTIVITY", "--ordinal", "4",
                   "--boot", "20", "--quiet"])
    assert status == 0
    out = capsys.readouterr().out
    for raw in ("None", "nan", "NaN", "inf", "{'", "['", "n = 0"):
        assert raw not in out, raw
    for text in ("PE order 4", "PE normalized", "PE conditional", "h to use", "n = 1 per step", "19 of 24"):
        assert text in out, text


def test_html_report_has_no_raw_values(tmp_path):
    import html
    import re

    out = tmp_path / "rep"
    assert main(["profile", str(CO2), "--format", "numeric", "--column", "co2", "--ordinal", "4", "--boot", "20",
                 "--quiet", "--out", str(out)]) == 0
    (page,) = out.glob("*/index.html")
    text = re.sub(r"<script.*?</script>|<style.*?</style>|data:image/png;base64,[A-Za-z0-9+/=]+", "", page.read_text(), flags=re.S)
    text = html.unescape(re.sub(r"<[^>]+>", " ", text))
    for raw in (r"\bNone\b", r"\bnan\b", r"\bNaN\b", r"\binf\b", r"\{'", r"\['", r"array\("):
        assert re.search(raw, text) is None, raw
    assert "Ordinal patterns" in text and "permutation entropy" in text
    assert (page.parent / "permutation.csv").is_file()


def test_time_column_is_skipped_by_default(tmp_path):
    # both files start with a time column (YEAR; date as YYYYMMDD): the measurement is the column to read
    sun = open_source(SUNSPOTS, fmt="numeric", ordinal=3).to_array().report.extra["numeric"]
    assert (sun["column"], sun["time_column"]) == ("SUNACTIVITY", "YEAR")
    co2 = open_source(CO2, fmt="numeric", bins=4).to_array().report.extra["numeric"]
    assert (co2["column"], co2["time_column"]) == ("co2", "date")
    # a lone column is read even when it increases, and a measurement column first in the file is kept
    lone = tmp_path / "lone.csv"
    lone.write_text("count\n1\n2\n3\n5\n8\n")
    info = open_source(lone, fmt="numeric", bins=2).to_array().report.extra["numeric"]
    assert (info["column"], info["time_column"]) == ("count", None)
    first = tmp_path / "first.csv"
    first.write_text("level,t\n0.5,1\n0.2,2\n0.9,3\n0.4,4\n")
    info = open_source(first, fmt="numeric", bins=2).to_array().report.extra["numeric"]
    assert (info["column"], info["time_column"]) == ("level", "t")  # read first; t is still the time column


def test_time_column_gaps_end_a_segment(tmp_path):
    # an invented daily series with three days left out (Jan 11-13): the step of 4 days is a gap, not a missing value
    days = list(range(1, 11)) + list(range(14, 21))
    rows = ["date,load"] + [f"2024-01-{d:02d},{math.sin(d):.3f}" for d in days]
    path = tmp_path / "daily.csv"
    path.write_text("\n".join(rows) + "\n")
    arr = open_source(path, fmt="numeric", bins=2).to_array()
    info = arr.report.extra["numeric"]
    assert (info["time_column"], info["time_step"], info["time_unit"], info["time_gaps"]) == ("date", 86400.0, "seconds", 1)
    assert info["values"] == 17 and info["missing"] == 0 and arr.report.dropped == {}
    assert arr.starts.tolist() == [0, 10] and len(arr) == 17
    # ordinal windows never span the gap: 10 - 2 and 7 - 2 windows of three
    pats = open_source(path, fmt="numeric", ordinal=3).to_array()
    assert pats.starts.tolist() == [0, 8] and len(pats) == 8 + 5
    # the same dates as YYYYMMDD numbers are read as days
    path.write_text("\n".join(["day,load"] + [f"202401{d:02d},{math.sin(d):.3f}" for d in days]) + "\n")
    info = open_source(path, fmt="numeric", bins=2).to_array().report.extra["numeric"]
    assert (info["time_step"], info["time_unit"], info["time_gaps"]) == (1.0, "days", 1)
    # the weekly CO2 file lists its missing weeks as empty rows: no gaps in its dates, 59 missing values
    co2 = open_source(CO2, fmt="numeric", bins=4).to_array().report.extra["numeric"]
    assert (co2["time_step"], co2["time_gaps"], co2["missing"]) == (7.0, 0, 59)

"""Numeric tables as users have them: several columns, embedding delay and tie rules from the command line.

Real data (reference/PROVENANCE.md, "timeseries/"): quarterly US macroeconomic series 1959Q1-2009Q3 (203 rows,
14 columns, public domain, FRED and BLS as compiled in statsmodels 0.15.0), weekly CO2 at Mauna Loa (59 missing
weeks) and yearly sunspot numbers. Small tables written here are invented and say so.
"""

from __future__ import annotations

import csv
import hashlib
import json
import math
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from fractalseq.cli.app import main
from fractalseq.entropy._ordinal import ordinal_patterns, permutation_entropy
from fractalseq.errors import ParameterError
from fractalseq.jobs._drift_columns import holm
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.jobs._profile import profile_source
from fractalseq.resampling import Resampling
from fractalseq.sources import numeric_columns, open_source

SERIES = Path(__file__).resolve().parents[1] / "reference" / "timeseries"
MACRO = SERIES / "us_macro_quarterly.csv"
CO2 = SERIES / "co2_mauna_loa_weekly.csv"
SUNSPOTS = SERIES / "sunspots_yearly.csv"
MACRO_SHA256 = "d93c0d3a7a77ef83c3af14e46032bb1d02ae3a512b22ab94159a8ca226fcf708"
MEASURED = ["realgdp", "realcons", "realinv", "realgovt", "realdpi", "cpi", "m1", "tbilrate", "unemp", "pop", "infl", "realint"]


def column(path: Path, name: str) -> np.ndarray:
    """One column read with the csv module (stdlib); an empty field is missing (NaN)."""
    with open(path, newline="") as fh:
        return np.array([float(r[name]) if r[name].strip() else np.nan for r in csv.DictReader(fh)])


def stdlib_patterns(x: np.ndarray, m: int, tau: int = 1) -> list[tuple[int, ...]]:
    """Ordinal patterns by sorted() with the earlier position winning ties (Bandt & Pompe 2002); NaN windows skipped."""
    out = []
    for t in range(len(x) - (m - 1) * tau):
        w = [x[t + j * tau] for j in range(m)]
        if any(math.isnan(v) for v in w):
            continue
        out.append(tuple(sorted(range(m), key=lambda j: (w[j], j))))
    return out


def run(capsys, *args: str) -> tuple[int, str, str]:
    code = main([str(a) for a in args])
    out = capsys.readouterr()
    return code, out.out, out.err


# ------------------------------------------------------------- the data
def test_macro_table_is_the_committed_bytes():
    assert hashlib.sha256(MACRO.read_bytes()).hexdigest() == MACRO_SHA256
    with open(MACRO, newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert len(rows) == 203 and list(rows[0])[:3] == ["year", "quarter", "realgdp"]


# ------------------------------------------------------- several columns
def test_column_lists_name_the_measured_columns():
    # "all": every numeric column but the time column (year) and the calendar part (quarter)
    assert numeric_columns(MACRO, "all") == MEASURED
    assert numeric_columns(MACRO, "infl, realgdp") == ["infl", "realgdp"]
    assert numeric_columns(MACRO, "2,2,12") == ["realgdp", "infl"]  # 0-based indices, duplicates once
    assert numeric_columns(MACRO, "realgdp") is None  # one column: one source
    # without --column: the first measured column (year is the time column, quarter a calendar part)
    assert open_source(MACRO, bins=4).to_array().report.extra["numeric"]["column"] == "realgdp"
    assert numeric_columns(CO2, "all") == ["co2"]  # the date column is a time column
    with pytest.raises(ParameterError, match="no column 'gdp'"):
        numeric_columns(MACRO, "realgdp,gdp")
    with pytest.raises(ParameterError, match="apply to numeric tables"):
        numeric_columns(SERIES.parent / "lambda_virus.fa.gz", "all")


def test_each_column_is_its_own_source_with_the_values_of_that_column():
    per = ReaderOptions(fmt="numeric", column="realgdp,unemp", ordinal=3).per_column(MACRO)
    assert [c for c, _ in per] == ["realgdp", "unemp"]
    for name, opts in per:
        arr = opts.read(MACRO)
        x = column(MACRO, name)
        names = ["".join(map(str, p)) for p in stdlib_patterns(x, 3)]
        assert [arr.alphabet.symbols[c] for c in arr.codes] == names


def test_profile_json_gives_one_source_per_column(capsys):
    code, out, err = run(capsys, "profile", MACRO, "--column", "realgdp,infl", "--ordinal", "3", "--boot", "0", "--json")
    assert code == 0, err
    doc = json.loads(out)
    assert [s["name"] for s in doc["sources"]] == [f"{MACRO}:realgdp", f"{MACRO}:infl"]
    for s, name in zip(doc["sources"], ["realgdp", "infl"]):
        # permutation entropy (Bandt & Pompe 2002) by an independent route: stdlib patterns, scipy's entropy
        counts = Counter(stdlib_patterns(column(MACRO, name), 3))
        want = scipy.stats.entropy(list(counts.values()), base=2)
        assert s["permutation_entropy"]["bits"] == pytest.approx(want, abs=1e-12)
        assert s["input"]["numeric"]["column"] == name and s["input"]["numeric"]["time_column"] == "year"


def test_survey_with_all_columns(capsys):
    code, out, err = run(capsys, "survey", MACRO, "--column", "all", "--ordinal", "3", "--json", "-q", "--no-cache")
    assert code == 0, err
    doc = json.loads(out)
    assert [s["name"] for s in doc["sources"]] == [f"{MACRO.name}:{c}" for c in MEASURED]
    assert len(doc["distances"]["names"]) == len(MEASURED)
    # every column's profile holds its rates to its own bounds: [0, smallest code length, log2 3 per step]
    # (a pattern of order 3 has at most 3 successors: common practice, see the README)
    for s in doc["sources"]:
        prof, name = s["profile"], s["name"]
        rates = prof["entropy_rate_bits"]
        top = min([math.log2(3)] + [r["estimate"] for r in rates.values() if r["kind"] == "upper bound"
                                    and r["estimate"] is not None and r["estimate"] <= math.log2(3)])
        for key, r in rates.items():
            inside = 0.0 <= r["estimate"] <= (math.log2(3) if r["kind"] == "upper bound" else top) + 1e-9
            assert r["within_bounds"] is inside, (name, key, r["estimate"], top)
        use = prof["rate_to_use"]
        assert 0.0 <= use["estimate"] <= top + 1e-12, name
        g = rates["grassberger"]
        if g["within_bounds"]:
            assert use["estimate"] == g["estimate"]
        elif g["estimate"] < 0:  # population rises every quarter: one pattern, rate 0, a slightly negative estimate
            assert use["estimate"] == 0.0 and "below 0" in use["reason"], name
        else:
            assert use["kind"] == "upper bound" and use["estimate"] == pytest.approx(top, abs=1e-12), name
    pop = doc["sources"][MEASURED.index("pop")]["profile"]
    assert pop["permutation_entropy"]["distinct"] == 1 and pop["permutation_entropy"]["bits"] == 0.0


def test_missing_values_and_gaps_in_one_column_break_only_that_column(tmp_path):
    # invented table: a regular daily time column (days 1..21) with day 11 missing (a gap), a column with NA on
    # day 3 and one without missing values
    days = [d for d in range(1, 22) if d != 11]
    lines = ["day,a,b"] + [f"{d},{'NA' if d == 3 else d % 4},{(7 * d) % 5}" for d in days]
    path = tmp_path / "invented.csv"
    path.write_text("\n".join(lines) + "\n")
    a, b = (ReaderOptions(fmt="numeric", column=c, bins=2).read(path) for c in ("a", "b"))
    # a: runs days 1-2, 4-10, 12-21 (the NA and the gap after day 10 end a segment)
    assert (len(a), a.starts.tolist()) == (19, [0, 2, 9])
    # b: no missing value, only the gap: days 1-10, 12-21
    assert (len(b), b.starts.tolist()) == (20, [0, 10])
    info = b.report.extra["numeric"]
    assert (info["time_column"], info["time_step"], info["time_gaps"], info["missing"]) == ("day", 1.0, 1, 0)


def test_several_columns_refused_where_one_is_read(capsys):
    code, _, err = run(capsys, "count", MACRO, "--column", "realgdp,infl")
    assert code == 2 and "several columns" in err and len(err.strip().splitlines()) == 1


# ----------------------------------------------------------- drift by column
def test_holm_adjustment_worked_example():
    # Holm (1979), Scand. J. Statist. 6:65: sorted p 0.01, 0.03, 0.04 of k = 3 become
    # 3 x 0.01 = 0.03, max(0.03, 2 x 0.03) = 0.06, max(0.06, 1 x 0.04) = 0.06 (worked by hand)
    assert holm([0.04, 0.01, 0.03]) == pytest.approx([0.06, 0.03, 0.06])
    assert holm([0.5, 0.9]) == pytest.approx([1.0, 1.0])  # 2 x 0.5 = 1; the step-down keeps max(1, 0.9)


def test_drift_by_column_on_real_quarters(tmp_path, capsys):
    with open(MACRO, newline="") as fh:
        rows = list(csv.reader(fh))
    head, body = rows[0], rows[1:]
    before, after = tmp_path / "before.csv", tmp_path / "after.csv"
    for path, part in ((before, [r for r in body if int(r[0]) < 1984]), (after, [r for r in body if int(r[0]) >= 1984])):
        with open(path, "w", newline="") as fh:
            csv.writer(fh).writerows([head, *part])
    code, out, err = run(capsys, "drift", before, after, "--column", "realgdp,unemp", "--json", "-q", "--permutations", "199")
    doc = json.loads(out)
    assert doc["format"] == "fractalseq-drift-columns" and [c["column"] for c in doc["columns"]] == ["realgdp", "unemp"]
    p = [c["drift"]["p_value"] for c in doc["columns"]]
    assert [c["p_value_across_columns"] for c in doc["columns"]] == pytest.approx(holm(p))
    # real GDP grew through the whole period: after 1984 every quarter lies above the baseline's top quartile
    assert doc["columns"][0]["drift"]["changed"] is True and doc["changed"] is True and code == 1


# -------------------------------------------------------- delay and ties
@pytest.mark.parametrize("m,tau,ties", [(3, 2, "time"), (4, 3, "dither"), (2, 7, "dither"), (5, 1, "dither")])
@pytest.mark.parametrize("chunk", [13, 1 << 16])
def test_reader_delay_and_ties_match_the_array_kernel(m, tau, ties, chunk):
    # the reader's streaming kernel against the array kernel of the entropy family, on real CO2 (59 missing weeks)
    x = column(CO2, "co2")
    arr = open_source(CO2, fmt="numeric", column="co2", ordinal=m, delay=tau, ties=ties, seed=11, chunk_size=chunk).to_array()
    codes, starts = ordinal_patterns(x, m, tau, ties, 11)
    assert np.array_equal(arr.codes.astype(np.int64), codes) and np.array_equal(arr.starts, starts)
    if ties == "time":  # and against sorted() with the earlier position winning ties
        names = ["".join(map(str, p)) for p in stdlib_patterns(x, m, tau)]
        assert [arr.alphabet.symbols[c] for c in arr.codes] == names


@pytest.mark.parametrize("m,tau", [(2, 1), (3, 1), (3, 4), (5, 2)])
def test_pattern_ends_are_the_rows_of_the_windows(m, tau):
    # the value each pattern ends at, on real CO2 with missing weeks, against a loop over the windows
    from fractalseq.sources.ordinal_stream import pattern_ends

    x = column(CO2, "co2")
    ends = np.flatnonzero(pattern_ends(np.isfinite(x), m, tau))
    want = [t for t in range((m - 1) * tau, len(x)) if all(not math.isnan(x[t - j * tau]) for j in range(m))]
    assert ends.tolist() == want
    arr = open_source(CO2, fmt="numeric", column="co2", ordinal=m, delay=tau).to_array()
    assert len(arr) == len(want)


def test_dither_breaks_ties_by_the_seed():
    # weekly CO2 is recorded to 0.1 ppm: hundreds of windows of 4 weeks hold equal values (ties), which the dither
    # orders by a seeded key instead of by time
    x = column(CO2, "co2")
    assert sum(len(set(x[t:t + 4])) < 4 and not np.isnan(x[t:t + 4]).any() for t in range(len(x) - 3)) > 600
    read = lambda **kw: open_source(CO2, fmt="numeric", column="co2", ordinal=4, **kw).to_array().codes  # noqa: E731
    assert np.array_equal(read(ties="dither", seed=3), read(ties="dither", seed=3))
    assert not np.array_equal(read(ties="dither", seed=3), read(ties="dither", seed=4))
    assert not np.array_equal(read(ties="dither", seed=3), read())


@pytest.mark.parametrize("args,option", [
    (["--ordinal", "3", "--delay", "0"], "--delay"),
    (["--ordinal", "3", "--ties", "random"], "--ties"),
    (["--delay", "2"], "--delay"),
    (["--ties", "dither"], "--ties"),
])
def test_bad_delay_and_ties_are_one_sentence(capsys, args, option):
    for command in (["profile"], ["survey"], ["count"]):
        code, _, err = run(capsys, *command, SUNSPOTS, *args)
        assert code == 2 and option in err and len(err.strip().splitlines()) == 1, (command, err)


def test_delayed_patterns_of_noise_per_step_rate():
    # i.i.d. noise, order 3, delay 3: patterns at t and t + 1 share no value, so they are independent and uniform
    # (Bandt & Pompe 2002): H(2) - H(1) = H(1) = log2 3! bits. A pattern shares m - 1 = 2 values with the one
    # tau = 3 steps later, so it has at most 3 successors there and the per-step rate, read at n >= tau, is at most
    # log2 3 bits (common practice: the overlap argument of the README).
    x = np.random.default_rng(5).random(60_000)
    codes, starts = ordinal_patterns(x, 3, 3)
    pe = permutation_entropy(x, 3, 3, n_boot=0)
    assert pe.normalized == pytest.approx(1.0, abs=1e-3)
    from fractalseq.sources.numeric import ordinal_alphabet
    from fractalseq.stream import ReadReport, SymbolArray

    report = ReadReport()
    report.extra["numeric"] = {"delay": 3, "ties": "time", "method": "ordinal", "order": 3}
    arr = SymbolArray(ordinal_alphabet(3), codes.astype(np.uint8), starts, "noise", report)
    res = profile_source(arr, resampling=Resampling(n_boot=0)).to_dict()
    rows = {r["depth"]: r for r in res["block_entropies"]}
    assert rows[2]["H_plugin"] - rows[1]["H_plugin"] == pytest.approx(math.log2(6), abs=0.01)
    g = res["entropy_rate_bits"]["grassberger"]
    assert g["depth"] >= 3 and g["estimate"] <= math.log2(3) + 0.01 and g["within_bounds"] is True
    assert rows[4]["possible"] == 6 ** 3 * 3  # m!^tau m^(k - tau) words of length k = 4

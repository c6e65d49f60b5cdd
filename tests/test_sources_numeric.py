"""Numeric columns: quantile bins, thresholds and ordinal patterns."""

from __future__ import annotations

import gzip
import itertools
import math
import tempfile
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from fractalseq.errors import InputError, ParameterError
from fractalseq.sources import open_source
from fractalseq.sources.numeric import ordinal_alphabet, ordinal_symbol


def write_series(path: Path, values, header: str | None = None) -> Path:
    rows = ["" if (isinstance(v, float) and math.isnan(v)) else repr(float(v)) for v in values]
    path.write_text(((header + "\n") if header else "") + "\n".join(rows) + "\n")
    return path


def read(path, **kw):
    stream = open_source(path, fmt="numeric", **kw)
    return stream.to_array(), stream.report


# ------------------------------------------------------------- ordinal
def test_ordinal_alphabet_is_lexicographic():
    a = ordinal_alphabet(3)
    assert a.symbols == ("012", "021", "102", "120", "201", "210")
    assert list(a.symbols) == ["".join(map(str, p)) for p in itertools.permutations(range(3))]
    assert ordinal_alphabet(5).size == math.factorial(5)


def test_increasing_series_gives_only_the_identity_pattern(tmp_path):
    # Bandt & Pompe 2002, Phys. Rev. Lett. 88:174102: a monotone increasing window has the identity pattern.
    path = write_series(tmp_path / "up.txt", np.cumsum(np.arange(1, 501)) * 0.5)
    for m in (2, 3, 4, 5):
        arr, rep = read(path, ordinal=m)
        assert len(arr) == 500 - m + 1
        assert set(arr.codes.tolist()) == {0}
        assert arr.alphabet.symbols[0] == "".join(map(str, range(m)))


def test_iid_noise_makes_all_patterns_equally_likely(tmp_path):
    # Bandt & Pompe 2002: for i.i.d. continuous noise every one of the m! patterns has probability 1/m!.
    # Overlapping windows are dependent, so the chi-square test uses every m-th window (independent).
    x = np.random.default_rng(2002).normal(size=60_000)
    path = write_series(tmp_path / "noise.csv", x, header="x")
    arr, _ = read(path, ordinal=3)
    counts = np.bincount(arr.codes[::3], minlength=6)
    assert stats.chisquare(counts).pvalue > 1e-3
    assert counts.min() > 0.9 * counts.mean()


def test_logistic_map_forbids_the_decreasing_pattern(tmp_path):
    # Amigó, Zambrano & Sanjuán 2007, Europhys. Lett. 79:50001 (forbidden ordinal patterns; from memory):
    # for x -> 4x(1-x) the pattern x[t] > x[t+1] > x[t+2] ("210") never occurs.  Elementary check:
    # x > f(x) needs x > 3/4, and then f(x) = 4x(1-x) < 3/4, so f(x) > f(f(x)) is impossible.
    x = np.empty(20_000)
    x[0] = 0.1234
    for i in range(1, x.size):
        x[i] = 4.0 * x[i - 1] * (1.0 - x[i - 1])
    path = write_series(tmp_path / "logistic.txt", x)
    arr, _ = read(path, ordinal=3)
    seen = Counter(arr.alphabet.decode(arr.codes))
    assert "210" not in seen
    assert set(seen) == {"012", "021", "102", "120", "201"}
    assert min(seen.values()) > 500


@settings(max_examples=40, deadline=None)
@given(
    values=st.lists(
        st.one_of(st.integers(-3, 3).map(float), st.just(float("nan"))), min_size=1, max_size=120
    ),
    m=st.integers(2, 4),
    chunk=st.sampled_from([1, 4, 9, 1 << 16]),
)
def test_ordinal_codes_match_a_slow_definition(values, m, chunk):
    # few distinct values, so ties are frequent: equal values are ordered by appearance
    codes, starts = [], []
    run: list[float] = []
    for v in values:
        if math.isnan(v):
            run = []
            continue
        run.append(v)
        if len(run) >= m:
            if len(run) == m:
                starts.append(len(codes))
            codes.append(ordinal_symbol(run[-m:]))
    with tempfile.TemporaryDirectory() as folder:
        path = write_series(Path(folder) / "v.csv", values, header="v")
        if not codes:
            with pytest.raises(InputError):
                read(path, ordinal=m, chunk_size=chunk)
            return
        arr, rep = read(path, ordinal=m, chunk_size=chunk)
    assert arr.alphabet.decode(arr.codes) == codes
    assert arr.starts.tolist() == starts
    assert rep.dropped.get("missing value", 0) == sum(math.isnan(v) for v in values)


def test_tie_rule_is_order_of_appearance():
    assert ordinal_symbol([1.0, 1.0, 0.0]) == "201"
    assert ordinal_symbol([5.0, 5.0, 5.0]) == "012"


# ------------------------------------------------------------ bins
def test_quantile_bins_are_equal_frequency(tmp_path):
    x = np.random.default_rng(9).random(10_000)
    path = write_series(tmp_path / "u.txt", x)
    arr, rep = read(path, bins=4)
    counts = np.bincount(arr.codes, minlength=4)
    assert counts.tolist() == [2500, 2500, 2500, 2500]
    # same bins as ranking the values (scipy.stats.rankdata) and cutting the ranks into quarters
    ranks = stats.rankdata(x, method="ordinal") - 1
    assert np.array_equal(arr.codes, ranks * 4 // 10_000)
    edges = rep.extra["numeric"]["edges"]
    assert np.allclose(edges, np.quantile(x, [0.25, 0.5, 0.75]))


def test_thresholds_match_numpy_digitize_and_missing_values_break(tmp_path):
    x = np.round(np.random.default_rng(4).normal(size=400), 2)
    x[[10, 11, 200]] = np.nan
    path = write_series(tmp_path / "t.csv", x, header="x")
    arr, rep = read(path, thresholds=[-1.0, 0.0, 1.0])
    good = x[~np.isnan(x)]
    assert np.array_equal(arr.codes, np.digitize(good, [-1.0, 0.0, 1.0]))
    assert arr.starts.tolist() == [0, 10, 198]  # values 0-9 | 12-199 | 201-399
    assert rep.dropped == {"missing value": 3}
    assert arr.alphabet.symbols == ("0", "1", "2", "3")


def test_csv_columns_by_name_index_and_default(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("# sensor export\nname;temp;load\na;1.5;7\nb;NA;8\nc;2.5;9\nd;3.5;\n")
    arr, rep = read(path, thresholds=[2.0])
    assert rep.extra["numeric"]["column"] == "temp"  # first numeric column
    assert arr.codes.tolist() == [0, 1, 1] and arr.starts.tolist() == [0, 1]
    arr, rep = read(path, column="LOAD", thresholds=[7.5])
    assert arr.codes.tolist() == [0, 1, 1] and rep.dropped == {"missing value": 1}
    arr, _ = read(path, column=2, thresholds=[7.5])
    assert arr.codes.tolist() == [0, 1, 1]
    with pytest.raises(ParameterError, match="no column 'pressure'"):
        read(path, column="pressure")
    with pytest.raises(ParameterError, match="outside"):
        read(path, column=7)


def test_tab_whitespace_and_compressed_tables(tmp_path):
    tab = tmp_path / "t.tsv"
    tab.write_text("t\tv\n1\t10\n2\t30\n3\t20\n")
    assert read(tab, column="v", ordinal=2)[0].alphabet.decode(read(tab, column="v", ordinal=2)[0].codes) == ["01", "10"]
    ws = tmp_path / "w.gz"
    ws.write_bytes(gzip.compress(b"1 10\n2 30\n3 20\n"))
    arr, _ = read(ws, column=1, thresholds=[15])
    assert arr.codes.tolist() == [0, 1, 1]


def test_bad_numbers_and_parameters(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("v\n1\n2\nabc\n")
    with pytest.raises(InputError, match="line 4 has 'abc'") as info:
        read(path)
    assert str(info.value).endswith(".")
    ok = write_series(tmp_path / "ok.txt", [1.0, 2.0, 3.0])
    with pytest.raises(ParameterError):
        read(ok, bins=1)
    with pytest.raises(ParameterError):
        read(ok, thresholds=[1.0, 1.0])
    with pytest.raises(ParameterError):
        read(ok, ordinal=9)
    with pytest.raises(ParameterError):
        read(ok, ordinal=3, thresholds=[1.0])
    with pytest.raises(InputError, match="no run of 4"):
        read(ok, ordinal=4)

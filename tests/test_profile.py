"""The complexity profile: numbers on a real genome and on sources with known answers, the JSON contract,
determinism, the report folder and the command line.

Outside references (see /work/shared/REFERENCE-CHECKS.md):
- Phage lambda, NC_001416.1: 48,502 bp (Sanger et al. 1982, J. Mol. Biol. 162:729; REFERENCE-CHECKS G1),
  file from the Debian package bowtie2-examples.  A genome is close to, but below, 2 bits per base: the band
  1.85–2.0 bits/base for the entropy rate is the acceptance band of the issue (a loose sanity band).
- Full shift on A symbols with ratio k: D_q = ln A / ln(1/k) for every q (Stein & Shakarchi 2005, Real
  Analysis ch. 7 Thm 2.12; Falconer 2003 Thm 9.3 — theorem number from memory; REFERENCE-CHECKS A1).
- Two-state Markov chain P = [[.9,.1],[.4,.6]], k = 1/2: h = 0.5693865938 bits (Cover & Thomas 2006 §4.2;
  REFERENCE-CHECKS B2) and D_2 = 0.297736275 (Rached, Alajaji & Campbell 2001; formula from memory,
  verified numerically; REFERENCE-CHECKS A5).
- The plug-in entropy rate H(n+1) - H(n) is recomputed with scipy.stats.entropy on word tables counted by
  collections.Counter (general-purpose reference libraries).
"""

from __future__ import annotations

import gzip
import json
import math
from collections import Counter
from pathlib import Path

import numpy as np
import pytest
import scipy.stats

from fractalseq import alphabet as al
from fractalseq.cli.app import main
from fractalseq.datasets._markov import simulate_markov
from fractalseq.io._outputs import to_json
from fractalseq.jobs._profile import CAUTION_GENOMIC, contract, profile_source
from fractalseq.report.profile import FIGURES, safe_name, write_profile_report
from fractalseq.sources import open_source
from fractalseq.resampling import Resampling
from fractalseq.stream import from_codes

ROOT = Path(__file__).resolve().parents[1]
LAMBDA = ROOT / "reference" / "lambda_virus.fa.gz"
VERDICTS = {"consistent", "inconsistent", "too little data", "not applicable"}


@pytest.fixture(scope="module")
def lambda_profile():
    assert LAMBDA.is_file(), f"{LAMBDA} is missing (copy of bowtie2-examples' lambda_virus.fa.gz)"
    arr = open_source(LAMBDA).to_array()
    return profile_source(arr, resampling=Resampling(n_boot=40, seed=3))


def test_lambda_numbers_are_sane(lambda_profile):
    r = lambda_profile
    d = r.to_dict()
    assert d["length"] == 48502  # Sanger et al. 1982
    assert d["alphabet_size"] == 4 and d["ratio"] == 0.5
    rates = d["entropy_rate_bits"]
    for name in ("plugin", "miller-madow", "grassberger"):
        assert 1.85 <= rates[name]["estimate"] <= 2.0, (name, rates[name])
        assert rates[name]["low"] is not None and rates[name]["high"] is not None
    # the plug-in rate is H(n+1) - H(n) of the overlapping words: scipy.stats.entropy on Counter tables agrees
    n = rates["plugin"]["depth"]
    text = gzip.open(LAMBDA, "rt").read().split("\n", 1)[1].replace("\n", "")

    def block_entropy(k: int) -> float:
        return float(scipy.stats.entropy(list(Counter(text[i : i + k] for i in range(len(text) - k + 1)).values()), base=2))

    assert rates["plugin"]["estimate"] == pytest.approx(block_entropy(n + 1) - block_entropy(n), abs=1e-12)
    g = rates["grassberger"]
    assert 1.85 <= g["low"] and g["high"] <= 2.0
    # LZ76 and the upper bounds are reported beside the block estimates
    assert 1.8 <= rates["lz76"]["estimate"] <= 2.05
    assert rates["compressors"]["kind"] == "upper bound" and 1.9 <= rates["compressors"]["estimate"] <= 2.1
    assert rates["online_predictor"]["kind"] == "upper bound"
    assert 1.85 <= rates["online_predictor"]["estimate"] <= 2.1
    # D_0 near 2: every short word of lambda occurs, so the box counts fill the square at k = 1/2
    d0 = next(x for x in d["dimensions"] if x["q"] == 0)
    assert abs(d0["estimate"] - 2.0) <= 0.02 and d0["low"] <= 2.0 + 1e-9
    d1 = next(x for x in d["dimensions"] if x["q"] == 1)
    d2 = next(x for x in d["dimensions"] if x["q"] == 2)
    assert d2["estimate"] <= d1["estimate"] <= d0["estimate"] + 1e-9  # D_q does not increase with q
    assert 1.85 <= d1["estimate"] <= 2.0
    assert [c["verdict"] in VERDICTS for c in d["consistency"]] == [True, True, True]
    assert {c["q"] for c in d["consistency"]} == {0.0, 1.0, 2.0}
    assert 1.9 <= d["topological_entropy_bits"]["estimate"] <= 2.0


def test_json_contract_shape(lambda_profile):
    doc = json.loads(to_json(contract([lambda_profile], {"seed": 3})))
    assert doc["format"] == "fractalseq-profile" and doc["version"] == 1
    assert "research" in doc["caution"]
    (s,) = doc["sources"]
    for key, kind in (("name", str), ("length", int), ("alphabet_size", int), ("ratio", float), ("dimensions", list),
                      ("entropy_rate_bits", dict), ("topological_entropy_bits", dict), ("consistency", list)):
        assert isinstance(s[key], kind), key
    for row in s["dimensions"]:
        assert {"q", "estimate", "low", "high"} <= row.keys()
    for name, row in s["entropy_rate_bits"].items():
        assert {"estimate", "low", "high"} <= row.keys(), name
    assert "estimate" in s["topological_entropy_bits"]
    for row in s["consistency"]:
        assert {"q", "dimension_bits", "entropy_bits", "verdict"} <= row.keys()
    # block entropies by length are reported for every counted depth
    assert [b["depth"] for b in s["block_entropies"]] == list(range(1, s["depth"] + 1))


def test_full_shift_dimensions_match_closed_form():
    # iid uniform symbols: D_q = ln A / ln(1/k) for every q (REFERENCE-CHECKS A1)
    rng = np.random.default_rng(11)
    for A, k, tol in ((4, 0.5, 0.01), (4, 1 / 3, 0.01), (2, 0.5, 0.01)):
        codes = rng.integers(0, A, 60_000).astype(np.uint8)
        arr = from_codes(al.from_symbols("ACGT"[:A]), codes, name=f"iid{A}")
        r = profile_source(arr, ratio=k, image=False, qs=(0, 2), resampling=Resampling.none())
        expect = math.log(A) / math.log(1 / k)
        for row in r.dimension_rows():
            assert abs(row["estimate"] - expect) <= tol * expect, (A, k, row)
        assert abs(r.rate_dict()["grassberger"]["estimate"] - math.log2(A)) <= 0.01


def test_markov_chain_rates_match_closed_form():
    # P = [[.9,.1],[.4,.6]]: h = 0.5693865938 bits (Cover & Thomas §4.2), D_2 = 0.297736275 at k = 1/2
    P = np.array([[0.9, 0.1], [0.4, 0.6]])
    codes = simulate_markov(P, 200_000, seed=5)
    arr = from_codes(al.binary(), np.asarray(codes, np.uint8), name="chain")
    r = profile_source(arr, image=False, qs=(1, 2), resampling=Resampling.none())
    assert abs(r.rate_dict()["grassberger"]["estimate"] - 0.5693865938) <= 0.015
    d = {row["q"]: row["estimate"] for row in r.dimension_rows()}
    assert abs(d[1.0] - 0.569386594) <= 0.02
    assert abs(d[2.0] - 0.297736275) <= 0.02


def test_short_and_overlapping_inputs_are_flagged_not_crashed():
    rng = np.random.default_rng(2)
    arr = from_codes(al.dna(), rng.integers(0, 4, 50).astype(np.uint8), name="tiny")
    r = profile_source(arr, image=False, resampling=Resampling.none())
    d = r.to_dict()
    assert all(c["verdict"] == "too little data" for c in d["consistency"])
    assert any("consistency table: not computed" in n for n in d["notes"])
    arr = from_codes(al.dna(), rng.integers(0, 4, 3000).astype(np.uint8), name="overlap")
    r = profile_source(arr, ratio=0.7, image=False, qs=(0,), resampling=Resampling.none())
    d = r.to_dict()
    assert d["overlap"]["overlapping"] is True
    assert d["consistency"][0]["verdict"] == "not applicable"
    assert any(n.startswith("encoding:") for n in d["notes"])


def test_report_folder_is_complete(tmp_path, lambda_profile):
    a = write_profile_report(lambda_profile, tmp_path / "a", contract([lambda_profile]), CAUTION_GENOMIC)
    names = sorted(p.name for p in a)
    for f in ("index.html", "profile.json", "dimensions.csv", "entropies.csv", "consistency.csv", "absent_words.csv", *FIGURES):
        assert f in names, f
    for p in a:
        if p.suffix == ".png":
            assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    header = (tmp_path / "a" / "dimensions.csv").read_text().splitlines()[0]
    assert header.startswith("q,d_q,low,high")
    rows = (tmp_path / "a" / "consistency.csv").read_text().splitlines()
    assert len(rows) == 4 and all(any(v in r for v in VERDICTS) for r in rows[1:])
    doc = json.loads((tmp_path / "a" / "profile.json").read_text())
    assert doc["sources"][0]["length"] == 48502
    page = (tmp_path / "a" / "index.html").read_text()
    assert "Genomic output is for research, not for clinical decisions." in page
    from fractalseq.errors import OutputError

    with pytest.raises(OutputError):
        write_profile_report(lambda_profile, tmp_path / "a", contract([lambda_profile]), CAUTION_GENOMIC)


def test_profile_is_deterministic_for_a_seed():
    rng = np.random.default_rng(4)
    arr = from_codes(al.dna(), rng.integers(0, 4, 8000).astype(np.uint8), name="det")
    a = to_json(contract([profile_source(arr, image=False, resampling=Resampling(n_boot=20, seed=1))]))
    b = to_json(contract([profile_source(arr, image=False, resampling=Resampling(n_boot=20, seed=1))]))
    c = to_json(contract([profile_source(arr, image=False, resampling=Resampling(n_boot=20, seed=2))]))
    assert a == b
    assert a != c  # the seed reaches the bootstrap


def test_safe_names():
    taken: set[str] = set()
    assert safe_name("dir/we ird'name.fa", taken) == "we_ird_name.fa"
    assert safe_name("other/we ird'name.fa", taken) == "we_ird_name.fa-2"
    assert safe_name("-", taken) == "stdin"
    assert safe_name("../..", taken) == "source"


# ---------------------------------------------------------------- command line
def _fasta(path: Path, header: str, seq: str) -> Path:
    path.write_text(f">{header}\n" + "\n".join(seq[i : i + 70] for i in range(0, len(seq), 70)) + "\n")
    return path


@pytest.fixture(scope="module")
def small_fasta(tmp_path_factory):
    rng = np.random.default_rng(9)
    seq = "".join(rng.choice(list("ACGT"), 6000, p=[0.3, 0.2, 0.2, 0.3]))
    d = tmp_path_factory.mktemp("fa")
    return _fasta(d / "we ird'name.fa", "<script>alert(1)</script> invented test record", seq)


def test_cli_json_is_byte_identical_for_the_same_seed(small_fasta, capsys):
    args = ["profile", str(small_fasta), "--json", "--boot", "20", "--seed", "7", "--quiet"]
    assert main(args) == 0
    first = capsys.readouterr().out
    assert main(args) == 0
    second = capsys.readouterr().out
    assert first == second
    doc = json.loads(first)
    assert doc["sources"][0]["length"] == 6000 and doc["parameters"]["seed"] == 7


def test_cli_tables_without_out_write_nothing(small_fasta, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert main(["profile", str(small_fasta), "--boot", "0", "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "D_0" in out and "h Grassberger" in out and "consistency q=1" in out
    assert list(tmp_path.iterdir()) == []


def test_cli_out_folder_and_index(small_fasta, tmp_path, capsys):
    out = tmp_path / "report"
    out.mkdir()
    (out / "stray.txt").write_text("left from before")
    # a non-empty folder needs --force
    assert main(["profile", str(small_fasta), "--out", str(out), "--boot", "0", "--quiet"]) == 2
    assert "--force" in capsys.readouterr().err
    assert main(["profile", str(small_fasta), str(small_fasta), "--out", str(out), "--boot", "0", "--quiet",
                 "--force"]) == 0
    subs = sorted(p.name for p in out.iterdir() if p.is_dir())
    assert subs == ["we_ird_name.fa", "we_ird_name.fa-2"]
    assert (out / "index.html").is_file() and (out / "profile.json").is_file()
    doc = json.loads((out / "profile.json").read_text())
    assert len(doc["sources"]) == 2
    for s in subs:
        assert (out / s / "index.html").is_file() and (out / s / "encoding.png").is_file()
    page = (out / subs[0] / "index.html").read_text()
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page and "<script>alert(1)" not in page
    index = (out / "index.html").read_text()
    assert 'href="we_ird_name.fa/index.html"' in index and 'href="we_ird_name.fa-2/index.html"' in index


@pytest.mark.parametrize(
    "extra, words",
    [
        (["--q", ""], "--q list is empty"),
        (["--q", "1,x"], "is not a number"),
        (["--ratio", "1.5"], "outside (0, 1)"),
        (["--ratio", "0"], "outside (0, 1)"),
        (["--depth", "40"], "exceeds"),
        (["--boot", "5"], "too few"),
        (["--level", "1.2"], "outside (0.5, 1)"),
    ],
)
def test_cli_bad_parameters_exit_2_with_one_sentence(small_fasta, capsys, extra, words):
    assert main(["profile", str(small_fasta), "--quiet", *extra]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("error:") and words in err and "Traceback" not in err
    assert len(err.splitlines()) == 1


def test_cli_output_folder_that_is_a_file(small_fasta, tmp_path, capsys):
    f = tmp_path / "taken"
    f.write_text("x")
    assert main(["profile", str(small_fasta), "--out", str(f), "--quiet"]) == 2
    assert "is a file" in capsys.readouterr().err


def test_cli_missing_input(tmp_path, capsys):
    assert main(["profile", str(tmp_path / "nope.fa"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and "Traceback" not in err

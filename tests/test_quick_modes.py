"""Quick modes: ``score --baselines none|markov|all``, ``profile --quick`` and ``survey --quick``.

Each mode must leave out exactly what it says and change nothing else: the remaining numbers are
compared with the full run's. The KT baseline is checked against a plain recount (Krichevsky &
Trofimov 1981 sequential rule, order 0: p(s) = (n_s + 1/2) / (n + A/2); common practice).
"""

from __future__ import annotations

import json
import lzma
import math
from pathlib import Path

import numpy as np
import pytest

from fractalseq.cli.app import main
from fractalseq.jobs._profile import QUICK_SKIPS, profile_source
from fractalseq.resampling._options import Resampling
from fractalseq.stream import from_codes
from fractalseq import alphabet as al

ROOT = Path(__file__).resolve().parents[1]
LAMBDA = ROOT / "reference" / "lambda_virus.fa.gz"  # provenance: reference/PROVENANCE.md


def run(capsys, *argv) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture(scope="module")
def fasta(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("quick")
    rng = np.random.default_rng(7)
    seq = "".join(rng.choice(list("ACGT"), 30_000, p=[0.4, 0.1, 0.1, 0.4]))  # invented test sequence
    p = d / "skewed.fa"
    p.write_text(">skewed invented test sequence\n" + "\n".join(seq[i : i + 60] for i in range(0, len(seq), 60)) + "\n")
    return p


@pytest.mark.parametrize("choice, keys", [("none", set()), ("markov", {"markov"}), ("all", {"markov", "compressors"})])
def test_score_baselines_leave_out_what_they_say(capsys, fasta, choice, keys):
    code, out, _ = run(capsys, "score", "--online", fasta, "--json", "-q", "--baselines", choice)
    assert code == 0
    src = json.loads(out)["sources"][0]
    assert set(src["baselines"]) == keys  # a baseline not computed is absent, never null
    code, full, _ = run(capsys, "score", "--online", fasta, "--json", "-q", "--baselines", "all")
    ref = json.loads(full)["sources"][0]
    # the predictor's own numbers do not depend on the baselines asked for
    assert src["bits_per_symbol"] == ref["bits_per_symbol"] and src["records"] == ref["records"]
    for k in keys:
        assert src["baselines"][k] == ref["baselines"][k]


def test_score_default_is_markov_and_matches_a_kt_recount(capsys, fasta):
    code, out, _ = run(capsys, "score", "--online", fasta, "--json", "-q")
    assert code == 0
    base = json.loads(out)["sources"][0]["baselines"]
    assert set(base) == {"markov"}
    seq = "".join(line.strip() for line in fasta.read_text().splitlines()[1:])
    counts = {s: 0 for s in "ACGT"}
    bits = 0.0
    for i, ch in enumerate(seq):  # sequential KT, order 0 (Krichevsky & Trofimov 1981)
        bits -= math.log2((counts[ch] + 0.5) / (i + 2.0))
        counts[ch] += 1
    order0 = base["markov"]["candidate_bits_per_symbol"]["0"]
    assert order0 == pytest.approx(bits / len(seq), rel=1e-9)


def test_score_all_compressor_matches_stdlib_lzma(capsys, fasta):
    code, out, _ = run(capsys, "score", "--online", fasta, "--json", "-q", "--baselines", "all")
    comp = json.loads(out)["sources"][0]["baselines"]["compressors"]
    seq = "".join(line.strip() for line in fasta.read_text().splitlines()[1:]).encode()
    ref = 8.0 * len(lzma.compress(seq, preset=9 | lzma.PRESET_EXTREME)) / len(seq)  # the stdlib compressor itself
    assert comp["lzma_text"] == pytest.approx(ref, rel=0.02)


def test_bad_baselines_choice_is_one_sentence(capsys, fasta):
    code, _, err = run(capsys, "score", "--online", fasta, "--baselines", "some")
    assert code == 2 and "--baselines" in err and "Traceback" not in err


def test_profile_quick_leaves_out_exactly_the_quick_skips():
    rng = np.random.default_rng(3)
    arr = from_codes(al.dna(), rng.integers(0, 4, 20_000), name="invented")
    full = profile_source(arr, resampling=Resampling(n_boot=20, seed=2)).to_dict()
    quick = profile_source(arr, resampling=Resampling(n_boot=20, seed=2), quick=True).to_dict()
    assert QUICK_SKIPS == ("bootstrap intervals", "consistency table", "compressor bound")
    # no bootstrap: no replicates, no bootstrap intervals of the rates (the dimensions keep the
    # fit-residual interval that any profile without replicates has, and a note says so)
    assert quick["bootstrap"]["n_boot"] == 0 and full["bootstrap"]["n_boot"] == 20
    assert quick["bootstrap"]["entropy_rate_block"] is None and full["bootstrap"]["entropy_rate_block"] is not None
    assert all(v["low"] is None for v in quick["entropy_rate_bits"].values())
    assert any("no bootstrap" in n for n in quick["notes"])
    # no consistency table, no compressor bound
    assert {r["verdict"] for r in quick["consistency"]} == {"skipped"}
    assert "compressors" not in quick["entropy_rate_bits"] and "compressors" in full["entropy_rate_bits"]
    # everything else: the same point estimates
    assert set(quick) == set(full)
    for k in ("block_entropies", "absent_words", "topological_entropy_bits", "depth", "length"):
        assert quick[k] == full[k], k
    for name in ("plugin", "miller-madow", "grassberger", "lz76", "online_predictor"):
        assert quick["entropy_rate_bits"][name]["estimate"] == full["entropy_rate_bits"][name]["estimate"]
    assert [r["estimate"] for r in quick["dimensions"]] == [r["estimate"] for r in full["dimensions"]]
    assert any(n.startswith("quick mode:") for n in quick["notes"])


def test_profile_and_survey_quick_through_the_cli(capsys, fasta, tmp_path):
    code, out, _ = run(capsys, "profile", fasta, "--quick", "--json", "-q", "--boot", "50")
    doc = json.loads(out)
    assert code == 0 and doc["parameters"]["quick"] is True and doc["parameters"]["boot"] == 0
    code, out, _ = run(capsys, "profile", fasta, "--json", "-q", "--boot", "20")
    assert "quick" not in json.loads(out)["parameters"]  # the default document keeps its keys
    code, out, _ = run(capsys, "survey", fasta, LAMBDA, "--quick", "--json", "-q")
    doc = json.loads(out)
    assert code == 0 and doc["parameters"]["quick"] is True
    for src in doc["sources"]:
        assert {r["verdict"] for r in src["profile"]["consistency"]} == {"skipped"}
        assert src["profile"]["bootstrap"]["n_boot"] == 0
        assert "compressors" not in src["profile"]["entropy_rate_bits"]

"""``fractalseq learn``, ``score`` and ``next``: tables, the public ``--json`` contract of ``score``, refusals."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from fractalseq.cli.app import main

ROOT = Path(__file__).resolve().parents[1]
LAMBDA = ROOT / "reference" / "lambda_virus.fa.gz"  # provenance: reference/PROVENANCE.md
LOGS = ROOT / "reference" / "logs"  # provenance: reference/logs/README.md


def _fasta(records: dict[str, str]) -> str:
    out = []
    for name, seq in records.items():
        out.append(f">{name} invented test sequence")
        out.extend(seq[i : i + 60] for i in range(0, len(seq), 60))
    return "\n".join(out) + "\n"


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("predict")
    rng = np.random.default_rng(1)
    motif = "".join(rng.choice(list("ACGT"), 400))
    noise = lambda n: "".join(rng.choice(list("ACGT"), n))  # noqa: E731
    # invented: a repeated motif with random spacers, and a plain random record
    (d / "train.fa").write_text(_fasta({"r1": "".join(motif + noise(100) for _ in range(20)), "r2": noise(3000)}))
    (d / "test.fa").write_text(_fasta({"t1": "".join(motif + noise(50) for _ in range(5)), "t2": noise(25000)}))
    (d / "prot.fa").write_text(_fasta({"p": "".join(rng.choice(list("ACDEFGHIKLMNPQRSTVWY"), 500))}))
    return d


def run(capsys, *argv: str) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_learn_score_next_round_trip(files: Path, capsys):
    model = files / "m.npz"
    code, out, _ = run(capsys, "learn", files / "train.fa", "-o", model, "--json", "-q")
    assert code == 0
    doc = json.loads(out)
    assert doc["symbols"] == 20 * 500 + 3000 and doc["segments"] == 2
    assert doc["cells"] > 0 and doc["pruned_cells"] == 0 and doc["baseline_order"] >= 0
    assert model.exists()

    code, out, _ = run(capsys, "score", files / "test.fa", "--model", model, "--json", "--window", "1000", "--top", "3", "-q",
                         "--baselines", "all")
    assert code == 0
    doc = json.loads(out)
    src = doc["sources"][0]
    assert doc["mode"] == "fitted"
    assert src["length"] == 5 * 450 + 25000
    names = [r["name"] for r in src["records"]]
    assert [n.split()[0] for n in names] == ["t1", "t2"]
    # the repeated motif learned in training is much cheaper than the random record
    rec = {r["name"].split()[0]: r["bits_per_symbol"] for r in src["records"]}
    assert rec["t1"] < 1.5 < 1.9 < rec["t2"]
    assert len(src["most_surprising_windows"]) == 3
    assert src["baselines"]["markov"]["order_chosen_on"] == "model training data"
    assert {"lzma_text", "bz2_text", "zlib_text", "lzma_packed"} <= set(src["baselines"]["compressors"])

    code, out, _ = run(capsys, "next", "ACGTTGCA", "--model", model, "--top", "4")
    assert code == 0 and "probability" in out and "deepest cell" in out
    code, out, _ = run(capsys, "next", "ACGTTGCA", "--model", model, "--json")
    doc = json.loads(out)
    assert len(doc["next"]) == 4
    assert sum(r["probability"] for r in doc["next"]) == pytest.approx(1.0)


def test_a_model_learned_on_one_log_scores_the_next(tmp_path: Path, capsys):
    """Learn last week's log, score this week's: known templates keep the model's codes, new ones are listed.

    Invented service log (no real data): a fixed cycle of three events; week 2 adds a new failure line.
    The lines kept must be scored like the training cycle (cheap), and the new template must be named.
    """
    cycle = ["{t} svc job {n} started", "{t} svc job {n} wrote {k} rows", "{t} svc job {n} finished in {k} ms"]
    week1 = [cycle[i % 3].format(t=f"2026-01-01T00:{i // 60 % 60:02d}:{i % 60:02d}", n=i // 3, k=7 * i) for i in range(3000)]
    week2 = []
    for i in range(3000):
        week2.append(cycle[i % 3].format(t=f"2026-01-08T00:{i // 60 % 60:02d}:{i % 60:02d}", n=i // 3, k=5 * i))
        if i % 300 == 299:
            week2.append(f"2026-01-08T01:00:{i % 60:02d} svc disk {i} full, job {i // 3} aborted")
    (tmp_path / "w1.log").write_text("\n".join(week1) + "\n")
    (tmp_path / "w2.log").write_text("\n".join(week2) + "\n")
    model = tmp_path / "w1.npz"
    assert run(capsys, "learn", tmp_path / "w1.log", "--format", "log", "-o", model, "-q")[0] == 0
    code, out, _ = run(capsys, "score", tmp_path / "w2.log", "--format", "log", "--model", model, "--json", "-q")
    assert code == 0
    doc = json.loads(out)
    src = doc["sources"][0]
    assert src["length"] == 3000 and src["bits_per_symbol"] < 0.1  # the learned cycle predicts the kept lines
    assert [(e["template"], e["count"]) for e in src["unseen_templates"]] == [("svc disk <*> full, job <*> aborted", 10)]
    assert sum(src["dropped"].values()) == 10
    assert "no security guarantee" in doc["note"]
    code, out, _ = run(capsys, "score", tmp_path / "w2.log", "--format", "log", "--model", model)
    assert code == 0 and "never saw" in out and "aborted" in out


def test_models_keep_the_symbolization_of_their_training_data(tmp_path: Path, capsys):
    """Several logs are learned over the union of their templates; numeric cut points travel with the model.

    Invented data. Numeric: a series and the same series shifted up; the model cuts at the training
    quantiles (checked against numpy), so the shifted series gets other symbols, while reading it with
    its own quantiles gives the training symbols back.
    """
    a = "\n".join(f"svc a {i}" if i % 2 else f"svc b {i}" for i in range(400)) + "\n"
    b = "\n".join(f"svc c {i}" if i % 2 else f"svc a {i}" for i in range(400)) + "\n"
    (tmp_path / "a.log").write_text(a)
    (tmp_path / "b.log").write_text(b)
    logm = tmp_path / "logs.npz"
    code, out, _ = run(capsys, "learn", tmp_path / "a.log", tmp_path / "b.log", "-f", "log", "-o", logm, "--json", "-q")
    assert code == 0
    assert sorted(json.loads(out)["alphabet"]["symbols"]) == ["svc a <*>", "svc b <*>", "svc c <*>"]

    rng = np.random.default_rng(3)
    x = np.sin(np.arange(4000) / 7.0) + 0.3 * rng.standard_normal(4000)
    (tmp_path / "x.csv").write_text("v\n" + "\n".join(f"{v:.6f}" for v in x) + "\n")
    (tmp_path / "y.csv").write_text("v\n" + "\n".join(f"{v + 5:.6f}" for v in x) + "\n")
    numm = tmp_path / "num.npz"
    assert run(capsys, "learn", tmp_path / "x.csv", "-f", "numeric", "-o", numm, "-q")[0] == 0
    from fractalseq.predict._modelfile import read_header

    cuts = read_header(numm)["reader"]["thresholds"]
    assert np.allclose(cuts, np.quantile(np.round(x, 6), [0.25, 0.5, 0.75]))
    code, out, _ = run(capsys, "score", tmp_path / "x.csv", "-f", "numeric", "--model", numm, "--json", "-q")
    same = json.loads(out)["sources"][0]
    code, out, _ = run(capsys, "score", tmp_path / "y.csv", "-f", "numeric", "--model", numm, "--json", "-q")
    shifted = json.loads(out)["sources"][0]
    # cut at its own quartiles (--thresholds overrides the model's cuts) the shifted series is the training series again
    own_cuts = ",".join(f"{c + 5:.6f}" for c in cuts)
    code, out, _ = run(capsys, "score", tmp_path / "y.csv", "-f", "numeric", "--model", numm, "--thresholds", own_cuts, "--json", "-q")
    own = json.loads(out)["sources"][0]
    assert code == 0 and own["bits_per_symbol"] == same["bits_per_symbol"]
    assert shifted["bits_per_symbol"] != same["bits_per_symbol"] and shifted["alphabet"] == same["alphabet"]


def test_score_json_contract_online_with_several_sources(files: Path, capsys):
    code, out, _ = run(capsys, "score", "--online", files / "train.fa", files / "test.fa", "--json", "-q")
    assert code == 0
    doc = json.loads(out)
    # public contract (README): top-level bits_per_symbol over all sources; sources with name, length, bits_per_symbol
    assert isinstance(doc["bits_per_symbol"], float)
    assert [s["name"] for s in doc["sources"]] == [str(files / "train.fa"), str(files / "test.fa")]
    for s in doc["sources"]:
        assert {"name", "length", "bits_per_symbol"} <= set(s)
    total = sum(s["total_bits"] for s in doc["sources"])
    length = sum(s["length"] for s in doc["sources"])
    assert doc["bits_per_symbol"] == pytest.approx(total / length)
    assert doc["mode"] == "online"
    assert doc["sources"][0]["baselines"]["markov"]["order_chosen_on"].startswith("the scored stream")
    assert doc["sources"][0]["memory"]["cells_cap"] > 0


def test_score_table_lists_records_and_windows(files: Path, capsys):
    code, out, err = run(capsys, "score", "--online", files / "test.fa", "--window", "2000", "--top", "2")
    assert code == 0
    assert "bits/symbol" in out and "records" in out and "most surprising windows" in out
    # the caution closes the table output (standard output), so it survives a redirected standard error
    assert out.rstrip().splitlines()[-1] == "Genomic output is for research, not for clinical decisions."


def test_online_score_of_lambda_beats_its_compressors(capsys):
    code, out, _ = run(capsys, "score", "--online", LAMBDA, "--json", "-q", "--baselines", "all")
    assert code == 0
    src = json.loads(out)["sources"][0]
    assert src["length"] == 48502  # NC_001416.1 (Sanger et al. 1982)
    assert src["bits_per_symbol"] < min(src["baselines"]["compressors"].values())


def test_online_tables_of_a_log_are_sized_by_its_lines(capsys):
    # reference/logs/dpkg-excerpt.log (real dpkg log, provenance in reference/logs/README.md): 2,000 lines,
    # so a few rows per line suffice; the fixed budget would be 182 MiB of tables for about 1,000 cells
    code, out, _ = run(capsys, "score", "--online", "-f", "log", str(LOGS / "dpkg-excerpt.log"), "--json", "-q")
    assert code == 0
    mem = json.loads(out)["sources"][0]["memory"]
    assert 0 < mem["cells_stored"] and mem["table_bytes"] < 8 << 20, mem


@pytest.mark.parametrize(
    "argv, pattern",
    [
        (("score", "{d}/test.fa"), r"--model|--online"),
        (("score", "{d}/test.fa", "--online", "--model", "{d}/m2.npz"), r"either"),
        (("score", "{d}/prot.fa", "--model", "{d}/m2.npz", "--alphabet", "protein"), r"learned on the dna alphabet"),
        (("score", "{d}/test.fa", "--model", "{d}/short.npz"), r"truncated or damaged"),
        (("next", "ACGTN", "--model", "{d}/m2.npz"), r"'N'"),
        (("learn", "{d}/train.fa", "-o", "{d}/m2.npz"), r"already exists"),
        (("learn", "{d}/train.fa", "-o", "{d}/m3.npz", "--depths", "1,x"), r"--depths"),
        (("score", "--online", "{d}/test.fa", "--strands", "sideways"), r"--strands"),
    ],
)
def test_bad_input_is_one_sentence_and_exit_2(files: Path, capsys, argv, pattern):
    import re

    m2 = files / "m2.npz"
    if not m2.exists():
        assert main(["learn", str(files / "train.fa"), "-o", str(m2), "-q"]) == 0
        data = m2.read_bytes()
        (files / "short.npz").write_bytes(data[: len(data) // 3])
    code, out, err = run(capsys, *[a.replace("{d}", str(files)) for a in argv])
    assert code == 2
    lines = [l for l in err.strip().splitlines() if l.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert re.search(pattern, lines[0])
    assert "Traceback" not in err


@pytest.mark.parametrize("command", ["learn", "score", "next"])
def test_help_reads_like_a_man_page(command, capsys):
    code, out, _ = run(capsys, command, "--help")
    assert code == 0
    assert "Example: fractalseq " + command in out.replace("\n", " ").replace("  ", " ") or "Example:" in out
    assert "--model" in out or "--out" in out
    assert "--json" in out


def test_score_online_as_a_real_process(files: Path):
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    proc = subprocess.run(
        [sys.executable, "-m", "fractalseq.cli", "score", "--online", str(files / "test.fa"), "--json", "-q"],
        capture_output=True, env=env, timeout=300,
    )
    assert proc.returncode == 0, proc.stderr.decode()
    doc = json.loads(proc.stdout)
    assert doc["sources"][0]["length"] == 5 * 450 + 25000
    # the command line reports exactly what the library's job computes in this process
    from fractalseq.io import to_json
    from fractalseq.jobs import score_files

    assert doc == json.loads(to_json(score_files([str(files / "test.fa")], online=True).to_dict()))


def test_a_log_none_of_whose_lines_the_model_knows_says_why(tmp_path: Path, capsys):
    """A model learned on dpkg's log, asked to score apt's terminal log: the sentence names the reason.

    Real logs of reference/logs (provenance in reference/logs/README.md). The hand labels written from the two
    programs' message formats (``dpkg-excerpt.labels``, ``apt-term-excerpt.labels``) share no event kind, so no
    line of the apt log can match a template of the dpkg model; the line count in the sentence is checked against
    a plain count of the apt log's non-blank lines (split at newline bytes, as the reader splits lines).
    """
    dpkg_kinds = {x.strip() for x in (LOGS / "dpkg-excerpt.labels").read_text().splitlines() if x.strip()}
    apt_kinds = {x.strip() for x in (LOGS / "apt-term-excerpt.labels").read_text().splitlines() if x.strip()}
    assert dpkg_kinds and apt_kinds and not dpkg_kinds & apt_kinds
    lines = sum(1 for x in (LOGS / "apt-term-excerpt.log").read_bytes().split(b"\n") if x.strip())
    model = tmp_path / "dpkg.npz"
    code, out, _ = run(capsys, "learn", "-f", "log", LOGS / "dpkg-excerpt.log", "-o", model, "--json", "-q")
    assert code == 0
    known = len(json.loads(out)["alphabet"]["symbols"])
    assert known == len(dpkg_kinds)  # 12 templates for 12 labelled kinds (grouping accuracy 1.0 on this excerpt)
    why = f"none of its {lines:,} lines match one of the {known} templates the model knows"

    # one file: exit 2 and one sentence that says why
    code, out, err = run(capsys, "score", "-f", "log", "--model", model, LOGS / "apt-term-excerpt.log")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and why in err and "holds no usable symbols" in err, err

    # with a file it can score: listed with length 0, the reason in the JSON and under the table
    code, out, _ = run(capsys, "score", "-f", "log", "--model", model, LOGS / "apt-term-excerpt.log",
                       LOGS / "dpkg-excerpt.log", "--json", "-q")
    assert code == 0
    apt, dpkg = json.loads(out)["sources"]
    assert apt["length"] == 0 and why in apt["not_scored"]
    assert sum(e["count"] for e in apt["unseen_templates"]) == lines
    assert dpkg["length"] == 2000 and dpkg["not_scored"] is None
    code, out, _ = run(capsys, "score", "-f", "log", "--model", model, LOGS / "apt-term-excerpt.log",
                       LOGS / "dpkg-excerpt.log", "-q")
    assert code == 0 and f"apt-term-excerpt.log: not scored: {why}" in " ".join(out.split())

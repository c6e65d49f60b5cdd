"""Survey: inputs, distances (against scipy), real genomes, cache and interrupted runs."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy.spatial.distance import jensenshannon

from fractalseq.alphabet import from_symbols
from fractalseq.distances import cluster, joint_alphabet, js_divergence, js_matrix, remap_words, word_matrix
from fractalseq.errors import InputError
from fractalseq.markov import simulate_markov
from fractalseq.survey import SurveyOptions, expand_inputs, run_survey
from fractalseq.cache import ResultCache
from fractalseq.words import count_words

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "benchmarks"))
LAMBDA = ROOT / "reference" / "lambda_virus.fa.gz"
CLI = [sys.executable, "-c", "import sys; from fractalseq.cli.app import main; sys.exit(main(sys.argv[1:]))"]


def _chain(seed):
    return np.random.default_rng(seed).dirichlet(np.full(4, 2.0), size=4)


def _write_fasta(path: Path, P, n, seed):
    x = simulate_markov(P, n, seed=seed)
    path.write_text(f">{path.stem} invented test sequence\n" + "".join("ACGT"[c] for c in x) + "\n")
    return path


def test_expand_inputs_files_folders_globs_lists(tmp_path):
    d = tmp_path / "g"
    d.mkdir()
    for name in ("b.fa", "a.fa", ".hidden.fa"):
        (d / name).write_text(">x\nACGT\n")
    (d / "sub").mkdir()
    (d / "sub" / "c.fa").write_text(">x\nACGT\n")
    specs = expand_inputs([str(d)])
    assert [s.name for s in specs] == ["a.fa", "b.fa", "c.fa"]
    assert [s.name for s in expand_inputs([str(d / "*.fa")])] == ["a.fa", "b.fa"]
    lst = tmp_path / "list.txt"
    lst.write_text("# inputs\ng/b.fa\n\ng/sub/c.fa\ng/b.fa\n")
    assert [s.name for s in expand_inputs([], str(lst))] == ["b.fa", "c.fa"]  # duplicates dropped
    assert [s.name for s in expand_inputs([], "-", ["%s" % (d / "a.fa")])] == ["a.fa"]
    with pytest.raises(InputError, match="does not exist"):
        expand_inputs([str(tmp_path / "nope.fa")])
    with pytest.raises(InputError, match="matches no file"):
        expand_inputs([str(tmp_path / "*.fq")])
    with pytest.raises(InputError, match="No inputs"):
        expand_inputs([])


def test_jensen_shannon_matches_scipy_and_bounds():
    rng = np.random.default_rng(0)
    for _ in range(20):
        a, b = rng.integers(0, 30, 50), rng.integers(0, 30, 50)
        # scipy returns the Jensen-Shannon *distance*, the square root of the divergence
        assert js_divergence(a, b) == pytest.approx(jensenshannon(a, b, base=2) ** 2, abs=1e-12)
    assert js_divergence([1, 0], [0, 1]) == pytest.approx(1.0)  # disjoint supports: 1 bit (Lin 1991)
    assert js_divergence([3, 5], [6, 10]) == pytest.approx(0.0, abs=1e-15)


def test_remap_words_into_a_joint_alphabet():
    a = from_symbols(["x", "y", "z"], "templates")
    b = from_symbols(["z", "w", "x"], "templates")
    j = joint_alphabet([a, b])
    assert j.symbols == ("x", "y", "z", "w")
    # words over b: "z w x" = codes (0, 1, 2) -> over j: (2, 3, 0)
    addr = (0 << 4) | (1 << 2) | 2
    got = remap_words(np.array([addr], np.uint64), 3, b, j)
    assert int(got[0]) == (2 << 4) | (3 << 2) | 0


def _genome_tables(paths, depth):
    from fractalseq.sources import open_source

    tables = []
    for p in paths:
        wc = count_words(open_source(str(p), alphabet="dna"), depth)
        tables.append(wc.words(depth))
    return word_matrix(tables)[1]


def test_real_genomes_lambda_stands_apart():
    # Debian kleborate-examples (four Klebsiella pneumoniae assemblies) and phage lambda
    # (bowtie2-examples, reference/PROVENANCE.md); fetched by benchmarks/genomes.py when absent
    from genomes import klebsiella

    kleb = klebsiella()
    names = list(kleb) + ["lambda"]
    paths = list(kleb.values()) + [LAMBDA]
    js = js_matrix(_genome_tables(paths, 6))
    clus = cluster(np.sqrt(js))
    a, b = clus.top_split()
    lam = names.index("lambda")
    assert [lam] in (a, b), (a, b)
    kk = js[:4, :4][np.triu_indices(4, 1)]
    assert js[lam, :4].min() > 5 * kk.max()  # phage vs bacteria far beyond strain vs strain


def test_survey_contract_cache_resume_and_determinism(tmp_path):
    srcs = [LAMBDA] + [_write_fasta(tmp_path / f"s{i}.fa", _chain(i % 2), 20_000, i) for i in range(3)]
    specs = expand_inputs([str(p) for p in srcs])
    opts = SurveyOptions(depth=10, seed=4)
    full = run_survey(specs, opts)
    data = json.loads(full.to_json())
    assert [s["name"] for s in data["sources"]] == ["lambda_virus.fa.gz", "s0.fa", "s1.fa", "s2.fa"]
    for s in data["sources"]:
        assert s["length"] > 0 and set(s["D1"]) == {"estimate", "low", "high"}
        for f in ("D0", "D1", "D2", "topological_entropy_bits", "predictor_bits_per_symbol"):
            assert f in s
    assert data["sources"][0]["length"] == 48502  # phage lambda, Sanger et al. 1982
    m = np.array(data["distances"]["matrix"])
    assert data["distances"]["names"] == [s["name"] for s in data["sources"]]
    assert np.allclose(m, m.T) and np.all(np.diag(m) == 0) and np.all((m >= 0) & (m <= 1))
    assert "spectrum" in data["distances"] and "clustering" in data["distances"]
    # s0 and s2 share a chain; they are nearer to each other than to s1
    assert m[1, 3] < m[1, 2] and m[1, 3] < m[2, 3]
    # an interrupted run keeps finished sources; the resumed run equals the uninterrupted one
    cache = ResultCache(tmp_path / "cache")
    seen = []

    def stop_after_two(event, i, spec):
        if event == "done":
            seen.append(i)
            if len(seen) == 2:
                raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_survey(specs, opts, cache=cache, progress=stop_after_two)
    events = []
    resumed = run_survey(specs, opts, cache=cache, progress=lambda e, i, s: events.append(e))
    assert events.count("cached") == 2 and events.count("done") == 2
    assert resumed.to_json() == full.to_json()


def test_sigint_then_rerun_gives_the_uninterrupted_result(tmp_path):
    srcs = [_write_fasta(tmp_path / f"t{i}.fa", _chain(i), 25_000, 10 + i) for i in range(5)]
    from fractalseq.cli.app import main

    ref = tmp_path / "ref"
    args = ["survey", *map(str, srcs), "-q", "--seed", "2"]
    base = CLI + args
    assert main(args + ["--out", str(ref), "--no-cache"]) == 0  # uninterrupted reference run
    out = tmp_path / "out"
    proc = subprocess.Popen(base + ["--out", str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    def finished() -> list:
        return list((out / ".cache").rglob("*.json")) if (out / ".cache").exists() else []

    deadline = time.time() + 300
    while time.time() < deadline and not finished() and proc.poll() is None:
        time.sleep(0.05)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "interrupted" in err
    assert [p.name for p in out.iterdir() if not p.name.startswith(".")] == []  # nothing half-written
    assert not [p for p in out.rglob("*") if p.name.endswith(".part")]
    cached = len(list((out / ".cache").rglob("*.json")))
    assert 1 <= cached < 5
    assert main(args + ["--out", str(out)]) == 0  # the re-run resumes from the cache
    assert (out / "survey.json").read_bytes() == (ref / "survey.json").read_bytes()
    assert (out / "survey.csv").read_bytes() == (ref / "survey.csv").read_bytes()
    assert main(args + ["--out", str(out)]) == 2  # nothing is overwritten without --force

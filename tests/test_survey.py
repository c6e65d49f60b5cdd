"""Survey: inputs, distances (against scipy), real genomes, cache and interrupted runs."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy.spatial.distance import jensenshannon

from fractalseq.alphabet import from_symbols
from fractalseq.compare._distances import cluster, joint_alphabet, js_divergence, js_matrix, remap_words, word_matrix
from fractalseq.errors import InputError
from fractalseq.datasets._markov import simulate_markov
from fractalseq.jobs._survey import SurveyOptions, expand_inputs, run_survey
from fractalseq.io._cache import ResultCache
from fractalseq.runner import PAUSE_VARIABLE
from fractalseq.words._counts import count_words

from _paths import CLI, LAMBDA, ROOT
sys.path.insert(0, str(ROOT / "benchmarks"))


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
    # The survey pauses (fractalseq.runner.pause_point) once two sources are in the cache, so the
    # interrupt lands at a known point whatever the machine's speed.
    env = {**os.environ, PAUSE_VARIABLE: "survey.cached:2"}
    proc = subprocess.Popen(base + ["--out", str(out)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)

    def stored(suffix: str) -> int:
        return len(list((out / ".cache").rglob(f"*{suffix}"))) if (out / ".cache").exists() else 0

    deadline = time.monotonic() + 900  # a safety net against a hang, not part of the check
    while proc.poll() is None and not (stored(".json") == 2 and stored(".npz") == 2) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert proc.poll() is None, "the survey ended before its pause point"
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "interrupted" in err
    assert [p.name for p in out.iterdir() if not p.name.startswith(".")] == []  # nothing half-written
    assert not [p for p in out.rglob("*") if p.name.endswith(".part")]
    assert stored(".json") == 2  # exactly the sources finished before the interrupt were kept
    assert main(args + ["--out", str(out)]) == 0  # the re-run resumes from the cache
    assert (out / "survey.json").read_bytes() == (ref / "survey.json").read_bytes()
    assert (out / "survey.csv").read_bytes() == (ref / "survey.csv").read_bytes()
    assert main(args + ["--out", str(out)]) == 2  # nothing is overwritten without --force


# ------------------------------------------------------- numeric reader options
def _write_buoy_csv(path: Path, seed: int, n: int = 6000) -> np.ndarray:
    """Invented test data: hourly readings of a fictional buoy; returns the salinity column."""
    rng = np.random.default_rng(seed)
    salinity = 35 + rng.normal(size=n)
    lines = ["# invented test data: hourly readings of a fictional buoy", "hour,tide_m,salinity"]
    lines += [f"{k % 24},{1.5 * np.sin(2 * np.pi * k / 12.4):.4f},{s:.4f}" for k, s in enumerate(salinity)]
    path.write_text("\n".join(lines) + "\n")
    return np.array([float(f"{s:.4f}") for s in salinity])


def test_survey_passes_numeric_reader_options_to_every_source(tmp_path, capsys):
    from fractalseq.cli.app import main

    salinity = [_write_buoy_csv(tmp_path / f"buoy{i}.csv", 100 + i) for i in range(2)]
    files = [str(tmp_path / f"buoy{i}.csv") for i in range(2)]
    capsys.readouterr()
    assert main(["survey", *files, "-f", "numeric", "--column", "salinity", "--bins", "3", "-q", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["parameters"]["reader"] == {"bins": 3, "column": "salinity"}
    assert [s["name"] for s in doc["sources"]] == ["buoy0.csv", "buoy1.csv"]
    for s, values in zip(doc["sources"], salinity):
        assert s["length"] == 6000 and s["alphabet_size"] == 3 and s["read"]["symbols"] == 6000
        numeric = s["profile"]["input"]["numeric"]
        assert numeric["column"] == "salinity" and numeric["method"] == "quantile"
        # equal-frequency edges of the chosen column: numpy's quantiles (default linear interpolation)
        assert numeric["edges"] == pytest.approx(np.quantile(values, [1 / 3, 2 / 3]), abs=1e-9)
        # independent normal draws cut at terciles are i.i.d. uniform over 3 symbols:
        # entropy rate log2(3) bits (common practice; Cover & Thomas 2006, eq. 2.1 and section 4.2)
        h = s["entropy_rate_bits"]["grassberger"]["estimate"]
        assert abs(h - np.log2(3)) < 0.02, h
    # without --column the reader takes the first measured column (tide_m: hour is a calendar part, 0..23 again
    # and again), so the options really reached the reader
    assert main(["survey", *files, "-f", "numeric", "-q", "--json"]) == 0
    plain = json.loads(capsys.readouterr().out)
    assert plain["parameters"]["reader"] == {}
    assert {s["profile"]["input"]["numeric"]["column"] for s in plain["sources"]} == {"tide_m"}
    assert main(["survey", *files, "-f", "numeric", "--bins", "1", "-q", "--json"]) == 2  # impossible value, before reading
    assert "bins" in capsys.readouterr().err
    # profile takes the same options (here the column by 0-based index) and reads the same symbols
    assert main(["profile", files[0], "-f", "numeric", "--column", "2", "--bins", "3", "--boot", "0", "-q", "--json"]) == 0
    prof = json.loads(capsys.readouterr().out)
    assert prof["parameters"]["reader"] == {"bins": 3, "column": "2"}
    assert prof["sources"][0]["input"]["numeric"] == doc["sources"][0]["profile"]["input"]["numeric"]


# ------------------------------------------------------------- cache pruning
def _entries(folder: Path) -> set[str]:
    return {p.stem for p in folder.rglob("*.json")}


def test_result_cache_prune_keeps_used_and_newer_entries_and_foreign_files(tmp_path):
    cache = ResultCache(tmp_path / "c")
    keys = [f"{i:02x}" + "ab" * 31 for i in range(4)]
    for k in keys:
        cache.put(k, {"k": k}, {"x": np.arange(3)})
    (tmp_path / "c" / keys[1][:2] / f".{keys[1]}.json.x1y2.part").write_text("half-written")
    (tmp_path / "c" / "notes.txt").write_text("not a cache file")
    orphan = tmp_path / "c" / keys[3][:2] / f"{keys[3]}.json"
    orphan.unlink()  # an entry interrupted between its two files: the .npz is left
    later = time.time() + 3600
    assert cache.prune([keys[0]], before=later) == 3
    assert _entries(tmp_path / "c") == {keys[0]}
    assert not list((tmp_path / "c").rglob("*.part"))
    assert [p.stem for p in (tmp_path / "c").rglob("*.npz")] == [keys[0]]  # the orphaned arrays went too
    assert (tmp_path / "c" / "notes.txt").exists()
    got = cache.get(keys[0])
    assert got is not None and got[0] == {"k": keys[0]} and np.array_equal(got[1]["x"], np.arange(3))
    assert sorted(p.name for p in (tmp_path / "c").iterdir()) == [keys[0][:2], "notes.txt"]  # empty sub-folders go
    # entries written after the given time (by another job sharing the folder) are kept
    cache.put(keys[2], {"k": keys[2]})
    assert cache.prune([keys[0]], before=time.time() - 3600) == 0
    assert _entries(tmp_path / "c") == {keys[0], keys[2]}


def test_survey_out_cache_keeps_only_the_last_runs_entries(tmp_path, capsys):
    from fractalseq.cli.app import main

    a, b, c = (_write_fasta(tmp_path / f"{n}.fa", _chain(i), 6_000, 20 + i) for i, n in enumerate("abc"))
    out = tmp_path / "out"
    base = ["survey", "--depth", "6", "--seed", "1"]
    assert main([*base, str(a), str(b), "--out", str(out), "-q"]) == 0
    first = _entries(out / ".cache")
    assert len(first) == 2
    # same output folder, one source swapped: a's entry is reused, b's is removed
    capsys.readouterr()
    assert main([*base, str(a), str(c), "--out", str(out), "--force"]) == 0
    second = _entries(out / ".cache")
    assert len(second) == 2 and len(second & first) == 1
    err = " ".join(capsys.readouterr().err.split())
    assert "resumed: 1 of 2 sources read from the cache" in err and "removed 1 cache entries of earlier runs" in err
    # other options: every earlier entry is stale
    assert main([*base[:-1], "2", str(a), str(c), "--out", str(out), "--force", "-q"]) == 0
    third = _entries(out / ".cache")
    assert len(third) == 2 and not third & second
    # an explicit --cache folder may serve several surveys: never pruned
    shared = tmp_path / "shared"
    assert main([*base, str(a), str(b), "--cache", str(shared), "-q", "--json"]) == 0
    assert main([*base, str(a), str(c), "--cache", str(shared), "-q", "--json"]) == 0
    assert len(_entries(shared)) == 3


def test_an_interrupted_survey_prunes_nothing(tmp_path):
    srcs = [_write_fasta(tmp_path / f"i{i}.fa", _chain(i), 6_000, 30 + i) for i in range(3)]
    specs = expand_inputs([str(p) for p in srcs])
    cache = ResultCache(tmp_path / "cache")
    run_survey(specs[:2], SurveyOptions(depth=6, seed=3), cache=cache)
    before = _entries(tmp_path / "cache")

    def stop(event, i, spec):
        if event == "done":
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_survey(specs[2:], SurveyOptions(depth=6, seed=3), cache=cache, progress=stop, prune_cache=True)
    assert _entries(tmp_path / "cache") >= before  # the earlier run's entries are still there
    done = run_survey(specs[2:], SurveyOptions(depth=6, seed=3), cache=cache, prune_cache=True)
    assert done.cache_pruned == 2 and len(_entries(tmp_path / "cache")) == 1


def test_common_cuts_compare_levels_as_well_as_dynamics(tmp_path, capsys):
    """--common-cuts cuts every source at the pooled quantiles (numpy), so a source at a higher level changes symbols.

    Invented data: two fictional buoys with the same i.i.d. salinity noise, the second 2 units saltier.
    Each cut at its own terciles, both are i.i.d. uniform over 3 symbols (log2 3 bits, common practice);
    cut at the pooled terciles, the saltier one sits mostly in the top bin and its entropy rate drops.
    """
    from fractalseq.cli.app import main

    a = _write_buoy_csv(tmp_path / "low.csv", 5)
    rng = np.random.default_rng(5)
    hi = 37 + rng.normal(size=6000)
    lines = ["hour,tide_m,salinity"] + [f"{k % 24},0.0,{s:.4f}" for k, s in enumerate(hi)]
    (tmp_path / "high.csv").write_text("\n".join(lines) + "\n")
    files = [str(tmp_path / "low.csv"), str(tmp_path / "high.csv")]
    base = ["survey", *files, "-f", "numeric", "--column", "salinity", "--bins", "3", "-q", "--json"]
    capsys.readouterr()
    assert main(base) == 0
    own = {s["name"]: s for s in json.loads(capsys.readouterr().out)["sources"]}
    assert main(base + ["--common-cuts"]) == 0
    doc = json.loads(capsys.readouterr().out)
    pooled = {s["name"]: s for s in doc["sources"]}
    edges = pooled["high.csv"]["profile"]["input"]["numeric"]["edges"]
    assert edges == pytest.approx(np.quantile(np.concatenate([a, np.round(hi, 4)]), [1 / 3, 2 / 3]), abs=1e-9)
    h = lambda d, n: d[n]["entropy_rate_bits"]["grassberger"]["estimate"]  # noqa: E731
    assert abs(h(own, "high.csv") - np.log2(3)) < 0.02 and abs(h(own, "low.csv") - np.log2(3)) < 0.02
    assert h(pooled, "high.csv") < 1.3 and h(pooled, "low.csv") < 1.3
    assert main(base + ["--common-cuts", "--ordinal", "3"]) == 2


def test_a_large_survey_keeps_its_report_readable_and_small(tmp_path):
    """61 sources: spectra without legend, unlabelled fixed-size heat map and dendrogram, matrices left to the CSV.

    (Before, figure sizes grew with the number of sources: 300 sources needed 6 GB to draw.)
    """
    import struct

    from fractalseq.runner import SerialEngine
    from fractalseq.jobs._survey import SurveyOptions, expand_inputs, run_survey, write_outputs
    from fractalseq.report.survey import MATRIX_IN_PAGE, NAMED_LEAVES

    n = NAMED_LEAVES + 1
    assert n > NAMED_LEAVES and n > MATRIX_IN_PAGE
    for i in range(n):
        _write_fasta(tmp_path / f"s{i:02d}.fa", _chain(i % 7), 2000, 100 + i)
    res = run_survey(expand_inputs([str(tmp_path / "*.fa")]), SurveyOptions(seed=0, depth=4), SerialEngine())
    written = write_outputs(res, tmp_path / "out")
    html = (tmp_path / "out" / "survey.html").read_text()
    assert f"The {n} × {n} distance matrices are in distances.csv" in html
    rows = (tmp_path / "out" / "distances.csv").read_text().splitlines()
    assert len(rows) == n + 1 and len(rows[1].split(",")) == n + 1
    for name in ("heatmap.png", "dendrogram.png", "spectra.png"):
        head = (tmp_path / "out" / name).read_bytes()[:24]
        w, h = struct.unpack(">II", head[16:24])  # PNG IHDR: width and height in pixels
        assert w <= 1400 and h <= 1400, (name, w, h)
    assert len(html) < 2_000_000 and len(written) == 7


def test_the_cache_rule_of_a_survey(tmp_path):
    """No cache unless asked; a given folder is shared and never pruned; OUT/.cache belongs to the survey and is pruned."""
    from fractalseq.jobs._files import survey_cache

    assert not survey_cache().store.enabled
    assert not survey_cache(tmp_path / "out", tmp_path / "shared", use_cache=False).store.enabled
    shared = survey_cache(tmp_path / "out", tmp_path / "shared")
    assert shared.store.folder == tmp_path / "shared" and shared.prune is False
    own = survey_cache(tmp_path / "out")
    assert own.store.folder == tmp_path / "out" / ".cache" and own.prune is True


def test_seeds_are_whole_numbers_below_two_to_the_64(tmp_path):
    from fractalseq.errors import ParameterError
    from fractalseq.jobs._inputs import check_seed

    assert check_seed(0) == 0 and check_seed(2**64 - 1) == 2**64 - 1 and check_seed(np.uint64(5)) == 5
    for bad in (-1, 2**64, 1.5, True, "3"):
        with pytest.raises(ParameterError) as info:
            check_seed(bad)
        assert info.value.parameter == "seed"
    with pytest.raises(ParameterError):
        SurveyOptions(seed=-3)

"""Two-batch drift test: statistics against scipy, block tables, calibration, logs, CLI."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import numpy as np
import pytest
from scipy.stats import chi2_contingency, false_discovery_control

from fractalseq.alphabet import dna
from fractalseq.compare._blocks import block_tables
from fractalseq.compare._drift import FIGURES, DriftOptions, drift_test
from fractalseq.compare._homogeneity import _Figures, adjust_pvalues, conditional_g, g_statistic
from fractalseq.jobs._engines import ProcessEngine
from fractalseq.runner import Engine
from fractalseq.words._pieces import iter_pieces
from fractalseq.entropy._estimators import rate_from_counts, renyi_rate_from_counts
from fractalseq.errors import ParameterError
from fractalseq.datasets._markov import simulate_markov
from fractalseq.stream import SymbolArray, from_codes
from fractalseq.words._counts import count_words

CLI = [sys.executable, "-c", "import sys; from fractalseq.cli.app import main; sys.exit(main(sys.argv[1:]))"]
CHAIN = np.random.default_rng(20240611).dirichlet(np.full(4, 5.0), size=16)  # invented order-2 chain


def _changed_chain(shift=0.05):
    Q = CHAIN.copy()
    hi, lo = int(np.argmax(Q[5])), int(np.argmin(Q[5]))
    Q[5, hi] -= shift
    Q[5, lo] += shift
    return Q


def _batch(P, n, seed, name):
    return from_codes(dna(), simulate_markov(P, n, seed=seed, order=2), name=name)


def test_g_statistic_matches_scipy_log_likelihood_ratio():
    # scipy.stats.chi2_contingency(lambda_="log-likelihood") is the G-test (Sokal & Rohlf, Biometry)
    rng = np.random.default_rng(1)
    for _ in range(20):
        table = rng.integers(1, 60, size=(2, 9)).astype(float)
        ref = chi2_contingency(table, correction=False, lambda_="log-likelihood")[0]
        assert g_statistic(table[0], table[1])[0] == pytest.approx(ref, rel=1e-10)


def test_conditional_g_is_the_sum_of_per_context_g_tests():
    rng = np.random.default_rng(2)
    a = rng.integers(1, 50, 16).astype(float)
    b = rng.integers(1, 50, 16).astype(float)
    context = np.repeat(np.arange(4), 4)  # 4 contexts x 4 next symbols
    ref = sum(
        chi2_contingency(np.vstack([a[context == c], b[context == c]]), correction=False, lambda_="log-likelihood")[0]
        for c in range(4)
    )
    assert conditional_g(a, b, context, 4)[0] == pytest.approx(ref, rel=1e-10)


def test_adjustments_match_scipy_and_a_worked_holm_example():
    p = np.array([0.01, 0.04, 0.03, 0.005, 0.5, 0.2])
    # Benjamini-Hochberg adjusted p-values as computed by scipy (an outside reference)
    assert np.allclose(adjust_pvalues(p, "bh"), false_discovery_control(p, method="bh"))
    # Holm (1979) step-down, worked by hand: sorted p 0.005 0.01 0.03 0.04 0.2 0.5, multipliers 6..1
    # -> 0.03 0.05 0.12 0.12 (max with 0.08) 0.4 0.5
    expected = {0.005: 0.03, 0.01: 0.05, 0.03: 0.12, 0.04: 0.12, 0.2: 0.4, 0.5: 0.5}
    got = adjust_pvalues(p, "holm")
    for pi, gi in zip(p, got):
        assert gi == pytest.approx(expected[pi])
    with pytest.raises(ParameterError):
        adjust_pvalues(p, "bonferroni")


def test_vectorised_figures_equal_the_entropy_module():
    rng = np.random.default_rng(4)
    counts = rng.integers(0, 40, 64).astype(float)
    context = np.repeat(np.arange(16), 4)
    fig = _Figures(counts, context, 16, 3, 0.5)
    prev = np.bincount(context, weights=counts, minlength=16)
    assert fig.rate(counts)[0] == pytest.approx(rate_from_counts(prev, counts, "grassberger"), abs=1e-12)
    assert fig.d2(counts)[0] == pytest.approx(renyi_rate_from_counts(prev, counts, 2.0, True), abs=1e-12)


def test_block_tables_sum_to_the_exact_word_counts():
    rng = np.random.default_rng(7)
    codes = rng.integers(0, 4, 20_000).astype(np.uint8)
    arr = SymbolArray(dna(), codes, [0, 777, 5000, 5001, 12_345], "x")
    depth, block = 3, 250
    total = {}
    for p in iter_pieces(arr.as_stream(chunk_size=999), block * 7, depth - 1):
        b, w, c = block_tables((p, depth, block))
        assert np.all(b >= p.offset // block) and np.all(b < (p.offset + p.core + block - 1) // block)
        for wi, ci in zip(w.tolist(), c.tolist()):
            total[wi] = total.get(wi, 0) + ci
    ref_w, ref_c = count_words(arr, depth).words(depth)
    assert total == dict(zip(ref_w.tolist(), ref_c.tolist()))


def test_no_change_keeps_its_level_and_a_change_is_found():
    # calibration on 40 small null trials (fixed seeds): the permutation test should reject
    # about 5% of the time; more than 5 of 40 would signal a badly calibrated test
    opts = DriftOptions(permutations=199)
    rejected = 0
    for i in range(40):
        r = drift_test([_batch(CHAIN, 20_000, 100 + 2 * i, "a")], [_batch(CHAIN, 20_000, 101 + 2 * i, "b")], opts)
        rejected += r.changed
    assert rejected <= 5
    # power: a shift of 0.15 in one transition row at 2e4 symbols per batch is found every time
    Q = _changed_chain(0.15)
    for i in range(5):
        r = drift_test([_batch(CHAIN, 20_000, 300 + i, "a")], [_batch(Q, 20_000, 400 + i, "b")], opts)
        assert r.changed and r.p_value < 0.05
        trans = next(t for t in r.tests if t.figure == "transitions")
        assert trans.p_adjusted <= 0.05
        assert r.top_contexts[0]["context"] == "CC"  # context 5 = (C, C) is the one changed


def test_engines_give_identical_results(monkeypatch):
    base = [_batch(CHAIN, 30_000, 1, "a1"), _batch(CHAIN, 10_000, 2, "a2")]
    new = [_batch(_changed_chain(), 40_000, 3, "b")]
    serial = drift_test(base, new, DriftOptions(seed=9, permutations=99))
    with ProcessEngine(2) as eng:
        par = drift_test(base, new, DriftOptions(seed=9, permutations=99), eng)
    assert serial.to_json() == par.to_json()
    # any engine of the runner contract will do, also one that hands results back out of order
    # (small pieces, so that there is an order to break; block tables do not depend on the piece size)
    import fractalseq.compare._blocks as blocks

    monkeypatch.setattr(blocks, "DEFAULT_PIECE", 4096)
    done = []
    last_first = drift_test(base, new, DriftOptions(seed=9, permutations=99), _LastFirstEngine(),
                            on_done=lambda i, r: done.append(i))
    assert last_first.to_json() == serial.to_json()
    assert done != sorted(done) and len(done) > 10  # really out of order


class _Later:
    def __init__(self, func, item):
        self.func, self.item = func, item

    def result(self):
        return self.func(self.item)


class _LastFirstEngine(Engine):
    """Only the :class:`fractalseq.runner.Engine` contract: the newest pending task finishes first."""

    name = "last-first"
    workers = 3

    def submit(self, func, item):
        return _Later(func, item)

    def wait_first(self, futures):
        return [futures[-1]]


def test_logs_with_different_templates_use_a_joint_alphabet(tmp_path):
    # invented scenario: a small service log; the new batch gains a timeout event
    rng = np.random.default_rng(0)
    events = ["worker {n} started job {j}", "job {j} finished in {n} ms", "cache hit for key {n}"]
    extra = "upstream timeout after {n} ms on shard {j}"

    def write(path, n, with_extra):
        lines = []
        for i in range(n):
            pool = events + ([extra] * 2 if with_extra else [])
            t = pool[int(rng.integers(0, len(pool)))]
            lines.append(f"2024-03-0{1 + i % 9}T10:00:{i % 60:02d} " + t.format(n=int(rng.integers(0, 999)), j=int(rng.integers(0, 99))))
        path.write_text("\n".join(lines) + "\n")

    write(tmp_path / "old.log", 6000, False)
    write(tmp_path / "new.log", 6000, True)
    cmd = CLI + ["drift", str(tmp_path / "old.log"), str(tmp_path / "new.log"), "--format", "log", "--json", "-q", "--permutations", "199"]
    proc = subprocess.run(cmd, capture_output=True, text=True)
    assert proc.returncode == 1, proc.stderr  # 1 = drift found
    data = json.loads(proc.stdout)
    assert data["changed"] is True and data["p_value"] < 0.05
    assert data["alphabet"]["size"] == 4  # three shared templates and the new one
    assert "timeout" in data["top_words"][0]["word"] and data["top_words"][0]["direction"] == "more in new"
    assert "no security guarantee" in data["caution"]


def test_cli_contract_verdict_and_exit_codes(tmp_path):
    a, b = tmp_path / "a.fa", tmp_path / "b.fa"
    for path, seed in ((a, 1), (b, 2)):
        x = simulate_markov(CHAIN, 30_000, seed=seed, order=2)
        path.write_text(">x\n" + "".join("ACGT"[c] for c in x) + "\n")
    run = lambda *args: subprocess.run(CLI + ["drift", *args], capture_output=True, text=True)  # noqa: E731
    text = run(str(a), str(b), "-q", "--permutations", "99")
    assert text.returncode == 0, text.stderr
    assert text.stdout.splitlines()[0].startswith("NO CHANGE DETECTED: the new batch is consistent with the baseline")
    assert "no security guarantee" in text.stdout
    j1 = run(str(a), str(b), "-q", "--json", "--permutations", "99", "--seed", "3")
    j2 = run(str(a), str(b), "-q", "--json", "--permutations", "99", "--seed", "3")
    assert j1.stdout == j2.stdout  # same input and seed: byte-identical JSON
    data = json.loads(j1.stdout)
    assert set(data) >= {"changed", "p_value", "tests"}
    assert data["p_value"] == min(t["p_adjusted"] for t in data["tests"])
    assert {t["figure"] for t in data["tests"]} == {"words", "transitions", "entropy_rate", "D2"}
    bad = run(str(a), str(tmp_path / "missing.fa"), "-q")
    assert bad.returncode == 2 and bad.stderr.startswith("error: ") and "Traceback" not in bad.stderr
    assert math.isfinite(data["tests"][0]["statistic"])


def test_numeric_batches_share_the_baselines_cut_points(tmp_path):
    """A level shift of a measured series is found because both batches are cut at the baseline's quantiles.

    Invented series (no real data): an AR(1) process, and the same values shifted by 0.8 standard
    deviations. Read with each batch's own quantiles the two batches would give identical symbols; with the
    baseline's cuts (quantiles checked against numpy) the shift shows. Ordinal patterns (Bandt & Pompe 2002)
    ignore level, so with --ordinal the two batches are the same symbols and no change can be found.
    """
    from fractalseq.sources import shared_quantile_edges

    rng = np.random.default_rng(7)
    x = np.zeros(20_000)
    for t in range(1, x.size):
        x[t] = 0.6 * x[t - 1] + rng.standard_normal()
    base, new = tmp_path / "base.csv", tmp_path / "new.csv"
    base.write_text("level\n" + "\n".join(f"{v:.6f}" for v in x) + "\n")
    new.write_text("level\n" + "\n".join(f"{v + 0.8 * x.std():.6f}" for v in x) + "\n")
    edges = shared_quantile_edges([base], 4)
    assert np.allclose(edges, np.quantile(np.round(x, 6), [0.25, 0.5, 0.75]))
    run = lambda *args: subprocess.run(CLI + ["drift", str(base), str(new), "-q", "-f", "numeric", "--permutations", "99", *args], capture_output=True, text=True)  # noqa: E731
    shifted = run("--json")
    assert shifted.returncode == 1, shifted.stderr
    data = json.loads(shifted.stdout)
    assert data["changed"] is True and "baseline's 4-quantiles" in data["notes"][0]
    patterns = run("--ordinal", "3", "--json")
    assert patterns.returncode == 0, patterns.stderr
    assert json.loads(patterns.stdout)["changed"] is False


def test_result_is_frozen_and_keeps_the_documented_json_keys():
    """The ``drift --json`` document keeps the keys of its contract (README, "JSON contract (drift --json)")
    now that it is generated from the result's fields; the result itself cannot be changed in place."""
    import dataclasses

    r = drift_test([_batch(CHAIN, 8000, 1, "a")], [_batch(CHAIN, 8000, 2, "b")], DriftOptions(permutations=19, seed=3))
    d = r.to_dict()
    assert set(d) == {
        "command", "fractalseq", "verdict", "changed", "inconclusive", "p_value", "alpha", "adjust", "method", "depth",
        "block", "tests", "top_words", "top_contexts", "baseline", "new", "alphabet", "parameters", "notes", "caution",
    }
    assert d["command"] == "drift" and d["alpha"] == 0.05 and d["adjust"] == "holm"
    assert set(d["tests"][0]) == {"figure", "statistic_name", "statistic", "baseline", "new", "effect", "effect_name",
                                  "standardized_effect", "p_value", "p_adjusted"}
    assert set(d["baseline"]) == {"inputs", "lengths", "symbols", "blocks", "words"}
    assert d["parameters"] == {"depth": None, "block": None, "permutations": 19, "alpha": 0.05, "adjust": "holm",
                               "seed": 3, "ratio": 0.5, "figures": list(FIGURES), "top": 10}
    assert d["verdict"] == r.verdict and d["verdict"].split(":")[0] in ("CHANGED", "NO CHANGE DETECTED", "INCONCLUSIVE")
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.changed = True
    with pytest.raises(dataclasses.FrozenInstanceError):
        r.tests[0].p_adjusted = 0.0
    noted = dataclasses.replace(r, notes=("an added note", *r.notes))
    assert noted.to_dict()["notes"][0] == "an added note" and noted.verdict == r.verdict


def test_errors_name_the_parameter():
    for opts, name in ((DriftOptions(permutations=5), "permutations"), (DriftOptions(alpha=2.0), "alpha"),
                       (DriftOptions(block=0), "block"), (DriftOptions(figures=("bogus",)), "figures")):
        with pytest.raises(ParameterError) as err:
            drift_test([_batch(CHAIN, 500, 1, "a")], [_batch(CHAIN, 500, 2, "b")], opts)
        assert err.value.parameter == name and "--" not in str(err.value)

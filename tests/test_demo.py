"""The README's first command: `fractalseq demo` into a temporary folder.

Checks that the report files exist, that the printed estimates lie within their stated 95% intervals of
the known truth of the simulated sources (closed forms: Cover & Thomas 2006, ch. 4, for entropy rates of
Markov chains; Rached, Alajaji & Campbell 2001 for their Rényi rates, D_q = h_q / log2(1/k) at k = 1/2),
that the drift and the repeat island are found, that every report kind renders in a real browser, and
that the same seed gives byte-identical JSON.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from browser_check import check_report_in_browser

#: Whole processes or many of them: part of every CI run; skip in a quick loop with -m 'not slow'.
pytestmark = pytest.mark.slow


def _run_demo(folder: Path, extra: list[str]) -> subprocess.CompletedProcess:
    cmd = [sys.executable, "-m", "fractalseq.cli", "demo", "--out", str(folder), "--json", "--quiet"] + extra
    return subprocess.run(cmd, capture_output=True, text=True, timeout=600)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo") / "report"
    proc = _run_demo(folder, [])
    assert proc.returncode == 0, proc.stderr
    return folder, json.loads(proc.stdout), proc.stdout


def test_demo_writes_every_report(demo_run):
    folder, _, _ = demo_run
    for rel in (
        "index.html", "demo.json",
        "survey/survey.html", "survey/survey.json", "survey/survey.csv", "survey/dendrogram.png", "survey/heatmap.png",
        "drift/drift.html", "drift/drift.json", "scan/scan.html", "scan/scan.png", "scan/scan.json",
        "data/samples/kelp-chain.fa", "data/logs/relay-week2.log",
    ):
        assert (folder / rel).is_file(), rel
    assert not list(folder.rglob("*.part"))


def test_printed_estimates_cover_the_truth(demo_run):
    _, summary, _ = demo_run
    rows = summary["summary"]
    with_interval = [r for r in rows if r["within"] is not None and r["low"] is not None]
    # entropy rate, D1 and D2 for each of the four stationary samples
    assert len(with_interval) >= 12
    misses = [r for r in with_interval if not (r["low"] <= r["truth"] <= r["high"])]
    assert not misses, misses
    for r in with_interval:
        assert r["within"] is True


def test_demo_finds_the_drift_and_the_island(demo_run):
    _, summary, _ = demo_run
    by_figure = {(r["subject"], r["figure"]): r for r in summary["summary"]}
    drift = by_figure[("relay logs", "drift found")]
    assert drift["within"] is True and str(drift["estimate"]).startswith("yes")
    island = by_figure[("kelp-island", "repeat island (scan)")]
    assert island["within"] is True
    pred = by_figure[("relay log wk 2", "predictor bits/event")]
    assert pred["within"] is True  # below lzma (preset 9, extreme) on the same event codes
    # the model of week 1 names exactly the scenario's new event kinds (their templates, written by hand in the
    # scenario from its message formats: two syslog lines and one JSON line of the failure mode)
    truth = summary["scenario"]["logs"]["new_templates"]
    assert len(truth) == 3
    new_kinds = by_figure[("relay log wk 2", "new event kinds named")]
    assert new_kinds["within"] is True and new_kinds["estimate"] == str(len(truth))
    named = [n.split(": ", 1)[1] for n in summary["notes"] if "never saw" in n]
    assert sorted(named) == sorted(truth)


def test_demo_logs_hold_syslog_headers_hosts_and_json_lines(demo_run):
    # the invented collector log: RFC 3164 lines of two relay hosts, RFC 5424 lines of the gauge hub, JSON lines
    folder, summary, _ = demo_run
    from fractalseq.sources.headers import split_header

    lines = (folder / "data" / "logs" / "relay-week1.log").read_text().splitlines()
    hosts = {split_header(ln)[0].host for ln in lines}
    assert {"relay-north", "relay-south", "gauge-hub"} <= hosts
    assert any(ln.startswith("<134>1 ") for ln in lines) and any(ln.startswith('{"ts": ') for ln in lines)


def test_online_predictor_is_an_upper_bound_near_the_rate(demo_run):
    # the online code length bounds the information content from above (Cover & Thomas 2006, ch. 5/13);
    # for these 120 kb samples it should sit within 0.05 bit of the true rate and not far below it.
    _, summary, _ = demo_run
    preds = [r for r in summary["summary"] if r["figure"] == "predictor bits (≥ h)"]
    assert len(preds) == 4
    for r in preds:
        assert r["truth"] - 0.01 <= r["estimate"] <= r["truth"] + 0.05, r


def test_every_report_kind_renders_in_a_browser(demo_run):
    folder, _, _ = demo_run
    check_report_in_browser(folder / "index.html", min_tables=1)
    check_report_in_browser(folder / "survey" / "survey.html", min_tables=2, min_images=3)
    check_report_in_browser(folder / "drift" / "drift.html", min_tables=1)
    check_report_in_browser(folder / "scan" / "scan.html", min_tables=1, min_images=1)


def test_same_seed_same_bytes(demo_run, tmp_path):
    folder, _, stdout = demo_run
    again = tmp_path / "again"
    proc = _run_demo(again, [])
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.replace(str(again), str(folder)) == stdout
    for rel in ("survey/survey.json", "drift/drift.json", "scan/scan.json"):
        a = (folder / rel).read_text().replace(str(folder), "")
        b = (again / rel).read_text().replace(str(again), "")
        assert a == b, rel

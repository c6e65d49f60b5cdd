"""A survey of pieces of five real logs: clustered by log, same-log distances below different-log ones.

The logs are the labelled excerpts of reference/logs/ (provenance in reference/logs/README.md): dpkg's log and
apt's terminal log of a Debian 12 machine, GDB's DejaGnu check log and the jtreg output shipped by Debian, and
fail2ban's sshd sample.  Each log is cut into consecutive pieces; every piece is a source of the survey.
Purity of a clustering (the share of items whose cluster's majority class is their own class) is the usual
external cluster-validity measure (common practice; Manning, Raghavan & Schütze 2008, "Introduction to
Information Retrieval", section 16.3).
"""

from __future__ import annotations

import json
from collections import Counter
from pathlib import Path

import numpy as np
from scipy.cluster.hierarchy import fcluster

from _paths import LOGS
from fractalseq.results import CAUTION_LOGS

#: (log, first line, last line, pieces): the jtreg excerpt's first 234 lines are all "Passed:" lines (a piece of
#: them alone has a single template), so its pieces are cut from line 150 on, each holding other kinds too
PIECES = [
    ("dpkg-excerpt", 1, 2000, 3),
    ("apt-term-excerpt", 1, 1200, 3),
    ("gdb-check-excerpt", 1, 3000, 3),
    ("fail2ban-sshd", 1, 399, 2),
    ("jtreg-output-excerpt", 150, 351, 2),
]


def cut_pieces(folder: Path) -> tuple[list[str], list[str]]:
    """Write the pieces of the five logs into ``folder``; their paths and the log each comes from."""
    paths, logs = [], []
    for name, first, last, k in PIECES:
        lines = (LOGS / f"{name}.log").read_bytes().split(b"\n")[first - 1 : last]
        step = len(lines) // k
        for i in range(k):
            part = lines[i * step : (i + 1) * step if i < k - 1 else len(lines)]
            p = folder / f"{name}-{i + 1}.log"
            p.write_bytes(b"\n".join(part) + b"\n")
            paths.append(str(p))
            logs.append(name)
    return paths, logs


def purity(clusters, classes) -> float:
    by: dict = {}
    for c, t in zip(clusters, classes):
        by.setdefault(c, Counter())[t] += 1
    return sum(cnt.most_common(1)[0][1] for cnt in by.values()) / len(classes)


def test_purity_measure_on_a_worked_example():
    # clusters {a,a,b} and {b,c}: majorities 2 and 1 of 5 items -> 3/5
    assert purity([1, 1, 1, 2, 2], ["a", "a", "b", "b", "c"]) == 0.6
    assert purity([1, 1, 2], ["x", "x", "y"]) == 1.0


def test_a_survey_of_five_real_logs_clusters_them_by_log(tmp_path, capsys):
    from fractalseq.cli.app import main

    paths, logs = cut_pieces(tmp_path)
    capsys.readouterr()
    assert main(["survey", *paths, "--format", "log", "-q", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [s["name"] for s in doc["sources"]] == [Path(p).name for p in paths]
    dist = doc["distances"]
    # the pieces' templates are compared in one table of templates (by text) across the survey
    assert dist["alphabet"] == "joint-templates"
    js = np.asarray(dist["matrix"])
    same = np.equal.outer(logs, logs)
    off = ~np.eye(len(logs), dtype=bool)
    within, between = js[same & off], js[~same]
    assert within.max() < between.min(), (within.max(), between.min())
    assert within.mean() < 0.25 * between.mean()
    # the survey's own clustering (average linkage on the Jensen-Shannon distance) cut into five clusters
    link = np.asarray(dist["clustering"]["linkage"], dtype=float)
    clusters = fcluster(link, t=len(PIECES), criterion="maxclust")
    assert purity(clusters, logs) == 1.0 and len(set(clusters)) == len(PIECES)
    assert doc["caution"] == CAUTION_LOGS
    # what a user reads on the terminal ends with the log caution, not the genomic one
    assert main(["survey", *paths, "--format", "log", "-q"]) == 0
    out = " ".join(capsys.readouterr().out.split())
    assert out.endswith("no security guarantee.") and "Genomic" not in out
    # pieces of different logs share no template: the five logs are joined at one height, named together
    assert "Top of the clustering: 5 groups joined at the same distance (1):" in out

"""``fractalseq templates`` through the command line, as a shell runs it, on the real logs of reference/logs.

The logs and their provenance are in reference/logs/README.md and PROVENANCE.md.  Line counting follows
POSIX (a line ends at a newline; a last line without one still counts): common practice.
"""

from __future__ import annotations

import csv
import json
import os
import subprocess
import sys
from collections import Counter
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
LOGS = ROOT / "reference" / "logs"
REAL = [
    "dpkg-excerpt.log", "apt-term-excerpt.log", "jtreg-output-excerpt.log", "gdb-check-excerpt.log",
    "fail2ban-sshd.log", "fail2ban-postfix.log", "fail2ban-apache-auth.log", "named-refused.log",
]


def _run(*args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    env.pop("FRACTALSEQ_DEBUG", None)
    return subprocess.run([sys.executable, "-m", "fractalseq", "templates", *map(str, args)],
                          capture_output=True, env=env, timeout=300)


def _file_lines(path: Path) -> list[str]:
    data = path.read_bytes().decode("utf-8")
    lines = data.split("\n")
    if data.endswith("\n"):
        lines.pop()
    return [ln[:-1] if ln.endswith("\r") else ln for ln in lines]


@pytest.mark.parametrize("name", REAL)
def test_json_gives_every_line_its_template(name):
    proc = _run(LOGS / name, "--json")
    assert proc.returncode == 0, proc.stderr
    doc = json.loads(proc.stdout)
    lines = _file_lines(LOGS / name)
    ids = doc["lines"]
    assert len(ids) == len(lines)
    # a blank line is no symbol, every other line has a template
    assert [i is None for i in ids] == [not ln.strip() for ln in lines]
    seen = Counter(i for i in ids if i is not None)
    table = doc["templates"]
    assert [t["id"] for t in table] == list(range(len(table)))
    for t in table:
        assert t["count"] == seen[t["id"]] > 0
        first = ids.index(t["id"])  # ids are by first appearance, and first_line is 1-based
        assert t["first_line"] == first + 1 and t["example"] == lines[first][:500]
        assert set(t) >= {"id", "text", "count", "first_line", "example", "hosts", "programs", "levels"}
    assert [t["first_line"] for t in table] == sorted(t["first_line"] for t in table)
    assert doc["inputs"][0]["lines"] == len(lines) and doc["inputs"][0]["blank"] == ids.count(None)


def test_header_fields_are_counted_per_template():
    # named-refused.log: syslog lines "Jul 24 14:16:55 raid5 named[3935]: client ..." (RFC 3164 header: time,
    # host, program[pid]); a line without the time has no header
    import re

    rfc3164 = re.compile(r"[A-Z][a-z]{2} [ \d]\d \d\d:\d\d:\d\d (\S+) named\[\d+\]: ")
    doc = json.loads(_run(LOGS / "named-refused.log", "--json").stdout)
    lines = _file_lines(LOGS / "named-refused.log")
    for t in doc["templates"]:
        heads = [rfc3164.match(lines[i]) for i, j in enumerate(doc["lines"]) if j == t["id"]]
        assert t["programs"].get("named", 0) == sum(m is not None for m in heads)
        assert t["hosts"].get("raid5", 0) == sum(m is not None and m.group(1) == "raid5" for m in heads)
    assert sum(t["hosts"].get("raid5", 0) for t in doc["templates"]) == 6


def test_several_logs_share_one_table_mined_over_their_union(tmp_path):
    a, b = LOGS / "dpkg-excerpt.log", LOGS / "apt-term-excerpt.log"
    both = tmp_path / "both.log"
    both.write_bytes(a.read_bytes() + b.read_bytes())  # both end with a newline
    union = json.loads(_run(a, b, "--json").stdout)
    whole = json.loads(_run(both, "--json").stdout)
    # mining the two as one sequence is mining their concatenation
    assert [(t["text"], t["count"]) for t in union["templates"]] == [(t["text"], t["count"]) for t in whole["templates"]]
    assert union["inputs"][0]["line_ids"] + union["inputs"][1]["line_ids"] == whole["lines"]
    for t in union["templates"]:
        assert sum(t["counts"]) == t["count"]
        assert t["counts"] == [log["line_ids"].count(t["id"]) for log in union["inputs"]]
    n_a = len(_file_lines(a))
    assert [len(log["line_ids"]) for log in union["inputs"]] == [n_a, len(_file_lines(b))]


def test_terminal_control_characters_and_markup_from_the_log_are_shown_escaped(tmp_path):
    log = tmp_path / "hostile.log"
    lines = [
        "Jan  5 10:11:12 h app: user \x1b[31mmallory\x1b[0m logged [bold]in[/bold] :smile: \u202egnp.exe",
        "Jan  5 10:11:13 h app: user \x1b[31mtrent\x1b[0m logged [bold]in[/bold] :smile: \u202egnp.exe",
        "Jan  5 10:11:14 h app: progress 10%\r20%\r30% \x9b2J done",
    ]
    log.write_text("\n".join(lines) + "\n", encoding="utf-8")
    proc = _run(log)
    assert proc.returncode == 0, proc.stderr
    out = proc.stdout.decode("utf-8")
    for raw in ("\x1b", "\u202e", "\r", "\x9b"):
        assert raw not in out
    assert "\\x1b[31mmallory\\x1b[0m logged [bold]in[/bold] :smile: \\u202egnp.exe" in out
    assert "progress 10%\\r20%\\r30% \\x9b2J done" in out
    # JSON keeps the text exactly, with every control character written as an escape
    js = _run(log, "--json").stdout.decode("utf-8")
    for raw in ("\x1b", "\u202e", "\r", "\x9b"):
        assert raw not in js
    assert [t["example"] for t in json.loads(js)["templates"]] == [lines[0], lines[2]]


def test_piped_table_is_not_cut(tmp_path):
    log = tmp_path / "long.log"
    tail = " ".join(f"word{i:03d}x" for i in range(40))  # about 360 characters
    log.write_text(f"2024-01-05 10:11:12 INFO start {tail}\n2024-01-05 10:11:13 INFO stop now\n", encoding="utf-8")
    out = _run(log).stdout.decode("utf-8")
    assert f"2024-01-05 10:11:12 INFO start {tail}" in out.splitlines()[4]
    assert "…" not in out


def test_csv_is_written_whole_and_not_overwritten_without_force(tmp_path):
    target = tmp_path / "t.csv"
    proc = _run(LOGS / "dpkg-excerpt.log", "--csv", target, "-q")
    assert proc.returncode == 0, proc.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.csv"]  # no temporary file left beside it
    with target.open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    doc = json.loads(_run(LOGS / "dpkg-excerpt.log", "--json").stdout)
    assert [(int(r["id"]), r["text"], int(r["count"]), int(r["first_line"]), r["example"]) for r in rows] == [
        (t["id"], t["text"], t["count"], t["first_line"], t["example"]) for t in doc["templates"]
    ]
    before = target.read_bytes()
    again = _run(LOGS / "apt-term-excerpt.log", "--csv", target)
    assert again.returncode == 2 and b"--force" in again.stderr and len(again.stderr.strip().splitlines()) == 1
    assert target.read_bytes() == before
    forced = _run(LOGS / "apt-term-excerpt.log", "--csv", target, "--force", "-q")
    assert forced.returncode == 0 and target.read_bytes() != before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.csv"]


def test_out_folder_holds_json_and_csv(tmp_path):
    out = tmp_path / "res"
    assert _run(LOGS / "jtreg-output-excerpt.log", "--out", out, "-q").returncode == 0
    doc = json.loads((out / "templates.json").read_text(encoding="utf-8"))
    assert len(doc["lines"]) == len(_file_lines(LOGS / "jtreg-output-excerpt.log"))
    again = _run(LOGS / "jtreg-output-excerpt.log", "--out", out)
    assert again.returncode == 2 and b"--force" in again.stderr
    assert _run(LOGS / "jtreg-output-excerpt.log", "--out", out, "--force", "-q").returncode == 0
    # a run refused for bad input leaves no empty output folder behind
    assert _run(tmp_path / "missing.log", "--out", tmp_path / "new" / "res").returncode == 2
    assert not (tmp_path / "new").exists()


@pytest.mark.parametrize("kind", ["missing", "binary", "empty", "blank", "folder"])
def test_bad_input_is_one_sentence_and_exit_2(tmp_path, kind):
    path = tmp_path / "x.log"
    if kind == "binary":
        path.write_bytes(bytes(range(256)) * 64)
    elif kind == "empty":
        path.write_bytes(b"")
    elif kind == "blank":
        path.write_bytes(b"\n  \n\t\n")
    elif kind == "folder":
        path.mkdir()
    proc = _run(path, "--json")
    assert proc.returncode == 2
    err = proc.stderr.decode("utf-8").strip()
    assert err.startswith("error: ") and len(err.splitlines()) == 1 and "Traceback" not in err
    assert proc.stdout == b""

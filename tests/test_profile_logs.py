"""A log's profile lists its most frequent templates, in the terminal and in the report, escaped.

Data: this machine's package-manager log excerpt in reference/logs/ (provenance in
reference/logs/README.md); the escaping checks use an invented line with terminal control
sequences and rich markup (a line nobody wrote, made here).
"""

from __future__ import annotations

import json
import subprocess

from _paths import CLI, LOGS

DPKG = LOGS / "dpkg-excerpt.log"


def _profile(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([*CLI, "profile", *args, "--format", "log", "--seed", "1", "--boot", "0"],
                          capture_output=True, text=True, env={"COLUMNS": "200", "PATH": "/usr/bin:/bin"})


def test_terminal_table_lists_the_most_frequent_templates_of_a_real_log():
    run = _profile(str(DPKG))
    assert run.returncode == 0, run.stderr
    doc = _profile(str(DPKG), "--json")
    templates = json.loads(doc.stdout)["sources"][0]["input"]["templates"]
    top = max(templates, key=lambda t: t["count"])
    assert "most frequent templates" in run.stdout
    assert top["template"] in run.stdout and f"{top['count']:,}" in run.stdout
    # counts agree with a plain count of the template ids of every line (fractalseq templates --json)
    ids = subprocess.run([*CLI, "templates", str(DPKG), "--json"], capture_output=True, text=True)
    tdoc = json.loads(ids.stdout)
    by_text = {t["text"]: t["id"] for t in tdoc["templates"]}
    assert sum(1 for i in tdoc["lines"] if i == by_text[top["template"]]) == top["count"]


def test_control_sequences_and_markup_from_a_log_are_shown_escaped(tmp_path):
    log = tmp_path / "[bold]invented[red].log"  # rich markup in a file name
    lines = ["2026-01-01 10:00:00 relay7 pump[3]: valve \x1b]0;owned\x07 opened \x1b[2J [bold]now[/bold]"]
    lines += [f"2026-01-01 10:00:{i % 60:02d} relay7 pump[3]: cycle {i} finished" for i in range(300)]
    log.write_text("\n".join(lines) + "\n")
    run = _profile(str(log))
    assert run.returncode == 0, run.stderr
    assert "\x1b" not in run.stdout and "\x07" not in run.stdout
    assert "\\x1b" in run.stdout  # shown escaped, not acted on
    assert "[bold]invented[red].log" in run.stdout  # markup in input is printed, never interpreted
    out = tmp_path / "report"
    assert _profile(str(log), "--out", str(out)).returncode == 0
    page = max(out.rglob("index.html"), key=lambda p: len(p.parts)).read_text()  # the source's own page
    assert "Most frequent event templates" in page and "\x1b" not in page

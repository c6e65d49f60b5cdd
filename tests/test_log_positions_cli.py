"""Logs and numeric columns through the command line: windows of lines, file coordinates, template contexts,
whole lines in a pipe, the caution that fits the input.

Every command runs in a child process with standard output a pipe (as ``fractalseq scan x.log | less`` would),
on real data nobody here wrote: the logs of ``reference/logs`` (provenance in reference/logs/README.md and
reference/PROVENANCE.md) and the weekly Mauna Loa CO2 series of ``reference/timeseries``. The expected line
numbers are recomputed here from the files with plain Python: a line ends at a newline (POSIX, common
practice), numbering starts at 1 as in an editor, and a line that is empty or only whitespace is no event.

Reports on event logs are no security guarantee; genomic output is for research, not for clinical decisions.
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

from _paths import CLI
from fractalseq.jobs._inputs import MIN_LINE_WINDOW, MIN_WINDOWS
from fractalseq.jobs._next import split_context, template_context
from fractalseq.results import CAUTION_GENOMIC, CAUTION_LOGS

ROOT = Path(__file__).resolve().parents[1]
LOGS = ROOT / "reference" / "logs"
CO2 = ROOT / "reference" / "timeseries" / "co2_mauna_loa_weekly.csv"
LAMBDA = ROOT / "reference" / "lambda_virus.fa.gz"

#: Whole processes: part of every CI run; skip in a quick loop with -m 'not slow'.
pytestmark = pytest.mark.slow


def _cli(*args, code: int = 0) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    env.pop("FRACTALSEQ_DEBUG", None)
    env.pop("COLUMNS", None)
    done = subprocess.run([sys.executable, "-m", "fractalseq", *map(str, args)], capture_output=True, text=True,
                          env=env, timeout=600)
    assert done.returncode == code, (args, done.returncode, done.stderr[-2000:])
    return done


def _event_lines(path: Path) -> list[int]:
    """1-based file line numbers of the non-blank lines (the log's events), counted from the raw bytes."""
    data = path.read_bytes()
    lines = data.split(b"\n")
    if data.endswith(b"\n"):
        lines.pop()
    return [i + 1 for i, ln in enumerate(lines) if ln.strip()]


# ----------------------------------------------------------------------------------- windows and positions
# (log, format option): logs detected by content (with headers, or lines of words), and one read as a log by choice
SCANNED = [
    ("dpkg-excerpt.log", ()),
    ("apt-term-excerpt.log", ()),  # no header on most lines: detected as a line-oriented log
    ("fail2ban-sshd.log", ()),
    ("gdb-check-excerpt.log", ("--format", "log")),
]


@pytest.fixture(scope="module", params=SCANNED, ids=[s[0] for s in SCANNED])
def scanned(request):
    name, fmt = request.param
    doc = json.loads(_cli("scan", LOGS / name, *fmt, "--json", "--quiet").stdout)
    return LOGS / name, doc, fmt


def test_scan_windows_of_lines_by_default(scanned):
    path, doc, _ = scanned
    events = len(_event_lines(path))
    assert doc["unit"] == "line" and doc["length"] == events
    n_windows = len(doc["windows"]["start"])
    if doc["window"] > MIN_LINE_WINDOW:
        assert n_windows >= MIN_WINDOWS  # the documented default: at least 50 windows
    else:  # a short log: the smallest window, as many windows as fit
        assert doc["window"] == MIN_LINE_WINDOW and n_windows == (events - MIN_LINE_WINDOW) // (MIN_LINE_WINDOW // 4) + 1
    if events >= 4 * MIN_WINDOWS * MIN_LINE_WINDOW // 3:
        assert n_windows >= MIN_WINDOWS


def test_scan_positions_are_the_file_line_numbers(scanned):
    path, doc, _ = scanned
    lines = _event_lines(path)
    w, starts = doc["window"], doc["windows"]["start"]
    assert doc["windows"]["first_line"] == [lines[s] for s in starts]
    assert doc["windows"]["last_line"] == [lines[s + w - 1] for s in starts]
    for iv in doc["intervals"]:
        assert iv["first_line"] == lines[iv["start"]] and iv["last_line"] == lines[iv["end"] - 1]
    assert doc["change_points"]["lines"] == [lines[min(round(p), len(lines) - 1)] for p in doc["change_points"]["positions"]]


def test_scan_names_the_templates_that_dominate_each_segment(scanned):
    """The counts agree with the per-line templates of ``fractalseq templates`` over the segment's file lines."""
    path, doc, _ = scanned
    tdoc = json.loads(_cli("templates", path, "--json").stdout)  # templates mines any file as a log
    text = {t["id"]: t["text"] for t in tdoc["templates"]}
    per_line = tdoc["lines"]  # template id of every file line (None for a blank line)
    for iv in doc["intervals"]:
        seen = Counter(text[i] for i in per_line[iv["first_line"] - 1 : iv["last_line"]] if i is not None)
        named = iv["templates"]
        assert named and [e["count"] for e in named] == sorted((e["count"] for e in named), reverse=True)
        assert named[0]["count"] == max(seen.values())
        for e in named:
            assert seen[e["template"]] == e["count"]


def test_score_windows_are_located_in_the_file():
    path = LOGS / "fail2ban-sshd.log"  # 65 blank lines inside: coordinates must count them
    lines = _event_lines(path)
    doc = json.loads(_cli("score", "--online", path, "--json", "--quiet", "--top", "50").stdout)
    src = doc["sources"][0]
    assert src["unit"] == "line" and src["length"] == len(lines)
    assert src["window"] == max(MIN_LINE_WINDOW, len(lines) // MIN_WINDOWS)
    assert len(src["most_surprising_windows"]) == -(-len(lines) // src["window"])  # every window listed
    for w in src["most_surprising_windows"]:
        assert w["first_line"] == lines[w["start"]] and w["last_line"] == lines[w["end"] - 1]


def test_dpkg_log_scores_in_at_least_50_windows():
    path = LOGS / "dpkg-excerpt.log"
    doc = json.loads(_cli("score", "--online", path, "--json", "--quiet", "--top", "100").stdout)
    src = doc["sources"][0]
    assert len(src["most_surprising_windows"]) >= MIN_WINDOWS
    table = _cli("score", "--online", path, "--quiet").stdout
    assert f"most surprising windows of {src['window']:,} lines (file line numbers)" in table


def test_numeric_scan_gives_rows_and_times():
    with CO2.open(newline="") as fh:
        rows = list(csv.reader(fh))
    header = rows[0]
    data = [(i + 1, r) for i, r in enumerate(rows) if i > 0 and r and r[1].strip()]
    doc = json.loads(_cli("scan", CO2, "--json", "--quiet").stdout)
    assert header == ["date", "co2"] and doc["unit"] == "row" and doc["length"] == len(data)
    assert len(doc["windows"]["start"]) >= MIN_WINDOWS
    for iv in doc["intervals"]:
        first, last = data[iv["start"]], data[iv["end"] - 1]
        assert (iv["first_row"], iv["first_time"]) == (first[0], first[1][0])
        assert (iv["last_row"], iv["last_time"]) == (last[0], last[1][0])


def test_a_log_shorter_than_the_smallest_window_is_refused_in_one_sentence():
    path = LOGS / "named-refused.log"
    events = len(_event_lines(path))
    done = _cli("scan", path, code=2)
    assert done.stderr.count("\n") == 1 and "Traceback" not in done.stderr
    assert f"has {events} lines to scan, fewer than one window of {MIN_LINE_WINDOW} lines" in done.stderr
    assert "--window" in done.stderr


# ---------------------------------------------------------------------------------- next with a log context
@pytest.fixture(scope="module")
def dpkg_model(tmp_path_factory):
    out = tmp_path_factory.mktemp("model") / "dpkg.npz"
    _cli("learn", LOGS / "dpkg-excerpt.log", "-o", out, "--quiet")
    return out


def test_next_takes_template_ids_or_texts(dpkg_model):
    log = LOGS / "dpkg-excerpt.log"
    tdoc = json.loads(_cli("templates", log, "--json").stdout)
    text = {t["id"]: t["text"] for t in tdoc["templates"]}
    seq = [text[i] for i in tdoc["lines"] if i is not None]
    context = "status half-installed <*> <*>"
    followers = Counter(b for a, b in zip(seq, seq[1:]) if a == context)
    by_text = json.loads(_cli("next", context, "-m", dpkg_model, "--json").stdout)
    assert by_text["context_templates"] == [context]
    ident = by_text["context_ids"][0]
    by_id = json.loads(_cli("next", f"#{ident}", "-m", dpkg_model, "--json").stdout)
    assert by_id["next"] == by_text["next"]
    top = by_text["next"][0]
    assert by_text["deepest_cell_depth"] == 1
    # the deepest cell (one event of context) counts exactly the followers in the file
    assert top["symbol"] == followers.most_common(1)[0][0] and top["count_in_deepest_cell"] == followers[top["symbol"]]
    for row in by_text["next"]:
        assert row["count_in_deepest_cell"] == followers.get(row["symbol"], 0)
    # a raw log line is matched to its template; texts and ids mix
    raw = json.loads(_cli("next", f"#{ident} || 2025-06-24 14:36:25 status unpacked libfoo:amd64 1.2-3", "-m", dpkg_model,
                          "--json").stdout)
    assert raw["context_templates"] == [context, "status unpacked <*> <*>"]
    table = _cli("next", context, "-m", dpkg_model).stdout
    assert f"#{top['id']}" in table and top["symbol"] in table
    assert table.rstrip().splitlines()[-1] == CAUTION_LOGS


def test_next_refuses_an_unknown_event_in_one_sentence(dpkg_model):
    done = _cli("next", "no such event at all || #1", "-m", dpkg_model, code=2)
    assert done.stderr.count("\n") == 1 and "'no such event at all'" in done.stderr
    done = _cli("next", "#999", "-m", dpkg_model, code=2)
    assert "#999" in done.stderr and done.stderr.count("\n") == 1


@pytest.mark.parametrize(
    ("text", "items"),
    [
        ("#3 #7", ["#3", "#7"]),
        ("  #3   #12 ", ["#3", "#12"]),
        ("a <*> || b <*>", ["a <*>", "b <*>"]),
        ("a \\|\\| b || c", ["a \\|\\| b", "c"]),  # escaped bars stay inside the text
        ("#3 || status <*>", ["#3", "status <*>"]),
        ("", []),
    ],
)
def test_context_items(text, items):
    assert split_context(text) == items


def test_context_escapes_and_ids():
    templates = ("#3 is a literal", "pipe | inside", "plain <*>")
    assert template_context("\\#3 is a literal || pipe \\| inside || #2", templates) == [0, 1, 2]


# ------------------------------------------------------------------------------ whole lines in a pipe
def test_piped_tables_keep_whole_templates_paths_and_headers(tmp_path):
    # a deep folder makes a long path; the log is a real one copied there
    deep = tmp_path / ("a-folder-with-a-rather-long-name-" * 3) / "logs"
    deep.mkdir(parents=True)
    log = deep / "gdb-check-excerpt.log"
    log.write_bytes((LOGS / "gdb-check-excerpt.log").read_bytes())
    sshd = deep / "fail2ban-sshd.log"
    sshd.write_bytes((LOGS / "fail2ban-sshd.log").read_bytes())
    out = _cli("scan", sshd, "--format", "log", "--quiet").stdout
    assert "…" not in out
    assert "Failed keyboard-interactive for <*> from <*> port <*> ssh2" in out
    assert "dominant templates (lines)" in out
    out = _cli("score", "--online", log, "--format", "log", "--quiet").stdout
    assert "…" not in out
    assert any(line.startswith("│ " + str(log) + " ") for line in out.splitlines())  # the whole path in the source column
    assert "bits/symbol" in out and "best compressor" in out
    for line in out.splitlines():  # notes and the caution on one line each
        if line.startswith(("read note:", "Reports on event logs")):
            assert line.endswith((")", ".", "used"))


# --------------------------------------------------------------------------------------- the caution
@pytest.mark.parametrize(
    ("args", "caution"),
    [
        (("scan", LOGS / "dpkg-excerpt.log"), CAUTION_LOGS),
        (("score", "--online", LOGS / "fail2ban-sshd.log"), CAUTION_LOGS),
        (("profile", LOGS / "fail2ban-postfix.log", "--boot", "20"), CAUTION_LOGS),
        (("scan", LAMBDA, "--window", "5000"), CAUTION_GENOMIC),
        (("score", "--online", LAMBDA), CAUTION_GENOMIC),
    ],
    ids=["scan-log", "score-log", "profile-log", "scan-genome", "score-genome"],
)
def test_the_caution_names_the_kind_of_input(args, caution):
    out = _cli(*args, "--quiet").stdout
    last = out.rstrip().splitlines()[-1]
    assert last.endswith(caution)
    assert ("security" in last) == (caution == CAUTION_LOGS) and ("clinical" in last) == (caution == CAUTION_GENOMIC)


def test_scan_page_of_a_log_carries_the_log_caution(tmp_path):
    _cli("scan", LOGS / "dpkg-excerpt.log", "--out", tmp_path / "scan", "--quiet")
    page = (tmp_path / "scan" / "scan.html").read_text()
    assert CAUTION_LOGS in page and "clinical" not in page
    assert "dominant templates" in page and "first line" in page
    doc = json.loads((tmp_path / "scan" / "scan.json").read_text())
    assert doc["caution"] == CAUTION_LOGS


def test_ordinal_patterns_sit_at_the_row_of_their_last_value():
    """Order-3 patterns need three consecutive numbers: each symbol sits at the row of the third (CO2 series with gaps)."""
    from fractalseq.sources import open_source

    with CO2.open(newline="") as fh:
        rows = list(csv.reader(fh))
    ok = [i > 0 and bool(r) and r[1].strip() not in ("", "NA", "nan") for i, r in enumerate(rows)]
    expected = [i + 1 for i in range(2, len(rows)) if ok[i] and ok[i - 1] and ok[i - 2]]
    arr = open_source(CO2, ordinal=3).to_array()
    pos = arr.report.positions
    assert pos.unit == "row" and len(arr) == len(expected)
    assert pos.values.tolist() == expected
    assert list(pos.times[:2]) == [rows[expected[0] - 1][0], rows[expected[1] - 1][0]]


@pytest.mark.parametrize("chunk", [37, 512, 1 << 22])
def test_positions_do_not_depend_on_the_block_size(chunk):
    """Blocks of any size give the same file lines (block edges inside lines and rows; common practice)."""
    from fractalseq.sources import open_source

    log = LOGS / "fail2ban-sshd.log"
    arr = open_source(log, chunk_size=chunk).to_array()
    assert arr.report.positions.values.tolist() == _event_lines(log)
    with CO2.open(newline="") as fh:
        rows = list(csv.reader(fh))
    expected = [i + 1 for i, r in enumerate(rows) if i > 0 and r and r[1].strip()]
    num = open_source(CO2, chunk_size=chunk).to_array()
    assert num.report.positions.values.tolist() == expected


def test_score_of_several_logs_keeps_the_others_when_one_has_no_known_template(tmp_path):
    # a model learned on the real dpkg excerpt knows none of the sshd sample's templates (reference/logs, provenance
    # in reference/logs/README.md): that file is listed with its unseen templates, the dpkg result is not lost
    model = tmp_path / "dpkg.npz"
    learn = subprocess.run([*CLI, "learn", str(LOGS / "dpkg-excerpt.log"), "-f", "log", "-o", str(model), "-q"],
                           capture_output=True, text=True)
    assert learn.returncode == 0, learn.stderr
    both = subprocess.run([*CLI, "score", "-m", str(model), str(LOGS / "dpkg-excerpt.log"), str(LOGS / "fail2ban-sshd.log"),
                           "-f", "log", "--json", "-q"], capture_output=True, text=True)
    assert both.returncode == 0, both.stderr
    doc = json.loads(both.stdout)
    alone = subprocess.run([*CLI, "score", "-m", str(model), str(LOGS / "dpkg-excerpt.log"), "-f", "log", "--json", "-q"],
                           capture_output=True, text=True)
    first = json.loads(alone.stdout)["sources"][0]
    assert doc["sources"][0]["bits_per_symbol"] == first["bits_per_symbol"]
    sshd = doc["sources"][1]
    assert sshd["length"] == 0 and sshd["bits_per_symbol"] is None
    assert sum(e["count"] for e in sshd["unseen_templates"]) == sum(
        1 for line in (LOGS / "fail2ban-sshd.log").read_text(encoding="utf-8", errors="replace").splitlines() if line.strip())
    assert doc["bits_per_symbol"] == first["bits_per_symbol"] and doc["length"] == first["length"]
    table = subprocess.run([*CLI, "score", "-m", str(model), str(LOGS / "dpkg-excerpt.log"), str(LOGS / "fail2ban-sshd.log"),
                            "-f", "log", "-q"], capture_output=True, text=True)
    assert table.returncode == 0 and "nan" not in table.stdout and "never saw" in table.stdout
    # only files of new templates: one sentence, exit 2
    none = subprocess.run([*CLI, "score", "-m", str(model), str(LOGS / "fail2ban-sshd.log"), str(LOGS / "fail2ban-sshd.log"),
                           "-f", "log", "-q"], capture_output=True, text=True)
    assert none.returncode == 2 and "Traceback" not in none.stderr and len(none.stderr.strip().splitlines()) == 1

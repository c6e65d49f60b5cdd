"""Format detection (``fmt="auto"``) on real files nobody on this project wrote.

The logs are described in reference/logs/README.md and PROVENANCE.md, the
numeric tables in reference/PROVENANCE.md, the genomes in reference/PROVENANCE.md.
The expected formats follow from the files' documented layouts, cited per test.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

from fractalseq.alphabet import resolve
from fractalseq.errors import FractalseqError, InputError
from fractalseq.sources import detect_format, open_source

ROOT = Path(__file__).resolve().parents[1]
REF = ROOT / "reference"
LOGS = REF / "logs"


def _notes(path, **kw) -> list[str]:
    stream = open_source(path, **kw)
    stream.to_array()
    return stream.report.notes


# ----------------------------------------------------------------- event logs
@pytest.mark.parametrize(
    "name",
    [
        "dpkg-excerpt.log",  # dpkg(1), --log: "YYYY-MM-DD HH:MM:SS type ..."
        "fail2ban-sshd.log",  # RFC 3164 "Mmm dd hh:mm:ss host prog[pid]:" lines, '#' comment lines
        "fail2ban-postfix.log",  # RFC 3164, as above
        "fail2ban-apache-auth.log",  # Apache error log: "[Www Mmm dd hh:mm:ss yyyy] [level] ..."
        "named-refused.log",  # RFC 3164
        "testcase04.log",  # RFC 3164 times and epoch seconds
    ],
)
def test_real_event_logs_are_logs_under_the_default_alphabet(name):
    path = LOGS / name
    assert detect_format(path) == "log"  # default alphabet dna
    assert detect_format(path, "learn") == "log"
    # the alphabet follows the format: the same templates as an explicit --format log
    auto = open_source(path)
    explicit = open_source(path, fmt="log", alphabet="learn")
    assert auto.alphabet.symbols == explicit.alphabet.symbols
    assert auto.alphabet.name != "dna"


def test_dpkg_note_counts_the_timestamped_lines():
    # dpkg(1) documents every --log line as starting with "YYYY-MM-DD HH:MM:SS"; count them independently
    path = LOGS / "dpkg-excerpt.log"
    lines = [ln for ln in path.read_text().splitlines() if ln.strip()][:200]
    stamped = sum(bool(re.match(r"\d{4}-\d{2}-\d{2} \d{2}:\d{2}:\d{2} ", ln)) for ln in lines)
    assert stamped == 200
    notes = _notes(path)
    assert any(f"detected as an event log: {stamped} of {len(lines)} sampled lines" in n for n in notes), notes


@pytest.mark.skipif(not os.access("/var/log/dpkg.log", os.R_OK), reason="needs this machine's /var/log/dpkg.log")
def test_this_machines_dpkg_log():
    assert detect_format("/var/log/dpkg.log") == "log"


def test_published_header_examples(tmp_path):
    # RFC 5424 section 6.5, example 1; Apache HTTP Server docs, "Common Log Format" example line;
    # a JSON-lines object per line (jsonlines.org); all three are logs by rule 5
    cases = {
        "r5424.log": '<34>1 2003-10-11T22:14:15.003Z mymachine.example.com su - ID47 - '
        "'su root' failed for lonvick on /dev/pts/8\n",
        "clf.log": '127.0.0.1 - frank [10/Oct/2000:13:55:36 -0700] "GET /apache_pb.gif HTTP/1.0" 200 2326\n',
        "lines.jsonl": '{"name": "Gilbert", "wins": [["straight", "7"], ["one pair", "10"]]}\n',
    }
    for fname, line in cases.items():
        path = tmp_path / fname
        path.write_text(line * 3)
        assert detect_format(path) == "log", fname


# ------------------------------------------------- logs without a line header
def test_apt_term_log_has_no_header_and_is_read_as_lines(tmp_path):
    # apt's term.log copies dpkg's terminal output: lines like "Unpacking x (1.0) ..." carry no time,
    # only the "Log started: <date>" lines do (reference/logs/README.md); it is not an event log with
    # headers, but its lines are words, not sequence: a line-oriented log under the default alphabet
    path = LOGS / "apt-term-excerpt.log"
    lines = [ln for ln in path.read_text(errors="replace").splitlines() if ln.strip()][:200]
    assert sum(ln.startswith("Log started: ") for ln in lines) < len(lines) / 2
    assert detect_format(path) == "log"
    notes = _notes(path)
    assert any("read as a line-oriented log" in n and "0 of 200 sampled lines start with a timestamp" in n
               for n in notes), notes
    assert detect_format(path, "learn") == "text"  # characters asked for: no rule turns them into a log
    assert open_source(path).alphabet.symbols == open_source(path, fmt="log", alphabet="learn").alphabet.symbols


@pytest.mark.parametrize("name", ["gdb-check-excerpt.log", "jtreg-output-excerpt.log"])
def test_test_logs_without_times_are_line_oriented_logs(name):
    # DejaGnu "PASS: name" and jtreg "Passed: name" lines carry no time (reference/logs/README.md)
    path = LOGS / name
    assert detect_format(path, "learn") == "text"
    assert detect_format(path) == "log"  # under dna: lines of words, few dna symbols
    notes = _notes(path)
    assert any("read as a line-oriented log" in n for n in notes), notes


def test_lines_without_words_are_still_refused_under_dna(tmp_path):
    # invented: lines of punctuation and digits hold no word and few dna symbols
    path = tmp_path / "marks.txt"
    path.write_text("%% ## ..\n== ** ;;\n@@ !! ~~\n")
    with pytest.raises(InputError) as info:
        open_source(path)
    msg = str(info.value)
    assert "does not look like dna" in msg and "log for an event log" in msg and "\n" not in msg


# ------------------------------------------------------------- numeric tables
@pytest.mark.parametrize("name", ["sunspots_yearly.csv", "co2_mauna_loa_weekly.csv"])
def test_real_csv_tables_are_numeric(name):
    # reference/PROVENANCE.md: a header row, then a time column and one value column, comma separated
    path = REF / "timeseries" / name
    assert detect_format(path) == "numeric"
    auto = open_source(path)
    explicit = open_source(path, fmt="numeric")
    assert auto.alphabet.symbols == explicit.alphabet.symbols
    assert len(auto.alphabet) == 4  # the numeric reader's default quantile bins
    assert (auto.to_array().codes == explicit.to_array().codes).all()
    assert any("detected as a numeric table: a header row" in n for n in auto.report.notes)


# ------------------------------------------------------------------- genomes
@pytest.mark.parametrize("name", ["lambda_virus.fa.gz", "chr17.hg19.part.fa"])
def test_genomes_stay_fasta(name):
    path = REF / name
    assert detect_format(path) == "fasta"
    assert open_source(path).alphabet.name == "dna"


def test_an_alphabet_object_does_not_follow():
    # a model's alphabet (an Alphabet object) is kept: a log read against a dna model is refused
    with pytest.raises(InputError, match="does not look like dna"):
        open_source(LOGS / "dpkg-excerpt.log", alphabet=resolve("dna"))


def test_prose_is_read_as_lines_under_dna(tmp_path):
    # invented prose: no line starts with a time
    path = tmp_path / "prose.txt"
    path.write_text(
        "The tide came in slowly over the flats that morning.\n"
        "Nobody on the pier had noticed the boat until it was close.\n"
        "By noon the gulls had left for the fields behind the town.\n"
    )
    assert detect_format(path, "learn") == "text"
    # under dna, lines of words with few dna symbols are a line-oriented log; the note names the way back
    assert detect_format(path) == "log"
    assert any("choose the text format and the learn alphabet" in n for n in _notes(path)), _notes(path)


# ----------------------------------------------------------------------- CLI
def _cli(*args: str) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    return subprocess.run([sys.executable, "-m", "fractalseq", *args], capture_output=True, text=True, env=env,
                          timeout=300, cwd=ROOT)


def test_cli_profile_detects_a_real_log():
    res = _cli("profile", str(LOGS / "dpkg-excerpt.log"), "--json", "--boot", "0")
    assert res.returncode == 0, res.stderr
    src = json.loads(res.stdout)["sources"][0]
    assert src["input"]["format"] == "log"
    assert any("detected as an event log" in n for n in src["input"]["notes"])
    assert src["alphabet_size"] > 1


def test_cli_reads_a_log_without_times_as_lines():
    res = _cli("profile", str(LOGS / "apt-term-excerpt.log"), "--json", "--boot", "0")
    assert res.returncode == 0, res.stderr
    src = json.loads(res.stdout)["sources"][0]
    assert src["input"]["format"] == "log"
    assert any("read as a line-oriented log" in n for n in src["input"]["notes"])


def test_cli_refuses_lines_without_words_in_one_sentence(tmp_path):
    path = tmp_path / "marks.txt"  # invented: punctuation only, no word, no dna symbol
    path.write_text("%% ## ..\n== ** ;;\n@@ !! ~~\n")
    res = _cli("profile", str(path), "--json", "--boot", "0")
    assert res.returncode == 2
    assert "Traceback" not in res.stderr
    assert "choose the format" in res.stderr


def test_a_template_alphabet_reads_a_log_as_log():
    # a model keeps the template alphabet of its training log; a later log read with it under auto is a log
    # (rule 7), every line counted against the listed templates as with an explicit --format log
    path = LOGS / "dpkg-excerpt.log"
    table = open_source(path, fmt="log", alphabet="learn").alphabet
    assert table.name == "templates"
    auto = open_source(path, alphabet=table)
    explicit = open_source(path, fmt="log", alphabet=table)
    assert auto.alphabet.symbols == table.symbols
    assert (auto.to_array().codes == explicit.to_array().codes).all()
    assert auto.report.extra["format"] == "log"
    # ... but not a table: a template alphabet does not make a CSV a log
    with pytest.raises(FractalseqError):
        open_source(REF / "timeseries" / "sunspots_yearly.csv", alphabet=table).to_array()

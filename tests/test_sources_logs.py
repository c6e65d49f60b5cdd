"""Event logs reduced to templates, on real sample logs from the fail2ban package.

The samples and their provenance are in reference/logs/PROVENANCE.md.
"""

from __future__ import annotations

import hashlib
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

from fractalseq.errors import InputError
from fractalseq.sources import line_template, open_source

LOGS = Path(__file__).resolve().parent.parent / "reference" / "logs"
SHA = {
    "named-refused.log": "b0c570c59ac9035f551ce8dea636bb1a23e037c6337eeedbfcc86da5ac1784c5",
    "testcase04.log": "f5f3c664f62bd35989e428cba901797679d5ed29e2e4ad369ee86a340fb011e0",
    "testcase-wrong-char.log": "4fc6896cb00ab352c1fe57cd6903816543bb15f410d71c42cb83120cce979670",
}


@pytest.mark.parametrize("name", sorted(SHA))
def test_reference_logs_are_the_documented_files(name):
    assert hashlib.sha256((LOGS / name).read_bytes()).hexdigest() == SHA[name]


# ------------------------------------------------------------- line masks
# Template of one line on its own: the header (time, host, program, level) is set aside and variable
# tokens become <*> (rules in fractalseq.sources.masks / headers). The old placeholder names (<time>, <ip>,
# <num>...) and the header kept inside the template were replaced by the mined templates.
@pytest.mark.parametrize(
    "line, template",
    [
        # syslog stamp, host, program[pid], IPv4 and port (lines from the fail2ban samples)
        (
            "Feb 25 14:34:10 belka sshd[31602]: Failed password for invalid user ROOT from 194.117.26.69 port 50273 ssh2",
            "Failed password for invalid user ROOT from <*> port <*> ssh2",
        ),
        # IPv6, also compressed and with an embedded IPv4
        (
            "May 29 20:56:56 imago sshd[28732]: error: PAM: Authentication failure for x from 2606:2800:220:1:248:1893:25c8:1946",
            "PAM: Authentication failure for x from <*>",
        ),
        ("ROOT LOGIN REFUSED FROM ::ffff:194.117.26.69 port 22", "ROOT LOGIN REFUSED FROM <*> port <*>"),
        # common log format: the date after the first three fields is header; quotes are kept around masks
        (
            '127.0.0.1 - frank [10/Oct/2000:13:55:36 -0700] "GET /apache_pb.gif HTTP/1.0" 200 2326',
            '<*> - frank "GET <*> <*>" <*> <*>',
        ),
        ("2023-04-01T12:00:00.123+02:00 read /var/log/app/x.log size=42", "read <*> size=<*>"),
        # a bracketed program name after the time is header
        ("2005/08/14 11:57:00 [sshd] Invalid user toto", "Invalid user toto"),
        ("1124012400 [sshd] Invalid user duck", "Invalid user duck"),
        ("11-Aug-2013 03:36:11.372 error: client gone", "client gone"),
        ("[Sat Jun 01 02:17:42 2013] [error] done", "done"),
        # identifiers
        ("job 550e8400-e29b-41d4-a716-446655440000 at 0x7ffd1a2b", "job <*> at <*>"),
        ("@400000004c91b044077a9e94 imap-login: Info", "<*> imap-login: Info"),
        ("s1GNXHYB005133: possible SMTP attack", "<*>: possible SMTP attack"),
        ("relay for <john@example.com> via http://mx.example.org/a?b=1", "relay for <<*>> via <*>"),
        ("nic aa:bb:cc:00:11:22 up", "nic <*> up"),
        # words with digits and apostrophes are left alone
        ("user can't log in with ssh2, 'root' denied", "user can't log in with ssh2, 'root' denied"),
        ("took   1.5 s\tand -3 retries", "took <*> s and <*> retries"),
    ],
)
def test_line_template_masks(line, template):
    assert line_template(line) == template
    assert line_template(line + "\r\n") == template


def test_lines_differing_only_in_address_and_time_share_a_template():
    a = "Jul 24 14:16:55 raid5 named[3935]: client 194.145.196.18#4795: query 'ricreig.com/NS/IN' denied"
    b = "Aug 17 08:20:22 raid5 named[2954]: client 62.123.164.113#32768: query 'ricreig.com/NS/IN' denied"
    c = "Aug 17 08:20:22 raid5 named[2954]: client 62.123.164.113#32768: zone transfer 'x/AXFR/IN' denied"
    assert line_template(a) == line_template(b) == "client <*>: query '<*>' denied"
    assert line_template(c) != line_template(a)


# ------------------------------------------------------------------ stream
def test_testcase04_has_two_templates_in_fifteen_lines():
    """Three time formats, two addresses and two user names collapse to one event; the repeat marker is another.

    The bracketed ``[sshd]`` after the time is the program (header), not part of the template.

    (The line-by-line masks used before kept the user names toto and duck apart: one template per user.)
    """
    stream = open_source(LOGS / "testcase04.log", fmt="log")
    arr = stream.to_array()
    rep = stream.report
    lines = [ln for ln in (LOGS / "testcase04.log").read_text().splitlines() if ln.strip()]
    assert len(arr) == len(lines) == 15
    table = rep.extra["templates"]
    assert [(t["template"], t["count"]) for t in table] == [
        ("Invalid user <*> from <*>", 13),
        ("- Last output repeated twice -", 2),
    ]
    assert table[0]["first_line"] == 1 and table[0]["example"] == lines[0]
    assert table[1]["first_line"] == 9
    assert arr.alphabet.name == "templates" and arr.alphabet.symbols == tuple(t["template"] for t in table)
    # codes follow the lines: the repeat markers are lines 9 and 14
    assert arr.codes.tolist() == [1 if "repeated" in ln else 0 for ln in lines]
    assert arr.starts.tolist() == [0] and rep.records[0].length == 15


def test_named_refused_template_table():
    from fractalseq.sources.miner import mine

    path = LOGS / "named-refused.log"
    stream = open_source(path, fmt="log", chunk_size=100)
    arr = stream.to_array()
    lines = [ln for ln in path.read_text().splitlines() if ln.strip()]
    texts, ids = mine(lines)
    counts = Counter(texts[i] for i in ids)
    table = stream.report.extra["templates"]
    # symbols by decreasing count, ties by template text
    assert [t["template"] for t in table] == sorted(counts, key=lambda t: (-counts[t], t))
    assert [t["count"] for t in table] == [counts[t["template"]] for t in table]
    assert sum(t["count"] for t in table) == len(arr) == len(lines) == 33
    assert len(table) <= len(lines) * 0.5
    query = "client <*>: query '<*>' denied"
    entry = next(t for t in table if t["template"] == query)
    assert entry["count"] == 2 and entry["first_line"] == 2
    assert entry["fields"] == {"host": {"raid5": 2}, "program": {"named": 2}}
    # reading in blocks of 100 bytes gives the same symbols as one block
    assert np.array_equal(open_source(path, fmt="log").to_array().codes, arr.codes)


def test_a_log_read_against_another_logs_templates(tmp_path):
    """A template table fixed in advance (a model's): listed templates keep its codes, the others follow the policy.

    Checked line by line on fail2ban's testcase04 sample: the table lists the user toto's event only.
    """
    from fractalseq.alphabet import Alphabet

    path = LOGS / "testcase04.log"
    lines = [ln for ln in path.read_text().splitlines() if ln.strip()]
    toto = "Invalid user toto from <*>"
    table = Alphabet("templates", ("<*> elsewhere <*>", toto))
    stream = open_source(path, fmt="log", alphabet=table, policy="break", chunk_size=64)
    arr = stream.to_array()
    keep = ["user toto" in ln for ln in lines]
    assert arr.alphabet.symbols == table.symbols and arr.codes.tolist() == [1] * sum(keep)
    # break policy: a new segment after every run of unlisted lines
    runs, prev = [], False
    for i, k in enumerate(keep):
        if k and (not runs or not prev):
            runs.append(sum(keep[:i]))
        prev = k
    assert arr.starts.tolist() == runs
    rep = stream.report
    assert rep.dropped_total == len(lines) - sum(keep)
    # the lines the table does not list are mined among themselves
    assert [e["template"] for e in rep.extra["unlisted_templates"]] == [
        "Invalid user duck from <*>", "- Last output repeated twice -"
    ]
    assert [e["count"] for e in rep.extra["templates"]] == [0, 7]
    skip = open_source(path, fmt="log", alphabet=table, policy="skip").to_array()
    assert skip.codes.tolist() == [1] * 7 and skip.starts.tolist() == [0]
    with pytest.raises(InputError, match="line 2 has a template"):
        open_source(path, fmt="log", alphabet=table, policy="error").to_array()


def test_an_invented_log_has_one_template_per_statement(tmp_path):
    # Invented scenario: a ticket service writing five kinds of lines with varying fields.
    rng = np.random.default_rng(11)
    kinds = [
        "{t} INFO  ticket {n} opened by {u}@example.net from {ip}",
        "{t} INFO  ticket {n} closed after {f} s",
        "{t} WARN  retry {n} for job {uuid}",
        '{t} ERROR upload "{q}" to /srv/tickets/{n}/a.bin failed: code 0x{h}',
        "{t} DEBUG cache hit ratio {f}",
    ]
    lines, truth = [], []
    for i in range(1000):
        k = int(rng.integers(0, 5))
        truth.append(k)
        lines.append(
            kinds[k].format(
                t=f"2024-03-{1 + i // 100:02d}T{i % 24:02d}:{i % 60:02d}:{(7 * i) % 60:02d}Z",
                n=int(rng.integers(1, 10**6)),
                u=f"user{int(rng.integers(0, 50))}",
                ip=".".join(str(int(v)) for v in rng.integers(0, 256, 4)),
                f=round(float(rng.random()) * 100, 3),
                uuid="%08x-%04x-%04x-%04x-%012x" % tuple(int(v) for v in rng.integers(0, 2**16, 5)),
                q=f"file {i}.txt",
                h=f"{int(rng.integers(0, 2**31)):x}",
            )
        )
    path = tmp_path / "tickets.log"
    path.write_text("\n".join(lines) + "\n\n")
    stream = open_source(path, alphabet="learn")  # auto-detected as a log
    arr = stream.to_array()
    assert stream.report.extra["format"] == "log"
    assert arr.alphabet.size == 5
    # the template codes are a relabelling of the true statement kinds
    pairs = set(zip(truth, arr.codes.tolist()))
    assert len(pairs) == 5
    assert "1 blank lines skipped" in stream.report.notes
    assert Counter(arr.codes.tolist()).most_common(1)[0][0] == 0


def test_non_utf8_line_is_read_as_latin1():
    """The raw byte 0xF1 ("ñ" in Latin-1) sits on line 3 of the sample; that line is read as Latin-1 and counted.

    (Before, the whole file was refused.)
    """
    stream = open_source(LOGS / "testcase-wrong-char.log", fmt="log")
    arr = stream.to_array()
    rep = stream.report
    assert len(arr) == 4 and rep.extra["latin1_lines"] == 1
    assert "1 lines that are not UTF-8 read as Latin-1" in rep.notes
    examples = [e["example"] for e in rep.extra["templates"]]
    assert any("llinco\u00f1ir" in ex for ex in examples)


def test_a_log_of_blank_lines_is_refused(tmp_path):
    path = tmp_path / "blank.log"
    path.write_text("   \n\n \n")
    with pytest.raises(InputError, match="only blank lines"):
        open_source(path, fmt="log")


@pytest.mark.parametrize("name", ["named-refused.log", "testcase04.log"])
def test_second_pass_from_kept_templates_equals_masking_again(name, monkeypatch):
    """Logs longer than the keep limit are mined again on every pass; the symbols and report are the same."""
    import fractalseq.sources.logs as logs_mod

    path = LOGS / name
    kept = open_source(path, fmt="log", chunk_size=200)
    a = kept.to_array()
    monkeypatch.setattr(logs_mod, "_KEEP_LINES", 3)
    again = open_source(path, fmt="log", chunk_size=200)
    b = again.to_array()
    assert np.array_equal(a.codes, b.codes) and np.array_equal(a.starts, b.starts)
    assert kept.report.to_dict() == again.report.to_dict()

"""Hand-written event-kind labels for four reference logs (one label per line), from the message formats.

Run from this folder: ``python label_rules.py`` writes ``<log>.labels`` beside each log.  The rules
restate each program's documented or printed message formats (see README.md); they were written from
those formats, not from any template miner's output.  A line that fits no rule is labelled by its own
whole text (its own kind).
"""

from __future__ import annotations

import re
from pathlib import Path

HERE = Path(__file__).resolve().parent

# dpkg(1), section "--log": "YYYY-MM-DD HH:MM:SS startup type command",
# "YYYY-MM-DD HH:MM:SS status state pkg installed-version",
# "YYYY-MM-DD HH:MM:SS action pkg installed-version available-version" (action: install, upgrade, configure,
# trigproc, disappear, remove, purge), "YYYY-MM-DD HH:MM:SS conffile filename decision".
def dpkg_label(line: str) -> str:
    f = line.split()
    if len(f) < 3:
        return "text:" + line
    kind = f[2]
    if kind == "startup":
        return "startup " + " ".join(f[3:5])
    if kind == "status":
        return "status " + f[3]
    if kind in ("install", "upgrade", "configure", "trigproc", "disappear", "remove", "purge"):
        return kind
    if kind == "conffile":
        return "conffile " + f[-1]
    return "text:" + line


# dpkg's and the maintainer scripts' terminal messages as printed (dpkg message catalogue strings such as
# "Selecting previously unselected package %s.", "Preparing to unpack %s ...", "Unpacking %s (%s) ...",
# "Unpacking %s (%s) over (%s) ...", "Setting up %s (%s) ...", "Processing triggers for %s (%s) ...";
# apt's "Log started: %s" / "Log ended: %s"; systemd-sysusers "Creating group '%s' with GID %u." and
# "Creating user '%s' (%s) with UID %u and GID %u."; systemctl "Created symlink %s → %s.";
# update-ca-certificates "%d added, %d removed; done.").
_TERM = [
    (r"Log started: ", "log-started"),
    (r"Log ended: ", "log-ended"),
    (r"Selecting previously unselected package \S+\.$", "selecting"),
    (r"Preparing to unpack \S+ \.\.\.$", "preparing"),
    (r"Unpacking \S+ \(\S+\) over \(\S+\) \.\.\.$", "unpacking-over"),
    (r"Unpacking \S+ \(\S+\) \.\.\.$", "unpacking"),
    (r"Setting up \S+ \(\S+\) \.\.\.$", "setting-up"),
    (r"Processing triggers for \S+ \(\S+\) \.\.\.$", "triggers"),
    (r"\(Reading database \.\.\. ", "reading-database"),
    (r"Creating group '[^']+' with GID \d+\.$", "create-group"),
    (r"Creating user '[^']+' \([^)]*\) with UID \d+ and GID \d+\.$", "create-user"),
    (r"Created symlink \S+ → \S+\.$", "symlink"),
    (r"\d+ added, \d+ removed; done\.$", "certificates-added"),
]


def term_label(line: str) -> str:
    for pat, lab in _TERM:
        if re.match(pat, line):
            return lab
    return "text:" + line


# jtreg's summary lines ("Passed: %s", "FAILED: %s", "Error: %s", "Test results: ...", "Report written to %s",
# "Results written to %s"), GNU time -v's statistics (one kind per statistic, the text before ": "), and the
# build's make / shell lines (each its own kind, but with the test group name — hotspot, langtools... — as a field).
_JT = [
    (r"Passed: ", "passed"),
    (r"FAILED: ", "failed"),
    (r"Error: ", "error"),
    (r"Test results: ", "test-results"),
    (r"Report written to ", "report-written"),
    (r"Results written to ", "results-written"),
    (r"===== START ", "start"),
    (r"===== END ", "end"),
    (r"mkdir -p ", "mkdir"),
    (r"Directory \"\S+\" not found: creating$", "directory-created"),
    (r"BOOTJDK_HOME=", "env-line-1"),
    (r"AUTOPKGTEST_TMP=", "env-line-2"),
    (r"  /usr/bin/time -v ", "time-command"),
    (r"Command exited with non-zero status ", "exit-status"),
    (r"\tCommand being timed: ", "time-stat Command being timed"),
    (r"Reason: ", "reason"),
    (r"Unable to compare jtreg results: ", "unable-to-compare"),
]


def jtreg_label(line: str) -> str:
    for pat, lab in _JT:
        if re.match(pat, line):
            return lab
    if line.startswith("\t") and ": " in line:
        return "time-stat " + line.strip().rsplit(": ", 1)[0]
    return "text:" + line


# DejaGnu test results (DejaGnu manual, "Test Output": one line per result, "KIND: test name", where KIND is
# PASS, FAIL, XPASS, XFAIL, KPASS, KFAIL, UNRESOLVED, UNTESTED, UNSUPPORTED, ERROR, WARNING); GDB's test suite
# adds "DUPLICATE: " and "PATH: " result lines (gdb/testsuite/lib/gdb.exp) and logs "gdb compile failed, %s".
# runtest prints "Running <file> ..." per test file.  The test name after the kind is free text (a field).
_DEJAGNU = ("PASS", "FAIL", "XPASS", "XFAIL", "KPASS", "KFAIL", "UNRESOLVED", "UNTESTED", "UNSUPPORTED", "ERROR",
            "WARNING", "DUPLICATE", "PATH")


def gdb_label(line: str) -> str:
    kind, sep, _ = line.partition(": ")
    if sep and kind in _DEJAGNU:
        return "result " + kind
    if re.match(r"Running \S+ \.\.\.$", line):
        return "running"
    if line.startswith("gdb compile failed, "):
        return "compile-failed"
    return "text:" + line


def main() -> None:
    for name, fn in (("dpkg-excerpt.log", dpkg_label), ("apt-term-excerpt.log", term_label), ("jtreg-output-excerpt.log", jtreg_label),
                     ("gdb-check-excerpt.log", gdb_label)):
        lines = (HERE / name).read_bytes().decode("utf-8").split("\n")
        if lines and lines[-1] == "":
            lines.pop()
        labels = [fn(ln.rstrip("\r")) if ln.strip() else "" for ln in lines]
        (HERE / (name[:-4] + ".labels")).write_text("\n".join(labels) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()

"""Hand-written event-kind labels for five reference logs (one label per line), from the message formats.

Run from this folder: ``python label_rules.py`` writes ``<log>.labels`` beside each log.  The rules
restate each program's documented or printed message formats (see README.md); they were written from
those formats, not from any template miner's output.  A line that fits no rule is labelled by its own
whole text (its own kind).
"""

from __future__ import annotations

import json
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


# fail2ban's sshd sample (a test fixture of fail2ban): lines starting with "#" are the fixture's own
# annotations (fail2ban's sample-log test reader): "# failJSON: {json}" (the expected result for the next
# line; kind = its set of JSON keys, one record schema per kind, as for any JSON record), "# filterOptions: ...",
# "# addFILE: ...", "#<n>" (a case number alone), "# gh-<n>:" or "# <URL>" (a reference alone); any other comment is
# its own kind.  Log lines: the syslog header (time, host, sshd[pid]), the RFC 5424 header and the level word
# sshd prints ("error: ", "fatal: ") and Solaris' "[ID <n> <facility.level>]" tag are not part of the kind.
# The kind is the printed message shape (the convention of the log-parsing benchmarks that the grouping accuracy
# comes from: one event per message format, a runtime value being a parameter): every fixed string is part of
# the kind, whoever prints it -- the words of sshd's format strings (including the authentication result and
# method: Failed/Accepted/Postponed, password/publickey/...; "invalid user"; " port N", " ssh2", "[preauth]"
# present or not), PAM's error string, the peer's disconnect reason (a fixed message of the client program) and
# the name of the key-exchange field that failed.  Values are fields: user names (of any form, also empty or with
# spaces), addresses and host names, ports, numbers, key types and fingerprints, algorithm lists.  Formats from
# OpenSSH's messages as printed (auth.c, sshd.c, packet.c; from memory) and the pam_unix
# "authentication failure; logname= uid= euid= tty= ruser= rhost= [user=]" line.
_SSHD = [
    (r"PAM: (.+) for illegal user .* from \S+$", "pam-error illegal-user {0}"),
    (r"PAM: (.+) for .* from \S+ via \S+$", "pam-error via {0}"),
    (r"PAM: (.+) for .* from \S+$", "pam-error {0}"),
    (r"ROOT LOGIN REFUSED FROM \S+ port \d+ \[preauth\]$", "root-refused port preauth"),
    (r"ROOT LOGIN REFUSED FROM \S+$", "root-refused"),
    (r"Invalid user .* from \S+ port \d+$", "invalid-user port"),
    (r"Invalid user .* from \S+$", "invalid-user"),
    (r"User \S+ from \S+ not allowed because (.+)$", "user-not-allowed {0}"),
    (r"User \S+ not allowed because account is locked$", "user-locked"),
    (r"refused connect from \S+ \(\S+\)$", "tcpd-refused"),
    (r"Address \S+ maps to \S+, but this does not map back to the address - POSSIBLE BREAK-IN ATTEMPT!?$", "reverse-mapping"),
    (r"input_userauth_request: invalid user .* \[preauth\]$", "userauth-invalid-user"),
    (r"Received disconnect from \S+ port \d+:\d+: (.*) \[preauth\]$", "received-disconnect port preauth {0}"),
    (r"Received disconnect from \S+: \d+: (.*) \[preauth\]$", "received-disconnect preauth {0}"),
    (r"Received disconnect from \S+: \d+: (.*)$", "received-disconnect {0}"),
    (r"Connection from \S+ port \d+ on \S+ port \d+ rdomain .*$", "connection-from port on rdomain"),
    (r"Connection from \S+ port \d+ on \S+ port \d+$", "connection-from port on"),
    (r"Connection from \S+ port \d+$", "connection-from port"),
    (r"Connection from \S+$", "connection-from"),
    (r"Connection (closed|reset) by authenticating user .* \S+ port \d+ \[preauth\]$", "connection-{0} authenticating-user"),
    (r"Connection (closed|reset) by invalid user .* \S+ port \d+ \[preauth\]$", "connection-{0} invalid-user"),
    (r"Connection (closed|reset) by \S+ port \d+ \[preauth\]$", "connection-{0} port preauth"),
    (r"Connection (closed|reset) by \S+ port \d+$", "connection-{0} port"),
    (r"Connection (closed|reset) by \S+ \[preauth\]$", "connection-{0} preauth"),
    (r"Connection (closed|reset) by \S+$", "connection-{0}"),
    (r"Disconnecting: Too many authentication failures for .* \[preauth\]$", "too-many-failures user"),
    (r"Disconnecting: Too many authentication failures \[preauth\]$", "too-many-failures"),
    (r"maximum authentication attempts exceeded for .* from \S+ port \d+ ssh2 \[preauth\]$", "max-attempts"),
    (r"pam_unix\(sshd:auth\): authentication failure; logname=\S* uid=\d+ euid=\d+ tty=\S+ ruser=\S* rhost=\S+ +user=\S+$", "pam_unix-failure user"),
    (r"pam_unix\(sshd:auth\): authentication failure; logname=\S* uid=\d+ euid=\d+ tty=\S+ ruser=\S* rhost=\S+ \[preauth\]$", "pam_unix-failure preauth"),
    (r"pam_unix\(sshd:auth\): authentication failure; logname=\S* uid=\d+ euid=\d+ tty=\S+ ruser=\S* rhost=\S+$", "pam_unix-failure"),
    (r"pam_unix\(sshd:session\): session opened for user \S+ by \(uid=\d+\)$", "pam_unix-session-opened"),
    (r"Disconnecting invalid user .* \S+ port \d+: Change of username or service not allowed: .* \[preauth\]$", "change-of-username"),
    (r"Disconnected from authenticating user .* \S+ port \d+ \[preauth\]$", "disconnected authenticating-user"),
    (r"Disconnected from \S+ port \d+ \[preauth\]$", "disconnected"),
    (r"Did not receive identification string from \S+ port \d+$", "no-identification port"),
    (r"Did not receive identification string from \S+$", "no-identification"),
    (r"Bad protocol version identification '.*' from \S+ port \d+$", "bad-protocol-version"),
    (r"SSH: Server;Ltype: (\w+);", "audit {0}"),
    (r"Read from socket failed: Connection reset by peer \[preauth\]$", "read-socket-failed"),
    (r"kex_exchange_identification: client sent invalid protocol identifier .*$", "kex-invalid-identifier"),
    (r"kex_exchange_identification: Connection closed by remote host$", "kex-closed"),
    (r"kex_exchange_identification: banner line too long$", "kex-banner-too-long"),
    (r"kex_exchange_identification: read: Connection reset by peer$", "kex-read-reset"),
    (r"banner exchange: Connection from \S+ port \d+: invalid format$", "banner-invalid-format"),
    (r"Unable to negotiate with \S+ port \d+: no matching (.+) found\. Their offer: \S+ \[preauth\]$", "unable-to-negotiate preauth {0}"),
    (r"Unable to negotiate with \S+ port \d+: no matching (.+) found\. Their offer: \S+$", "unable-to-negotiate {0}"),
    (r"Unable to negotiate a key exchange method \[preauth\]$", "unable-to-negotiate-kex"),
    (r"no matching mac found: client \S+ server \S+ \[preauth\]$", "no-matching-mac"),
]
_SSHD_AUTH = re.compile(r"(Failed|Accepted|Postponed) (\S+) for (invalid user )?(.*?) from (\S+)( port \d+( ssh\d)?)?(:? (.*))?$")
_KEY_TYPES = ("RSA", "DSA", "ECDSA", "ED25519")


def _sshd_auth(msg: str) -> str | None:
    m = _SSHD_AUTH.match(msg)
    if m is None:
        return None
    result, method, invalid, _, _, port, proto, _, extra = m.groups()
    tail = "port ssh" if proto else ("port" if port else "")
    if extra is not None:
        extra = extra.strip()
        if extra == "[preauth]":
            tail += " preauth"
        elif extra.split(" ", 1)[0] in _KEY_TYPES:
            tail += " key"
        elif extra.startswith("ruser "):
            tail += " ruser"
        elif extra.startswith("client user "):
            tail += " client-host"
        else:
            tail += " extra"
    return " ".join(x for x in ("auth", result, method, "invalid-user" if invalid else "", tail) if x)


_SSHD_HEADER = re.compile(r"(?:<\d+>1 \S+ \S+ \S+ \S+ \S+ (?:-|(?:\[(?:[^\]\"]|\"(?:[^\"\\]|\\.)*\")*\])+) "
                          r"|\w{3} {1,2}\d{1,2} \d\d:\d\d:\d\d (?:\S+ )?(?:\[sshd\]:? |sshd\[\d+\]: )"
                          r"|\S+ \S+ sshd\[\d+\]: )")


def sshd_label(line: str) -> str:
    if line.startswith("#"):
        body = line[1:].strip()
        if body.startswith("failJSON:"):
            keys = json.loads(body[len("failJSON:"):])
            return "failJSON " + ",".join(sorted(keys))  # a JSON object is an unordered set of members (RFC 8259)
        for directive in ("filterOptions:", "addFILE:"):
            if body.startswith(directive):
                return directive[:-1]
        if re.fullmatch(r"\d+", body):
            return "case-number"
        if re.fullmatch(r"gh-\d+(\(\d+\))?:|https?://\S+", body):
            return "reference"  # a comment whose only content is a value: an issue number or a URL
        return "comment:" + line
    m = _SSHD_HEADER.match(line)
    if m is None:
        return "text:" + line
    msg = line[m.end():]
    for lvl in ("error: ", "fatal: "):
        if msg.startswith(lvl):
            msg = msg[len(lvl):]
    msg = re.sub(r"^\[ID \d+ \S+\] ", "", msg).rstrip()
    auth = _sshd_auth(msg)
    if auth is not None:
        return auth
    for pat, lab in _SSHD:
        mm = re.match(pat, msg)
        if mm:
            return lab.format(*mm.groups())
    return "text:" + line


def main() -> None:
    for name, fn in (("dpkg-excerpt.log", dpkg_label), ("apt-term-excerpt.log", term_label), ("jtreg-output-excerpt.log", jtreg_label),
                     ("gdb-check-excerpt.log", gdb_label), ("fail2ban-sshd.log", sshd_label)):
        lines = (HERE / name).read_bytes().decode("utf-8").split("\n")
        if lines and lines[-1] == "":
            lines.pop()
        labels = [fn(ln.rstrip("\r")) if ln.strip() else "" for ln in lines]
        (HERE / (name[:-4] + ".labels")).write_text("\n".join(labels) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()

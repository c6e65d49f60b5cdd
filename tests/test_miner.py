"""The data-driven template miner: grouping accuracy on labelled real logs, determinism, linear-time masks.

Grouping accuracy is the measure of Zhu et al. 2019, "Tools and Benchmarks for Automated Log Parsing"
(ICSE-SEIP): a line is correct when the set of lines sharing its template equals the set of lines sharing
its true label.  The logs and the labels (written from the message formats) are described in
reference/logs/README.md.
"""

from __future__ import annotations

import hashlib
import ipaddress
from collections import defaultdict
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq.sources import logs, masks, open_source
from fractalseq.sources.headers import split_header
from fractalseq.sources.miner import TAIL, TemplateIndex, TemplateMiner, mine
from fractalseq.sources.rawio import locate
from fractalseq.sources.structured import Tokenizer

LOGS = Path(__file__).resolve().parent.parent / "reference" / "logs"
SHA = {
    "dpkg-excerpt.log": "2f712c118082c1415356561dca07e7a9cfc32df6f46da0eff444b644cf66dbf1",
    "apt-term-excerpt.log": "46e2f71345fb316c24667a6ae48eed10fb1869f7d6ed1963a11722b5a4acee1e",
    "jtreg-output-excerpt.log": "5b00bc9ccd6b816ce0502c8264b7da67bbaa5f9aadcabb4666cc435b68cfa11a",
    "fail2ban-sshd.log": "8b0471fa41098f81fde60d1caf0b22ec4cf3beb685906b8581ca511d762bc03c",
    "fail2ban-postfix.log": "f640b34495a33dd84b24e85f9af02bc25e17cddf56f203256adb7790cb360ab4",
    "fail2ban-apache-auth.log": "dfac64aa76d482bed138bd8e9edf0612d3befd7380c3abf68603c602d456901b",
    "gdb-check-excerpt.log": "a8aa7fcc873f072fda4eb13e94b7efe3369f8404b00523cae6c004c0ab853ce1",
}
LABELLED = ["dpkg-excerpt", "apt-term-excerpt", "jtreg-output-excerpt", "gdb-check-excerpt", "fail2ban-sshd"]
#: least grouping accuracy asserted per labelled log (the issue's target, 0.9, on each).  fail2ban's sshd sample
#: is a test fixture that holds deliberately hostile lines (user names holding "from <address>", an injected
#: quote, "# filterOptions:" with JSON values of different shapes) that no token-count-preserving miner groups
#: as the labels do (about 20 of its 334 lines), and fixed strings that differ in one word of a long line
#: ("no matching cipher" / "no matching MAC"; PAM's "Authentication failure" / "authentication error"), which
#: the similarity grouping merges as it merges one-word values: 0.91 measured (reference/logs/README.md).
LEAST_ACCURACY = dict.fromkeys(LABELLED, 0.9)


def _lines(path: Path) -> list[str]:
    out = path.read_bytes().decode("utf-8").split("\n")
    if out and out[-1] == "":
        out.pop()
    return out


def grouping_accuracy(pred: list, truth: list) -> float:
    """Zhu et al. 2019 grouping accuracy (see the module docstring)."""
    gp: dict = defaultdict(set)
    gt: dict = defaultdict(set)
    for i, (p, t) in enumerate(zip(pred, truth)):
        gp[p].add(i)
        gt[t].add(i)
    return sum(gp[p] == gt[t] for p, t in zip(pred, truth)) / len(pred)


@pytest.mark.parametrize("name", sorted(SHA))
def test_reference_logs_are_the_documented_files(name):
    assert hashlib.sha256((LOGS / name).read_bytes()).hexdigest() == SHA[name]


def test_grouping_accuracy_measure_on_a_worked_example():
    # Worked example: truth {0,1},{2},{3}; prediction merges 2 and 3 -> lines 0 and 1 correct, 2 and 3 wrong.
    assert grouping_accuracy(["a", "a", "b", "b"], ["x", "x", "y", "z"]) == 0.5
    assert grouping_accuracy([1, 1, 2], ["p", "p", "q"]) == 1.0


@pytest.mark.parametrize("name", LABELLED)
def test_grouping_accuracy_on_labelled_real_logs(name):
    lines = _lines(LOGS / f"{name}.log")
    labels = _lines(LOGS / f"{name}.labels")
    assert len(labels) == len(lines)
    keep = [i for i, ln in enumerate(lines) if ln.strip()]
    truth = [labels[i] for i in keep]
    assert all(truth)
    stream = open_source(LOGS / f"{name}.log", fmt="log", alphabet="learn")
    codes = stream.to_array().codes.tolist()
    assert len(codes) == len(truth)
    kinds = len(set(truth))
    found = stream.alphabet.size
    assert grouping_accuracy(codes, truth) >= LEAST_ACCURACY[name]
    assert kinds / 2 <= found <= 2 * kinds


def _labelled(name: str) -> tuple[list[str], list[str]]:
    lines = _lines(LOGS / f"{name}.log")
    labels = _lines(LOGS / f"{name}.labels")
    keep = [i for i, ln in enumerate(lines) if ln.strip()]
    return [lines[i] for i in keep], [labels[i] for i in keep]


def test_test_names_of_a_dejagnu_log_are_one_free_text_tail():
    """GDB's DejaGnu log: "PASS: <file>: <test name>" with test names of any length is one event kind.

    Labels: DejaGnu's result line format "KIND: test name" (reference/logs/label_rules.py, README.md).
    """
    lines, truth = _labelled("gdb-check-excerpt")
    texts, ids = mine(lines)
    assert grouping_accuracy(ids, truth) >= 0.9
    passed = {ids[i] for i, t in enumerate(truth) if t == "result PASS"}
    assert len(passed) == 1 and len(truth) > 2000
    (pid,) = passed
    assert texts[pid] == "PASS: <*> " + TAIL
    assert [t for t, i in zip(truth, ids) if i == pid] == ["result PASS"] * truth.count("result PASS")
    # the result lines of the other kinds keep to their own kind: no template mixes two labels
    by_id: dict = defaultdict(set)
    for t, i in zip(truth, ids):
        by_id[i].add(t)
    assert all(len(v) == 1 for v in by_id.values())


@pytest.mark.parametrize("block", [64, 4096, 1 << 20])
def test_free_text_tails_do_not_depend_on_block_size(block):
    path = LOGS / "gdb-check-excerpt.log"
    ref = logs.learn(locate(path), 1 << 16)
    got = logs.learn(locate(path), block)
    assert got.to_list() == ref.to_list() and np.array_equal(got.ids, ref.ids)


def test_a_fixed_table_with_a_free_text_tail_matches_any_number_of_words():
    idx = TemplateIndex(["PASS: <*> " + TAIL, "PASS: <*> continue to breakpoint: " + TAIL, "Running <*> ..."])
    assert idx.match("PASS: gdb.base/a.exp: print x") == 0
    assert idx.match("PASS: gdb.base/a.exp:") == 0  # the tail may be empty
    assert idx.match("PASS: gdb.base/a.exp: continue to breakpoint: foo bar") == 1  # most constant tokens win
    assert idx.match("Running /x/y.exp ...") == 2
    assert idx.match("PASS:") == -1 and idx.match("FAIL: a b c") == -1


def test_a_route_crowded_with_clusters_stays_bounded_and_deterministic():
    # invented scenario: 3000 lines of one fixed length whose words never repeat, so every line starts a cluster
    lines = [f"cmd {a}x {b}y {c}z" for a, b, c in zip(_words(3000, 1), _words(3000, 2), _words(3000, 3))]
    t1, i1 = mine(lines)
    t2, i2 = mine(lines)
    assert (t1, i1) == (t2, i2)
    # two lines share only "cmd" (1 of 4 tokens, under the 0.5 threshold): every line is its own template
    assert len(set(lines)) == 3000 and i1 == list(range(3000))


def _words(n: int, seed: int) -> list[str]:
    rng = np.random.default_rng(seed)
    letters = np.array(list("abcdefghijklmnopqrstuvwxyz"))
    return ["".join(rng.choice(letters, 7)) for _ in range(n)]


def test_sshd_sample_over_splitting_causes_are_gone():
    """The causes that split fail2ban's sshd sample into ~135 templates, each checked on its own lines.

    Labels: reference/logs/label_rules.py (sshd message formats, fail2ban's sample annotations).
    """
    lines, truth = _labelled("fail2ban-sshd")
    texts, ids = mine(lines)

    def kind_template(label: str) -> set:
        return {texts[i] for i, t in zip(ids, truth) if t == label}

    # "# failJSON: {...}": words then a JSON object -> one template per key set, whatever the values
    assert kind_template("failJSON desc,host,match,time") == {"# failJSON: { desc=<*> host=<*> match=<*> time=<*> }"}
    # Solaris' "[ID 800047 auth.info]" tag is header; "<invalid username>" is a placeholder value
    assert kind_template("auth Failed keyboard-interactive port ssh") == {"Failed keyboard-interactive for <*> from <*> port <*> ssh2"}
    # "[sshd]" and "[sshd]:" after the time are the program; host names and addresses are one field
    assert kind_template("user-not-allowed not listed in AllowUsers") == {"User root from <*> not allowed because not listed in AllowUsers"}
    # RFC 5424 structured data whose quoted value holds "]"
    assert kind_template("auth Failed unknown invalid-user port ssh") == {"Failed unknown for invalid user redmond from <*> port <*> ssh2"}
    by_id: dict = defaultdict(set)
    for t, i in zip(truth, ids):
        by_id[i].add(t)
    merged = sum(1 for v in by_id.values() if len(v) > 1)
    assert len(texts) <= 2 * len(set(truth)) and merged <= 12


def test_one_differing_word_is_a_variable_only_with_evidence():
    """Short lines differing in one word: a variable needs several different words seen once each.

    Invented scenario (a job runner and a login service).  "job N started" / "job N done" are two events
    (two words, each recurring); "user <name> logged in" with many names each seen once is one event, and
    then also takes a name that recurs (root).
    """
    rng = np.random.default_rng(5)
    names = _words(40, 9)
    lines = []
    for k in range(200):
        lines.append(f"job {int(rng.integers(1, 99))} " + ("started" if k % 2 == 0 else "done"))
        if k % 5 == 0:
            lines.append(f"user {names[k // 5]} logged in")
        if k % 7 == 0:
            lines.append("user root logged in")
    texts, ids = mine(lines)
    assert sorted(texts) == ["job <*> done", "job <*> started", "user <*> logged in"]
    # the smallest cases: two lines each
    assert sorted(mine(["job 12 started", "job 12 done"])[0]) == ["job <*> done", "job <*> started"]
    assert mine(["user alice logged in", "user bob logged in", "user carol logged in"])[0] == ["user <*> logged in"]
    # two names seen once are not yet evidence of a variable (they could be two events)
    assert len(mine(["user alice logged in", "user bob logged in"])[0]) == 2
    # threshold 1: a line joins only when every word of the template agrees (numbers are no evidence)
    assert mine(["a b 1", "a b 2", "a c 3"], threshold=1.0) == (["a b <*>", "a c <*>"], [0, 0, 1])
    # words that recur keep their templates however many there are (dpkg's status states)
    states = ["installed", "unpacked", "half-configured", "half-installed", "config-files"] * 4
    assert len(mine([f"status {w} pkg{i}:amd64 1.{i}" for i, w in enumerate(states)])[0]) == 5


def test_dpkg_log_templates_follow_the_documented_line_kinds():
    """dpkg(1) --log formats: status lines keep their state; package names and versions are variables."""
    texts, _ = mine(_lines(LOGS / "dpkg-excerpt.log"))
    assert "status installed <*> <*>" in texts and "status unpacked <*> <*>" in texts
    assert "install <*> <none> <*>" in texts
    assert not any(":amd64" in t for t in texts)


# ------------------------------------------------------------ determinism
_KINDS = [
    "Jan  5 10:11:{s:02d} host{h} sshd[{p}]: Failed password for user{u} from 10.0.{h}.{p} port {p} ssh2",
    "2024-01-05T10:11:{s:02d}.5Z INFO job {p} finished in {s}.{h} s",
    '{{"event":"login_failed","user":"u{u}","msg":"bad password from 10.1.1.{h}"}}',
    "level=warn event=disk_full path=/srv/data/{u} used={p}",
    "status installed pkg{u}:amd64 1.{h}-{s}+deb12u{p}",
]


def _invented_log(seed: int, n: int) -> list[str]:
    """Invented scenario: five kinds of lines of a small service farm, with varying fields."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        k = int(rng.integers(0, len(_KINDS)))
        out.append(_KINDS[k].format(s=int(rng.integers(0, 60)), h=int(rng.integers(0, 9)), p=int(rng.integers(1, 999)), u=int(rng.integers(0, 40))))
    return out


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 4000), st.booleans(), st.integers(0, 3))
def test_templates_do_not_depend_on_block_size_or_line_ends(block, crlf, seed):
    import tempfile

    lines = _invented_log(seed, 300)
    with tempfile.TemporaryDirectory() as d:
        ref_path = Path(d) / "ref.log"
        ref_path.write_bytes(("\n".join(lines) + "\n").encode())
        path = Path(d) / "x.log"
        path.write_bytes(("\r\n" if crlf else "\n").join(lines).encode() + (b"\r\n" if crlf else b"\n"))
        ref = logs.learn(locate(ref_path), 1 << 16)
        got = logs.learn(locate(path), block)
    assert got.to_list() == ref.to_list()
    assert np.array_equal(got.ids, ref.ids)


def test_invented_log_kinds_are_recovered():
    lines = _invented_log(7, 2000)
    texts, ids = mine(lines)
    truth = [next(k for k, fmt in enumerate(["sshd", "job", "login_failed", "disk_full", "status"]) if fmt in ln) for ln in lines]
    assert grouping_accuracy(ids, truth) == 1.0
    assert "Failed password for <*> from <*> port <*> ssh2" in texts
    # pinned tokens (an object's keys in sorted order: its members are unordered, RFC 8259), then the message's
    assert '{ event=login_failed msg: user=<*> } bad password from <*>' in texts
    assert "level=warn event=disk_full path=<*> used=<*>" in texts


def test_ids_by_first_appearance_and_a_fixed_table_matches_lines():
    # file names with digits are values; plain words would be evidence of different events
    lines = ["open 1 f01", "close 1 f01", "open 2 f02", "close 3 f02"]
    m = TemplateMiner()
    cids = m.add_many(lines)
    tpls = m.finish()
    assert [t.text for t in tpls] == ["open <*> <*>", "close <*> <*>"]
    assert [m.final_id(c) for c in cids] == [0, 1, 0, 1]
    assert [t.count for t in tpls] == [2, 2]
    idx = TemplateIndex(["close <*> <*>", "open <*> a", "open <*> <*>"])
    # the most specific matching template wins
    assert [idx.match(ln.replace("f01", "a").replace("f02", "b")) for ln in lines] == [1, 0, 2, 0]
    assert idx.match("reboot now") == -1


def test_merge_pass_folds_templates_that_differ_only_at_wildcards():
    # the first lines route by their second word while the route has room, later ones by <*>
    m = TemplateMiner(max_children=2)
    lines = [f"install pkg{c} <none> 1.{i}" for i, c in enumerate("abcdef")]
    lines = [ln.replace("pkg", "word") for ln in lines]
    m.add_many(lines)
    tpls = m.finish()
    assert [t.text for t in tpls] == ["install <*> <none> <*>"] and tpls[0].count == 6


# ----------------------------------------------------------------- masks
@settings(max_examples=200, deadline=None)
@given(st.integers(-(10**12), 10**12), st.floats(allow_nan=False, allow_infinity=False, width=32))
def test_numbers_are_masked(i, x):
    assert masks.mask_token(str(i)) == "<*>"
    assert masks.mask_token(repr(x)) == "<*>" or repr(x) in ("inf", "-inf")
    assert masks.mask_token(f"({i}),") == "(<*>),"


@settings(max_examples=200, deadline=None)
@given(st.ip_addresses(), st.integers(0, 65535))
def test_ip_addresses_are_masked(ip, port):
    text = str(ip)
    assert masks.is_ip(text)
    assert masks.mask_token(text) == "<*>"
    if isinstance(ip, ipaddress.IPv4Address):
        assert masks.is_ipv4(f"{text}:{port}")
        assert masks.mask_token(f"from={text}:{port};") == "from=<*>;"
    else:
        assert masks.mask_token(f"[{text}]") == "[<*>]"


@settings(max_examples=200, deadline=None)
@given(st.uuids())
def test_uuids_are_masked(u):
    assert masks.is_uuid(str(u)) and masks.mask_token(str(u)) == "<*>"
    assert masks.mask_token(str(u).upper()) == "<*>"


@pytest.mark.parametrize(
    "token, masked",
    [
        ("2.36-9+deb12u10", "<*>"), ("1:2.3.4-1", "<*>"), ("v1.2.3", "<*>"), ("0x7ffd1a2b", "<*>"),
        ("deadbeef12", "<*>"), ("user@example.org", "<*>"), ("https://h.example/p?q=1", "<*>"),
        ("/var/log/x.log", "<*>"), ("usr/lib/x.so", "<*>"), ("aa:bb:cc:dd:ee:ff", "<*>"), ("12ms", "<*>"),
        ("ssh2", "ssh2"), ("password", "password"), ("can't", "can't"), ("sshd[31602]:", "sshd[<*>]:"),
        ("n2Jp8cLk1d0Q4aZ7x+9yR3", "<*>"), ("deadbeef", "deadbeef"),
    ],
)
def test_token_masks(token, masked):
    # kinds from the module table (common practice for log templating)
    assert masks.mask_token(token) == masked


# A mask with super-linear backtracking would take minutes on 1 MB; these inputs are adversarial for
# the usual regular expressions (long near-matches).  No time is asserted, only the results.
MB = 1 << 20
ADVERSARIAL = {
    "number": ("1" * MB + "x", True),
    "dotted": ("1." * (MB // 2) + "x", True),
    "hex": ("a" * MB + "g", False),
    "ipv6": ("a:" * (MB // 2) + "g", False),
    "uuid": ("abcdef12-" * (MB // 9) + "z", True),  # an id (letters, digits, '-')
    "email": ("a@" * (MB // 2), False),
    "url": ("a://" * (MB // 4) + "b", True),
    "path": ("/" + "a/" * (MB // 2) + "b", True),
    "id": ("a1_" * (MB // 3) + "!", True),
    "quoted": ('x="' + "a" * MB, False),
}


@pytest.mark.parametrize("kind", sorted(ADVERSARIAL))
def test_masks_on_a_one_megabyte_adversarial_token(kind):
    tok, variable = ADVERSARIAL[kind]
    assert len(tok) >= MB - 16
    assert masks.is_variable(tok) is variable
    for f in (masks.is_number, masks.is_hex, masks.is_ipv4, masks.is_ipv6, masks.is_uuid, masks.is_email,
              masks.is_url, masks.is_path, masks.is_version, masks.is_id):
        assert f(tok) in (True, False)
    m = masks.mask_token(tok)
    assert m.startswith("<*>") is variable or kind == "quoted"


def test_placeholders_and_prefixed_json_on_a_one_megabyte_line():
    tok = Tokenizer()
    line = "<a b" * (MB // 4) + ">"
    free = tok(line)[1]
    assert free[-1].endswith("<*>")
    pinned, free = tok("note " + '{"a": ' * (MB // 8) + "1" + "}" * (MB // 8))  # nesting too deep for json
    assert pinned == () and free[0] == "note"
    pinned, free = tok("expect: " + '{"k": "' + "v " * (MB // 2) + '"}')
    assert pinned == ("expect:", "{", "k=<*>", "}") and free == []


def test_header_and_tokenizer_on_a_one_megabyte_line():
    line = "Jan  5 10:11:12 " + "a" * MB + ' {"x":' + "[" * 1000 + " end"
    hdr, msg = split_header(line)
    assert hdr.host == "" and msg.startswith("aaa")
    pinned, free = Tokenizer()(msg)
    assert pinned == () and free[0] == "a" * MB and free[-1] == "end"
    logline = "a=" + '"' + "b " * (MB // 2)  # an unterminated logfmt value
    assert Tokenizer()(logline)[0] == ()


@pytest.mark.parametrize(
    "line, host, program, level, message",
    [
        ("Jan  5 10:11:12 belka sshd[31602]: Failed", "belka", "sshd", "", "Failed"),
        ("<34>1 2003-10-11T22:14:15.003Z mymachine.example.com su - ID47 - 'su root' failed", "mymachine.example.com", "su", "", "'su root' failed"),
        ("<13>Feb  5 17:32:18 10.0.0.99 myprog: hello", "10.0.0.99", "myprog", "", "hello"),
        ("2024-01-05T10:11:12.123Z [WARN] foo", "", "", "WARN", "foo"),
        ("2024-01-05 10:11:12,345 INFO  [main] started", "", "", "INFO", "[main] started"),
        ('10.0.0.1 - - [05/Jan/2024:10:11:12 +0000] "GET / HTTP/1.1" 200 5', "", "", "", '10.0.0.1 - - "GET / HTTP/1.1" 200 5'),
        ("[05/Jan/2024:10:11:12 +0000] GET x", "", "", "", "GET x"),
        ("Sat Jun  1 02:17:42 2013 error: done", "", "", "ERROR", "done"),
        ("no header here", "", "", "", "no header here"),
        # ISO stamp then one space (dpkg.log's form, common practice): the first word decides whether the header
        # goes on (a zone, a level, ``host prog:``, ``prog:``, ``[prog]``) or the message starts there
        ("2025-06-24 14:36:25 status installed libc-bin:amd64 2.36-9", "", "", "", "status installed libc-bin:amd64 2.36-9"),
        ("2024-01-05 10:11:12 UTC disk full", "", "", "", "disk full"),
        ("2024-01-05 10:11:12 +0100 disk full", "", "", "", "disk full"),
        ("2024-01-05 10:11:12 ERROR disk full", "", "", "ERROR", "disk full"),
        ("2024-01-05 10:11:12 Error: x", "", "", "ERROR", "x"),
        ("2024-01-05 10:11:12 belka sshd[7]: Failed", "belka", "sshd", "", "Failed"),
        ("2024-01-05 10:11:12 cron: started", "", "cron", "", "started"),
        ("2024-01-05 10:11:12 [main] started", "", "main", "", "started"),
        # lines of fail2ban's sshd sample: a bracketed program after the time, Solaris' message tag,
        # RFC 5424 structured data with a quoted "]"
        ("Jun 25 23:53:34 [sshd] User root from 1.2.3.4", "", "sshd", "", "User root from 1.2.3.4"),
        ("Mar  3 00:17:22 [sshd]: User root", "", "sshd", "", "User root"),
        ("Mar 29 05:59:23 dusky sshd[20878]: [ID 800047 auth.info] Failed x", "dusky", "sshd", "", "Failed x"),
        ('<38>1 2019-07-08T17:40:17.9-04:00 h.example.com sshd 55555 - [tq a="1"][x@123 t="[b]"] Failed y',
         "h.example.com", "sshd", "", "Failed y"),
    ],
)
def test_headers(line, host, program, level, message):
    # syslog forms: RFC 3164 and RFC 5424 (its example 1); common log format date: common practice
    hdr, msg = split_header(line)
    assert (hdr.host, hdr.program, hdr.level, msg) == (host, program, level, message)


# ------------------------------------------------------------- reading
def test_latin1_byte_nul_block_and_long_line_are_read_and_counted(tmp_path):
    path = tmp_path / "mixed.log"
    long_line = b"Jan  5 10:11:14 h app: payload " + b"x" * (logs.LINE_LIMIT + 10)
    path.write_bytes(
        b"Jan  5 10:11:12 h app: login failed for Mu\xf1oz\n"
        + b"\x00" * 4096
        + b"Jan  5 10:11:13 h app: login failed for Smith\n"
        + long_line + b"\n"
    )
    stream = open_source(path, fmt="log")
    arr = stream.to_array()
    rep = stream.report
    assert len(arr) == 3
    assert rep.extra["junk_bytes_skipped"] == 4096
    assert rep.extra["latin1_lines"] == 1
    assert rep.extra["lines_cut"] == 1
    t = rep.extra["templates"]
    assert t[0]["template"] == "login failed for <*>" and t[0]["count"] == 2
    assert "Mu\u00f1oz" in t[0]["example"]
    assert t[0]["fields"] == {"host": {"h": 2}, "program": {"app": 2}}

"""Grouping rules of the template miner: different constants, sibling labels, empty values.

Real logs and labels: reference/logs (provenance and the label rules in reference/logs/README.md and
label_rules.py).  Other lines are an invented scenario (a job runner, a login gate, a test harness).
"""

from __future__ import annotations

from collections import defaultdict

from fractalseq.sources.evidence import conflicting, constant_part, label_shape
from fractalseq.sources.miner import TAIL, mine
from fractalseq.sources.structured import Tokenizer

from test_miner import _labelled


def _templates_of(label: str, truth: list[str], ids: list[int], texts: list[str]) -> set[str]:
    return {texts[i] for i, t in zip(ids, truth) if t == label}


def test_what_a_token_fixes():
    assert constant_part("ATTEMPT!") == constant_part("ATTEMPT") == "ATTEMPT"  # punctuation aside
    assert constant_part("<*>;Name:") == "Name"  # the fixed text beside a masked value
    assert constant_part("<*>:") == ""  # a masked value alone fixes nothing
    assert constant_part("user=root") == constant_part("user=") == "user="  # the key, not the value
    assert constant_part("'alice'") == constant_part('"x y"') == ""  # quoted: printed from a value
    assert constant_part("gate.example.org") == constant_part("file.c.12") == ""  # dotted names
    assert constant_part("log-format)") == "log-format"
    assert conflicting(["a", "b", "c"], ["a", "x", "y"]) and not conflicting(["a", "b", "c"], ["a", "x", "c"])
    assert not conflicting(["<*>", "'p'", "k=1"], ["w", "'q'", "k=2"])


def test_two_different_constants_make_two_events():
    """Invented job runner: two fixed words differ -> two events; one differing word is a value, as before."""
    lines = ["job runner: queue drained after 3 retries", "job runner: worker crashed after 4 retries"]
    # four of six words agree (over the 0.5 threshold), but "queue drained" / "worker crashed" are two constants
    assert len(mine(lines)[0]) == 2
    texts, ids = mine(["job runner: queue drained after 3 retries", "job runner: queue emptied after 5 retries"])
    assert texts == ["job runner: queue <*> after <*> retries"] and ids == [0, 0]
    # quoted values, key=value values and host names are values, whatever else differs with them
    gate = ["login refused for 'alice' by gate.example.org policy=strict", "login refused for 'bob' by relay.example.net policy=open",
            "login refused for 'carol' by gate.example.org policy=open"]
    assert len(mine(gate)[0]) == 1


def test_sshd_messages_that_differ_in_fixed_words_are_apart():
    """fail2ban's sshd sample: the failed key-exchange field's name and the disconnect reason are fixed strings.

    Labels: reference/logs/label_rules.py (OpenSSH message formats restated from memory, README.md).
    """
    lines, truth = _labelled("fail2ban-sshd")
    texts, ids = mine(lines)
    by_id: dict = defaultdict(set)
    for t, i in zip(truth, ids):
        by_id[i].add(t)
    for label in ("unable-to-negotiate key exchange method", "unable-to-negotiate host key type",
                  "received-disconnect port preauth Bye Bye"):
        (tpl,) = _templates_of(label, truth, ids, texts)
        assert by_id[texts.index(tpl)] == {label}, label


def test_sibling_labels_share_a_free_text_tail():
    """Invented test harness: once PASS: has a free-text tail, FAIL: and UNTESTED: (same shape) get one too."""
    names = ["alpha", "beta gamma", "delta epsilon zeta", "eta theta iota kappa", "lambda mu", "nu xi omicron",
             "pi rho sigma tau upsilon", "phi", "chi psi", "omega one two", "three four", "five six seven eight"]
    lines = []
    for k in range(24):
        lines.append(f"PASS: suite{k % 3}.exp: {names[k % len(names)]}")
    lines += ["FAIL: suite1.exp: check frames", "UNTESTED: suite2.exp: needs a compiler", "Running suite3.exp ...",
              "FAIL: suite2.exp: print value after restart", "UNTESTED: suite0.exp: skipped"]
    texts, ids = mine(lines)
    assert sorted(texts) == sorted(["PASS: <*> " + TAIL, "FAIL: <*> " + TAIL, "UNTESTED: <*> " + TAIL, "Running suite3.exp ..."])
    assert label_shape((), ["FAIL:", "<*>"]) == label_shape((), ["PASS:", "<*>"]) != label_shape((), ["Pass:", "<*>"])
    assert label_shape((), ["Running", "<*>"]) is None


def test_each_dejagnu_result_kind_is_one_template():
    """GDB's check log excerpt: DejaGnu's "KIND: file: test name" lines, one template per result kind.

    Labels: DejaGnu manual, "Test Output" (reference/logs/label_rules.py); the excerpt has 10 kinds.
    """
    lines, truth = _labelled("gdb-check-excerpt")
    texts, ids = mine(lines)
    for kind in sorted({t for t in truth if t.startswith("result ")}):
        word = kind.split()[1]
        assert _templates_of(kind, truth, ids, texts) == {f"{word}: <*> {TAIL}"}, kind
    assert len(texts) <= 2 * len(set(truth))


def test_an_empty_value_keeps_the_tokens_aligned():
    """Two spaces where a value would be (printf of an empty string) become <*>; wider runs are alignment."""
    tok = Tokenizer()
    assert tok("Invalid user  from 10.0.0.1 port 22")[1] == ["Invalid", "user", "<*>", "from", "<*>", "port", "<*>"]
    assert tok("total:   12 items")[1] == ["total:", "<*>", "items"]  # three spaces: column alignment
    lines, truth = _labelled("fail2ban-sshd")
    texts, ids = mine(lines)
    # sshd's "Invalid user %s from %s port %d" with an empty user name joins the lines with a name
    assert _templates_of("invalid-user port", truth, ids, texts) == {"Invalid user <*> from <*> port <*>"}
    # pam_unix's "... rhost=%s  user=%s" (an empty field before user=) stays apart from the [preauth] form
    assert not _templates_of("pam_unix-failure user", truth, ids, texts) & _templates_of("pam_unix-failure preauth", truth, ids, texts)


def test_empty_value_marking_on_a_one_megabyte_line():
    # fixed-width look-arounds only (linear time; speed is measured in benchmarks, not asserted here)
    free = Tokenizer()("a  " * (1 << 19))[1]
    assert len(free) == 2 * (1 << 19) - 1 and free[1] == "<*>" and free[-1] == "a"


def test_an_empty_json_object_at_the_end_is_text():
    """A line of GDB's check log (/usr/share/doc/gdb/check.log.gz, line 35596, shortened): a test name ending in "{}".

    "words {json object}" pins the words and the object's keys; an empty object names no key, so the line stays text
    and joins the other PASS lines (the whole log's 96,989 PASS lines were one template but for this one).
    """
    pinned, free = Tokenizer()("PASS: gdb.base/share-env-with-gdbserver.exp: long var value: set V = testing long vars; {}")
    assert pinned == () and free[0] == "PASS:" and free[-1] == "{}"
    assert Tokenizer()('request done {"ms": 12}')[0] == ("request", "done", "{", "ms=<*>", "}")

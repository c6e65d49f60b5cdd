"""The shortcuts of ``masks.mask_token`` give what its general steps give.

``mask_token`` takes most tokens through cheap tests (a digit-led token without ``:``, an ASCII token that
holds no digit, ``/`` or ``@``, a letter-led word without separators, a path without ``:`` or ``@``) before
the general steps (``masks._mask_by_rules``).  Checked here on every whitespace token of the real logs of
reference/logs (programs' output nobody here wrote; provenance in reference/logs/README.md), on generated
tokens built from the characters the rules look at, and on worked examples whose masks follow from the
rule table of the module docstring (the expected values are written from that table, not from a run).
"""

from __future__ import annotations

from pathlib import Path

from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq.sources import masks

LOGS = Path(__file__).resolve().parent.parent / "reference" / "logs"


def _real_tokens() -> set[str]:
    toks: set[str] = set()
    for path in sorted(LOGS.glob("*.log")):
        toks.update(path.read_text(encoding="utf-8", errors="replace").split())
    return toks


def test_shortcuts_agree_with_the_rules_on_every_token_of_the_real_logs():
    toks = _real_tokens()
    assert len(toks) > 1000  # the excerpts hold a few thousand distinct tokens
    differ = {t: (masks.mask_token(t), masks._mask_by_rules(t)) for t in toks if masks.mask_token(t) != masks._mask_by_rules(t)}
    assert not differ, list(differ.items())[:5]
    # the real tokens do take the shortcuts: many are left alone, many masked whole
    kept = sum(masks.mask_token(t) == t for t in toks)
    assert 0 < kept < len(toks)


# characters every rule looks at: digits, hex and other letters, v, x, and the punctuation of addresses,
# paths, versions, separators and trailing marks; a non-ASCII digit (U+0663) and letter (e with acute)
_ALPHABET = "09afAFvVxXgz:./@-_+=#,;|()[]{}<>\"'!?~%\u0663\u00e9"


@settings(max_examples=3000, deadline=None, derandomize=True)
@given(st.text(alphabet=_ALPHABET, min_size=1, max_size=16))
def test_shortcuts_agree_with_the_rules_on_generated_tokens(tok):
    assert masks.mask_token(tok) == masks._mask_by_rules(tok)


def test_worked_examples_of_each_shortcut():
    # expected masks written from the rule table of fractalseq.sources.masks (the project's documented rules)
    cases = {
        "installed": "installed",  # letters only: no rule applies
        "started:": "started:",  # a word with a trailing ':' (one ':' is no IPv6 address)
        "12ms": "<*>",  # number with a short unit
        "2.36-9+deb12u10,": "<*>,",  # version (starts with a digit); the trailing ',' is set aside
        "v1.2": "<*>",  # version: v + digit
        "deadbeef12": "<*>",  # hex: 6 or more hex digits with a decimal digit
        "x11-utils": "<*>",  # id: 8+ id characters, two digits and a letter (a constant that looks like an id)
        "libsystemd0:amd64": "libsystemd0:amd64",  # ':' is no id character and one ':' no IPv6 address
        ".../libudev1_252.38-1~deb12u1_amd64.deb": "<*>",  # path: '/' between two non-empty parts
        "/usr/lib/x.so.": "<*>.",  # absolute path; the trailing '.' is set aside
        "ab/": "ab/",  # a '/' at the end is no path
        "10:11:12:": "<*>",  # clock time under the IPv6-like rule, tested before the digit-led shortcut
        "(1.23-3)": "(<*>)",  # version inside brackets
        "\u0663abc": "<*>",  # a non-ASCII digit leads: the general steps (str.isdigit) mask it
    }
    got = {t: masks.mask_token(t) for t in cases}
    assert got == cases

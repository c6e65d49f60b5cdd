"""The miner routes a raw word as its masked token would route, without always masking it.

A line's routing token is its masked token when that is a plain word (letters, ``-``, ``_``, ``'``, brackets
and trailing marks aside), else ``<*>``.  The miner (``miner._RouteTokens``) skips the masking of a word that
is no plain word itself: a mask either leaves a token as it is or puts ``<*>`` into it, and a token holding
``<*>`` is never a plain word.  Both facts, and the routing token they give, are checked here on every
whitespace token of the real logs of reference/logs (programs' output nobody here wrote; provenance in
reference/logs/README.md) and on generated tokens built from the characters the mask rules and the
plain-word test look at.
"""

from __future__ import annotations

from pathlib import Path

from hypothesis import given, settings
from hypothesis import strategies as st

from fractalseq.sources import masks
from fractalseq.sources.miner import _routable, _RouteTokens

LOGS = Path(__file__).resolve().parent.parent / "reference" / "logs"


def _real_tokens() -> set[str]:
    toks: set[str] = set()
    for path in sorted(LOGS.glob("*.log")):
        toks.update(path.read_text(encoding="utf-8", errors="replace").split())
    return toks


def _by_definition(tok: str) -> str:
    m = masks.mask_token(tok) or tok
    return m if _routable(m) else masks.WILDCARD


def test_routing_tokens_of_the_real_logs_match_the_definition():
    toks = _real_tokens()
    assert len(toks) > 1000  # the excerpts hold a few thousand distinct tokens
    route = _RouteTokens(masks.mask_token)
    differ = {t: (route[t], _by_definition(t)) for t in toks if route[t] != _by_definition(t)}
    assert not differ, list(differ.items())[:5]
    # both kinds occur: words that route as themselves, and tokens that route as <*>
    words = sum(route[t] == t for t in toks)
    assert 0 < words < len(toks)


def test_a_mask_keeps_a_token_or_puts_the_wildcard_into_it():
    for tok in _real_tokens():
        m = masks.mask_token(tok)
        assert m == tok or masks.WILDCARD in m, (tok, m)
    # worked examples written from the rule table of fractalseq.sources.masks: a version and a path are
    # masked (and then route as <*>), a plain word is kept and routes as itself
    route = _RouteTokens(masks.mask_token)
    assert route["(2.36-9+deb12u10)"] == "<*>"
    assert route[".../libudev1_252.38-1~deb12u1_amd64.deb"] == "<*>"
    assert route["Unpacking"] == "Unpacking"
    assert route["libudev1:amd64"] == "<*>"  # a digit and an inner ':': no plain word, though not masked


# characters the mask rules and the plain-word test look at: digits, hex and other letters, v, x, the
# punctuation of addresses, paths and versions, separators, brackets and trailing marks, a non-ASCII digit
# (U+0663) and letter (e with acute), and the wildcard's '*'
_ALPHABET = "09afAFvVxXgz:./@-_'+=#,;|()[]{}<>\"!?~%*\u0663\u00e9"


@settings(max_examples=3000, deadline=None, derandomize=True)
@given(st.text(alphabet=_ALPHABET, min_size=1, max_size=16))
def test_routing_tokens_of_generated_tokens_match_the_definition(tok):
    m = masks.mask_token(tok)
    assert m == tok or masks.WILDCARD in m
    assert _RouteTokens(masks.mask_token)[tok] == _by_definition(tok)

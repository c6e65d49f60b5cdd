"""When two log lines are different events, and when sibling families share a free-text tail.

Two rules of the template miner (:mod:`fractalseq.sources.miner`) that look at what tokens *fix*:

Different constants
    A line does not join a cluster whose template holds different constants at ``CONFLICTS`` (2)
    or more positions, however many other words agree: ``no matching key exchange method found``
    and ``no matching host key type found`` are two messages, while one differing word may be a
    value (a user name) and is left to the similarity threshold and the merge pass's evidence rule.
    A token's constant is its text without wildcards and outer punctuation (:func:`constant_part`);
    values fix nothing: masked pieces, a quoted token, the value of ``key=value`` (the key is
    compared) and a dotted name (``host.example.org``, ``file.c.12``).
Sibling labels
    Lines ``LABEL: field text`` (``PASS: a.exp: test name``, ``FAIL: ...``) are printed by one
    format whatever the label word, so once one label's family has shown a free-text tail, the
    families of the other labels of the same shape (:func:`label_shape`) get one too.
"""

from __future__ import annotations

from functools import lru_cache
from operator import ne
from typing import Sequence

from fractalseq.sources.masks import WILDCARD

__all__ = ["CONFLICTS", "conflicting", "constant_part", "label_shape"]

#: positions with different constants that make a line a different event from a template
CONFLICTS = 2
#: outer punctuation set aside when tokens are compared (the miner's routing strips the same set)
_OUTER = "[]()<>{}:,;.!?\"'"
_QUOTES = frozenset("\"'`")


@lru_cache(maxsize=1 << 16)
def constant_part(tok: str) -> str:
    """What a token fixes: its text without wildcards and outer punctuation; ``""`` when it fixes nothing.

    A quoted token, the value of ``key=value`` (the key is kept) and a dotted name (letters or digits
    on both sides of an inner ``.``) are printed from values and fix nothing.

    Examples
    --------
    >>> constant_part("ATTEMPT!"), constant_part("<*>;Name:"), constant_part("user=root"), constant_part("a.example.org")
    ('ATTEMPT', 'Name', 'user=', '')
    """
    if tok[:1] in _QUOTES:
        return ""
    key, eq, _ = tok.partition("=")
    if eq:
        return key.strip(_OUTER) + "="
    core = tok.replace(WILDCARD, " ").strip(_OUTER + " ")
    i = core.find(".")
    while 0 < i < len(core) - 1:
        if core[i - 1].isalnum() and core[i + 1].isalnum():
            return ""
        i = core.find(".", i + 1)
    return core


def conflicting(tpl: Sequence[str], free: Sequence[str]) -> bool:
    """Whether a template and a line's tokens fix different constants at ``CONFLICTS`` or more positions."""
    if sum(map(ne, tpl, free)) < CONFLICTS:
        return False  # too few different tokens (most lines): no need to look at what they fix
    k = 0
    for a, b in zip(tpl, free):
        if a != b:
            ca = constant_part(a)
            if ca:
                cb = constant_part(b)
                if cb and ca != cb:
                    k += 1
                    if k >= CONFLICTS:
                        return True
    return False


def label_shape(pinned: tuple[str, ...], head: Sequence[str]) -> tuple | None:
    """The shape sibling ``LABEL: ...`` families share, or ``None`` when the routing head starts with no label.

    A label is a word of letters ended by ``:`` (``PASS:``, ``FAIL:``, ``ERROR:``); two labels of the
    same case (all capitals, capitalised, lower case) with the same pinned tokens and the same rest of
    the head share the shape.
    """
    if not head:
        return None
    first = head[0]
    core = first[:-1]
    if first[-1:] != ":" or not core.isalpha():
        return None
    case = "upper" if core.isupper() else "title" if core.istitle() else "lower" if core.islower() else "mixed"
    return (pinned, case, *head[1:])

"""Linear-time masks of variable tokens in log messages.

A message is split at whitespace; every token is then looked at with plain
string operations (no regular expression that can backtrack), so the cost is
linear in the length of the line whatever it holds.  A token, or a piece of it
between separator characters (``= , ; # | ( ) [ ] { } < > " '``), that is one
of the following becomes the wildcard ``<*>``:

==============  ===========================================================
kind            rule (after trailing ``.:!?`` and leading ``:@#`` are set aside)
==============  ===========================================================
number          optional sign, digits, optional ``.`` / ``,`` decimals and
                exponent; also with a unit glued on (``12ms``, ``4.5kB``)
hex             ``0x`` followed by hex digits, or 6 or more hex digits with
                at least one decimal digit
IPv4            four dotted numbers 0-255, optional ``:port``
IPv6            two or more ``:`` and only hex digits, ``:`` and ``.``;
                also MAC addresses and clock times (``10:11:12``)
UUID            8-4-4-4-12 hex digits (covered by the dashed-hex rule:
                hex digit groups joined by ``-`` with a decimal digit)
email           ``local@domain`` with a non-empty local part and a domain
URL             ``scheme://...``
path            starts with ``/``, ``~/``, ``./`` or ``../``, or holds a
                ``/`` between two non-empty parts (``usr/lib/x.so``)
version         starts with a digit, or with ``v`` + digit, and holds a
                digit (``2.36-9+deb12u10``, ``1:2.3-1``, ``v1.2``)
id              8 or more characters of letters, digits and ``_-+/=``
                with at least two digits and one letter (keys, session ids,
                base64 fingerprints)
==============  ===========================================================

The rules are common practice for log templating (masking before grouping);
they are heuristics, and a constant that looks like a number is masked too.
"""

from __future__ import annotations

import re
from typing import Callable

__all__ = [
    "WILDCARD",
    "is_email",
    "is_hex",
    "is_id",
    "is_ip",
    "is_ipv4",
    "is_ipv6",
    "is_number",
    "is_path",
    "is_url",
    "is_uuid",
    "is_variable",
    "is_version",
    "mask_token",
    "mask_tokens",
]

WILDCARD = "<*>"

_HEX = frozenset("0123456789abcdefABCDEF")
_DIGITS = frozenset("0123456789")
_IPV6_CHARS = _HEX | frozenset(":.")
_DROP_DIGITS = str.maketrans("", "", "0123456789")
_ID_CHARS = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_-+/=")
_TRAIL = ".:!?"
_LEAD_CHARS = "\"'([{<"
_TAIL_CHARS = "\"')]}>,;:.!?"
# separators inside a whitespace token; a character class with one '+' runs in linear time
_SPLIT = re.compile(r"([=,;#|()\[\]{}<>\"']+)")
_SEP_CHARS = frozenset("=,;#|()[]{}<>\"'")


def _has_digit(s: str) -> bool:
    return not _DIGITS.isdisjoint(s)


def is_number(s: str) -> bool:
    """Signed integer or decimal (``-12``, ``3.5``, ``1,5``, ``2e-3``), optionally with a short unit (``12ms``)."""
    if not s:
        return False
    i = 1 if s[0] in "+-" else 0
    n = len(s)
    j = i
    while j < n and s[j].isdigit():
        j += 1
    if j == i:
        return False
    if j < n and s[j] in ".,":
        k = j + 1
        while k < n and s[k].isdigit():
            k += 1
        if k > j + 1:
            j = k
    if j < n and s[j] in "eE" and j + 1 < n:
        k = j + 1 + (s[j + 1] in "+-")
        m = k
        while m < n and s[m].isdigit():
            m += 1
        if m > k:
            j = m
    rest = s[j:]
    return not rest or (len(rest) <= 3 and rest.isalpha()) or rest == "%"


def is_hex(s: str) -> bool:
    """``0x`` + hex digits, or 6+ hex digits holding a decimal digit (``deadbeef12``)."""
    if len(s) > 2 and s[0] == "0" and s[1] in "xX":
        return _HEX.issuperset(s[2:])
    return len(s) >= 6 and _HEX.issuperset(s) and _has_digit(s)


def is_ipv4(s: str) -> bool:
    """Dotted quad with parts 0-255 and an optional ``:port``."""
    host, colon, port = s.partition(":")
    if colon and not (port.isdigit() and len(port) <= 5):
        return False
    parts = host.split(".", 4)
    if len(parts) != 4:
        return False
    return all(p.isdigit() and len(p) <= 3 and int(p) <= 255 for p in parts)


def is_ipv6(s: str) -> bool:
    """Two or more ``:`` with only hex digits, ``:`` and ``.`` (IPv6, MAC addresses, clock times)."""
    return s.count(":") >= 2 and _IPV6_CHARS.issuperset(s) and (not _HEX.isdisjoint(s) or "::" in s)


def is_ip(s: str) -> bool:
    """IPv4 (with port) or IPv6-like."""
    return is_ipv4(s) or is_ipv6(s)


def is_uuid(s: str) -> bool:
    """8-4-4-4-12 hex digits."""
    parts = s.split("-", 5)
    return [len(p) for p in parts] == [8, 4, 4, 4, 12] and all(_HEX.issuperset(p) for p in parts)


def _is_dashed_hex(s: str) -> bool:
    return "-" in s and _has_digit(s) and _HEX.issuperset(s.replace("-", "")) and "--" not in s and s[0] != "-"


def is_email(s: str) -> bool:
    """``local@domain``: one ``@`` with a non-empty part on each side and a letter or digit in the domain."""
    local, at, domain = s.partition("@")
    return bool(at and local and domain and "@" not in domain and domain[0].isalnum())


def is_url(s: str) -> bool:
    """``scheme://...`` with a letter-led scheme."""
    scheme, sep, _ = s.partition("://")
    return bool(sep and scheme and scheme[0].isalpha() and scheme.replace("+", "").replace("-", "").replace(".", "").isalnum())


def is_path(s: str) -> bool:
    """Absolute or relative file path."""
    if len(s) < 2 or "/" not in s:
        return False
    if s[0] == "/" or s.startswith(("~/", "./", "../")):
        return True
    i = s.find("/")
    return 0 < i < len(s) - 1


def is_version(s: str) -> bool:
    """Version-like token: starts with a digit (or ``v`` + digit)."""
    if not s:
        return False
    c = s[0]
    if c.isdigit():
        return True
    return c in "vV" and len(s) > 1 and s[1].isdigit()


def is_id(s: str) -> bool:
    """8+ characters of ``[A-Za-z0-9_+/=-]`` with two or more digits and a letter."""
    if len(s) < 8 or not _ID_CHARS.issuperset(s):
        return False
    digits = len(s) - len(s.translate(_DROP_DIGITS))  # s is ASCII here: its digits are 0-9
    return digits >= 2 and digits < len(s)


def is_variable(s: str) -> bool:
    """True when the token (or piece of a token) is masked by one of the rules of the module."""
    core = s.rstrip(_TRAIL)
    if ":" in core and is_ipv6(core):
        return True
    core = core.lstrip(":@#")
    if not core:
        return False
    c = core[0]
    if c.isdigit() or (c in "+-" and len(core) > 1 and core[1].isdigit()):
        return True  # numbers, versions, IPv4, dates, clock times, dashed hex / UUIDs starting with a digit
    if "://" in core:
        return is_url(core)
    if "@" in core and is_email(core):
        return True
    if "/" in core and is_path(core):
        return True
    if ":" in core and is_ipv6(core):
        return True
    if c in "vV" and len(core) > 1 and core[1].isdigit():
        return True
    if c in "0123456789abcdefABCDEF" and (is_hex(core) or _is_dashed_hex(core)):
        return True
    return is_id(core)


#: a token that is ASCII, holds none of these and fewer than two ``:`` is never masked (every rule needs one of them)
_RISKY = frozenset("0123456789/@")
#: a token led by an ASCII letter and holding none of these is judged by the letter-led rules alone
_WORD_RISK = _SEP_CHARS | frozenset("/@")
_LETTERS = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ")


def _letter_led_variable(core: str) -> bool:
    """:func:`is_variable` of a core that starts with an ASCII letter and holds no ``/``, ``@``, separator or two ``:``.

    Such a core is no number, IPv4 or IPv6 address, URL, email or path, so only
    the ``v`` + digit, hex and id rules can apply (in that order, as in :func:`is_variable`).
    """
    c = core[0]
    if c in "vV" and len(core) > 1 and core[1].isdigit():
        return True
    if not _ID_CHARS.issuperset(core):
        return False  # hex digits, dashed hex and ids hold only id characters
    if c in "abcdefABCDEF" and (is_hex(core) or _is_dashed_hex(core)):
        return True
    return is_id(core)


def mask_token(tok: str) -> str:
    """The token with its variable pieces replaced by ``<*>`` (the whole token, brackets and quotes aside, when it is variable as a whole)."""
    # shortcuts that give what the general steps below give, with fewer steps
    if tok[:1] in _DIGITS and ":" not in tok:
        return WILDCARD + tok[len(tok.rstrip(_TAIL_CHARS)):]  # no IPv6 test to pass first; a digit leads the core
    if tok.isascii() and tok.count(":") < 2:
        if _RISKY.isdisjoint(tok):
            return tok  # no digit, "/" or "@", fewer than two ":": no rule can mask the token or a piece of it
        if tok[0] in _LETTERS and _WORD_RISK.isdisjoint(tok):
            # no lead to set aside and no piece to split: the core is the token without its trailing ".:!?"
            core = tok.rstrip(_TRAIL)
            return WILDCARD + tok[len(core):] if _letter_led_variable(core) else tok
        if "/" in tok and ":" not in tok and "@" not in tok and _SEP_CHARS.isdisjoint(tok):
            # no lead, no piece, no URL, email or IPv6: a path core is masked whatever rule comes before the path rule
            core = tok.rstrip(_TRAIL)
            if is_path(core):
                return WILDCARD + tok[len(core):]
    return _mask_by_rules(tok)


def _mask_by_rules(tok: str) -> str:
    """:func:`mask_token` by the general steps alone (its shortcuts give the same for the tokens they take)."""
    if ":" in tok:
        core = tok.strip("\"'()[]{}<>,;")
        if core and is_ipv6(core):
            return tok.replace(core, WILDCARD, 1)
    i = len(tok) - len(tok.lstrip(_LEAD_CHARS))
    core = tok[i:].rstrip(_TAIL_CHARS)
    if core and (core[0] in _DIGITS or is_variable(core)):  # a core led by a digit is variable (number, version...)
        return tok[:i] + WILDCARD + tok[i + len(core):]
    if _SEP_CHARS.isdisjoint(tok):
        return tok
    parts = _SPLIT.split(tok)
    changed = False
    for i in range(0, len(parts), 2):
        p = parts[i]
        if p and is_variable(p):
            tail = p[len(p.rstrip(_TRAIL)):]
            parts[i] = WILDCARD + tail
            changed = True
    return "".join(parts) if changed else tok


#: cache of token -> masked token; cleared when it grows past this many entries (deterministic)
_CACHE_LIMIT = 1 << 17


class _MaskCache(dict):
    """token -> masked token; a token not yet in it is masked once and kept (cleared past ``_CACHE_LIMIT`` entries)."""

    __slots__ = ()

    def __missing__(self, tok: str) -> str:
        m = mask_token(tok) or tok
        if len(self) >= _CACHE_LIMIT:
            self.clear()
        self[tok] = m
        return m


class TokenMasker:
    """Masks tokens with a bounded cache (most log words repeat)."""

    __slots__ = ("_cache", "one")

    def __init__(self) -> None:
        self._cache = _MaskCache()
        #: the masked token of one token (through the cache)
        self.one: Callable[[str], str] = self._cache.__getitem__

    def __call__(self, tokens: list[str]) -> list[str]:
        return list(map(self.one, tokens))  # a token seen before takes no Python step


def mask_tokens(tokens: list[str]) -> list[str]:
    """:func:`mask_token` of every token."""
    return [mask_token(t) for t in tokens]

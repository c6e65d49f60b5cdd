"""Tokens of a log message: structured (JSON object, logfmt) or plain text.

A message becomes two token lists:

``pinned``
    Tokens that must be equal for two lines to share a template (they are part
    of the grouping key and never become wildcards): for a JSON object (keys
    in sorted order: members of an object are unordered) or a logfmt line
    (keys in their order), one token per key, ``key=<*>`` for a value, or ``key=value``
    when the key names an event or a level (``EVENT_KEYS``) and the value is a
    short identifier-like string (``"event":"login_failed"``, ``level=error``).
``free``
    Masked tokens that the similarity grouping works on: the words of a plain
    message, or of the message field (``msg``, ``message``; ``MESSAGE_KEYS``)
    of a structured one.

Plain text: a double-quoted span holding three or more spaces (a user agent,
a free-text query) becomes the single token ``"<*>"``; short quoted spans
(``"GET /x HTTP/1.1"``) are split into words like the rest of the line.  An
angle-bracketed phrase of two to four words (``<invalid username>``, a
placeholder printed instead of a value) becomes ``<*>``.  Exactly two spaces
between two tokens mark an empty value (``Invalid user  from ...``) and become
`` <*> `` (:func:`_empty_fields`).

A message of words followed by a JSON object (``# expect: {"time": ...}``,
``request done {"ms": 12}``) is structured: its words (masked) and the object's
keys are pinned, as for a JSON line.
"""

from __future__ import annotations

import json
import re

from fractalseq.sources.masks import WILDCARD, TokenMasker, is_variable

__all__ = ["EVENT_KEYS", "MESSAGE_KEYS", "Tokenizer", "EMPTY_TOKEN"]

EVENT_KEYS = frozenset(
    "event event_type eventtype evt type action activity status state kind category op operation method "
    "component module logger level lvl severity loglevel outcome result phase stage step name".split()
)
MESSAGE_KEYS = frozenset(("msg", "message", "text", "log"))
#: the single token of a line with an empty message
EMPTY_TOKEN = "<empty>"

_LOGFMT_START = re.compile(r"[A-Za-z_][\w.-]{0,63}=")
_KEY_BAD = re.compile(r"[\s=]")


def _identifier(v: str) -> bool:
    """Short identifier-like value: 1-40 characters, a letter first, then letters, digits, ``_ . - :``."""
    if not v or len(v) > 40 or not v[0].isalpha():
        return False
    if not v.replace("_", "").replace("-", "").replace(".", "").replace(":", "").isalnum():
        return False
    return not is_variable(v)


def _key(k: str) -> str:
    return _KEY_BAD.sub("_", k) if _KEY_BAD.search(k) else k


def _value_token(key: str, v: object) -> str:
    if isinstance(v, str) and key.lower() in EVENT_KEYS and _identifier(v):
        return f"{key}={v}"
    return f"{key}={WILDCARD}"


def _collapse_quotes(msg: str) -> str:
    """Replace double-quoted spans with three or more spaces by ``"<*>"`` (one left-to-right scan)."""
    out = []
    pos = 0
    n = len(msg)
    while True:
        i = msg.find('"', pos)
        if i < 0:
            break
        j = msg.find('"', i + 1)
        if j < 0:
            break
        if msg.count(" ", i, j) >= 3:
            out.append(msg[pos:i])
            out.append('"' + WILDCARD + '"')
        else:
            out.append(msg[pos : j + 1])
        pos = j + 1
    if not out:
        return msg
    out.append(msg[pos:n])
    return "".join(out)


def _collapse_angles(msg: str) -> str:
    """Replace ``<a placeholder>`` (angle brackets around 2-4 words, nothing nested) by ``<*>``.

    Each span is found by a forward search for ``>`` and a backward search
    for the last ``<`` before it, so every character is looked at a bounded
    number of times (linear time).
    """
    out = []
    pos = 0
    while True:
        i = msg.find("<", pos)
        if i < 0:
            break
        j = msg.find(">", i + 1)
        if j < 0:
            break
        i = msg.rfind("<", i, j)
        if 1 <= msg.count(" ", i, j) <= 3 and msg[i + 1] != " " and msg[j - 1] != " ":
            out.append(msg[pos:i])
            out.append(WILDCARD)
        else:
            out.append(msg[pos : j + 1])
        pos = j + 1
    if not out:
        return msg
    out.append(msg[pos:])
    return "".join(out)


_EMPTY_FIELD = re.compile(r"(?<=\S)  (?=\S)")


def _empty_fields(msg: str) -> str:
    """Mark an empty field: exactly two spaces between two tokens become `` <*> ``.

    A message printed from a format such as ``"Invalid user %s from %s"`` with an empty value has
    two spaces where the value would be; marking it keeps the line's tokens aligned with the lines
    that have a value.  Runs of three or more spaces (column alignment) are left alone.  The pattern
    has fixed-width look-arounds only: linear time.
    """
    return _EMPTY_FIELD.sub(" " + WILDCARD + " ", msg)


def _logfmt(msg: str) -> list[tuple[str, str]] | None:
    """``key=value`` pairs of a logfmt message, or ``None`` when it is not one (quoted values may hold spaces)."""
    pairs = []
    pos = 0
    n = len(msg)
    while pos < n:
        while pos < n and msg[pos] == " ":
            pos += 1
        if pos >= n:
            break
        eq = msg.find("=", pos)
        sp = msg.find(" ", pos)
        if eq < 0 or (0 <= sp < eq) or eq == pos:
            return None
        key = msg[pos:eq]
        pos = eq + 1
        if pos < n and msg[pos] == '"':
            j = pos + 1
            while True:
                j = msg.find('"', j)
                if j < 0:
                    return None
                if msg[j - 1] != "\\":
                    break
                j += 1
            pairs.append((key, msg[pos + 1 : j]))
            pos = j + 1
        else:
            end = msg.find(" ", pos)
            end = n if end < 0 else end
            pairs.append((key, msg[pos:end]))
            pos = end
    return pairs if len(pairs) >= 2 else None


class Tokenizer:
    """Message -> ``(pinned, free)`` tokens, with bounded caches (deterministic: they depend on the lines only)."""

    _LIMIT = 1 << 16

    def __init__(self) -> None:
        self.mask = TokenMasker()
        self._cache: dict[str, tuple[tuple[str, ...], list[str]]] = {}

    def _text(self, msg: str) -> list[str]:
        if '"' in msg:
            msg = _collapse_quotes(msg)
        if "<" in msg:
            msg = _collapse_angles(msg)
        if "  " in msg:
            msg = _empty_fields(msg)
        return self.mask(msg.split())

    def _structured(self, msg: str) -> tuple[tuple[str, ...], list[str]] | None:
        c = msg[0]
        if msg[-1] == "}" and c != "{":
            res = self._prefixed_json(msg)
            if res is not None:
                return res
        elif c == "{" and msg[-1] == "}":
            try:
                obj = json.loads(msg)
            except (ValueError, RecursionError):
                return None
            if not isinstance(obj, dict):
                return None
            members: list[tuple[str, str]] = []
            free: list[str] = []
            for k, v in obj.items():
                key = _key(str(k))
                if key.lower() in MESSAGE_KEYS and isinstance(v, str) and not free:
                    members.append((key, key + ":"))
                    free = self._text(v)
                else:
                    members.append((key, _value_token(key, v)))
            members.sort()  # an object is an unordered set of members (RFC 8259): key order does not split templates
            return ("{", *(t for _, t in members), "}"), free
        if "=" in msg and _LOGFMT_START.match(msg):
            pairs = _logfmt(msg)
            if pairs is None:
                return None
            pinned = []
            free = []
            for k, v in pairs:
                if k.lower() in MESSAGE_KEYS and not free:
                    pinned.append(k + ":")
                    free = self._text(v)
                else:
                    pinned.append(_value_token(k, v))
            return tuple(pinned), free
        return None

    def _prefixed_json(self, msg: str) -> tuple[tuple[str, ...], list[str]] | None:
        """``words {json object}``: the words (masked) then the object's structure are pinned, its message is free."""
        i = msg.find(" {")
        if i < 0:
            return None
        res = self._structured(msg[i + 1 :])
        if res is None or res[0][:1] != ("{",) or len(res[0]) <= 2:  # ``{}`` names no key: the line is text
            return None
        pinned, free = res
        return tuple(self._text(msg[:i])) + pinned, free

    def __call__(self, msg: str) -> tuple[tuple[str, ...], list[str]]:
        """Pinned and free tokens of a message (see the module documentation)."""
        hit = self._cache.get(msg)
        if hit is not None:
            return hit
        res = self.uncached(msg)
        if len(self._cache) >= self._LIMIT:
            self._cache.clear()
        self._cache[msg] = res
        return res

    @staticmethod
    def plain_words(msg: str) -> list[str] | None:
        """The words of a plain-text message before masking (quoted and angle-bracketed spans collapsed), or ``None``.

        ``None`` for a message that may be structured (JSON object, logfmt) or
        is blank: :meth:`uncached` gives its tokens.  For any other message,
        :meth:`uncached` gives ``()`` and these words masked, one for one.
        """
        msg_s = msg.strip()
        if msg_s and msg_s[-1] != "}" and "=" not in msg_s:  # plain text: no JSON object, no logfmt pair
            if '"' in msg_s:  # :meth:`_text`, inlined on this path taken by most lines
                msg_s = _collapse_quotes(msg_s)
            if "<" in msg_s:
                msg_s = _collapse_angles(msg_s)
            if "  " in msg_s:
                msg_s = _empty_fields(msg_s)
            return msg_s.split()
        return None

    def uncached(self, msg: str) -> tuple[tuple[str, ...], list[str]]:
        """:meth:`__call__` without its cache (for a caller that remembers messages itself)."""
        raw = self.plain_words(msg)
        if raw is not None:
            toks = self.mask(raw)
            return (), toks if toks else [EMPTY_TOKEN]
        msg_s = msg.strip()
        res = self._structured(msg_s) if msg_s else None
        if res is None:
            toks = self._text(msg_s)
            res = ((), toks if toks else [EMPTY_TOKEN])
        elif not res[1] and not res[0]:
            res = ((), [EMPTY_TOKEN])
        return res

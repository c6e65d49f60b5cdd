"""Event-log lines reduced to templates.

A *template* is a log line with its variable fields replaced by placeholders,
so that lines written by the same statement map to the same symbol.  The
masks are applied in this order (earlier masks protect their text from later
ones):

==============  ===========================================================
placeholder     what it replaces
==============  ===========================================================
``<str>``       double-quoted strings; single-quoted strings that stand
                alone (not an apostrophe inside a word)
``<url>``       ``scheme://...`` up to the next space
``<time>``      ISO 8601 date-times and dates (also ``2005/01/12``); common-log dates
                ``10/Oct/2000:13:55:36 -0700``; syslog / ctime stamps
                ``[Sat] Jun 01 02:17:42 [2013]``; ``11-Aug-2013 03:36:11.372``;
                bare ``HH:MM:SS[.fff]``;
                epoch-like 10- or 13-digit numbers starting with 1
``<uuid>``      8-4-4-4-12 hexadecimal UUIDs
``<email>``     ``user@host`` (also ``user@host.domain``)
``<mac>``       ``aa:bb:cc:dd:ee:ff`` hardware addresses
``<ip>``        IPv4 addresses with an optional ``:port``; IPv6 addresses
                (with ``::`` or all eight groups), optionally in brackets
                with a port
``<hex>``       ``0x...`` numbers, and runs of 8 or more hex digits that
                mix digits and letters
``<id>``        alphanumeric runs of 10 or more characters with at least
                one letter and three digits (queue and session ids)
``<path>``      ``/a/b/c`` file paths (a slash not glued to a word)
``<num>``       integers, decimals and dotted numbers (``5.7.1``), with a
                sign, not glued to a preceding letter (``ssh2`` stays)
==============  ===========================================================

Finally runs of spaces and tabs collapse to one space and the line is
stripped.  Masking is heuristic: it does not parse any particular log format,
and two different events can share a template.  Drift reports built on
templates are no security guarantee.
"""

from __future__ import annotations

import re

__all__ = ["PLACEHOLDERS", "has_timestamp", "line_template", "line_templates"]

PLACEHOLDERS: tuple[str, ...] = (
    "<str>",
    "<url>",
    "<time>",
    "<uuid>",
    "<email>",
    "<mac>",
    "<ip>",
    "<hex>",
    "<id>",
    "<path>",
    "<num>",
)

_MONTH = r"(?:Jan|Feb|Mar|Apr|May|Jun|Jul|Aug|Sep|Oct|Nov|Dec)"
_DAY = r"(?:Mon|Tue|Wed|Thu|Fri|Sat|Sun)"

_ISO = (
    r"(?<![\w.])\d{4}([-/])\d{2}\1\d{2}"
    r"(?:[T ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?)?"
    r"(?:[^\S\n]?(?:Z|[+-]\d{2}:?\d{2})(?![\w]))?"
)
_CLF = r"\d{1,2}/" + _MONTH + r"/\d{4}:\d{2}:\d{2}:\d{2}(?:[^\S\n][+-]\d{4})?"
_SYSLOG = (
    r"(?:" + _DAY + r",?[^\S\n]+)?" + _MONTH + r"[^\S\n]+\d{1,2},?[^\S\n]+\d{2}:\d{2}:\d{2}(?:[.,]\d+)?"
    r"(?:[^\S\n]+\d{4}(?!\d))?"
)
_DMY = r"(?<![\w.])\d{1,2}[-/ ]" + _MONTH + r"[-/ ]\d{4}(?:[ T:]\d{2}:\d{2}:\d{2}(?:[.,]\d+)?)?"
_CLOCK = r"(?<![\w:.])\d{1,2}:\d{2}:\d{2}(?:[.,]\d+)?(?![\w:])"
_EPOCH = r"(?<![\w.])1\d{9}(?:\d{3})?(?:\.\d+)?(?![\w.])"

_H4 = r"[0-9A-Fa-f]{1,4}"
_IPV6_CORE = (
    r"(?:"
    r"(?:" + _H4 + r":){7}" + _H4 + r"|"  # all eight groups
    r"(?:" + _H4 + r":){0,6}(?:" + _H4 + r")?::(?:" + _H4 + r":){0,6}(?:\d{1,3}(?:\.\d{1,3}){3}|" + _H4 + r")?"
    r")"
)
_IPV6 = r"(?<![\w:.])" + _IPV6_CORE + r"(?![\w:]|\.\d)"

_RULES: tuple[tuple[re.Pattern[str], str], ...] = tuple(
    (re.compile(p), r)
    for p, r in (
        (r'"(?:[^"\\\n]|\\.)*"', "<str>"),
        (r"(?<![\w'])'[^'\n]*'(?![\w'])", "<str>"),
        (r"\b[A-Za-z][A-Za-z0-9+.-]*://[^\s\"'<>]*", "<url>"),
        (_CLF, "<time>"),
        (_ISO, "<time>"),
        (_SYSLOG, "<time>"),
        (_DMY, "<time>"),
        (_CLOCK, "<time>"),
        (_EPOCH, "<time>"),
        (r"\b[0-9A-Fa-f]{8}-[0-9A-Fa-f]{4}-[0-9A-Fa-f]{4}-[0-9A-Fa-f]{4}-[0-9A-Fa-f]{12}\b", "<uuid>"),
        (r"[\w.+-]+@[A-Za-z0-9-]+(?:\.[A-Za-z0-9-]+)*", "<email>"),
        (r"(?<![\w:])(?:[0-9A-Fa-f]{2}[:-]){5}[0-9A-Fa-f]{2}(?![\w:])", "<mac>"),
        (r"\[" + _IPV6_CORE + r"\](?::\d{1,5})?", "<ip>"),
        (_IPV6, "<ip>"),
        (r"(?<![\w.])(?:\d{1,3}\.){3}\d{1,3}(?::\d{1,5})?(?!\w|\.\d)", "<ip>"),
        (r"\b0[xX][0-9A-Fa-f]+\b", "<hex>"),
        (r"(?<![\w])(?=[0-9A-Fa-f]*[A-Fa-f])(?=[0-9A-Fa-f]*\d)[0-9A-Fa-f]{8,}(?![\w])", "<hex>"),
        (r"(?<![\w])(?=[A-Za-z0-9]*[A-Za-z])(?=(?:[A-Za-z]*\d){3})[A-Za-z0-9]{10,}(?![\w])", "<id>"),
        (r"(?<![\w>.:/])/(?:[\w.@%+~=,-]+/?)+", "<path>"),
        (r"(?<![\w.<])[-+]?\d+(?:\.\d+)*", "<num>"),
        (r"[ \t]+", " "),
    )
)

_STAMP = re.compile(r"(?:" + _CLF + r"|" + _ISO + r"|" + _SYSLOG + r"|" + _DMY + r"|" + _EPOCH + r"|@[0-9a-f]{24})")


def line_templates(lines: list[str]) -> list[str]:
    """Templates of many lines at once (each mask runs once over the block): the same as :func:`line_template` per line.

    No mask can match a line end (whitespace in the patterns is ``[^\\S\\n]``,
    and the look-arounds treat a line end like the start or end of a line), so
    masking the lines joined by newlines gives each line's own template.
    """
    if not lines:
        return []
    text = "\n".join(ln.rstrip("\r\n") for ln in lines)
    for pattern, repl in _RULES:
        text = pattern.sub(repl, text)
    out = [t.strip() for t in text.split("\n")]
    if len(out) != len(lines):  # a line holding a line end of its own: mask line by line
        return [line_template(ln) for ln in lines]
    return out


def line_template(line: str) -> str:
    """Template of one log line: variable fields replaced by placeholders.

    Parameters
    ----------
    line:
        One line of text, with or without its line end.

    Returns
    -------
    str
        The line with timestamps, addresses, ids, quoted strings, paths and
        numbers masked (see the module documentation for the placeholders and
        their order), whitespace runs collapsed and ends stripped.

    Examples
    --------
    >>> line_template("Feb 25 14:34:10 belka sshd[31602]: Failed password for root from 194.117.26.69 port 50273 ssh2")
    '<time> belka sshd[<num>]: Failed password for root from <ip> port <num> ssh2'
    """
    text = line.rstrip("\r\n")
    for pattern, repl in _RULES:
        text = pattern.sub(repl, text)
    return text.strip()


def has_timestamp(line: str, within: int = 80) -> bool:
    """True when a timestamp of a kind :func:`line_template` masks occurs in the first ``within`` characters."""
    return _STAMP.search(line[:within]) is not None

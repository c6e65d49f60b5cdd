"""Separating a log line's header (time, host, program, level) from its message.

Recognised at the start of a line, in this order (each optional):

1. ``<PRI>`` of syslog; ``<PRI>1 TIME HOST APP PROCID MSGID SD`` of RFC 5424
   (structured data ``[...]`` or ``-`` is dropped with the header; a quoted
   parameter value may hold ``]``).
2. A timestamp: ISO 8601 / RFC 3339 (``2024-01-05 10:11:12``,
   ``2024-01-05T10:11:12.123Z``, ``2024/01/05 10:11:12``), RFC 3164 syslog
   (``Jan  5 10:11:12``, optional weekday and year), ``05-Jan-2024 10:11:12``,
   epoch seconds or milliseconds (``1700000000``), a bare clock
   (``10:11:12.5``), and any of these in square brackets, including the
   common-log date ``[05/Jan/2024:10:11:12 +0000]``.  A common-log date after
   the first three fields (``host ident user [date] ...``) is removed too.
3. ``host program[pid]:`` after a syslog-style time, or ``program[pid]:``, or a
   bracketed ``[program]`` (with or without ``:``) right after a time; then
   Solaris' message tag ``[ID <number> <facility>.<level>]``, dropped.
4. A level word (``INFO``, ``WARN``, ``ERROR``, ``DEBUG``... see ``LEVELS``),
   upper case, or any case inside brackets or followed by ``:``.

Every pattern is anchored and has only bounded repetitions, so matching costs
a bounded number of steps per line whatever its length.  The time itself is
dropped (it never belongs to a template); host, program and level are
returned beside the message.
"""

from __future__ import annotations

import re
from typing import NamedTuple

__all__ = ["LEVELS", "Header", "split_header"]

LEVELS = frozenset(
    "TRACE DEBUG DBG FINE FINER FINEST INFO INFORMATION NOTICE NOTE WARN WARNING ERR ERROR SEVERE CRIT "
    "CRITICAL ALERT EMERG EMERGENCY FATAL PANIC".split()
)

_MON = r"(?:Jan|Feb|Mar|Apr|May|Jun|Jul|Aug|Sep|Oct|Nov|Dec)"
_WDAY = r"(?:Mon|Tue|Wed|Thu|Fri|Sat|Sun)"
_FRAC = r"(?:[.,]\d{1,9})?"
_ZONE = r"(?: ?(?:Z|[+-]\d{2}:?\d{2}|UTC|GMT))?"
_ISO = r"\d{4}[-/]\d{2}[-/]\d{2}(?:[T ]\d{2}:\d{2}(?::\d{2})?" + _FRAC + _ZONE + r")?"
_SYSLOG = r"(?:" + _WDAY + r",? {1,2})?" + _MON + r" {1,2}\d{1,2},? \d{2}:\d{2}:\d{2}" + _FRAC + r"(?: \d{4}(?= |\]|$))?"
_DMY = r"\d{1,2}[-/ ]" + _MON + r"[-/ ]\d{4}(?:[ :T]\d{2}:\d{2}:\d{2}" + _FRAC + r")?(?: [+-]\d{4})?"
_EPOCH = r"1\d{9}(?:\d{3})?(?:\.\d{1,9})?"
_CLOCK = r"\d{2}:\d{2}:\d{2}" + _FRAC
_ANY = r"(?:" + _ISO + "|" + _DMY + "|" + _EPOCH + "|" + _CLOCK + ")"
# a time ends at a space, a ':' + space (``10:11:12: msg``), or the end of the line
_END = r"(?::?(?: +|$))"

_TIME_DIGIT = re.compile(_ANY + _END)
_TIME_WORD = re.compile(r"(" + _SYSLOG + r")" + _END)
_TIME_BRACKET = re.compile(r"\[(?:" + _ANY + "|" + _SYSLOG + r")\]:?(?: +|$)")
_CLF_AFTER = re.compile(r"(\S{1,255} \S{1,255} \S{1,255} )\[" + _DMY + r"\](?: +|$)")
_PRI = re.compile(r"<\d{1,3}>")
_R5424 = re.compile(r"<\d{1,3}>\d{1,2} (\S{1,64}) (\S{1,255}) (\S{1,48}) (\S{1,128}) (\S{1,32}) ")
_HOST_PROG = re.compile(r"([\w.-]{1,255}) ([\w./@-]{1,64})(?:\[\d{1,10}\])?:(?: +|$)")
_PROG_PID = re.compile(r"([\w./@-]{1,64})\[\d{1,10}\]:(?: +|$)")
_PROG = re.compile(r"([\w./@-]{1,64})(?:\[\d{1,10}\])?:(?: +|$)")
_WORD = re.compile(r"\[?([A-Za-z]{3,11})\]?:?(?: +|$)")
_BRACKET_PROG = re.compile(r"\[([\w./@-]{1,64})\]:?(?: +|$)")
_SOLARIS_ID = re.compile(r"\[ID \d{1,10} [\w-]{1,32}\.[\w-]{1,32}\](?: +|$)")
# the most common stamp, ``YYYY-MM-DD HH:MM:SS`` then one space and no zone: where it matches, ``_TIME_DIGIT`` ends
# at the same place (its optional fraction and zone cannot start there, and one space is all ``_END`` takes)
_ISO_PLAIN = re.compile(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}:\d{2} (?![Z+\-UG ])")


class Header(NamedTuple):
    """Fields of a line's header that are kept beside its template (empty string when absent)."""

    host: str
    program: str
    level: str


_EMPTY = Header("", "", "")


_MON_WDAY = frozenset("Jan Feb Mar Apr May Jun Jul Aug Sep Oct Nov Dec Mon Tue Wed Thu Fri Sat Sun".split())


def _level_word(tok: str) -> str:
    """The level named by one token (``\\[?[A-Za-z]{3,11}\\]?:?``), upper case, or ``""``."""
    core = tok[1:] if tok[:1] == "[" else tok
    if core[-1:] == ":":
        core = core[:-1]
    if core[-1:] == "]":
        core = core[:-1]
    up = core.upper()
    if up not in LEVELS or not core.isascii() or not core.isalpha():
        return ""
    if not (core.isupper() or tok[0] == "[" or tok[-1] == ":"):
        return ""
    return up


#: :func:`_level_word` per token seen (the first word after a header repeats from line to line); bounded.
_LEVEL_MEMO: dict[str, str] = {}


def _level(line: str, pos: int) -> tuple[str, int]:
    """A level word at ``pos`` (``\\[?[A-Za-z]{3,11}\\]?:?`` then spaces or the end), with plain string steps."""
    end = line.find(" ", pos)
    # a level word has 3 to 11 letters, with at most ``[``, ``]`` and ``:`` around it: other lengths never match
    if not 3 <= (len(line) if end < 0 else end) - pos <= 14:
        return "", pos
    tok = line[pos:] if end < 0 else line[pos:end]
    up = _LEVEL_MEMO.get(tok)
    if up is None:
        up = _level_word(tok)
        if len(_LEVEL_MEMO) >= 4096:
            _LEVEL_MEMO.clear()
        _LEVEL_MEMO[tok] = up
    if not up:
        return "", pos
    if end < 0:
        return up, len(line)
    n = len(line)
    while end < n and line[end] == " ":
        end += 1
    return up, end


#: :func:`_inert` per token seen (the first word after a stamp repeats from line to line); bounded.
_INERT: dict[str, bool] = {}


def _inert(tok: str) -> bool:
    """True when a first word after a stamp (no space in it) is no level word, ends without ``:``, starts without ``[``."""
    if tok[-1] == ":" or tok[0] == "[":
        return False
    return not (3 <= len(tok) <= 14 and _level_word(tok))


def _clf_candidate(line: str) -> bool:
    """Necessary condition for a common-log date after three fields: ``[`` right after the third single space."""
    s1 = line.find(" ")
    if s1 <= 0:
        return False
    s2 = line.find(" ", s1 + 1)
    if s2 <= s1 + 1:
        return False
    s3 = line.find(" ", s2 + 1)
    return s3 > s2 + 1 and line.startswith("[", s3 + 1)


def _skip_sd(line: str, pos: int) -> int:
    """End of RFC 5424 structured data (``-`` or ``[..][..]``) starting at ``pos``."""
    n = len(line)
    if line.startswith("- ", pos) or (pos == n - 1 and line[pos] == "-"):
        return min(n, pos + 2)
    while pos < n and line[pos] == "[":
        i = pos + 1
        quoted = False
        while i < n:
            c = line[i]
            if c == "\\":
                i += 2
                continue
            if c == '"':
                quoted = not quoted
            elif c == "]" and not quoted:
                break
            i += 1
        pos = i + 1
    while pos < n and line[pos] == " ":
        pos += 1
    return pos


def split_header(line: str) -> tuple[Header, str]:
    """The header fields of a log line and its message (the rest of the line).

    Parameters
    ----------
    line:
        One log line without its line end.

    Returns
    -------
    (Header, str)
        Host, program and level ("" when absent) and the message.  A line
        without a recognised header is returned whole as the message.

    Examples
    --------
    >>> split_header("Jan  5 10:11:12 belka sshd[31602]: Failed password for root")
    (Header(host='belka', program='sshd', level=''), 'Failed password for root')
    >>> split_header("2024-01-05T10:11:12.123Z ERROR disk full")
    (Header(host='', program='', level='ERROR'), 'disk full')
    """
    if not line:
        return _EMPTY, line
    c = line[0]
    if c.isalpha() and line[:3] not in _MON_WDAY and " [" not in line:
        # fast path of a line led by a word that starts no time: the general steps below give a header only when
        # that word is a level word (``_level`` at 0, which looks at the first token alone)
        end = line.find(" ")
        tok = line if end < 0 else line[:end]
        if not 3 <= len(tok) <= 14:
            return _EMPTY, line
        up = _LEVEL_MEMO.get(tok)
        if up == "":
            return _EMPTY, line
    elif c.isdigit():
        # fast path of a plain ISO stamp followed by a first word that names no level, no program (no ':' at its end)
        # and no bracketed field, and by a second word without ':' at its end: the general steps below give no
        # header field and the message after the stamp (any other line takes the general steps)
        m = _ISO_PLAIN.match(line)
        if m is not None:
            pos = m.end()
            e1 = line.find(" ", pos)
            if e1 > pos:
                tok = line[pos:e1]
                inert = _INERT.get(tok)
                if inert is None:
                    inert = _inert(tok)
                    if len(_INERT) >= 4096:
                        _INERT.clear()
                    _INERT[tok] = inert
                if inert:
                    e2 = line.find(" ", e1 + 1)
                    if (line[e2 - 1] != ":") if e2 > e1 + 1 else (e2 >= 0 or len(line) == e1 + 1 or line[-1] != ":"):
                        return _EMPTY, line[pos:]
    pos = 0
    host = program = ""
    syslog_like = False
    if c == "<":
        m = _R5424.match(line)
        if m is not None:
            host = "" if m.group(2) == "-" else m.group(2)
            program = "" if m.group(3) == "-" else m.group(3)
            pos = _skip_sd(line, m.end())
            lv, pos = _level(line, pos)
            return Header(host, program, lv), line[pos:]
        m = _PRI.match(line)
        if m is None:
            return _EMPTY, line
        pos = m.end()
        c = line[pos : pos + 1]
    stamped = False
    if c.isdigit():
        m = _TIME_DIGIT.match(line, pos)
        if m is not None:
            pos, stamped = m.end(), True
            syslog_like = True
    elif c == "[":
        m = _TIME_BRACKET.match(line, pos)
        if m is not None:
            pos, stamped = m.end(), True
    elif c.isalpha() and line[pos : pos + 3] in _MON_WDAY:
        m = _TIME_WORD.match(line, pos)
        if m is not None:
            pos, stamped, syslog_like = m.end(), True, True
    if not stamped and pos == 0 and " [" in line and _clf_candidate(line):
        m = _CLF_AFTER.match(line)
        if m is not None:
            return _EMPTY, m.group(1) + line[m.end():]
    lv, pos = _level(line, pos)
    if stamped or pos:
        at = pos
        # cheap tests before the regular expressions: ``host prog:`` ends its second token with ':', ``prog:`` its first
        e1 = line.find(" ", pos)
        colon1 = line[e1 - 1] == ":" if e1 > pos else (e1 < 0 and len(line) > pos and line[-1] == ":")
        if syslog_like and not lv and e1 > pos:
            e2 = line.find(" ", e1 + 1)
            if (line[e2 - 1] == ":") if e2 > e1 + 1 else (e2 < 0 and len(line) > e1 + 1 and line[-1] == ":"):
                m = _HOST_PROG.match(line, pos)
                if m is not None:
                    host, program, pos = m.group(1), m.group(2), m.end()
        if not program and colon1:
            m = (_PROG if syslog_like and not lv else _PROG_PID).match(line, pos)
            if m is not None:
                program, pos = m.group(1), m.end()
        if not program and stamped and not lv and line.startswith("[", pos):
            m = _BRACKET_PROG.match(line, pos)
            if m is not None and m.group(1).upper() not in LEVELS:
                program, pos = m.group(1), m.end()
        if program and line.startswith("[ID ", pos):
            m = _SOLARIS_ID.match(line, pos)
            if m is not None:
                pos = m.end()
        if not lv and pos != at:
            lv, pos = _level(line, pos)
    if not pos:
        return _EMPTY, line
    if not (host or program or lv):
        return _EMPTY, line[pos:]
    return Header(host, program, lv), line[pos:]

"""Event-log lines reduced to templates, one line at a time.

A *template* is a log line with its header (time, host, program, level)
set aside and its variable tokens replaced by the wildcard ``<*>``.  The
templates of a whole log are *mined* (:mod:`fractalseq.sources.miner`):
positions that vary between lines of the same kind become ``<*>`` too.  This
module gives the template of a single line on its own, before any grouping:
the header separated (:mod:`fractalseq.sources.headers`), then the tokens
masked in linear time (:mod:`fractalseq.sources.masks`; JSON and logfmt
lines by :mod:`fractalseq.sources.structured`).

Masking is heuristic: it does not parse any particular log format, and two
different events can share a template.  Drift reports built on templates are
no security guarantee.
"""

from __future__ import annotations

import re

from fractalseq.sources.headers import split_header
from fractalseq.sources.structured import Tokenizer

__all__ = ["WILDCARD", "has_timestamp", "line_template", "line_templates"]

WILDCARD = "<*>"

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

_STAMP = re.compile(r"(?:" + _CLF + r"|" + _ISO + r"|" + _SYSLOG + r"|" + _DMY + r"|" + _EPOCH + r"|@[0-9a-f]{24})")

_TOKENIZER = Tokenizer()


def line_template(line: str) -> str:
    """Template of one log line on its own: header set aside, variable tokens masked.

    Parameters
    ----------
    line:
        One line of text, with or without its line end.

    Returns
    -------
    str
        The masked tokens joined by single spaces (see the module documentation).

    Examples
    --------
    >>> line_template("Feb 25 14:34:10 belka sshd[31602]: Failed password for root from 194.117.26.69 port 50273 ssh2")
    'Failed password for root from <*> port <*> ssh2'
    """
    _, msg = split_header(line.rstrip("\r\n"))
    pinned, free = _TOKENIZER(msg)
    return " ".join(pinned + tuple(free)) if pinned else " ".join(free)


def line_templates(lines: list[str]) -> list[str]:
    """:func:`line_template` of every line."""
    return [line_template(ln) for ln in lines]


def has_timestamp(line: str, within: int = 80) -> bool:
    """True when a timestamp of a common kind occurs in the first ``within`` characters (used to detect logs)."""
    return _STAMP.search(line[:within]) is not None

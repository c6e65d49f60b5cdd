"""Line-oriented event logs: each line becomes the symbol of its template.

Every non-blank line is reduced by :func:`fractalseq.sources.templates.line_template`;
each distinct template is one symbol.  The alphabet (named ``templates``) is
learned in a first pass: templates by decreasing count, ties by template text.
Blank lines are skipped (counted in a note).  The log must be UTF-8: a line
that is not raises :class:`InputError` naming the line and the fix.

The template table goes into ``report.extra["templates"]``: one entry per
symbol in code order with the template text, its count, the 1-based line
number where it first occurs and that first raw line as an example.

Masking runs one regular-expression pass per line and per mask (C code, no
per-character Python); a line is one symbol, so this is the per-symbol cost.
Drift reports on logs are no security guarantee.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError
from fractalseq.sources.rawio import Origin, line_blocks
from fractalseq.sources.templates import line_template
from fractalseq.stream import Chunk, ReadReport, Record

_EXAMPLE_CHARS = 500


@dataclass
class TemplateTable:
    """The templates of a log, in code order (learned from it, or fixed in advance, e.g. by a model).

    ``unlisted`` holds, for a fixed table, the templates of the log that the
    table does not list (same fields as ``entries``), by decreasing count.
    """

    alphabet: Alphabet
    entries: list[dict]
    lines: int
    blank: int
    fixed: bool = False
    unlisted: list[dict] | None = None

    def to_list(self) -> list[dict]:
        """JSON-ready copy of the entries (template, count, first_line, example)."""
        return [dict(e) for e in self.entries]


def _lines(origin: Origin, block_size: int) -> Iterator[tuple[int, list[str]]]:
    """Blocks of decoded lines: ``(first_line_number, lines)`` with CR and LF removed."""
    for first_line, block in line_blocks(origin, block_size):
        try:
            text = block.decode("utf-8")
        except UnicodeDecodeError as exc:
            line = first_line + block[: exc.start].count(b"\n")
            raise InputError(
                f"{origin.name} line {line} is not valid UTF-8; convert the log to UTF-8 "
                "(for example iconv -f latin1 -t utf-8) and read it again."
            ) from None
        lines = text.split("\n")
        if lines[-1] == "":
            lines.pop()
        yield first_line, [ln[:-1] if ln.endswith("\r") else ln for ln in lines]


def _tally(origin: Origin, block_size: int) -> tuple[dict[str, int], dict[str, tuple[int, str]], int, int]:
    """Count the templates of a log and remember where each first occurs."""
    counts: dict[str, int] = {}
    first: dict[str, tuple[int, str]] = {}
    blank = 0
    total = 0
    for first_line, lines in _lines(origin, block_size):
        for j, line in enumerate(lines):
            total += 1
            if not line.strip():
                blank += 1
                continue
            t = line_template(line)
            if t in counts:
                counts[t] += 1
            else:
                counts[t] = 1
                first[t] = (first_line + j, line[:_EXAMPLE_CHARS])
    if not counts:
        raise InputError(f"{origin.name} holds no log lines (only blank lines); give a log with events.")
    return counts, first, total, blank


def _entry(t: str, counts: dict[str, int], first: dict[str, tuple[int, str]]) -> dict:
    f = first.get(t)
    return {"template": t, "count": counts.get(t, 0), "first_line": f[0] if f else None, "example": f[1] if f else None}


def learn(origin: Origin, block_size: int) -> TemplateTable:
    """First pass: the templates of the log, by decreasing count (ties by text), as its alphabet."""
    counts, first, total, blank = _tally(origin, block_size)
    order = sorted(counts, key=lambda t: (-counts[t], t))
    return TemplateTable(Alphabet("templates", tuple(order)), [_entry(t, counts, first) for t in order], total, blank)


def fixed(origin: Origin, alphabet: Alphabet, block_size: int) -> TemplateTable:
    """First pass against a template alphabet given in advance (e.g. a model's): counts per listed template.

    Lines whose template the alphabet does not list are read under the
    reader's policy (break, skip or error) and named in ``unlisted``.
    """
    counts, first, total, blank = _tally(origin, block_size)
    listed = set(alphabet.symbols)
    others = sorted((t for t in counts if t not in listed), key=lambda t: (-counts[t], t))
    return TemplateTable(
        alphabet, [_entry(t, counts, first) for t in alphabet.symbols], total, blank, True,
        [_entry(t, counts, first) for t in others],
    )


def chunks(origin: Origin, table: TemplateTable, block_size: int, report: ReadReport, policy: str = "break") -> Iterator[Chunk]:
    """Second pass: the template code of every non-blank line (``policy`` applies to unlisted templates of a fixed table)."""
    if table.fixed:
        yield from _fixed_chunks(origin, table, block_size, report, policy)
        return
    index = {t: i for i, t in enumerate(table.alphabet.symbols)}
    dtype = table.alphabet.code_dtype
    total = 0
    for _, lines in _lines(origin, block_size):
        try:
            codes = np.fromiter((index[line_template(ln)] for ln in lines if ln.strip()), dtype=dtype)
        except KeyError:
            raise InputError(f"{origin.name} changed while it was read; read it again.") from None
        if codes.size:
            yield Chunk(codes, np.zeros(1 if total == 0 else 0, dtype=np.int64))
        total += codes.size
    if total != sum(e["count"] for e in table.entries):
        raise InputError(f"{origin.name} changed while it was read; read it again.")
    report.symbols = total
    report.segments = 1 if total else 0
    report.records = [Record(origin.name, 0, total)]
    report.extra["templates"] = table.to_list()
    report.extra["lines"] = table.lines
    if table.blank:
        report.notes.append(f"{table.blank} blank lines skipped")


def _fixed_chunks(origin: Origin, table: TemplateTable, block_size: int, report: ReadReport, policy: str) -> Iterator[Chunk]:
    """Codes against a fixed table; unlisted templates are dropped (with a segment break) or refused by the policy."""
    from fractalseq.sources.text import item_scanner

    scan = item_scanner(table.alphabet, policy)
    total = segments = 0
    dropped: dict[str, int] = {}
    for first_line, lines in _lines(origin, block_size):
        numbers = [first_line + j for j, ln in enumerate(lines) if ln.strip()]
        templates = [line_template(ln) for ln in lines if ln.strip()]
        codes, starts, drops, err = scan(templates)
        if err >= 0:
            raise InputError(
                f"{origin.name} line {numbers[err]} has a template the {table.alphabet.name} table does not list "
                f"({templates[err][:80]!r}), under the error policy; use the break or skip policy to leave such lines out."
            )
        for t, n in drops.items():
            dropped[t] = dropped.get(t, 0) + n
        if codes.size:
            yield Chunk(codes, starts)
        total += codes.size
        segments += starts.size
    report.symbols = total
    report.segments = segments
    report.records = [Record(origin.name, 0, total)]
    for t, n in dropped.items():
        report.drop(f"template not in the table: {t[:60]}", n)
    report.extra["templates"] = table.to_list()
    report.extra["unlisted_templates"] = [dict(e) for e in (table.unlisted or [])]
    report.extra["lines"] = table.lines
    if table.blank:
        report.notes.append(f"{table.blank} blank lines skipped")
    if table.unlisted:
        n = sum(e["count"] for e in table.unlisted)
        report.notes.append(
            f"{n} lines of {len(table.unlisted)} templates not in the given table were "
            + ("left out, each ending a segment" if policy == "break" else "left out")
        )

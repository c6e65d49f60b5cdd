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
    """The learned templates of a log, in code order."""

    alphabet: Alphabet
    entries: list[dict]
    lines: int
    blank: int

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


def learn(origin: Origin, block_size: int) -> TemplateTable:
    """First pass: count templates, remember where each first occurs."""
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
    order = sorted(counts, key=lambda t: (-counts[t], t))
    entries = [
        {"template": t, "count": counts[t], "first_line": first[t][0], "example": first[t][1]} for t in order
    ]
    return TemplateTable(Alphabet("templates", tuple(order)), entries, total, blank)


def chunks(origin: Origin, table: TemplateTable, block_size: int, report: ReadReport) -> Iterator[Chunk]:
    """Second pass: the template code of every non-blank line."""
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

"""Line-oriented event logs: each line becomes the symbol of its template.

Every non-blank line is reduced by :func:`fractalseq.sources.templates.line_template`
(block by block, :func:`~fractalseq.sources.templates.line_templates`);
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
from fractalseq.sources.templates import line_templates
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
    #: the first pass's result per non-blank line, kept so that later passes need no masking:
    #: ``seen[ids[i]]`` is the template of the i-th non-blank line, ``numbers[i]`` its line number
    seen: list[str] | None = None
    ids: np.ndarray | None = None
    numbers: np.ndarray | None = None

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


#: Logs with more non-blank lines than this are masked again on every pass instead of keeping
#: the first pass's template per line (12 bytes a line).
_KEEP_LINES = 1 << 27


@dataclass
class _Tally:
    counts: dict[str, int]
    first: dict[str, tuple[int, str]]
    total: int
    blank: int
    seen: list[str]
    ids: np.ndarray | None
    numbers: np.ndarray | None


def _tally(origin: Origin, block_size: int) -> _Tally:
    """Count the templates of a log, remember where each first occurs and (up to a size) each line's template."""
    counts: dict[str, int] = {}
    first: dict[str, tuple[int, str]] = {}
    seen_id: dict[str, int] = {}
    ids: list[np.ndarray] | None = []
    numbers: list[np.ndarray] | None = []
    kept_lines = 0
    blank = 0
    total = 0
    for first_line, lines in _lines(origin, block_size):
        kept = [j for j, line in enumerate(lines) if line.strip()]
        total += len(lines)
        blank += len(lines) - len(kept)
        block_ids = np.empty(len(kept), dtype=np.int32)
        for k, (j, t) in enumerate(zip(kept, line_templates([lines[j] for j in kept]))):
            if t in counts:
                counts[t] += 1
            else:
                counts[t] = 1
                first[t] = (first_line + j, lines[j][:_EXAMPLE_CHARS])
                seen_id[t] = len(seen_id)
            block_ids[k] = seen_id[t]
        kept_lines += len(kept)
        if ids is not None and numbers is not None:
            if kept_lines > _KEEP_LINES:
                ids = numbers = None
            else:
                ids.append(block_ids)
                numbers.append(first_line + np.asarray(kept, dtype=np.int64))
    if not counts:
        raise InputError(f"{origin.name} holds no log lines (only blank lines); give a log with events.")
    return _Tally(
        counts, first, total, blank, list(seen_id),
        np.concatenate(ids) if ids is not None else None, np.concatenate(numbers) if numbers is not None else None,
    )


def _entry(t: str, counts: dict[str, int], first: dict[str, tuple[int, str]]) -> dict:
    f = first.get(t)
    return {"template": t, "count": counts.get(t, 0), "first_line": f[0] if f else None, "example": f[1] if f else None}


def learn(origin: Origin, block_size: int) -> TemplateTable:
    """First pass: the templates of the log, by decreasing count (ties by text), as its alphabet."""
    ty = _tally(origin, block_size)
    order = sorted(ty.counts, key=lambda t: (-ty.counts[t], t))
    return TemplateTable(
        Alphabet("templates", tuple(order)), [_entry(t, ty.counts, ty.first) for t in order], ty.total, ty.blank,
        seen=ty.seen, ids=ty.ids, numbers=ty.numbers,
    )


def fixed(origin: Origin, alphabet: Alphabet, block_size: int) -> TemplateTable:
    """First pass against a template alphabet given in advance (e.g. a model's): counts per listed template.

    Lines whose template the alphabet does not list are read under the
    reader's policy (break, skip or error) and named in ``unlisted``.
    """
    ty = _tally(origin, block_size)
    listed = set(alphabet.symbols)
    others = sorted((t for t in ty.counts if t not in listed), key=lambda t: (-ty.counts[t], t))
    return TemplateTable(
        alphabet, [_entry(t, ty.counts, ty.first) for t in alphabet.symbols], ty.total, ty.blank, True,
        [_entry(t, ty.counts, ty.first) for t in others], ty.seen, ty.ids, ty.numbers,
    )


def _template_blocks(origin: Origin, table: TemplateTable, block_size: int) -> Iterator[tuple[np.ndarray, list[str]]]:
    """``(line numbers, templates)`` of the non-blank lines, block by block: from the first pass when it kept them."""
    if table.ids is not None and table.seen is not None and table.numbers is not None:
        step = max(1, block_size // 64)  # about a block of lines
        for a in range(0, table.ids.size, step):
            yield table.numbers[a : a + step], [table.seen[i] for i in table.ids[a : a + step]]
        return
    for first_line, lines in _lines(origin, block_size):
        kept = [j for j, ln in enumerate(lines) if ln.strip()]
        yield first_line + np.asarray(kept, dtype=np.int64), line_templates([lines[j] for j in kept])


def chunks(origin: Origin, table: TemplateTable, block_size: int, report: ReadReport, policy: str = "break") -> Iterator[Chunk]:
    """Second pass: the template code of every non-blank line (``policy`` applies to unlisted templates of a fixed table)."""
    if table.fixed:
        yield from _fixed_chunks(origin, table, block_size, report, policy)
        return
    index = {t: i for i, t in enumerate(table.alphabet.symbols)}
    dtype = table.alphabet.code_dtype
    total = 0
    for _, templates in _template_blocks(origin, table, block_size):
        try:
            codes = np.fromiter((index[t] for t in templates), dtype=dtype, count=len(templates))
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
    for numbers, templates in _template_blocks(origin, table, block_size):
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

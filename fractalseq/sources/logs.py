"""Line-oriented event logs: each line becomes the symbol of its template.

Templates are mined from the log itself (:mod:`fractalseq.sources.miner`:
header separated, variable tokens masked, lines grouped by similarity, a
free-text tail after a constant head folded into ``head <...>``, a merge
pass); each template is one symbol.  The alphabet (named
``templates``) is learned in a first pass: templates by decreasing count,
ties by template text.  Blank lines are skipped (counted in a note).

Reading is forgiving: a line that is not UTF-8 is decoded as Latin-1
(counted), runs of NUL bytes and other binary junk (control bytes other than
tab, line feed, vertical tab, form feed, carriage return and escape) are
skipped (counted), a line whose control bytes make up more than 2 % of it
once its NULs are set aside is binary junk and left out whole (its bytes
counted with the junk, the number of such lines and the first one's line
number in the note; it gives no symbol), and lines longer than
``LINE_LIMIT`` characters are cut (counted).  The counts are in
``report.extra`` (``lines_cut``, ``junk_bytes_skipped``, ``latin1_lines``)
and in a note when not zero.  Under the ``error`` policy a log holding junk
is refused (:func:`junk_refusal`, raised by :func:`fractalseq.sources.open_source`).

The template table goes into ``report.extra["templates"]``: one entry per
symbol in code order with the template text, its count, the 1-based line
number where it first occurs, that first raw line as an example, and the
header fields seen with it (``fields``: host, program, level -> counts).

A template table given in advance (a model's) is matched first: a line takes
the most specific listed template it matches; the other lines are mined and
reported as unlisted.  Drift reports on logs are no security guarantee.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import repeat
from typing import Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError
from fractalseq.sources.miner import TemplateIndex, TemplateMiner
from fractalseq.sources.rawio import Origin, line_blocks
from fractalseq.sources.sniff import junk_line_mask, line_junk
from fractalseq.stream import Chunk, Positions, ReadReport, Record

_EXAMPLE_CHARS = 500
#: lines longer than this many characters are cut
LINE_LIMIT = 1 << 16
# control bytes skipped as binary junk (tab, LF, VT, FF, CR and ESC are kept)
_JUNK = bytes(b for b in range(32) if b not in b"\t\n\x0b\x0c\r\x1b") + b"\x7f"


@dataclass
class ReadStats:
    """What forgiving reading changed: lines cut, junk bytes skipped, lines decoded as Latin-1."""

    lines_cut: int = 0
    junk_bytes_skipped: int = 0
    latin1_lines: int = 0
    #: lines left out whole as binary junk (no symbol), and the first one's line number (0: none)
    junk_lines: int = 0
    first_junk_line: int = 0

    def fill(self, report: ReadReport) -> None:
        report.extra["lines_cut"] = self.lines_cut
        report.extra["junk_bytes_skipped"] = self.junk_bytes_skipped
        report.extra["latin1_lines"] = self.latin1_lines
        if self.lines_cut:
            report.notes.append(f"{self.lines_cut} lines longer than {LINE_LIMIT} characters cut")
        if self.junk_bytes_skipped:
            report.notes.append(junk_note(self))
        if self.latin1_lines:
            report.notes.append(f"{self.latin1_lines} lines that are not UTF-8 read as Latin-1")


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
    #: the first pass's result per non-blank line, kept so that later passes need no mining:
    #: ``seen[ids[i]]`` is the template of the i-th non-blank line, ``numbers[i]`` its line number
    seen: list[str] | None = None
    ids: np.ndarray | None = None
    numbers: np.ndarray | None = None
    stats: ReadStats = field(default_factory=ReadStats)
    #: template text of every raw id of the first pass (listed templates, then mined clusters)
    texts: list[str] | None = None

    def to_list(self) -> list[dict]:
        """JSON-ready copy of the entries (template, count, first_line, example, fields)."""
        return [dict(e) for e in self.entries]


def junk_note(stats: ReadStats) -> str:
    """The read note on skipped junk: bytes, and lines left out whole with the first one's number."""
    note = f"{stats.junk_bytes_skipped} NUL or binary junk bytes skipped"
    if stats.junk_lines:
        note += (f", {stats.junk_lines} line{'s' if stats.junk_lines != 1 else ''} of binary junk left out "
                 f"(the first at line {stats.first_junk_line})")
    return note


def junk_refusal(name: str, stats: ReadStats) -> str:
    """The one-sentence refusal of a log holding junk under the ``error`` policy."""
    where = f" (the first junk line is line {stats.first_junk_line})" if stats.first_junk_line else ""
    return (f"{name} holds {stats.junk_bytes_skipped} NUL or binary junk bytes{where}, under the error policy; "
            "use the skip or break policy to read the log without them.")


def _strip_junk(block: bytes, stats: ReadStats, first_line: int) -> bytes:
    """The block with NUL and control bytes removed; a line that is mostly junk is emptied (counted)."""
    clean = block.translate(None, _JUNK)
    if len(clean) == len(block):
        return block
    length, nul, control = line_junk(block)
    bad = junk_line_mask(length, nul, control)
    if bad.any():
        parts = block.split(b"\n")
        for i in np.flatnonzero(bad).tolist():
            parts[i] = b""
        stats.junk_lines += int(np.count_nonzero(bad))
        if not stats.first_junk_line:
            stats.first_junk_line = first_line + int(np.flatnonzero(bad)[0])
        clean = b"\n".join(parts).translate(None, _JUNK)
    stats.junk_bytes_skipped += len(block) - len(clean)
    return clean


def _decode(block: bytes, stats: ReadStats, first_line: int = 1) -> list[str]:
    """Lines of a block: junk bytes and junk lines removed, UTF-8 or (per line) Latin-1, CR removed, long lines cut."""
    clean = _strip_junk(block, stats, first_line)
    try:
        lines = clean.decode("utf-8").split("\n")
    except UnicodeDecodeError:
        lines = []
        for raw in clean.split(b"\n"):
            try:
                lines.append(raw.decode("utf-8"))
            except UnicodeDecodeError:
                lines.append(raw.decode("latin-1"))
                stats.latin1_lines += 1
    if lines[-1] == "":
        lines.pop()
    # one CR before each LF (CR LF line ends) and at the very end is dropped: a C-level map over the lines
    # (replacing CR LF in a text holding characters beyond Latin-1 costs more than the split itself)
    out = list(map(str.removesuffix, lines, repeat("\r"))) if b"\r" in clean else lines
    if len(clean) > LINE_LIMIT and max(map(len, out), default=0) > LINE_LIMIT:
        for i, ln in enumerate(out):
            if len(ln) > LINE_LIMIT:
                out[i] = ln[:LINE_LIMIT]
                stats.lines_cut += 1
    return out


def _lines(origin: Origin, block_size: int, stats: ReadStats) -> Iterator[tuple[int, list[str]]]:
    """Blocks of decoded lines: ``(first_line_number, lines)`` with CR and LF removed."""
    for first_line, block in line_blocks(origin, block_size):
        yield first_line, _decode(block, stats, first_line)


#: Logs with more non-blank lines than this are mined again on every pass instead of keeping
#: the first pass's template per line (12 bytes a line).
_KEEP_LINES = 1 << 27


def _assign(origin: Origin, block_size: int, listed: tuple[str, ...] | None, stats: ReadStats):
    """Generator: ``(line numbers, raw ids, lines)`` per block; returns the miner at the end.

    A raw id below ``len(listed)`` is a listed template; others are ``len(listed) + cluster``.
    """
    miner = TemplateMiner()
    index = TemplateIndex(listed) if listed else None
    base = len(listed) if listed else 0
    add_many = miner.add_many
    for first_line, lines in _lines(origin, block_size, stats):
        if "" in lines or any(map(str.isspace, lines)):
            kept = [j for j, line in enumerate(lines) if line and not line.isspace()]
            klines = [lines[j] for j in kept]
        else:
            kept, klines = None, lines
        if index is None:
            raw = add_many(klines)
        else:
            raw = []
            for ln in klines:
                m = index.match(ln)
                raw.append(m if m >= 0 else base + add_many((ln,))[0])
        where = np.arange(len(lines), dtype=np.int64) if kept is None else np.asarray(kept, dtype=np.int64)
        yield first_line + where, raw, klines, len(lines)
    miner.finish()
    return miner


@dataclass
class _Tally:
    counts: dict[str, int]
    first: dict[str, tuple[int, str]]
    fields: dict[str, dict]
    total: int
    blank: int
    seen: list[str]
    ids: np.ndarray | None
    numbers: np.ndarray | None
    texts: list[str]  # raw id -> template text
    stats: ReadStats


def _tally(origin: Origin, block_size: int, listed: tuple[str, ...] | None = None) -> _Tally:
    """Mine (and match) the templates of a log; count them, note where each first occurs and each line's template."""
    stats = ReadStats()
    first_raw: dict[int, tuple[int, str]] = {}
    raw_counts: dict[int, int] = {}
    ids: list[np.ndarray] | None = []
    numbers: list[np.ndarray] | None = []
    kept_lines = blank = total = 0
    gen = _assign(origin, block_size, listed, stats)
    while True:
        try:
            nums, raw, klines, n_lines = next(gen)
        except StopIteration as stop:
            miner = stop.value
            break
        total += n_lines
        blank += n_lines - len(raw)
        arr = np.asarray(raw, dtype=np.int64)
        if arr.size:  # count per raw id, and where each first occurs in the block, in one array pass
            made, first, n = np.unique(arr, return_index=True, return_counts=True)
            for r, k, c in zip(made.tolist(), first.tolist(), n.tolist()):
                old = raw_counts.get(r)
                if old is None:
                    raw_counts[r] = c
                    first_raw[r] = (int(nums[k]), klines[k][:_EXAMPLE_CHARS])
                else:
                    raw_counts[r] = old + c
        kept_lines += len(raw)
        if ids is not None and numbers is not None:
            if kept_lines > _KEEP_LINES:
                ids = numbers = None
            else:
                ids.append(arr)
                numbers.append(nums)
    blank -= stats.junk_lines  # left out as junk, noted as such
    if not raw_counts:
        raise InputError(f"{origin.name} holds no log lines (only blank lines); give a log with events.")
    mined = miner._templates or []
    texts = list(listed or ()) + [mined[f].text for f in miner.final_ids]
    counts: dict[str, int] = {}
    first: dict[str, tuple[int, str]] = {}
    for r in sorted(raw_counts, key=lambda r: first_raw[r][0]):
        t = texts[r]
        counts[t] = counts.get(t, 0) + raw_counts[r]
        if t not in first:
            first[t] = first_raw[r]
    fields = {mt.text: mt.fields for mt in mined}
    seen = list(dict.fromkeys(texts))
    pos = {t: i for i, t in enumerate(seen)}
    remap = np.asarray([pos[t] for t in texts], dtype=np.int32)
    return _Tally(
        counts, first, fields, total, blank, seen,
        remap[np.concatenate(ids)] if ids is not None else None,
        np.concatenate(numbers) if numbers is not None else None, texts, stats,
    )


def _entry(t: str, ty: _Tally) -> dict:
    f = ty.first.get(t)
    return {
        "template": t, "count": ty.counts.get(t, 0), "first_line": f[0] if f else None, "example": f[1] if f else None,
        "fields": {k: dict(sorted(v.items(), key=lambda kv: (-kv[1], kv[0]))) for k, v in sorted(ty.fields.get(t, {}).items())},
    }


def learn(origin: Origin, block_size: int) -> TemplateTable:
    """First pass: the templates of the log, by decreasing count (ties by text), as its alphabet."""
    ty = _tally(origin, block_size)
    order = sorted(ty.counts, key=lambda t: (-ty.counts[t], t))
    return TemplateTable(
        Alphabet("templates", tuple(order)), [_entry(t, ty) for t in order], ty.total, ty.blank,
        seen=ty.seen, ids=ty.ids, numbers=ty.numbers, stats=ty.stats, texts=ty.texts,
    )


def fixed(origin: Origin, alphabet: Alphabet, block_size: int) -> TemplateTable:
    """First pass against a template alphabet given in advance (e.g. a model's): counts per listed template.

    Lines that match no listed template are mined; they are read under the
    reader's policy (break, skip or error) and their templates named in ``unlisted``.
    """
    ty = _tally(origin, block_size, tuple(alphabet.symbols))
    listed = set(alphabet.symbols)
    others = sorted((t for t in ty.counts if t not in listed), key=lambda t: (-ty.counts[t], t))
    return TemplateTable(
        alphabet, [_entry(t, ty) for t in alphabet.symbols], ty.total, ty.blank, True,
        [_entry(t, ty) for t in others], ty.seen, ty.ids, ty.numbers, ty.stats, ty.texts,
    )


def _template_blocks(origin: Origin, table: TemplateTable, block_size: int) -> Iterator[tuple[np.ndarray, list[str]]]:
    """``(line numbers, templates)`` of the non-blank lines, block by block: from the first pass when it kept them.

    Otherwise the log is mined again: the miner is deterministic, so its
    cluster numbers are those of the first pass and ``table.texts`` names them.
    """
    if table.ids is not None and table.seen is not None and table.numbers is not None:
        step = max(1, block_size // 64)  # about a block of lines
        for a in range(0, table.ids.size, step):
            yield table.numbers[a : a + step], [table.seen[i] for i in table.ids[a : a + step]]
        return
    texts = table.texts or []
    listed = tuple(table.alphabet.symbols) if table.fixed else None
    for nums, raw, _, _ in _assign(origin, block_size, listed, ReadStats()):
        try:
            yield nums, [texts[r] for r in raw]
        except IndexError:
            raise InputError(f"{origin.name} changed while it was read; read it again.") from None


def _code_blocks(origin: Origin, table: TemplateTable, block_size: int, index: dict[str, int]) -> Iterator[tuple]:
    """:func:`_template_blocks`, with the codes themselves (an array) when the first pass kept every line's template."""
    if table.ids is None or table.seen is None or table.numbers is None:
        yield from _template_blocks(origin, table, block_size)
        return
    lut = np.asarray([index.get(t, -1) for t in table.seen], dtype=np.int64)
    step = max(1, block_size // 64)  # the blocks of :func:`_template_blocks`
    for a in range(0, table.ids.size, step):
        codes = lut[table.ids[a : a + step]]
        if codes.size and codes.min() < 0:
            raise InputError(f"{origin.name} changed while it was read; read it again.")
        yield table.numbers[a : a + step], codes


def chunks(origin: Origin, table: TemplateTable, block_size: int, report: ReadReport, policy: str = "break") -> Iterator[Chunk]:
    """Second pass: the template code of every non-blank line (``policy`` applies to unlisted templates of a fixed table)."""
    if table.fixed:
        yield from _fixed_chunks(origin, table, block_size, report, policy)
        return
    index = {t: i for i, t in enumerate(table.alphabet.symbols)}
    dtype = table.alphabet.code_dtype
    total = 0
    where: list[np.ndarray] = []
    for numbers, templates in _code_blocks(origin, table, block_size, index):
        if isinstance(templates, np.ndarray):
            codes = templates.astype(dtype)
        else:
            try:
                codes = np.fromiter((index[t] for t in templates), dtype=dtype, count=len(templates))
            except KeyError:
                raise InputError(f"{origin.name} changed while it was read; read it again.") from None
        if codes.size:
            yield Chunk(codes, np.zeros(1 if total == 0 else 0, dtype=np.int64))
        total += codes.size
        where.append(np.asarray(numbers, dtype=np.int64))
    if total != sum(e["count"] for e in table.entries):
        raise InputError(f"{origin.name} changed while it was read; read it again.")
    report.symbols = total
    report.segments = 1 if total else 0
    report.records = [Record(origin.name, 0, total)]
    report.extra["templates"] = table.to_list()
    report.extra["lines"] = table.lines
    report.positions = _line_positions(where)
    table.stats.fill(report)
    if table.blank:
        report.notes.append(f"{table.blank} blank lines skipped")


def _line_positions(parts: list[np.ndarray]) -> Positions:
    """The 1-based file line number of every symbol (one per kept line)."""
    return Positions("line", np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64))


def _fixed_chunks(origin: Origin, table: TemplateTable, block_size: int, report: ReadReport, policy: str) -> Iterator[Chunk]:
    """Codes against a fixed table; unlisted templates are dropped (with a segment break) or refused by the policy."""
    from fractalseq.sources.text import item_scanner

    scan = item_scanner(table.alphabet, policy)
    total = segments = 0
    dropped: dict[str, int] = {}
    where: list[np.ndarray] = []
    listed = {t: i for i, t in enumerate(table.alphabet.symbols)}
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
        kept = np.fromiter((t in listed for t in templates), dtype=bool, count=len(templates))
        where.append(np.asarray(numbers, dtype=np.int64)[kept])
    report.symbols = total
    report.positions = _line_positions(where)
    report.segments = segments
    report.records = [Record(origin.name, 0, total)]
    for t, n in dropped.items():
        report.drop(f"template not in the table: {t[:60]}", n)
    report.extra["templates"] = table.to_list()
    report.extra["unlisted_templates"] = [dict(e) for e in (table.unlisted or [])]
    report.extra["lines"] = table.lines
    table.stats.fill(report)
    if table.blank:
        report.notes.append(f"{table.blank} blank lines skipped")
    if table.unlisted:
        n = sum(e["count"] for e in table.unlisted)
        report.notes.append(
            f"{n} lines of {len(table.unlisted)} templates not in the given table were "
            + ("left out, each ending a segment" if policy == "break" else "left out")
        )

"""The template table of one or several event logs, and the template of every line.

Several logs are mined together, as one sequence of lines in the order the
files are given, so that they share one table (a survey or a drift check
between them must compare the same templates).  Template ids are 0-based, by
order of first appearance in that sequence.  A blank line is turned into no
symbol: its id is ``None``.

Reading is that of :mod:`fractalseq.sources.logs` (forgiving: Latin-1 lines,
NUL runs and long lines are read and counted); an input that is missing,
empty, only blank or binary is refused with :class:`InputError` before any
mining.  Drift reports on logs are no security guarantee.
"""

from __future__ import annotations

import gc
from dataclasses import dataclass, field
from itertools import compress
from typing import Callable, Sequence

import numpy as np

from fractalseq.errors import InputError
from fractalseq.sources.logs import ReadStats, _lines, junk_note
from fractalseq.sources.miner import TemplateMiner
from fractalseq.sources.rawio import head, locate
from fractalseq.sources.sniff import check_content, is_binary

__all__ = ["FIELD_NAMES", "TemplateRun", "mine_logs"]

#: header field of the miner -> name in the table (values seen with their counts)
FIELD_NAMES = {"host": "hosts", "program": "programs", "level": "levels"}
#: values beyond the miner's per-template budget are counted under this name
OTHERS = "(others)"
_EXAMPLE_CHARS = 500
_BLOCK = 1 << 20


@dataclass
class LogInput:
    """One input: its name, per-line template ids (-1 for a blank line), counts per template, reading notes."""

    name: str
    ids: np.ndarray
    counts: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64))
    stats: ReadStats = field(default_factory=ReadStats)

    @property
    def lines(self) -> int:
        """Number of lines of the input (blank ones included)."""
        return int(self.ids.size)

    @property
    def blank(self) -> int:
        """Number of blank lines (no symbol)."""
        return int(np.count_nonzero(self.ids < 0))

    def line_ids(self) -> list[int | None]:
        """Template id of every line in file order, ``None`` for a blank line."""
        return [None if i < 0 else i for i in self.ids.tolist()]

    def notes(self) -> list[str]:
        out = []
        s = self.stats
        if s.lines_cut:
            out.append(f"{s.lines_cut} over-long lines cut")
        if s.junk_bytes_skipped:
            out.append(junk_note(s))
        if s.latin1_lines:
            out.append(f"{s.latin1_lines} lines that are not UTF-8 read as Latin-1")
        return out


@dataclass
class TemplateRun:
    """Templates mined over the union of the inputs (see the module documentation)."""

    templates: list[dict]
    inputs: list[LogInput]

    def to_dict(self, lines: bool = True) -> dict:
        """JSON-ready result; with one input its per-line ids are also the top-level ``lines``."""
        inputs = []
        for log in self.inputs:
            entry = {
                "name": log.name, "lines": log.lines, "blank": log.blank,
                "counts": {str(i): int(c) for i, c in enumerate(log.counts) if c},
                "lines_cut": log.stats.lines_cut, "junk_bytes_skipped": log.stats.junk_bytes_skipped,
                "latin1_lines": log.stats.latin1_lines,
            }
            if lines and len(self.inputs) > 1:
                entry["line_ids"] = log.line_ids()
            inputs.append(entry)
        out: dict = {"templates": self.templates, "inputs": inputs}
        if lines and len(self.inputs) == 1:
            out["lines"] = self.inputs[0].line_ids()
        return out

    def csv_rows(self) -> tuple[list[str], list[list]]:
        """Header and rows of the table: id, text, count, first input and line, example, then the count per input."""
        header = ["id", "text", "count", "first_input", "first_line", "example"]
        several = len(self.inputs) > 1
        if several:
            header += [f"count:{log.name}" for log in self.inputs]
        rows = []
        for t in self.templates:
            row = [t["id"], t["text"], t["count"], self.inputs[t["first_input"]].name, t["first_line"], t["example"]]
            if several:
                row += [int(log.counts[t["id"]]) for log in self.inputs]
            rows.append(row)
        return header, rows


def _fields(raw: dict[str, dict[str, int]]) -> dict[str, dict[str, int]]:
    out = {}
    for key, name in FIELD_NAMES.items():
        values = raw.get(key, {})
        out[name] = {(v or OTHERS): c for v, c in sorted(values.items(), key=lambda kv: (-kv[1], kv[0]))}
    return out


def mine_logs(
    paths: Sequence[str], block_size: int = _BLOCK, on_input: Callable[[str], None] | None = None
) -> TemplateRun:
    """Mine the templates of the logs together and give each line its template id.

    Parameters
    ----------
    paths:
        Log files (compressed or not; ``-`` reads standard input), mined as one
        sequence of lines in this order.
    block_size:
        Bytes read at a time (the result does not depend on it).
    on_input:
        Called with each path once it has been read.

    Returns
    -------
    TemplateRun
        The templates (``id``, ``text``, ``count``, ``first_input``,
        ``first_line`` 1-based, ``example`` line, ``counts`` per input and the
        header fields ``hosts``/``programs``/``levels`` seen, with counts) and
        per input the template id of every line.

    Raises
    ------
    InputError
        An input is missing, unreadable, empty, only blank lines or binary.
    """
    # no cyclic garbage collection during the run (the miner makes many small containers and frees them by reference
    # counts): re-enabled once the miner is gone, so its objects are never traversed by the collector
    collecting = gc.isenabled()
    if collecting:
        gc.disable()
    try:
        return _mine(paths, block_size, on_input)
    finally:
        if collecting:
            gc.enable()


def _mine(paths: Sequence[str], block_size: int, on_input: Callable[[str], None] | None) -> TemplateRun:
    """:func:`mine_logs` (its body)."""
    if not paths:
        raise InputError("No input given; name one or more log files.")
    origins = []
    for p in paths:
        origin = locate(p)
        block = head(origin)
        binary = bool(block) and is_binary(block)
        if binary:
            raise InputError(f"{origin.name} looks like binary data, not a text log; give an event log (compressed or not).")
        check_content(block, origin.name, allow_binary=False, binary=binary)
        origins.append(origin)
    miner = TemplateMiner()
    add_many = miner.add_many
    firsts: dict[int, tuple[int, int, str]] = {}  # cluster -> (input, line number, example)
    raw_ids: list[np.ndarray] = []
    stats_of: list[ReadStats] = []
    for k, origin in enumerate(origins):
        stats = ReadStats()
        parts: list[np.ndarray] = []
        for first_line, lines in _lines(origin, block_size, stats):
            top = len(miner.clusters)
            if "" in lines or any(map(str.isspace, lines)):
                kept = list(map(bool, map(str.strip, lines)))  # a blank line (only whitespace) gets no template: -1
                arr = np.full(len(lines), -1, dtype=np.int64)
                arr[np.array(kept, dtype=bool)] = add_many(list(compress(lines, kept)))
            else:
                arr = np.asarray(add_many(lines), dtype=np.int64)
            if len(miner.clusters) > top:  # clusters are numbered as they are made: a new one first shows here
                new = np.flatnonzero(arr >= top)
                made, first = np.unique(arr[new], return_index=True)
                for c, j in zip(made.tolist(), new[first].tolist()):
                    firsts[c] = (k, first_line + j, lines[j][:_EXAMPLE_CHARS])
            parts.append(arr)
        raw_ids.append(np.concatenate(parts) if parts else np.zeros(0, dtype=np.int64))
        stats_of.append(stats)
        if on_input is not None:
            on_input(origin.name)
    if not firsts:
        raise InputError("The inputs hold only blank lines; give logs with events.")
    mined = miner.finish()
    final = np.asarray(miner.final_ids, dtype=np.int64)
    first_of: dict[int, tuple[int, int, str]] = {}
    for c, where in firsts.items():
        t = int(final[c])
        if t not in first_of or where[:2] < first_of[t][:2]:
            first_of[t] = where
    inputs = []
    for origin, ids, stats in zip(origins, raw_ids, stats_of):
        tids = np.where(ids >= 0, final[np.maximum(ids, 0)], -1)
        counts = np.bincount(tids[tids >= 0], minlength=len(mined))
        inputs.append(LogInput(origin.name, tids, counts, stats))
    templates = []
    for t, mt in enumerate(mined):
        k, line_no, example = first_of[t]
        templates.append({
            "id": t, "text": mt.text, "count": int(mt.count), "first_input": k, "first_line": int(line_no),
            "example": example, "counts": [int(log.counts[t]) for log in inputs], **_fields(mt.fields),
        })
    return TemplateRun(templates, inputs)

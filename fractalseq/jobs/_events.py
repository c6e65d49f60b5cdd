"""The lines of two log batches as template ids from one template table, for the event novelty test.

The drift test reads each log with its own mined table and joins them by
template text; a template mined a little differently in each batch would
then look new.  For the novelty test both batches are mined together, in one
pass of one :class:`~fractalseq.sources.miner.TemplateMiner` (baseline lines
first, then the new batch's), so a line gets the same template whichever
batch it is in.  Blank lines are skipped and lines decoded as the log reader
decodes them (:mod:`fractalseq.sources.logs`).
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from fractalseq.compare._novelty import EventBatch, NoveltyOptions, NoveltyResult, novelty_test
from fractalseq.jobs._sources import SourceSpec
from fractalseq.sources.logs import ReadStats, _lines
from fractalseq.sources.miner import TemplateMiner
from fractalseq.sources.rawio import locate

__all__ = ["event_batches", "novelty_files"]

_BLOCK = 1 << 20


def event_batches(baseline: Sequence[SourceSpec], new: Sequence[SourceSpec]) -> tuple[EventBatch, EventBatch, list[str]]:
    """Mine the lines of both batches together; each batch's lines as template ids, and the template texts."""
    miner = TemplateMiner()
    add = miner.add
    parts = []
    for specs in (baseline, new):
        raw: list[np.ndarray] = []
        where: list[np.ndarray] = []
        numbers: list[np.ndarray] = []
        first: dict[int, tuple[int, str]] = {}  # cluster -> (position in the batch, its first line)
        done = 0
        for k, spec in enumerate(specs):
            for first_line, lines in _lines(locate(spec.path), _BLOCK, ReadStats()):
                kept = [j for j, line in enumerate(lines) if line and not line.isspace()]
                cids = np.asarray([add(lines[j]) for j in kept], dtype=np.int64)
                uniq, at = np.unique(cids, return_index=True)
                for cid, i in zip(uniq.tolist(), at.tolist()):
                    if cid not in first:
                        first[cid] = (done + i, lines[kept[i]])
                raw.append(cids)
                numbers.append(first_line + np.asarray(kept, dtype=np.int64))
                where.append(np.full(len(kept), k, dtype=np.int64))
                done += len(kept)
        parts.append((raw, where, numbers, first, tuple(s.name for s in specs)))
    templates = miner.finish()
    final = np.asarray(miner.final_ids, dtype=np.int64)
    batches = []
    cat = lambda xs: np.concatenate(xs) if xs else np.zeros(0, np.int64)  # noqa: E731
    for raw, where, numbers, first, names in parts:
        ids = final[cat(raw)]
        earliest: dict[int, tuple[int, str]] = {}
        for cid, (pos, text) in first.items():  # the earliest line of each template in this batch
            t = int(final[cid])
            if t not in earliest or pos < earliest[t][0]:
                earliest[t] = (pos, text)
        batches.append(EventBatch(ids, names, cat(where), cat(numbers), {t: v[1] for t, v in earliest.items()}))
    return batches[0], batches[1], [t.text for t in templates]


def novelty_files(baseline: Sequence[SourceSpec], new: Sequence[SourceSpec], options: NoveltyOptions | None = None) -> NoveltyResult:
    """The event novelty test of two batches of log files (see :func:`fractalseq.compare._novelty.novelty_test`)."""
    base, fresh, templates = event_batches(baseline, new)
    return novelty_test(base, fresh, templates, options)

"""Test helpers for split counts: an engine that runs its tasks at once in this process, and a plain word counter.

``InProcess`` is not the serial engine, so ``count_files`` splits its inputs as it would for
workers (by address, or by position with ``piece``), while the tasks run here, one after another.
``fasta_word_counts`` is the reference of the split-count tests: a ``collections.Counter`` over every
record of a FASTA text cut at its ``N`` symbols (common practice: a word never spans an ambiguous base).
"""

from __future__ import annotations

import collections

from fractalseq.runner import Engine


class Done:
    """A finished task's result, as a future holds it."""

    def __init__(self, value):
        self._value = value

    def result(self):
        return self._value


class InProcess(Engine):
    """Runs each task at once in this process, with ``workers`` pretend workers."""

    name = "in-process"

    def __init__(self, workers: int = 1) -> None:
        self.workers = workers

    def submit(self, func, item):
        return Done(func(item))

    def wait_first(self, futures):
        return futures


def fasta_word_counts(text: str, n: int) -> collections.Counter:
    """Occurrences of every ``n``-word of each record of a FASTA text, records cut at ``N``."""
    c: collections.Counter = collections.Counter()
    for rec in text.split(">")[1:]:
        seq = "".join(rec.split("\n")[1:])
        for part in seq.split("N"):
            for i in range(len(part) - n + 1):
                c[part[i : i + n]] += 1
    return c

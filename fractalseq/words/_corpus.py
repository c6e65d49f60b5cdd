"""Word counts of several inputs together: each input its own segment, one table for all."""

from __future__ import annotations

from typing import Callable, Iterable

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError
from fractalseq.runner import pause_point
from fractalseq.stream import ReadReport, SymbolStream
from fractalseq.words._counts import WordCounter, WordCounts


def count_inputs(
    inputs: Iterable[tuple[str, SymbolStream]],
    depth: int | Callable[[Alphabet], int],
    parallel: bool = True,
    on_input: Callable[[str], None] | None = None,
    compact: bool = False,
    window: tuple[int, int] | None = None,
) -> tuple[WordCounts, list[tuple[str, ReadReport]]]:
    """Count the words of several inputs together, streamed; each input is its own segment.

    Parameters
    ----------
    inputs:
        ``(name, stream)`` pairs (a generator may open each file when it is reached).
    depth:
        Deepest word length, or a function of the first input's alphabet giving it.
    parallel:
        Threaded counting of large chunks (see :class:`WordCounter`).
    on_input:
        Called with each input's name once it is counted (progress display).
    compact:
        ``uint32`` counts while they fit (see :class:`WordCounter`).
    window:
        Count only the words of this address range (see :class:`WordCounter`).

    Returns
    -------
    The counts and, per input, what its reader kept and dropped.

    Raises
    ------
    InputError
        No input, or an input whose alphabet differs from the first one's.
    """
    counter = None
    reports: list[tuple[str, ReadReport]] = []
    chunks = 0
    for name, stream in inputs:
        if counter is None:
            a = stream.alphabet
            counter = WordCounter(a, depth(a) if callable(depth) else depth, parallel=parallel, compact=compact, window=window)
        elif not counter.alphabet.same_symbols(stream.alphabet):
            raise InputError(
                f"{name} has a different alphabet from the first input; give one alphabet (e.g. dna) for all inputs."
            )
        for chunk in stream.chunks():
            chunks += 1
            pause_point("words.kernel", chunks)  # test hook: blocks just before a counting kernel runs
            counter.add(chunk.codes, chunk.starts)
        # close the open segment: inputs never continue each other
        counter.add(np.zeros(0, counter.alphabet.code_dtype), np.zeros(0, np.int64), final=True)
        reports.append((name, stream.report))
        if on_input is not None:
            on_input(name)
    if counter is None:
        raise InputError("There is no input to count; give at least one file.")
    return counter.finish(), reports

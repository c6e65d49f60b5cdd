"""Occurrences and replicate spectra of several word lengths, one map task per length on an engine.

The replicate spectra of one depth (:func:`fractalseq.resampling._streamed.streamed_replicate_spectra`)
are the heaviest pass of a profile.  They do not split by position: a word's replicate count is
``sum_b w_b * count_b`` over *every* block that holds it, and a spectrum counts words by that total,
so two halves of a stream have no spectra that add.  Depths are independent, though, so each depth
is one task: a worker gets the stream (:func:`fractalseq.words._pieces.stream_for_workers`), draws the
block weights from the seed (the same draws as the parent's, :func:`block_major_weights`, kept for
the worker's next depth) and returns the depth's occurrences and spectra.  The parent takes the
results in depth order, so every engine gives the arrays of the in-process loop, integer for integer.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from fractalseq.resampling._plan import block_major_weights
from fractalseq.resampling._replicates import ReplicateSpectra
from fractalseq.resampling._streamed import streamed_replicate_spectra
from fractalseq.resampling._word_labels import WordIndex
from fractalseq.runner import Engine, SerialEngine
from fractalseq.stream import SymbolArray

#: The block weights a process drew last, by ``(length, block length, replicates, seed)`` (one entry).
_WEIGHTS: dict[tuple[int, int, int, int], np.ndarray] = {}


def on_workers(engine: Engine | None) -> bool:
    """True when ``engine`` runs tasks outside this process's loop (anything but ``None`` or the serial engine)."""
    return engine is not None and not isinstance(engine, SerialEngine)


def _weights(length: int, block_length: int, n_boot: int, seed: int) -> np.ndarray | None:
    if not n_boot:
        return None
    key = (int(length), int(block_length), int(n_boot), int(seed))
    wt = _WEIGHTS.get(key)
    if wt is None:
        _WEIGHTS.clear()  # one table at a time (it is ~4 bytes per replicate and block)
        wt = _WEIGHTS[key] = block_major_weights(*key)
    return wt


def depth_spectra_task(task: tuple[SymbolArray, int, int, int, int]) -> tuple[np.ndarray, ReplicateSpectra | None]:
    """One depth's occurrences and replicate spectra (a map task; pure function of its arguments).

    ``task`` is ``(stream, depth, block_length, n_boot, seed)``; the result equals
    ``streamed_replicate_spectra(WordIndex(stream, depth), depth, block_length,
    block_major_weights(len(stream), block_length, n_boot, seed))``.
    """
    arr, depth, block_length, n_boot, seed = task
    wt = _weights(len(arr), block_length, n_boot, seed)
    return streamed_replicate_spectra(WordIndex(arr, int(depth)), int(depth), int(block_length), wt)


def depth_spectra(
    arr: SymbolArray, depths: Sequence[int], block_length: int, n_boot: int, seed: int, engine: Engine,
) -> list[tuple[np.ndarray, ReplicateSpectra | None]]:
    """:func:`depth_spectra_task` of every depth on ``engine``, results in the order of ``depths``.

    Parameters
    ----------
    arr:
        The stream.
    depths:
        Word lengths (one task each).
    block_length:
        Length of the disjoint bootstrap blocks.
    n_boot, seed:
        Replicates and seed of the block weights (0 replicates: occurrences only).
    engine:
        Where the tasks run.
    """
    from fractalseq.words._pieces import stream_for_workers

    shipped = stream_for_workers(arr)
    tasks = [(shipped, int(n), int(block_length), int(n_boot), int(seed)) for n in depths]
    return engine.map(depth_spectra_task, tasks)

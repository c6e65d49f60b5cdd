"""Occurrences and replicate spectra of several word lengths, one map task per length on an engine.

The replicate spectra of one depth (:func:`fractalseq.resampling._streamed.streamed_replicate_spectra`)
are the heaviest pass of a profile.  They do not split by position: a word's replicate count is
``sum_b w_b * count_b`` over *every* block that holds it, and a spectrum counts words by that total,
so two halves of a stream have no spectra that add.  Depths are independent, though, so each depth
is one task: a worker gets the stream (:func:`fractalseq.words._worker_stream.stream_for_workers`: read
from its file once per worker process, or shipped), draws the block weights from the seed (the same
draws as the parent's, :func:`block_major_weights`, kept for the worker's next depth) and returns the
depth's occurrences and spectra.  The deepest depths (the most distinct words, the longest tasks) are
submitted first, so the last tasks to finish are short ones; the parent takes the results in depth
order, so every engine gives the arrays of the in-process loop, integer for integer.
"""

from __future__ import annotations

import weakref
from typing import Sequence

import numpy as np

from fractalseq.resampling._plan import block_major_weights
from fractalseq.resampling._replicates import ReplicateSpectra
from fractalseq.resampling._streamed import streamed_replicate_spectra
from fractalseq.resampling._word_labels import WordIndex
from fractalseq.runner import Engine, SerialEngine
from fractalseq.stream import SymbolArray
from fractalseq.words._worker_stream import StreamFile, stream_for_workers, worker_stream

#: The block weights a process drew last, by ``(length, block length, replicates, seed)`` (one entry).
_WEIGHTS: dict[tuple[int, int, int, int], np.ndarray] = {}


def on_workers(engine: Engine | None) -> bool:
    """True when ``engine`` runs tasks outside this process's loop (anything but ``None`` or the serial engine)."""
    return engine is not None and not isinstance(engine, SerialEngine)


def worker_weights(length: int, block_length: int, n_boot: int, seed: int) -> np.ndarray | None:
    """:func:`block_major_weights` of a worker, kept for its next depth (``None`` without replicates)."""
    if not n_boot:
        return None
    key = (int(length), int(block_length), int(n_boot), int(seed))
    wt = _WEIGHTS.get(key)
    if wt is None:
        _WEIGHTS.clear()  # one table at a time (it is ~4 bytes per replicate and block)
        wt = _WEIGHTS[key] = block_major_weights(*key)
    return wt


#: Occurrences and spectra made ahead for the next :func:`depth_spectra` of one stream: the stream (a weak
#: reference), ``(block length, replicates, seed)`` and the results by depth.
_KEPT: list = [None, None, {}]


def keep_spectra(arr: SymbolArray, block_length: int, n_boot: int, seed: int, results: dict[int, tuple]) -> None:
    """Hold ``results`` (depth -> ``(occurrences, spectra)``, as :func:`depth_spectra_task` gives them) for the next
    :func:`depth_spectra` of ``arr`` with the same blocks and seed (anything held before is dropped)."""
    _KEPT[:] = [weakref.ref(arr), (int(block_length), int(n_boot), int(seed)), dict(results)] if results else [None, None, {}]


def kept_spectra(arr: SymbolArray, depths: Sequence[int], block_length: int, n_boot: int, seed: int) -> dict[int, tuple]:
    """Take out what :func:`keep_spectra` holds for ``arr`` with these blocks and seed, for the ``depths`` asked
    (depth -> ``(occurrences, spectra)``); what is left stays held until taken or forgotten."""
    ref, key, kept = _KEPT
    if ref is None or ref() is not arr or key != (int(block_length), int(n_boot), int(seed)):
        return {}
    out = {int(n): kept.pop(int(n)) for n in depths if int(n) in kept}
    if not kept:
        forget_spectra()
    return out


def forget_spectra() -> None:
    """Drop what :func:`keep_spectra` holds (the end of a job, or an error)."""
    _KEPT[:] = [None, None, {}]


def deepest_first(engine: Engine, func, tasks: list, depths: Sequence[int]) -> list:
    """``engine.map(func, tasks)`` with the tasks of the deepest ``depths`` submitted first; results in task order."""
    order = sorted(range(len(tasks)), key=lambda i: (-int(depths[i]), i))
    out: list = [None] * len(tasks)
    for i, res in zip(order, engine.map(func, [tasks[i] for i in order])):
        out[i] = res
    return out


def depth_spectra_task(task: tuple[SymbolArray | StreamFile, int, int, int, int]) -> tuple[np.ndarray, ReplicateSpectra | None]:
    """One depth's occurrences and replicate spectra (a map task; pure function of its arguments).

    ``task`` is ``(stream, depth, block_length, n_boot, seed)`` (the stream as :func:`stream_for_workers` gives it); the result equals
    ``streamed_replicate_spectra(WordIndex(stream, depth), depth, block_length,
    block_major_weights(len(stream), block_length, n_boot, seed))``.
    """
    item, depth, block_length, n_boot, seed = task
    arr = worker_stream(item)
    wt = worker_weights(len(arr), block_length, n_boot, seed)
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

    Depths made ahead for this stream, blocks and seed (:func:`keep_spectra`) are taken from there
    (the same arrays a task would give) and not run again.
    """
    held = kept_spectra(arr, depths, block_length, n_boot, seed)
    todo = [int(n) for n in depths if int(n) not in held]
    done: list = []
    if todo:
        shipped = stream_for_workers(arr)
        tasks = [(shipped, n, int(block_length), int(n_boot), int(seed)) for n in todo]
        done = deepest_first(engine, depth_spectra_task, tasks, todo)
    made = dict(zip(todo, done))
    return [held[int(n)] if int(n) in held else made[int(n)] for n in depths]

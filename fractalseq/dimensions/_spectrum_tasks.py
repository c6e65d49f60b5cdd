"""The word levels of a dimension spectrum on an engine: one map task per depth, labelled once.

A spectrum from a stream needs, per depth n, the occurrences of the n-words, the bootstrap
replicates' spectra (:mod:`fractalseq.resampling._spectra_tasks`) and, for the batch-means
covariance of the levels, each batch's sums of the level's influence values
(:func:`fractalseq.dimensions._level_variance.level_batch_sums`).  All three come from the same labels
of the stream, so one task per depth makes all three where the labels are: the parent never labels
a depth.  The parent joins the batch sums with
:func:`~fractalseq.dimensions._level_variance.covariance_from_level_sums`, the arithmetic of the
in-process :func:`~fractalseq.dimensions._level_variance.streamed_batch_covariance` on the same sums
(added in the same order, fed to the same block accumulator), so the covariance is the same to the last bit.

The parent holds every level's sums until the covariance (``levels x batches x Q`` float64); beyond
:data:`MAPPED_BATCH_CELLS` cells the tasks leave them out and the parent labels the depths for the
covariance itself, in one pass for every level and q, as in process.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from fractalseq.dimensions._level_variance import BatchSums, level_batch_sums
from fractalseq.resampling._replicates import ReplicateSpectra
from fractalseq.resampling._spectra_tasks import deepest_first, worker_weights
from fractalseq.resampling._streamed import streamed_replicate_spectra
from fractalseq.resampling._word_labels import WordIndex
from fractalseq.runner import Engine
from fractalseq.stream import SymbolArray
from fractalseq.words._worker_stream import StreamFile, stream_for_workers, worker_stream

__all__ = ["MAPPED_BATCH_CELLS", "depth_level_task", "depth_levels", "sums_fit"]

#: Batch sums (float64 cells, ``levels x batches x Q``) the parent may hold from the tasks: 1 GiB.
MAPPED_BATCH_CELLS = 1 << 27


def sums_fit(length: int, batch: int, levels: int, q_count: int) -> bool:
    """True when the tasks' batch sums of ``levels`` levels fit :data:`MAPPED_BATCH_CELLS`."""
    B = BatchSums(length, 1, 1, batch=batch).B
    return levels * B * q_count <= MAPPED_BATCH_CELLS


def depth_level_task(
    task: tuple[SymbolArray | StreamFile, int, int, int, int, int | None, np.ndarray],
) -> tuple[np.ndarray, ReplicateSpectra | None, np.ndarray | None]:
    """One depth's occurrences, replicate spectra and batch sums (a map task; pure function of its arguments).

    ``task`` is ``(stream, depth, block_length, n_boot, seed, batch, qs)``: the stream as
    :func:`stream_for_workers` gives it, the bootstrap's blocks and replicates, and the batch length and
    orders of the batch sums (``batch=None``: no sums).  The occurrences and spectra are those of
    :func:`fractalseq.resampling._spectra_tasks.depth_spectra_task`; the sums are
    ``level_batch_sums(len(stream), batch, WordIndex(stream, depth).chunks, occurrences, qs)``.
    """
    item, depth, block_length, n_boot, seed, batch, qs = task
    arr = worker_stream(item)
    index = WordIndex(arr, int(depth))
    wt = worker_weights(len(arr), block_length, n_boot, seed)
    counts, spectra = streamed_replicate_spectra(index, int(depth), int(block_length), wt)
    sums = None if batch is None else level_batch_sums(len(arr), int(batch), index.chunks, counts, qs)
    return counts, spectra, sums


def depth_levels(
    arr: SymbolArray, depths: Sequence[int], block_length: int, n_boot: int, seed: int, batch: int | None,
    qs: np.ndarray, engine: Engine, extra: Sequence[int] = (),
) -> list[tuple[np.ndarray, ReplicateSpectra | None, np.ndarray | None]]:
    """:func:`depth_level_task` of every depth on ``engine`` (deepest first), results in the order of ``depths``,
    then those of the ``extra`` depths (occurrences and spectra only, no batch sums)."""
    shipped = stream_for_workers(arr)
    q = np.asarray(qs, dtype=np.float64)
    tasks = [(shipped, int(n), int(block_length), int(n_boot), int(seed), batch, q) for n in depths]
    tasks += [(shipped, int(n), int(block_length), int(n_boot), int(seed), None, q) for n in extra]
    return deepest_first(engine, depth_level_task, tasks, [*depths, *extra])

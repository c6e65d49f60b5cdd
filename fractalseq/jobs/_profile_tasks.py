"""The map tasks of one profile on an engine (``profile --workers N``), and their merge.

A profile of one large source on an engine runs:

* with a piece size, the word counts as pieces overlapping by ``N - 1`` symbols
  (:func:`fractalseq.words._pieces.count_words_split`, added in piece order: the counts of a
  one-pass count exactly; without one they are counted in the parent, on two threads);
* the bootstrap pass of every depth as one task each (dimensions and entropy-rate intervals,
  :mod:`fractalseq.resampling._spectra_tasks`);
* two steps that need nothing from the others, started on the workers before anything else (they
  run beside the parent's counts, block entropies and block-length choice) and collected when the
  serial order reaches them: the online predictor's code length and, beyond
  ``consistency_max_length`` symbols, the consistency table of the prefix.

Every task gets the stream from :func:`fractalseq.words._worker_stream.stream_for_workers`: a
stream read from a file is read there by each worker process once, any other is shipped.

Every task is a module-level pure function of its arguments (the seed included) and the parent
takes each result at the place where the in-process profile computes it, notes included, so the
JSON is the same bytes on every engine and for every piece size.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any, Callable

import numpy as np

from fractalseq.dimensions import _consistency as cons
from fractalseq.dimensions import _spectrum as sp
from fractalseq.entropy import _estimators as ent
from fractalseq.errors import FractalseqError, ParameterError
from fractalseq.resampling._options import Resampling
from fractalseq.resampling._spectra_tasks import on_workers
from fractalseq.runner import Engine
from fractalseq.stream import SymbolArray
from fractalseq.words._counts import WordCounts, count_words
from fractalseq.words._worker_stream import StreamFile, worker_stream

__all__ = ["Background", "ParentSteps", "predictor_task", "consistency_task", "words_counter"]


def words_counter(engine: Engine | None, piece: int | None) -> Callable[[SymbolArray, int], WordCounts]:
    """``count_words``, or with a ``piece`` size on an engine the same counts added up from pieces.

    Without ``piece`` the counts are made in this process even on an engine: the one-pass count
    sorts on two threads, and on one two-core machine the split count is slower (README, "Split
    counting"); pieces pay when the workers are other machines.
    """
    if piece is not None and (isinstance(piece, bool) or not isinstance(piece, (int, np.integer)) or piece < 1):
        raise ParameterError(f"The piece size must be a positive number of symbols, not {piece!r}.", parameter="piece")
    if piece is None or not on_workers(engine):
        return count_words
    from fractalseq.words._pieces import count_words_split

    return lambda arr, depth: count_words_split(arr, depth, engine, chunk=int(piece))


def _predictor_code_length(arr: SymbolArray):
    """The online predictor's code length in bits per symbol as an EntropyEstimate (an upper bound)."""
    from fractalseq.predict import _predictor as predict

    res = predict.online_code_length(arr)
    A = arr.alphabet.size
    bits = float(res.bits_per_symbol)
    details = {
        "total_bits": float(res.total_bits),
        "top1": float(res.top1_accuracy),
        "top3": float(res.top3_accuracy),
        "calibration_error": float(res.expected_calibration_error),
        "depths": [int(d) for d in res.depths],
        "cells_stored": int(res.memory.cells_stored),
        "evictions": int(res.memory.evictions),
    }
    return ent.EntropyEstimate(
        quantity="entropy rate upper bound", method="online predictor", estimate=bits, unit="bits/symbol",
        fraction_of_max=bits / math.log2(A), reliable=True,
        note="predict-then-update code length of the count-based predictor: an upper bound on the information content",
        details=details,
    )


def predictor_task(arr: SymbolArray | StreamFile) -> tuple[Any, str | None]:
    """The online predictor's code length (an ``EntropyEstimate``), or ``None`` and why not."""
    try:
        return _predictor_code_length(worker_stream(arr)), None
    except FractalseqError as exc:
        return None, str(exc)


def consistency_task(task: tuple[SymbolArray | StreamFile, tuple[float, ...], float, Resampling, int, int]) -> tuple[Any, list[str]]:
    """The consistency table of a stream longer than ``max_length`` (measured on its prefix) and its notes."""
    item, qs, k, rs, offsets, max_length = task
    notes: list[str] = []
    return _consistency(worker_stream(item), None, qs, k, rs, offsets, notes, max_length), notes


def _consistency(
    arr: SymbolArray, spec: sp.SpectrumResult | None, user_qs: tuple[float, ...], k: float, rs: Resampling,
    offsets: int, notes: list[str], max_length: int | None,
) -> cons.ConsistencyResult | None:
    """Step 5: the consistency table (geometry against information), or ``None`` with a note saying why.

    Beyond ``max_length`` symbols both sides are measured on the prefix of that length (the point
    cloud and its box labels cost about 30 bytes per symbol), with a note.
    """
    L = len(arr)
    if L <= sp.TRANSIENT + 10:
        notes.append(f"consistency table: not computed, the stream has {L} symbols (needs more than {sp.TRANSIENT + 10})")
        return None
    if max_length is not None and L > max_length:
        notes.append(f"consistency table: both sides measured on the first {max_length:,} of {L:,} symbols")
        try:
            table = cons.consistency_table(arr.slice(0, max_length), user_qs, ratio=k, resampling=rs, offsets=offsets)
        except FractalseqError as exc:
            notes.append(f"consistency table: not computed ({exc})")
            return None
        notes.extend(f"consistency table: {f}" for f in table.flags)
        return table
    assert spec is not None  # only a stream within max_length reads the spectrum's rates
    block = spec.block
    info = None
    if spec.route == "word counts" and spec.rates:
        info = cons.RateResult(
            tuple(r for r in spec.rates if r.q in user_qs), block, rs.n_boot if block else 0, rs.seed, L
        )
    try:
        consistency = cons.consistency_table(
            arr, user_qs, ratio=k, resampling=replace(rs, block_length=block), offsets=offsets, information=info,
            levels=spec.data_limit if spec.route == "word counts" and spec.data_limit else None,
        )
    except FractalseqError as exc:
        notes.append(f"consistency table: not computed ({exc})")
        return None
    notes.extend(f"consistency table: {f}" for f in consistency.flags)
    return consistency


class Background:
    """Steps started on the engine's workers, each collected once at its place in the serial order.

    With no engine (or the serial one) nothing is started and :meth:`take` returns ``None``:
    the caller then computes the step itself.
    """

    def __init__(self, engine: Engine | None) -> None:
        self.engine = engine if on_workers(engine) else None
        self._futures: dict[str, Any] = {}

    def start(self, name: str, func: Callable[[Any], Any], item: Any) -> None:
        """Submit ``func(item)`` as step ``name`` (nothing happens without workers)."""
        if self.engine is not None:
            self._futures[name] = self.engine.submit(func, item)

    def take(self, name: str) -> Any:
        """The result of step ``name`` (waiting for it), or ``None`` when it was not started."""
        fut = self._futures.pop(name, None)
        if fut is None:
            return None
        assert self.engine is not None
        while not self.engine.wait_first([fut]):  # pragma: no cover - wait_first returns once it is done
            pass
        return fut.result()

    def cancel(self) -> None:
        """Cancel what was not collected (after an error or an interrupt)."""
        if self.engine is not None and self._futures:
            self.engine.cancel(list(self._futures.values()))
        self._futures.clear()


class ParentSteps:
    """Steps that stay in the parent, each ``step(notes) -> result``: run where the serial order puts them,
    or all at once earlier (:meth:`run_all`, while an engine's workers run the long tasks) and then taken
    at their places, with the notes each wrote, so the notes keep their order.
    """

    def __init__(self, steps: dict[str, Callable[[list[str]], Any]]) -> None:
        self._steps = dict(steps)
        self._done: dict[str, tuple[Any, list[str]]] = {}

    def run_all(self) -> None:
        """Run every step now, keeping each result and its notes."""
        for name, step in self._steps.items():
            notes: list[str] = []
            self._done[name] = (step(notes), notes)

    def take(self, name: str, notes: list[str]) -> Any:
        """The result of step ``name`` (run now unless :meth:`run_all` ran it), its notes added to ``notes``."""
        if name in self._done:
            result, own = self._done.pop(name)
            notes.extend(own)
            return result
        return self._steps[name](notes)

"""The map-then-merge contract every engine honours, and the serial engine.

An *engine* runs a function over items and hands the results back in item
order; :meth:`Engine.map_reduce` merges them left to right in that order, so
every engine gives the same numbers (integer counts exactly, floating figures
to the last bit).  This module holds the contract and the in-process engine;
local processes and Dask distributed live in :mod:`fractalseq.jobs`.  It sits
low in the package so that the math (word counts of pieces, drift) can take an
engine without depending on the job layer.
"""

from __future__ import annotations

import os
import time
from typing import Any, Callable, Iterable, Iterator

from fractalseq.errors import InputError

#: Environment variable of the test pause point (see :func:`pause_point`).
PAUSE_VARIABLE = "FRACTALSEQ_PAUSE_AT"
#: Environment variable naming a file :func:`pause_point` creates when it blocks (optional).
PAUSE_FLAG_VARIABLE = "FRACTALSEQ_PAUSE_FLAG"


def pause_point(name: str, count: int) -> None:
    """Block here forever when ``FRACTALSEQ_PAUSE_AT`` names ``name:count`` (a hook for interruption tests).

    Tests that interrupt a running job set the variable, wait until the job
    has reached the named point (e.g. the first source stored in the cache),
    then send the signal: what was finished before the pause is then known
    exactly, whatever the speed of the machine.  With ``FRACTALSEQ_PAUSE_FLAG``
    set to a path, the file is created when the pause begins (for pause points
    that leave no output of their own, such as ``words.kernel``: just before a
    counting kernel runs).  Several points may be named, separated by commas (a
    child process inherits the variable: ``report.file:1,demo.warmup:1`` pauses
    the demo and its warm-up process).  Unset, it costs one lookup.
    """
    want = os.environ.get(PAUSE_VARIABLE)
    if want and f"{name}:{count}" in want.split(","):
        flag = os.environ.get(PAUSE_FLAG_VARIABLE)
        if flag:  # tell the waiting test that the pause is reached (for points that leave no file of their own)
            with open(flag, "a", encoding="utf-8") as fh:  # appended: several processes may pause
                fh.write(f"{name}:{count}\n")
        while True:  # pragma: no cover - ended by the signal the test sends
            time.sleep(0.05)

OnDone = Callable[[int, Any], None]


class _Done:
    """A finished task of the serial engine (looks like a future)."""

    def __init__(self, value: Any) -> None:
        self._value = value

    def result(self) -> Any:
        return self._value


class Engine:
    """Runs a function over items and returns the results in item order.

    Subclasses implement :meth:`submit` (start one task, return a future)
    and :meth:`wait_first` (block until at least one future is done).  Use an
    engine as a context manager so that workers are released, also when the
    job is interrupted.
    """

    name = "engine"
    workers = 1

    def submit(self, func: Callable[[Any], Any], item: Any) -> Any:  # pragma: no cover - abstract
        raise NotImplementedError

    def wait_first(self, futures: list[Any]) -> list[Any]:  # pragma: no cover - abstract
        raise NotImplementedError

    def cancel(self, futures: list[Any]) -> None:
        """Cancel unfinished tasks (after an interrupt)."""

    def imap(
        self, func: Callable[[Any], Any], items: Iterable[Any], max_pending: int | None = None
    ) -> Iterator[tuple[int, Any]]:
        """Yield ``(index, result)`` as tasks complete, keeping at most ``max_pending`` in flight.

        ``items`` may be a generator (e.g. pieces of a file read on the fly):
        it is consumed only as fast as workers take tasks, so memory stays
        bounded by about ``max_pending`` tasks.
        """
        limit = max_pending or 2 * self.workers + 1
        it = iter(items)
        pending: dict[Any, int] = {}
        nxt = 0
        exhausted = False
        try:
            while True:
                while not exhausted and len(pending) < limit:
                    try:
                        item = next(it)
                    except StopIteration:
                        exhausted = True
                        break
                    pending[self.submit(func, item)] = nxt
                    nxt += 1
                if not pending:
                    return
                done = self.wait_first(list(pending))
                for fut in sorted(done, key=lambda f: pending[f]):
                    i = pending.pop(fut)
                    yield i, fut.result()
        except BaseException:
            self.cancel(list(pending))
            raise

    def map(self, func: Callable[[Any], Any], items: Iterable[Any], on_done: OnDone | None = None) -> list[Any]:
        """Apply ``func`` to every item; results in item order.

        Parameters
        ----------
        func:
            A module-level function (it must be importable by the workers).
        items:
            Task arguments (one call each).
        on_done:
            Called in the parent as ``on_done(index, result)`` when a task
            finishes (in completion order, e.g. to advance a progress bar).
        """
        items = list(items)
        results: list[Any] = [None] * len(items)
        for i, res in self.imap(func, items, max_pending=max(len(items), 1)):
            results[i] = res
            if on_done is not None:
                on_done(i, res)
        return results

    def map_reduce(
        self,
        func: Callable[[Any], Any],
        items: Iterable[Any],
        merge: Callable[[Any, Any], Any],
        on_done: OnDone | None = None,
        max_pending: int | None = None,
    ) -> Any:
        """Map, then merge the results left to right in item order (streaming).

        Results arriving out of order wait until their predecessors are
        merged, so the merge order, and hence every floating-point sum, is
        the same on every engine.
        """
        waiting: dict[int, Any] = {}
        total: Any = None
        have = False
        nxt = 0
        for i, res in self.imap(func, items, max_pending):
            if on_done is not None:
                on_done(i, res)
            waiting[i] = res
            while nxt in waiting:
                r = waiting.pop(nxt)
                total = merge(total, r) if have else r
                have = True
                nxt += 1
        if not have:
            raise InputError("There was nothing to process; give at least one non-empty input.")
        return total

    def describe(self) -> dict:
        """JSON-ready description (engine name and workers); not part of any result."""
        return {"engine": self.name, "workers": self.workers}

    def close(self) -> None:
        """Release workers."""

    def __enter__(self) -> "Engine":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class SerialEngine(Engine):
    """Runs every task in this process, in order."""

    name = "serial"

    def submit(self, func, item):
        return _Done(func(item))

    def imap(
        self, func: Callable[[Any], Any], items: Iterable[Any], max_pending: int | None = None
    ) -> Iterator[tuple[int, Any]]:
        """Run each task when its result is asked for, so every result is handed back the moment it exists."""
        for i, item in enumerate(items):
            yield i, func(item)

    def wait_first(self, futures):
        return futures


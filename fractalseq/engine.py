"""Map-then-merge runner: serially, on local processes, or on Dask distributed.

Every corpus job in fractalseq has the same shape: *map* each source (or
each chunk of a large source) to word counts and per-source results, *merge*
the pieces in a fixed order, then *estimate*.  The engines differ only in
where the map runs:

``serial``
    In this process, one task after another.
``processes``
    A pool of local worker processes (``spawn`` start method, so workers
    share nothing with the parent but the task arguments).
``dask``
    A Dask distributed cluster: an existing scheduler (``address``) or a
    local cluster of worker processes started for the job.  Dask is an
    optional extra (``pip install 'fractalseq[cluster]'``); it is imported
    only when asked for.

Results always come back in task order and are merged in that order, so
every engine gives the same numbers: integer counts exactly, floating
figures to the last bit (each task is a pure function of its arguments,
including its seed).  A task lost with a Dask worker is run again by the
scheduler; the merged result is unchanged.

Large sources are split into *pieces* of ``chunk`` symbols, each carrying
the next ``N - 1`` symbols as lookahead, and each piece counts exactly the
words that *start* inside it, so no word is lost at a piece edge and none is
counted twice (:func:`iter_pieces`, :func:`count_piece`).

Arguments and results travel between processes with the standard library's
pickle protocol (as multiprocessing and Dask do); nothing pickled is ever
written to disk.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass
from typing import Any, Callable, Iterable, Iterator

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ParameterError
from fractalseq.stream import Chunk, SymbolArray, SymbolStream
from fractalseq.words import WordCounts, check_depth, count_words

ENGINES: tuple[str, ...] = ("serial", "processes", "dask")
#: Default piece size for splitting one large source (symbols).
DEFAULT_PIECE = 1 << 24
DASK_MISSING = (
    "The dask engine needs the optional Dask packages, which are not installed; "
    "run pip install 'fractalseq[cluster]' or choose --engine serial or processes."
)

OnDone = Callable[[int, Any], None]


# =================================================================== engines
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

    def wait_first(self, futures):
        return futures


class ProcessEngine(Engine):
    """Runs tasks on a pool of local worker processes.

    Parameters
    ----------
    workers:
        Number of worker processes (at least 1).
    """

    name = "processes"

    def __init__(self, workers: int) -> None:
        self.workers = _check_workers(workers)
        self._pool: ProcessPoolExecutor | None = None

    def _ensure(self) -> ProcessPoolExecutor:
        if self._pool is None:
            self._pool = ProcessPoolExecutor(
                max_workers=self.workers,
                mp_context=multiprocessing.get_context("spawn"),
                initializer=_worker_init,
            )
        return self._pool

    def submit(self, func, item):
        # workers are spawned lazily by submit: give them one thread each for numba and BLAS (the
        # parallelism is the pool; several threads per worker would only compete for the cores)
        with _single_threaded_children():
            return self._ensure().submit(func, item)

    def wait_first(self, futures):
        done, _ = wait(futures, return_when=FIRST_COMPLETED)
        return list(done)

    def cancel(self, futures):
        for fut in futures:
            fut.cancel()
        self.close(kill=True)

    def close(self, kill: bool = False) -> None:
        pool, self._pool = self._pool, None
        if pool is None:
            return
        if kill:
            procs = list((getattr(pool, "_processes", None) or {}).values())
            pool.shutdown(wait=False, cancel_futures=True)
            for p in procs:  # stop running tasks now instead of waiting for them
                if p.is_alive():
                    p.terminate()
            for p in procs:
                p.join(timeout=5)
        else:
            pool.shutdown(wait=True, cancel_futures=True)


class DaskEngine(Engine):
    """Runs tasks on Dask distributed.

    Parameters
    ----------
    address:
        Scheduler address (``tcp://host:8786``) of a running cluster, or
        ``None`` to start a local cluster of ``workers`` processes for the job.
    workers:
        Worker processes of the local cluster (ignored with ``address``).
    client:
        An existing ``distributed.Client`` to use (not closed by :meth:`close`).
    """

    name = "dask"

    def __init__(self, address: str | None = None, workers: int | None = None, client: Any = None) -> None:
        distributed = import_dask()
        self._own_cluster = None
        self._own_client = client is None
        if client is not None:
            self.client = client
        elif address:
            try:
                self.client = distributed.Client(address, timeout="20s")
            except (OSError, TimeoutError) as exc:
                raise ParameterError(
                    f"Cannot reach the Dask scheduler at {address} ({exc}); check the address or start the scheduler."
                ) from None
        else:
            n = _check_workers(workers or 2)
            self._own_cluster = distributed.LocalCluster(
                n_workers=n, processes=True, threads_per_worker=1, dashboard_address=None, silence_logs=40
            )
            self.client = distributed.Client(self._own_cluster)
        info = self.client.scheduler_info()
        self.workers = max(1, len(info.get("workers", {})))
        self.address = address

    def submit(self, func, item):
        return self.client.submit(func, item, pure=False)

    def wait_first(self, futures):
        distributed = import_dask()
        done, _ = distributed.wait(futures, return_when="FIRST_COMPLETED")
        return list(done)

    def cancel(self, futures):
        if futures and getattr(self, "client", None) is not None:
            self.client.cancel(futures)

    def close(self) -> None:
        if self._own_client and getattr(self, "client", None) is not None:
            self.client.close()
            self.client = None
        if self._own_cluster is not None:
            self._own_cluster.close()
            self._own_cluster = None


def import_dask():
    """Import ``distributed`` or raise one clear sentence naming the extra to install."""
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise ParameterError(DASK_MISSING) from None
    return distributed


def _check_workers(workers: int | None) -> int:
    if workers is None or isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ParameterError(f"The number of workers must be a positive whole number, not {workers!r}.")
    return int(workers)


#: Environment variables that cap the threads of numba and the BLAS/OpenMP libraries.
THREAD_VARIABLES = ("NUMBA_NUM_THREADS", "OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


@contextlib.contextmanager
def _single_threaded_children():
    """Processes started inside this block inherit one-thread settings (the parent's are restored after)."""
    saved = {k: os.environ.get(k) for k in THREAD_VARIABLES}
    try:
        for k in THREAD_VARIABLES:
            os.environ[k] = "1"
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def _worker_init() -> None:  # pragma: no cover - runs in the workers
    """Worker processes ignore SIGINT; the parent stops them after an interrupt."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)


def make_engine(kind: str | None = None, workers: int | None = None, address: str | None = None) -> Engine:
    """Build an engine from command-line style settings.

    Parameters
    ----------
    kind:
        ``serial``, ``processes`` or ``dask``; ``None`` picks ``dask`` when an
        address is given, ``processes`` when ``workers > 1``, else ``serial``.
    workers:
        Local worker processes (processes engine, or a local Dask cluster).
    address:
        Dask scheduler address.

    Raises
    ------
    ParameterError
        Unknown engine, bad worker count, an address for a non-Dask engine, or
        Dask asked for but not installed.
    """
    if kind is None:
        kind = "dask" if address else ("processes" if (workers or 1) > 1 else "serial")
    if kind not in ENGINES:
        raise ParameterError(f"Engine {kind!r} is not known; use one of {', '.join(ENGINES)}.")
    if address and kind != "dask":
        raise ParameterError("A scheduler address only applies to --engine dask; drop --scheduler or use the dask engine.")
    if kind == "serial":
        if workers not in (None, 1):
            raise ParameterError("The serial engine runs one task at a time; drop --workers or choose --engine processes.")
        return SerialEngine()
    if kind == "processes":
        return ProcessEngine(workers if workers is not None else max(1, os.cpu_count() or 1))
    return DaskEngine(address=address, workers=workers)


# ============================================================ split sources
@dataclass(frozen=True)
class Piece:
    """A piece of one source for a map task.

    Attributes
    ----------
    alphabet:
        Alphabet of the codes.
    codes:
        The piece's own ``core`` symbols followed by up to ``overlap``
        lookahead symbols of the next piece.
    starts:
        Real segment starts inside ``codes`` (relative positions, sorted);
        position 0 is listed only if a segment really starts there.
    core:
        Symbols that belong to this piece (words starting at ``0..core-1``).
    offset:
        Position of ``codes[0]`` in the source.
    final:
        True when ``codes`` ends where the source ends.
    index:
        Piece number within its source.
    """

    alphabet: Alphabet
    codes: np.ndarray
    starts: np.ndarray
    core: int
    offset: int
    final: bool
    index: int


def iter_pieces(source: SymbolStream | SymbolArray, chunk: int, overlap: int) -> Iterator[Piece]:
    """Split a source into pieces of ``chunk`` symbols plus ``overlap`` lookahead symbols.

    Memory is bounded by about ``chunk + overlap`` symbols plus one reader
    chunk; the source is read once.  A source with no symbol yields nothing.
    """
    if chunk < 1 or overlap < 0:
        raise ParameterError("The piece size must be positive and the overlap non-negative.")
    alphabet = source.alphabet
    if isinstance(source, SymbolArray):
        chunks: Iterable[Chunk] = [Chunk(source.codes, source.starts)]
    else:
        chunks = source.chunks()
    buf = np.zeros(0, dtype=alphabet.code_dtype)
    bstarts: list[np.ndarray] = []
    offset = 0  # source position of buf[0]
    index = 0
    first = True
    for ch in chunks:
        codes = np.asarray(ch.codes, dtype=alphabet.code_dtype)
        st = np.asarray(ch.starts, dtype=np.int64)
        if first and codes.size:
            st = np.union1d(st, [0])
        if codes.size == 0:
            continue
        first = False
        bstarts.append(st[(st >= 0) & (st < codes.size)] + (offset + buf.size))
        buf = np.concatenate([buf, codes]) if buf.size else codes
        while buf.size >= chunk + overlap + 1:  # keep >= 1 symbol so the last piece is non-empty
            allst = np.concatenate(bstarts) if bstarts else np.zeros(0, np.int64)
            end = chunk + overlap
            rel = allst - offset
            sel = rel[(rel >= 0) & (rel < end)]
            yield Piece(alphabet, buf[:end].copy(), sel, chunk, offset, False, index)
            index += 1
            buf = buf[chunk:]
            offset += chunk
            bstarts = [allst[allst >= offset]]
    if buf.size:
        allst = np.concatenate(bstarts) if bstarts else np.zeros(0, np.int64)
        rel = allst - offset
        yield Piece(alphabet, buf.copy(), rel[(rel >= 0) & (rel < buf.size)], int(buf.size), offset, True, index)


def count_piece(task: tuple[Piece, int]) -> WordCounts:
    """Counts of the words (lengths ``1..depth``) that *start* in a piece's core.

    Summing the results of :func:`iter_pieces` pieces (overlap ``depth - 1``)
    gives exactly :func:`fractalseq.words.count_words` of the whole source.

    The piece is counted with its lookahead (so words crossing the core's end
    are complete); the words starting in the lookahead are exactly those of
    the lookahead counted alone (fewer than ``depth`` symbols: tails only),
    and they are subtracted.
    """
    piece, depth = task
    alphabet = piece.alphabet
    whole = count_words(SymbolArray(alphabet, piece.codes, piece.starts, "piece"), depth)
    tl, ta, tc = whole.tail_len, whole.tail_addr, whole.tail_count
    if piece.core < piece.codes.size:
        look_starts = piece.starts[piece.starts >= piece.core] - piece.core
        look = count_words(SymbolArray(alphabet, piece.codes[piece.core:], look_starts, "lookahead"), depth)
        if look.leaf()[0].size:  # pragma: no cover - a lookahead shorter than depth has no full word
            raise RuntimeError("lookahead longer than the word depth")
        tl, ta, tc = _subtract_tails((tl, ta, tc), (look.tail_len, look.tail_addr, look.tail_count))
    segments = int(np.count_nonzero(piece.starts < piece.core))
    return WordCounts(
        alphabet, whole.depth, int(piece.core), segments,
        whole.dense, whole.leaf_words, whole.leaf_counts, tl, ta, tc,
    )


def _subtract_tails(a, b):
    """Tails ``a - b`` (``b`` is contained in ``a``); entries sorted by (length, address)."""
    al, aa, ac = a
    ac = ac.copy()
    bl, ba, bc = b
    for l, addr, c in zip(bl.tolist(), ba.tolist(), bc.tolist()):
        hit = np.flatnonzero((al == l) & (aa == np.uint64(addr)))
        if hit.size != 1 or ac[hit[0]] < c:  # pragma: no cover - would be a counting bug
            raise RuntimeError("lookahead tail missing from the piece counts")
        ac[hit[0]] -= c
    keep = ac > 0
    return al[keep], aa[keep], ac[keep]


def _add_counts(a: WordCounts, b: WordCounts) -> WordCounts:
    return a + b


def count_words_split(
    source: SymbolStream | SymbolArray,
    depth: int,
    engine: Engine | None = None,
    chunk: int = DEFAULT_PIECE,
    on_done: OnDone | None = None,
) -> WordCounts:
    """Exact word counts of one (large) source, counted piece by piece on an engine.

    Parameters
    ----------
    source:
        The stream to count.
    depth:
        Deepest word length N; pieces overlap by ``N - 1`` symbols.
    engine:
        Where pieces are counted (default: serially).
    chunk:
        Symbols per piece.

    Returns
    -------
    WordCounts
        Equal to ``count_words(source, depth)`` in every count.
    """
    depth = check_depth(source.alphabet, depth)
    engine = engine or SerialEngine()
    tasks = ((p, depth) for p in iter_pieces(source, chunk, depth - 1))
    try:
        return engine.map_reduce(count_piece, tasks, _add_counts, on_done)
    except InputError:
        raise InputError(f"{source.name} holds no symbols to count; give a file with data.") from None

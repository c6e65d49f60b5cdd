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
counted twice (:func:`iter_pieces`, :func:`count_piece`).  An uncompressed
or BGZF FASTA or text file is split into byte ranges that the workers read
themselves (:mod:`fractalseq.sources.ranges`, :func:`count_range`), so only a
path and two offsets travel to a worker.

Arguments and results travel between processes with the standard library's
pickle protocol (as multiprocessing and Dask do); nothing pickled is ever
written to disk.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from typing import Any

import numpy as np

from fractalseq.errors import ParameterError
from fractalseq.jobs._scheduler import DEFAULT_CONNECT_TIMEOUT, check_timeout, parse_address, probe_scheduler
from fractalseq.runner import Engine, SerialEngine

ENGINES: tuple[str, ...] = ("serial", "processes", "dask")
DASK_MISSING = (
    "The dask engine needs the optional Dask packages, which are not installed; "
    "run pip install 'fractalseq[cluster]' or choose --engine serial or processes."
)



class ProcessEngine(Engine):
    """Runs tasks on a pool of local worker processes.

    Parameters
    ----------
    workers:
        Number of worker processes (at least 1).
    """

    name = "processes"

    def __init__(self, workers: int) -> None:
        self.workers = _check_workers(workers, local=True)
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
        self.close()

    def close(self) -> None:
        """Stop the workers: tasks still running (after an interrupt) and idle workers alike.

        Idle workers are stopped rather than sent home: one that has loaded numba's kernels
        takes about a quarter of a second to unwind its interpreter on a graceful exit
        (measured), and it holds nothing to save (results travel back with each task).
        """
        pool, self._pool = self._pool, None
        if pool is None:
            return
        procs = list((getattr(pool, "_processes", None) or {}).values())
        pool.shutdown(wait=False, cancel_futures=True)
        for p in procs:
            if p.is_alive():
                p.terminate()
        for p in procs:
            p.join(timeout=5)


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

    def __init__(
        self, address: str | None = None, workers: int | None = None, client: Any = None,
        timeout: float = DEFAULT_CONNECT_TIMEOUT,
    ) -> None:
        self._own_cluster = None
        self._own_client = client is None
        if client is not None:
            self.client = client
        elif address:
            checked = parse_address(address)  # a bad address is refused before Dask is even imported
            timeout = check_timeout(timeout)
            distributed = import_dask()
            probe_scheduler(checked, timeout)
            try:
                self.client = distributed.Client(checked.url, timeout=f"{timeout}s")
            except (OSError, TimeoutError) as exc:
                raise ParameterError(
                    f"Cannot reach the Dask scheduler at {checked.url} ({exc}); check the address or start the scheduler.",
                    parameter="address",
                ) from None
        else:
            n = _check_workers(workers or 2, local=True)
            distributed = import_dask()
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


#: Local worker processes allowed per core (more only compete for the cores and exhaust file handles).
WORKERS_PER_CORE = 4


def max_local_workers() -> int:
    """The most local worker processes an engine starts on this machine (:data:`WORKERS_PER_CORE` per core)."""
    return WORKERS_PER_CORE * max(1, os.cpu_count() or 1)


def _check_workers(workers: int | None, local: bool = False) -> int:
    if workers is None or isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ParameterError(f"The number of workers must be a positive whole number, not {workers!r}.", parameter="workers")
    cap = max_local_workers()
    if local and workers > cap:
        cores = max(1, os.cpu_count() or 1)
        raise ParameterError(
            f"{int(workers)} local workers are more than this machine's {cores} core{'s' if cores != 1 else ''} can use "
            f"(at most {WORKERS_PER_CORE} per core, {cap} here); ask for {cap} or fewer, or run them on a Dask cluster.",
            parameter="workers",
        )
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


def make_engine(
    kind: str | None = None, workers: int | None = None, address: str | None = None,
    timeout: float = DEFAULT_CONNECT_TIMEOUT,
) -> Engine:
    """Build an engine from command-line style settings.

    Parameters
    ----------
    kind:
        ``serial``, ``processes`` or ``dask``; ``None`` picks ``dask`` when an
        address is given, ``processes`` when ``workers > 1``, else ``serial``.
    workers:
        Local worker processes (processes engine, or a local Dask cluster).
    address:
        Dask scheduler address (``tcp://HOST:PORT``), checked and tried before any work.
    timeout:
        Seconds allowed for reaching the scheduler.

    Raises
    ------
    ParameterError
        Unknown engine, bad worker count (more than :func:`max_local_workers` local
        workers), an address for a non-Dask engine, a malformed or unreachable
        address, or Dask asked for but not installed.
    """
    if kind is None:
        kind = "dask" if address else ("processes" if (workers or 1) > 1 else "serial")
    if kind not in ENGINES:
        raise ParameterError(f"Engine {kind!r} is not known; use one of {', '.join(ENGINES)}.", parameter="engine")
    if address and kind != "dask":
        raise ParameterError("A scheduler address only applies to the dask engine; drop the address or use the dask engine.", parameter="address")
    if kind == "serial":
        if workers not in (None, 1):
            raise ParameterError("The serial engine runs one task at a time; drop the worker count or use the processes engine.", parameter="workers")
        return SerialEngine()
    if kind == "processes":
        return ProcessEngine(workers if workers is not None else max(1, os.cpu_count() or 1))
    return DaskEngine(address=address, workers=workers, timeout=timeout)


"""One in-memory stream handed to the map tasks of a job: read from its file by each worker, or shipped.

A profile on an engine runs a dozen or more tasks over the same whole stream.  Pickled into every
task, a 100-Mbase stream would travel through the pipe (or a scheduler) a dozen times.  When the
stream was read whole from a regular file (:attr:`fractalseq.stream.SymbolArray.reread`), a task
gets a :class:`StreamFile` instead: the path, the reader's options and a checksum of the symbols.
Each worker process reads the file once, checks that it got the same symbols (length, alphabet and
a CRC-32 of the codes and segment starts) and keeps the stream for its next task
(:func:`worker_stream`).  A stream without a file (standard input, a record or column cut from a
larger input, one built in memory) is shipped with each task as before.

Either way a task sees the same codes, segment starts, alphabet and name, so its result is the same.
A cluster's workers need the parent's paths, as for every input read by workers (README, "Cluster").
"""

from __future__ import annotations

import os
import weakref
import zlib
from dataclasses import dataclass
from typing import Any

import numpy as np

from fractalseq.errors import InputError
from fractalseq.stream import SymbolArray

__all__ = ["StreamFile", "stream_for_workers", "worker_stream"]


@dataclass(frozen=True)
class StreamFile:
    """A stream as a task argument: how a worker reads it from its file, and what it must find there.

    Attributes
    ----------
    path:
        Absolute path of the file.
    options:
        The keyword options of :func:`fractalseq.sources.open_source` the parent read it with.
    name:
        The stream's name.
    key:
        ``(size, modification time in ns)`` of the file when the task was made.
    length, check, symbols:
        Symbols, CRC-32 of the codes and the segment starts, and the alphabet's symbols: a worker's
        read must give these.
    """

    path: str
    options: tuple[tuple[str, Any], ...]
    name: str
    key: tuple[int, int]
    length: int
    check: int
    symbols: tuple


def _checksum(codes: np.ndarray, starts: np.ndarray) -> int:
    crc = zlib.crc32(memoryview(np.ascontiguousarray(codes)).cast("B"))
    return zlib.crc32(memoryview(np.ascontiguousarray(starts, dtype=np.int64)).cast("B"), crc)


#: The last stream described by :func:`stream_for_workers` in this process, and its description.
_DESCRIBED: list = [None, None]


def stream_for_workers(arr: SymbolArray) -> SymbolArray | StreamFile:
    """The in-memory stream as map tasks get it: a :class:`StreamFile`, or the codes, segment starts,
    alphabet and name.

    The one place where a whole stream is handed to workers.  A stream read whole from a regular file
    that is still there unchanged goes as its :class:`StreamFile` (read by each worker process once,
    :func:`worker_stream`); any other is shipped with each task.  The reader's report (which may list
    millions of records) stays in the parent; no task result depends on it.
    """
    shipped = SymbolArray(arr.alphabet, arr.codes, arr.starts, arr.name)
    how = getattr(arr, "reread", None)
    if how is None:
        return shipped
    path, options = how
    try:
        st = os.stat(path)
    except OSError:
        return shipped
    key = (int(st.st_size), int(st.st_mtime_ns))
    last, desc = _DESCRIBED
    if last is not None and last() is arr and desc.key == key:
        return desc
    desc = StreamFile(str(path), tuple(sorted(options.items())), str(arr.name), key, len(arr),
                      _checksum(arr.codes, arr.starts), tuple(arr.alphabet.symbols))
    _DESCRIBED[:] = [weakref.ref(arr), desc]
    return desc


#: The stream a worker process read last, by its :class:`StreamFile` (one entry).
_READ: dict[tuple, SymbolArray] = {}


def worker_stream(item: SymbolArray | StreamFile) -> SymbolArray:
    """The stream of a task argument: the shipped stream itself, or the file read once per process and checked."""
    if isinstance(item, SymbolArray):
        return item
    token = (item.path, item.key, item.length, item.check)
    got = _READ.get(token)
    if got is None:
        from fractalseq.sources import open_source

        _READ.clear()  # one stream at a time
        arr = open_source(item.path, **dict(item.options)).to_array()
        st = os.stat(item.path)
        same = ((int(st.st_size), int(st.st_mtime_ns)) == item.key and len(arr) == item.length
                and tuple(arr.alphabet.symbols) == item.symbols and _checksum(arr.codes, arr.starts) == item.check)
        if not same:
            raise InputError(f"{item.path} changed while it was being read by the workers; run the command again.")
        got = _READ[token] = SymbolArray(arr.alphabet, arr.codes, arr.starts, item.name)
    return got

"""Checks made before any work: why a path cannot be opened, and whether a request fits in memory.

Two small rules shared by every reader, writer and option:

- :func:`path_problem` says why a path cannot be used as an input, in words a
  user can act on (a symbolic link loop, a link to nothing, a file where a
  folder was expected in the path, a folder that cannot be searched) instead of
  a blanket "does not exist".
- :func:`check_memory` refuses, before anything is allocated, a request whose
  size follows from an option (bootstrap replicates, permutations, simulated
  length) when even a lower bound of the memory it needs exceeds what this
  process may use (:func:`memory_budget`: physical memory, capped by the
  process's resource limits and its control group).

One setting for jobs that build large tables in parts: :func:`return_freed_arrays`.
"""

from __future__ import annotations

import errno
import os

from fractalseq.errors import ParameterError

__all__ = ["check_memory", "format_bytes", "memory_budget", "path_problem", "return_freed_arrays"]


def format_bytes(n: float) -> str:
    """``n`` bytes in binary units with three significant figures (``'1.5 GiB'``)."""
    value = float(n)
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if abs(value) < 1024 or unit == "PiB":
            return f"{value:.0f} bytes" if unit == "bytes" else f"{value:.3g} {unit}"
        value /= 1024
    return f"{value:.3g} EiB"  # pragma: no cover - unreachable


def _cgroup_limit() -> int | None:
    for name in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            with open(name) as fh:
                text = fh.read().strip()
        except OSError:
            continue
        if text.isdigit():
            return int(text)
    return None


def memory_budget() -> int:
    """Bytes this process may use at most: physical memory, capped by ``RLIMIT_AS``/``RLIMIT_DATA`` and the cgroup."""
    try:
        budget = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):  # pragma: no cover - not a POSIX system
        budget = 1 << 44
    try:
        import resource

        for limit in (resource.RLIMIT_AS, resource.RLIMIT_DATA):
            soft = resource.getrlimit(limit)[0]
            if soft != resource.RLIM_INFINITY and soft > 0:
                budget = min(budget, soft)
    except (ImportError, ValueError, OSError):  # pragma: no cover - not a POSIX system
        pass
    group = _cgroup_limit()
    if group:
        budget = min(budget, group)
    return int(budget)


def check_memory(need: float, what: str, parameter: str, fix: str) -> None:
    """Raise :class:`ParameterError` when ``need`` bytes (a lower bound) exceed :func:`memory_budget`.

    Parameters
    ----------
    need:
        Lower bound of the bytes the request needs (say in ``what`` what it counts).
    what:
        What is being allocated, e.g. ``"1000000000 bootstrap replicates (their block draws, 240 bytes each)"``.
    parameter:
        The library parameter that sets the size (the command line names its option).
    fix:
        What to do, e.g. ``"use fewer replicates"``.
    """
    budget = memory_budget()
    if need > budget:
        raise ParameterError(
            f"{what} would need at least {format_bytes(need)} of memory, more than the {format_bytes(budget)} "
            f"this process may use; {fix}.",
            parameter=parameter,
        )


def path_problem(name: str) -> str | None:
    """Why ``name`` cannot be opened as an input (one clause plus its fix), or ``None`` when it exists.

    The clause follows the name: ``f"{name} {path_problem(name)}"`` is a sentence.
    """
    try:
        os.stat(name)
        return None
    except OSError as exc:
        code = exc.errno
    if code == errno.ELOOP:
        return "is a symbolic link loop (a link that leads back to itself); point the link at a file"
    if code == errno.ENOTDIR:
        return "is not reachable because a part of its path is a file, not a folder; check the path"
    if code == errno.EACCES:
        return "cannot be reached: a folder on its path may not be searched (permission denied); check the permissions"
    if code == errno.ENAMETOOLONG:
        return "is too long a name for the file system; check the path"
    if os.path.islink(name):
        return f"is a symbolic link to {os.readlink(name)}, which does not exist; fix the link or check the path"
    return "does not exist; check the path"


#: Blocks from this size on are mapped apart by the C allocator after :func:`return_freed_arrays`.
MAPPED_BLOCK_BYTES = 1 << 20


def return_freed_arrays(threshold: int = MAPPED_BLOCK_BYTES) -> bool:
    """Have the C allocator map every block of ``threshold`` bytes or more apart, so a freed array leaves the process.

    glibc raises its mapping threshold after each large block freed (up to 32 MiB); arrays of a
    few MiB then come from the heap, and freed among live ones they stay in the process: a job
    that builds a table in parts of a few MiB ends up holding far more than it uses.  Fixing the
    threshold (``mallopt(M_MMAP_THRESHOLD)``) keeps the resident size to what is live.  A
    process-wide setting, meant for a command's process; elsewhere than glibc nothing happens.

    Returns
    -------
    bool
        Whether the allocator took the setting.
    """
    import ctypes
    import ctypes.util

    try:
        mallopt = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6").mallopt
    except (OSError, AttributeError, TypeError):
        return False
    m_mmap_threshold = -3  # glibc's <malloc.h>
    return bool(mallopt(ctypes.c_int(m_mmap_threshold), ctypes.c_int(int(threshold))))

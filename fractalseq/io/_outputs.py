"""Writing results without losing anything.

Every file is written to a temporary name in the destination folder and
renamed into place when complete (``os.replace`` is atomic on POSIX), so an
interrupted run never leaves a half-written file under the final name.
Existing files are only replaced when the caller passes ``force=True``.
"""

from __future__ import annotations

import contextlib
import json
import math
import os
import re
import signal
import tempfile
import threading
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Any, BinaryIO, Callable, Iterable

import numpy as np

from fractalseq.errors import OutputError
from fractalseq.runner import pause_point


def _clean(value: Any) -> Any:
    """Make ``value`` JSON-ready: numpy scalars/arrays to Python, NaN/inf to None."""
    if isinstance(value, dict):
        return {str(k): _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.ndarray):
        return _clean(value.tolist())
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (np.floating, float)):
        f = float(value)
        return f if math.isfinite(f) else None
    if isinstance(value, np.bool_):
        return bool(value)
    if hasattr(value, "to_dict"):
        return _clean(value.to_dict())
    return value


def to_json(data: Any) -> str:
    """Deterministic JSON text: sorted keys, NaN as null, fixed float repr, trailing newline."""
    return json.dumps(_clean(data), indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n"


def json_ready(data: Any) -> Any:
    """``data`` as plain JSON values (numpy to Python, tuples to lists, NaN and infinities to None)."""
    return _clean(data)


def compact_json(data: Any, ready: bool = False) -> str:
    """Deterministic JSON on one line (sorted keys, NaN as null, no spaces): the same values as :func:`to_json`.

    For machine-read files (cache entries) and JSON round trips: Python's C encoder writes it, several
    times faster than the indented form, which the standard library writes in Python.  ``ready=True``:
    ``data`` already went through :func:`json_ready`.
    """
    return json.dumps(data if ready else _clean(data), sort_keys=True, ensure_ascii=False, allow_nan=False, separators=(",", ":"))


#: Real paths of this run's inputs (:func:`protect_inputs`): no output may replace one, even with ``force``.
_protected: set[str] = set()


def protect_inputs(paths: Iterable[str | Path | None]) -> None:
    """Declare the run's inputs (files or folders; ``-`` and missing paths are skipped).

    :func:`check_writable` then refuses an output file that is one of them, and
    :func:`check_folder` an output folder that is or holds one (replacing it with
    ``force`` would delete the input).  The command line declares each command's
    inputs before it checks its outputs; :func:`tracking_folders` forgets them.
    """
    for p in paths:
        if p is None or str(p) in ("", "-") or not os.path.exists(p):
            continue
        _protected.add(os.path.realpath(p))


def _input_inside(folder: Path) -> str | None:
    root = os.path.realpath(folder)
    for p in sorted(_protected):
        if p == root or p.startswith(root.rstrip(os.sep) + os.sep):
            return p
    return None


def _refusal(message: str, parameter: str) -> OutputError:
    """An :class:`OutputError` naming the parameter that would allow the write (the command line adds its option)."""
    error = OutputError(message)
    error.parameter = parameter  # type: ignore[attr-defined]
    return error


def check_writable(path: Path, force: bool, probe: bool = True) -> None:
    """Raise :class:`OutputError` if ``path`` exists and ``force`` is false, or its folder is unusable.

    ``probe=False`` leaves out the trial file of :func:`probe_writable` (for a caller that creates
    its own file in the same, existing folder next and turns a refusal into the same kind of sentence).
    """
    path = Path(path)
    if path.exists() and path.is_dir():
        raise OutputError(f"{path} is a folder, not a file; give a file name.")
    if os.path.lexists(path) and not path.exists():
        raise OutputError(f"{path} is a symbolic link that leads nowhere (or to itself); remove it or give another file name.")
    if path.exists() and not path.is_file():
        # a device, a pipe or a socket: replacing it by a renamed file (as --force would) must never happen
        raise OutputError(f"{path} is a {_special_kind(path)}, not a regular file; give a file name.")
    # (a symbolic link to an input is replaced by the rename, never written through: the input is untouched)
    if path.exists() and not path.is_symlink() and os.path.realpath(path) in _protected:
        raise OutputError(f"{path} is one of the inputs and writing it would destroy it; give another output file name.")
    if path.exists() and not force:
        raise _refusal(f"{path} already exists; allow overwriting it or choose another name.", "force")
    parent = path.parent if str(path.parent) else Path(".")
    if parent.exists() and not parent.is_dir():
        raise OutputError(f"{parent} is a file, not a folder; choose another output folder.")
    if probe:
        probe_writable(path)


def _nearest_existing(folder: Path) -> Path:
    for candidate in (folder, *folder.parents):
        if os.path.lexists(candidate):
            return candidate
    return Path(".")  # pragma: no cover - a relative path always ends at "."


def probe_writable(path: Path | str, shown: Path | str | None = None) -> None:
    """Refuse, before any work, an output ``path`` whose folder this process cannot write.

    Creates and removes one empty temporary file named like :func:`write_bytes`'s
    temporaries (``.NAME.XXXXXXXX.part``) in the folder that will receive
    ``path`` (or in the nearest existing folder above it, where the missing
    folders would be created), so a read-only folder, a read-only file system
    or a missing permission is found before the computation, and the message
    names the user's path, never a temporary name.
    """
    path = Path(path)
    label = path if shown is None else shown  # the user's path, as given
    parent = path.parent if str(path.parent) else Path(".")
    where = _nearest_existing(parent)
    if not where.is_dir():
        raise OutputError(f"{where} is a file, not a folder; choose another place for {label}.")
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=where)
    except OSError as exc:
        raise OutputError(
            f"{label} cannot be written: {where} refuses new files ({exc.strerror}); choose another place or fix its permissions."
        ) from None
    os.close(fd)
    try:
        os.unlink(tmp)
    except OSError:  # pragma: no cover - removed by someone else
        pass


def _special_kind(path: Path) -> str:
    import stat

    mode = os.stat(path).st_mode
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "device"
    if stat.S_ISFIFO(mode):
        return "named pipe"
    if stat.S_ISSOCK(mode):
        return "socket"
    return "special file"


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _current_umask()


@contextlib.contextmanager
def _signals_deferred():
    """Hold SIGINT/SIGTERM back while a file is being written and renamed (main thread only).

    A Ctrl-C that arrives mid-write is delivered right after the rename, so a
    temporary file is never left behind by an interruption.
    """
    if threading.current_thread() is not threading.main_thread() or not hasattr(signal, "pthread_sigmask"):
        yield
        return
    held = {signal.SIGINT, signal.SIGTERM}
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


def _process_start() -> float:
    """When this process started (:func:`time.time` scale); the module's import time where unknown."""
    try:
        with open("/proc/self/stat", "rb") as fh:
            ticks = int(fh.read().rsplit(b")", 1)[1].split()[19])  # field 22: start time in clock ticks
        with open("/proc/stat", "rb") as fh:
            boot = next(int(line.split()[1]) for line in fh if line.startswith(b"btime "))
        return boot + ticks / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError, StopIteration):
        return time.time()


#: Temporary files whose last change is older than this are not being written by this process.
PROCESS_START = _process_start()
#: The random part :func:`tempfile.mkstemp` puts in a name (8 of these characters).
_MKSTEMP_PART = r"[a-z0-9_]{8}"
_MKSTEMP_RE = re.compile(_MKSTEMP_PART)


def remove_stale_parts(path: Path | str, before: float | None = None) -> int:
    """Remove temporary files an interrupted write of ``path`` left in its folder; return how many.

    Only files named exactly as :func:`write_bytes` names its temporary files
    for this path (``.NAME.XXXXXXXX.part``) and last changed before ``before``
    (default: this process's start, so a write in progress elsewhere is left
    alone) are removed; anything else is never touched.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    limit = PROCESS_START if before is None else before
    prefix = f".{path.name}."  # names .NAME.XXXXXXXX.part (compared as strings: no regex compiled per path)
    removed = 0
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return 0
    for entry in entries:
        name = entry.name
        if not (name.startswith(prefix) and name.endswith(".part") and _MKSTEMP_RE.fullmatch(name[len(prefix) : -len(".part")])):
            continue
        try:
            if not entry.is_file(follow_symlinks=False) or entry.stat(follow_symlinks=False).st_mtime >= limit:
                continue
            os.unlink(entry.path)
            removed += 1
        except OSError:
            continue
    return removed


def write_bytes(path: Path | str, data: bytes | Callable[[BinaryIO], None], force: bool = False, sync: bool = True) -> Path:
    """Atomically write ``data`` to ``path`` (temporary file in the same folder, then rename).

    ``data`` is the bytes, or a function that writes them into the open (seekable) temporary file,
    so a large file is streamed instead of being held in memory first.  ``sync=False`` skips the
    ``fsync`` before the rename (still atomic, not durable across a power cut): for files that carry
    their own checksum and are recomputed when damaged (cache entries).  Temporary files of an
    earlier, killed write of the same path are removed first (:func:`remove_stale_parts`).
    """
    path = Path(path)
    # an existing folder: the temporary file below is the probe (its refusal is one sentence too)
    check_writable(path, force, probe=not path.parent.is_dir())
    path.parent.mkdir(parents=True, exist_ok=True)
    remove_stale_parts(path)
    with _signals_deferred():
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
        except OSError as exc:
            raise OutputError(f"{path} cannot be written ({exc.strerror}); choose another place or fix its permissions.") from None
        try:
            os.fchmod(fd, 0o666 & ~_UMASK)  # mkstemp makes 0600; give the usual permissions
            with os.fdopen(fd, "wb") as fh:
                if callable(data):
                    data(fh)
                else:
                    fh.write(data)
                fh.flush()
                if sync:
                    os.fsync(fh.fileno())
            os.replace(tmp, path)
        except BaseException as exc:
            try:
                os.unlink(tmp)
            except FileNotFoundError:
                pass
            if isinstance(exc, OSError) and not isinstance(exc, OutputError):
                # name the user's path, never the temporary file (a full disk, a quota, a vanished folder)
                raise OutputError(
                    f"{path} could not be written ({exc.strerror or exc}); free space or choose another place."
                ) from None
            raise
    for stage in _open_stages:
        if stage.path in path.parents:
            stage.files += 1
            pause_point("report.file", stage.files)
    return path


def write_text(path: Path | str, text: str, force: bool = False, sync: bool = True) -> Path:
    """Atomically write UTF-8 text (``sync`` as in :func:`write_bytes`)."""
    return write_bytes(path, text.encode("utf-8"), force=force, sync=sync)


def write_json(path: Path | str, data: Any, force: bool = False) -> Path:
    """Atomically write deterministic JSON (see :func:`to_json`)."""
    return write_text(path, to_json(data), force=force)


def write_csv(path: Path | str, header: Iterable[str], rows: Iterable[Iterable[Any]], force: bool = False) -> Path:
    """Atomically write a CSV table (floats with 10 significant digits, None as empty)."""
    import csv
    import io

    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(header))
    for row in rows:
        out = []
        for v in row:
            v = _clean(v)
            if v is None:
                out.append("")
            elif isinstance(v, float):
                out.append(f"{v:.10g}")
            else:
                out.append(v)
        w.writerow(out)
    return write_text(path, buf.getvalue(), force=force)


#: Folders created by :func:`prepare_folder` while :func:`tracking_folders` is active.
_created: list[Path] | None = None


def prepare_folder(folder: Path | str, force: bool) -> Path:
    """Create an output folder; refuse a file, or a non-empty folder without ``force``."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder} is a file, not a folder; choose another output folder.")
    if folder.exists() and any(p for p in folder.iterdir() if not p.name.startswith(".")) and not force:
        raise _refusal(f"{folder} already holds files; allow overwriting them or choose another folder.", "force")
    top = None  # the outermost folder this call creates
    for candidate in (folder, *folder.parents):
        if candidate.exists():
            break
        top = candidate
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError(f"Cannot create the output folder {folder} ({exc.strerror}); choose another place.") from None
    if top is not None and _created is not None:
        _created.append(top)
    probe_writable(folder / "report", shown=folder)
    return folder


def _holds_files(folder: Path) -> bool:
    return any(not p.is_dir() for p in folder.rglob("*"))


@contextmanager
def tracking_folders():
    """Track the output folders :func:`prepare_folder` creates; yields a function that removes the empty ones.

    The command line calls the yielded function when a run fails, so a run
    refused for bad input leaves no empty output folder behind.  Folders that
    hold any file (for example a survey's result cache) are kept.
    """
    global _created
    outer, _created = _created, []
    protected_before = set(_protected)
    mine = _created
    stages_before = list(_open_stages)

    def discard_empty() -> None:
        import shutil

        for stage in [st for st in _open_stages if st not in stages_before]:
            stage.discard()
        for top in reversed(mine):
            if top.is_dir() and not _holds_files(top):
                shutil.rmtree(top, ignore_errors=True)

    try:
        yield discard_empty
    finally:
        _created = outer
        _protected.clear()
        _protected.update(protected_before)
        for stage in [st for st in _open_stages if st not in stages_before]:
            stage.discard()  # a run that ended without committing its report folder leaves no trace


def write_npz(path: Path | str, arrays: dict[str, np.ndarray], force: bool = False) -> Path:
    """Atomically write a numpy ``.npz`` archive (plain arrays, no object arrays)."""
    import io

    for k, a in arrays.items():
        if np.asarray(a).dtype == object:
            raise ValueError(f"array {k} has dtype object, which cannot be saved without pickle")
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return write_bytes(path, buf.getvalue(), force=force)


# ------------------------------------------------------------------ report folders written as a whole
def check_folder(folder: Path | str, force: bool) -> Path:
    """Refuse a file, or a folder holding visible files without ``force``; create nothing.

    Returns the folder to write (a symbolic link to a folder is followed, so the
    folder it points to is replaced, never the link).
    """
    given = Path(folder)  # named in messages as the user wrote it
    if given.exists() and not given.is_dir():
        raise OutputError(f"{given} is a file, not a folder; choose another output folder.")
    # (a folder holding the working directory is filled in place, entry by entry, never replaced)
    inside = _input_inside(given) if given.exists() and not _holds_cwd(Path(os.path.abspath(given))) else None
    if inside is not None:
        raise OutputError(f"The output folder {given} holds the input {inside}, which replacing the folder would "
                          "delete; choose another output folder.")
    if given.exists() and any(p for p in given.iterdir() if not p.name.startswith(".")) and not force:
        raise _refusal(f"{given} already holds files; allow overwriting them or choose another folder.", "force")
    folder = Path(os.path.abspath(given))  # "." and "out/.." get a name and a parent
    folder = folder.resolve() if folder.is_symlink() and folder.is_dir() else folder
    # the report is built beside the folder and renamed into place: its parent must take new entries
    probe_writable(folder / "report", shown=given)
    if folder.is_dir():
        probe_writable(folder.parent / folder.name, shown=given)
    return folder


#: Staged report folders opened and not yet committed or discarded.
_open_stages: list["StagedFolder"] = []
_PARTIAL = ".partial-"
_OLD = ".old-"


class StagedFolder:
    """A report folder built under a hidden sibling name and renamed into place as a whole.

    ``StagedFolder(folder, force)`` checks ``folder`` as :func:`prepare_folder`
    does (a file, or a folder holding visible files without ``force``, is refused)
    and creates the sibling ``.NAME.partial-XXXXXXXX`` in the same parent; the
    writers write into :attr:`path`; :meth:`commit` renames it to ``folder``
    (``os.rename`` of a folder is atomic on one file system).  An existing
    ``folder`` (empty, or replaced with ``force``) is swapped: renamed away to
    ``.NAME.old-XXXXXXXX``, the new one renamed in, the old one removed.  Hidden
    entries of the existing folder that the new one lacks (a survey's ``.cache``)
    are moved into the new folder first, so they survive.  An interrupted run
    (:meth:`discard`, or the command line's :func:`tracking_folders`) leaves
    nothing under the final name; siblings left by a killed run (no live process
    holds their ``flock``; where locks are unavailable, older than this process)
    are removed when the same folder is staged again.

    Also a context manager: commits on success, discards on any exception.
    """

    def __init__(self, folder: Path | str, force: bool) -> None:
        folder = check_folder(folder, force)
        parent = folder.parent if str(folder.parent) else Path(".")
        top = None  # the outermost parent folder this call creates (removed by the command line if the run fails)
        for candidate in (parent, *parent.parents):
            if candidate.exists():
                break
            top = candidate
        try:
            parent.mkdir(parents=True, exist_ok=True)
            if top is not None and _created is not None:
                _created.append(top)
            _remove_stale_stages(parent, folder.name)
            self.path = Path(tempfile.mkdtemp(prefix=f".{folder.name}{_PARTIAL}", dir=parent))
            os.chmod(self.path, 0o777 & ~_UMASK)  # mkdtemp makes 0700; give the usual permissions
            self._lock = _lock_folder(self.path)  # held while this process lives: the sibling is not stale
        except OSError as exc:
            raise OutputError(f"Cannot create the output folder {folder} ({exc.strerror}); choose another place.") from None
        self.folder = folder
        self.files = 0
        self.done = False
        _open_stages.append(self)

    def commit(self) -> Path:
        """Move the finished folder into place (carrying hidden entries of an existing one); return its path."""
        import shutil

        if self.done:
            return self.folder
        if self.folder.is_dir() and _holds_cwd(self.folder):
            return self._merge_into_place()
        with _signals_deferred():
            old = None
            if self.folder.is_dir():
                for entry in sorted(self.folder.iterdir()):
                    if entry.name.startswith(".") and not (self.path / entry.name).exists():
                        os.rename(entry, self.path / entry.name)
                old = Path(tempfile.mkdtemp(prefix=f".{self.folder.name}{_OLD}", dir=self.folder.parent))
                os.rename(self.folder, old / "folder")
            os.rename(self.path, self.folder)
            self.done = True
            _open_stages.remove(self)
            self._release()
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
        return self.folder

    def _merge_into_place(self) -> Path:
        """Commit into a folder that holds the working directory (never renamed away): entry by entry."""
        import shutil

        with _signals_deferred():
            for entry in sorted(self.path.iterdir()):
                target = self.folder / entry.name
                if target.is_dir() and not target.is_symlink() and entry.is_dir():
                    shutil.rmtree(target)
                os.replace(entry, target)
            self.done = True
            _open_stages.remove(self)
            self._release()
        shutil.rmtree(self.path, ignore_errors=True)
        return self.folder

    def _release(self) -> None:
        fd, self._lock = getattr(self, "_lock", None), None
        if fd is not None:
            os.close(fd)

    def discard(self) -> None:
        """Remove the unfinished folder (nothing is left under the final name)."""
        import shutil

        if self.done:
            return
        self.done = True
        self._release()
        if self in _open_stages:
            _open_stages.remove(self)
        shutil.rmtree(self.path, ignore_errors=True)

    def __enter__(self) -> Path:
        return self.path

    def __exit__(self, kind, value, tb) -> None:
        if kind is None:
            self.commit()
        else:
            self.discard()


def _holds_cwd(folder: Path) -> bool:
    """Whether ``folder`` is the working directory or one of its parents."""
    try:
        cwd = Path(os.getcwd()).resolve()
    except OSError:
        return False
    target = folder.resolve()
    return cwd == target or target in cwd.parents


def _lock_folder(path: Path) -> int | None:
    """Hold an exclusive ``flock`` on the folder ``path`` (its descriptor stays open while this process lives).

    A staged folder is locked by the run that builds it; the lock goes with the
    process, so a sibling nobody holds is the leftover of a killed run, whatever
    its time stamps say.  ``None`` where locks are not available.
    """
    try:
        import fcntl

        fd = os.open(path, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0) | getattr(os, "O_CLOEXEC", 0))
    except (ImportError, OSError):
        return None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        os.close(fd)
        return None
    return fd


def _unheld(path: str) -> bool | None:
    """True when no process holds the folder's lock, False when one does, None when that cannot be told."""
    fd = _lock_folder(Path(path))
    if fd is not None:
        os.close(fd)
        return True
    try:
        import fcntl  # noqa: F401 - locks exist, so the failure means someone holds it
    except ImportError:
        return None
    return False if os.path.isdir(path) else None


def _remove_stale_stages(parent: Path, name: str) -> None:
    """Remove ``.NAME.partial-XXXXXXXX`` / ``.NAME.old-XXXXXXXX`` siblings a killed run left.

    A ``partial`` sibling is stale when no live process holds its lock (a run
    holds the lock of the folder it builds until it ends); where locks cannot be
    told, and for ``old`` siblings (which live only for the instant of a swap),
    when it is older than this process.
    """
    import shutil

    pattern = re.compile(re.escape(f".{name}") + "(" + re.escape(_PARTIAL) + "|" + re.escape(_OLD) + ")" + _MKSTEMP_PART)
    for entry in os.scandir(parent):
        try:
            match = pattern.fullmatch(entry.name)
            if not match or not entry.is_dir(follow_symlinks=False):
                continue
            free = _unheld(entry.path) if match.group(1) == _PARTIAL else None
            if free is False:
                continue
            if free or entry.stat(follow_symlinks=False).st_mtime < PROCESS_START:
                shutil.rmtree(entry.path, ignore_errors=True)
        except OSError:
            continue

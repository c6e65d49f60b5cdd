"""The sources of a job: files, folders, glob patterns and list files, each with a display name."""

from __future__ import annotations

import glob
import itertools
import os
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable, Iterator, Sequence

from fractalseq.errors import InputError

_GLOB_CHARS = set("*?[")

__all__ = ["SourceSpec", "expand_inputs", "is_stream_path"]


def is_stream_path(path: str) -> bool:
    """True for standard input (``-``) and for a pipe or character device given by path (``<(cmd)``, a FIFO).

    Such an input can be read once only: jobs that need it more than once read it
    into memory (or a temporary copy) first, as they do standard input.
    """
    if path == "-":
        return True
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return False
    return stat.S_ISFIFO(mode) or stat.S_ISCHR(mode) or stat.S_ISSOCK(mode)


@dataclass(frozen=True)
class SourceSpec:
    """One input of a survey: a path (``-`` for standard input), its display name, and for one column of a
    numeric table read as its own source (``--column a,b`` or ``all``), that column (``None``: the reader's)."""

    path: str
    name: str
    column: str | None = None


def _folder_files(folder: Path) -> list[Path]:
    return sorted(p for p in folder.rglob("*") if p.is_file() and not any(part.startswith(".") for part in p.relative_to(folder).parts))


def _identity(path: str) -> tuple[int, int] | str:
    """What makes two paths the same input: device and inode (one stat, no walk of the path), else the real path."""
    try:
        st = os.stat(path)
    except OSError:
        return os.path.realpath(path)
    return (st.st_dev, st.st_ino)


def _list_entries(list_file: str | None, stdin_lines: Sequence[str] | None) -> Iterator[tuple[str, Path]]:
    """The entries of a list file, read line by line (a list of a million lines is never held as text)."""
    if list_file is None:
        return
    if list_file == "-":
        lines: Iterable[str] = stdin_lines or []
        base = Path(".")
        for ln in lines:
            ln = ln.strip()
            if ln and not ln.startswith("#"):
                yield ln, base
        return
    lp = Path(list_file)
    try:
        fh = open(lp, encoding="utf-8")
    except (FileNotFoundError, NotADirectoryError) as exc:
        from fractalseq.guards import path_problem

        why = path_problem(str(lp)) or f"cannot be read ({exc.strerror}); check the path"
        raise InputError(f"The list file {list_file} {why}.") from None
    except OSError as exc:
        raise InputError(f"The list file {list_file} cannot be read ({exc.strerror or exc}); give a UTF-8 text file.") from None
    with fh:
        try:
            for ln in fh:
                ln = ln.strip()
                if ln and not ln.startswith("#"):
                    yield ln, lp.parent
        except (OSError, UnicodeDecodeError) as exc:
            raise InputError(f"The list file {list_file} cannot be read ({exc}); give a UTF-8 text file.") from None


def expand_inputs(items: Sequence[str], list_file: str | None = None, stdin_lines: Sequence[str] | None = None) -> list[SourceSpec]:
    """Turn files, folders, glob patterns and a list file into a list of sources.

    Parameters
    ----------
    items:
        Paths: a file; a folder (every non-hidden file below it, sorted);
        a glob pattern such as ``genomes/*.fa.gz`` (``**`` recurses); or
        ``-`` for standard input.
    list_file:
        A text file with one path (or pattern) per line; blank lines and
        lines starting with ``#`` are skipped; relative paths are relative
        to the list file's folder.  ``-`` reads the list from ``stdin_lines``.
    stdin_lines:
        Lines of the list when ``list_file`` is ``-``.

    Returns
    -------
    list of SourceSpec
        In the order given, duplicates removed; names are file names, or
        paths relative to the current folder when two file names clash.

    Raises
    ------
    InputError
        A path that does not exist, a pattern or folder matching no file, or
        no input at all.
    """
    raw = itertools.chain(((it, None) for it in items), _list_entries(list_file, stdin_lines))
    paths: list[str] = []
    for item, base in raw:
        if item == "-":
            paths.append("-")
            continue
        p = Path(item)
        if base is not None and not p.is_absolute():
            p = base / p
        try:
            mode = os.stat(p).st_mode
        except (OSError, ValueError):
            mode = 0
        if stat.S_ISDIR(mode):
            found = _folder_files(p)
            if not found:
                raise InputError(f"The folder {item} holds no files; give a folder with inputs.")
            paths.extend(str(f) for f in found)
        elif mode:
            paths.append(str(p))  # a regular file, or a pipe or device the reader will judge
        elif _GLOB_CHARS & set(str(p)):
            found = sorted(f for f in glob.glob(str(p), recursive=True) if Path(f).is_file())
            if not found:
                raise InputError(f"The pattern {item} matches no file; check the pattern (quote it for the shell).")
            paths.extend(found)
        else:
            from fractalseq.guards import path_problem

            raise InputError(f"Input {item} {path_problem(str(p)) or 'is neither a file nor a folder; give a file'}.")
    if not paths:
        raise InputError("No inputs were given; name files, folders, patterns or a list file.")
    if paths.count("-") > 1 or ("-" in paths and list_file == "-"):
        raise InputError("Standard input can be read only once; give '-' once and not together with a list read from standard input.")
    seen: set = set()
    unique: list[str] = []
    for p in paths:
        key = p if p == "-" else _identity(p)
        if key not in seen:
            seen.add(key)
            unique.append(p)
    names = [("stdin" if p == "-" else Path(p).name) for p in unique]
    if len(set(names)) < len(names):
        names = [("stdin" if p == "-" else os.path.relpath(p)) for p in unique]
    if len(set(names)) < len(names):
        names = [("stdin" if p == "-" else os.path.abspath(p)) for p in unique]
    return [SourceSpec(p, n) for p, n in zip(unique, names)]

"""Per-source result cache keyed by content hash and parameters.

A corpus job (survey, drift) computes figures per source.  Each finished
source is stored under a key that is the SHA-256 of

* the source's *content hash* (SHA-256 of the file's bytes as stored, or of
  the decoded symbols for standard input), and
* every parameter that changes the result (alphabet, depth, seed, ...) plus
  the cache format version,

so a changed file or a changed option never reuses a stale entry, and an
interrupted job resumes where it stopped: finished sources are read back,
the rest are computed.

An entry is two files written atomically (:mod:`fractalseq.io._outputs`): an
``.npz`` container of plain arrays (:mod:`fractalseq.io._npz`, each array
checksummed, read with :func:`~fractalseq.io._npz.read_container`, never
pickle) and a ``.json`` holding the results, the SHA-256 of the arrays file
and the SHA-256 of its own content (``entry_sha256``, over the deterministic
one-line JSON of the other keys, :func:`~fractalseq.io._outputs.compact_json`).  The ``.json`` is written last, so its presence marks
a complete entry.  An entry whose JSON or arrays fail a check (hand-edited,
damaged) is reported by :meth:`ResultCache.lookup` as damaged, and the job
recomputes it with a note.

:meth:`ResultCache.prune` removes the entries a finished job did not use
(the survey does this for its own ``OUT/.cache`` folder), so the folder holds
the entries of the last run rather than of every run before it.
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path
from typing import Any, Iterable

import numpy as np

from fractalseq.errors import InputError, ModelFileError, OutputError
from fractalseq.io._npz import read_container, write_container
from fractalseq.io._outputs import compact_json, json_ready, write_text

#: Bump when the meaning of cached results changes (2: checksummed JSON, arrays in the checked container;
#: 3: the entry's JSON on one line, its checksum over that line).
CACHE_VERSION = 3
#: The ``format`` of a cache entry's arrays container.
ARRAYS_FORMAT = "fractalseq-cache-arrays"
_BLOCK = 1 << 20
#: File names of a complete entry's two files, and of the temporary files of an interrupted write.
_ENTRY_FILE = re.compile(r"^([0-9a-f]{64})\.(?:json|npz)$")
_TEMP_FILE = re.compile(r"^\.([0-9a-f]{64})\.(?:json|npz)\..*\.part$")
_SUBFOLDER = re.compile(r"^[0-9a-f]{2}$")


def file_hash(path: str | Path) -> str:
    """SHA-256 (hex) of a file's bytes, read in 1 MiB blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(_BLOCK)
            if not block:
                break
            h.update(block)
    return h.hexdigest()


def array_hash(*arrays: np.ndarray, extra: str = "") -> str:
    """SHA-256 (hex) of arrays' bytes, dtypes and shapes plus an extra text."""
    h = hashlib.sha256()
    for a in arrays:
        a = np.ascontiguousarray(a)
        h.update(f"{a.dtype.str}{a.shape}".encode())
        h.update(a.tobytes())
    h.update(extra.encode())
    return h.hexdigest()


def cache_key(content: str, params: dict[str, Any]) -> str:
    """Key of one source's results: SHA-256 of its content hash and the parameters."""
    text = json.dumps({"content": content, "params": params, "version": CACHE_VERSION}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


class ResultCache:
    """A folder of cached per-source results.

    Parameters
    ----------
    folder:
        Where entries live (created on first write).  ``None`` disables the
        cache: :meth:`get` always misses and :meth:`put` does nothing.
    """

    def __init__(self, folder: str | Path | None) -> None:
        self.folder = Path(folder) if folder is not None else None
        if self.folder is not None and self.folder.exists() and not self.folder.is_dir():
            error = OutputError(f"The cache path {self.folder} is a file, not a folder; choose another cache folder.")
            error.parameter = "cache"  # type: ignore[attr-defined]  (the command line names its option)
            raise error

    @property
    def enabled(self) -> bool:
        return self.folder is not None

    def _paths(self, key: str) -> tuple[Path, Path]:
        assert self.folder is not None
        sub = self.folder / key[:2]
        return sub / f"{key}.json", sub / f"{key}.npz"

    def lookup(self, key: str) -> tuple[tuple[dict, dict[str, np.ndarray]] | None, str | None]:
        """The cached ``(results, arrays)`` of ``key`` (or ``None``) and why an existing entry was not used.

        Returns
        -------
        tuple
            ``(entry, problem)``: ``entry`` is ``None`` when there is no usable entry;
            ``problem`` is ``None`` when the entry is usable or simply absent, else a
            short phrase ("its JSON fails its checksum", ...) for a note.
        """
        if self.folder is None:
            return None, None
        jpath, npath = self._paths(key)
        if not jpath.exists():
            return None, None
        try:
            entry = json.loads(jpath.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            return None, "its JSON cannot be read"
        if not isinstance(entry, dict) or not isinstance(entry.get("results"), dict):
            return None, "its JSON is not a cache entry"
        body = {k: v for k, v in entry.items() if k != "entry_sha256"}
        if entry.get("entry_sha256") != hashlib.sha256(compact_json(body).encode("utf-8")).hexdigest():
            return None, "its JSON fails its checksum"
        if entry.get("key") != key:
            return None, "its JSON belongs to another entry"
        try:
            blob = npath.read_bytes()
        except OSError:
            return None, "its arrays file is missing"
        if entry.get("arrays_sha256") != hashlib.sha256(blob).hexdigest():
            return None, "its arrays file fails its checksum"
        try:
            _, arrays = read_container(npath, ARRAYS_FORMAT, expected_version=CACHE_VERSION)
        except (InputError, ModelFileError):
            return None, "its arrays file is damaged"
        return (entry["results"], arrays), None

    def get(self, key: str) -> tuple[dict, dict[str, np.ndarray]] | None:
        """The cached ``(results, arrays)`` of ``key``, or ``None`` if absent or damaged (see :meth:`lookup`)."""
        return self.lookup(key)[0]

    def put(self, key: str, results: dict, arrays: dict[str, np.ndarray] | None = None) -> None:
        """Store one entry (arrays first, then the JSON that marks it complete)."""
        if self.folder is None:
            return
        jpath, npath = self._paths(key)
        # no fsync: an entry damaged by a crash fails its checksums and is recomputed (one fsync per file
        # was 11 ms of waiting per file here, the parent's largest cost in a survey of thousands of sources)
        write_container(npath, {"format": ARRAYS_FORMAT, "version": CACHE_VERSION},
                        {k: np.asarray(v) for k, v in (arrays or {}).items()}, force=True, sync=False)
        entry = json_ready({"key": key, "arrays_sha256": file_hash(npath), "results": results})  # cleaned once, encoded twice
        entry["entry_sha256"] = hashlib.sha256(compact_json(entry, ready=True).encode("utf-8")).hexdigest()
        write_text(jpath, compact_json(entry, ready=True) + "\n", force=True, sync=False)

    def __contains__(self, key: str) -> bool:
        return self.get(key) is not None

    def prune(self, keep: Iterable[str], before: float | None = None) -> int:
        """Remove every entry whose key is not in ``keep``; return how many entries were removed.

        Parameters
        ----------
        keep:
            Keys of the entries to keep (those the finished job used).
        before:
            A :func:`time.time` value, normally when the job started: only files
            last modified earlier are removed, so entries that another job
            sharing the folder wrote in the meantime survive.  ``None``: no limit.

        Notes
        -----
        Only the cache's own files are touched: the ``.json``/``.npz`` pair of an
        entry (also a half-written entry whose ``.json`` is missing), temporary
        files left by an interrupted write, and sub-folders left empty.  A file
        that cannot be removed is left in place.
        """
        if self.folder is None or not self.folder.is_dir():
            return 0
        keep = set(keep)
        removed: set[str] = set()
        for sub in sorted(self.folder.iterdir()):
            if not (sub.is_dir() and _SUBFOLDER.match(sub.name)):
                continue
            for f in sorted(sub.iterdir()):
                entry = _ENTRY_FILE.match(f.name)
                temp = _TEMP_FILE.match(f.name)
                if not (entry or temp) or (entry and entry.group(1) in keep):
                    continue
                try:
                    if before is not None and f.stat().st_mtime >= before:
                        continue
                    f.unlink()
                except OSError:
                    continue
                if entry:
                    removed.add(entry.group(1))
            try:
                sub.rmdir()  # only succeeds when nothing is left in it
            except OSError:
                pass
        return len(removed)

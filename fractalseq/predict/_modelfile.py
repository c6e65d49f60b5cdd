"""The model file: a plain state (a JSON header and arrays) written and read with checksums, never pickled.

This module knows nothing of the predictor: it writes and reads a
:class:`ModelState` (a header dictionary plus named arrays).  The predictor
turns itself into a state (:meth:`~fractalseq.predict._predictor.CellPredictor.to_state`)
and builds itself from one (:meth:`~fractalseq.predict._predictor.CellPredictor.from_state`).

Format (version 1)
------------------
A ZIP archive in numpy's ``.npz`` layout (``numpy.savez_compressed``) whose
members are plain arrays only, so it loads with ``allow_pickle=False``:

``header``
    ``uint8`` bytes of a UTF-8 JSON object::

        {
          "format": "fractalseq-model",
          "version": 1,
          "alphabet": {"name": ..., "symbols": [...], "case_insensitive": ..., "ambiguous": ...},
          "params": {"depths": ..., "max_depth": ..., "smoothing": ..., "discount": ...,
                     "max_cells": ..., "learning_rate": ..., "reverse_complement": ...},
          "ladder": [cell depths of the predictor],
          "depths": [every stored depth: 0..K for the baseline, then the ladder],
          "reverse_complement": true/false,
          "training": {"symbols": ..., "segments": ..., "pruned_cells": ..., "max_cells": ...},
          "baseline": {"max_order": K, "order": k, "bits_per_symbol_by_order": {"0": ..., ...}},
          "reader": {how the training data were read: numeric cut points, column...},
          "sha256": {"cells_0": "<hex>", "counts_0": "<hex>", ...},
          "software": "fractalseq <version>"
        }

``cells_<n>``
    ``uint64``, sorted strictly increasing addresses of the stored cells of
    depth ``n`` (the last ``n`` symbols packed ``b`` bits each, first symbol
    most significant).
``counts_<n>``
    ``uint32`` ``(cells, A)``: how often each symbol followed each cell.

The checksum of an array is the SHA-256 of its raw bytes (C order, the
dtype above).  Reading checks the format name, the version, every checksum,
the dtypes and shapes of the cell tables and their order, and refuses
anything else with one sentence (:class:`~fractalseq.errors.ModelFileError`).
"""

from __future__ import annotations

import hashlib
import io
import json
import zipfile
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from fractalseq.errors import InputError, ModelFileError
from fractalseq.io._outputs import write_bytes

FORMAT = "fractalseq-model"
VERSION = 1
#: Header keys the file layer adds and checks itself (not part of a model's own state).
_ENVELOPE = ("format", "version", "sha256", "software")


@dataclass(frozen=True)
class ModelState:
    """What a model file holds: a JSON-ready header and the cell tables.

    Attributes
    ----------
    header:
        The model's description (alphabet, params, ladder, depths, training, baseline, reader);
        plain JSON types only.
    arrays:
        ``cells_<n>`` (uint64 sorted addresses) and ``counts_<n>`` (uint32 ``(cells, A)``) of every stored depth.
    origin:
        Where the state was read from (for messages); empty for a state built in memory.
    """

    header: dict[str, Any]
    arrays: dict[str, np.ndarray] = field(default_factory=dict)
    origin: str = ""

    def tables(self, depths, A: int) -> dict[int, tuple[np.ndarray, np.ndarray]]:
        """``{n: (cells, counts)}`` of the given depths, checked for type, shape and order."""
        where = self.origin or "The model state"
        out = {}
        for n in depths:
            kc, kn = f"cells_{n}", f"counts_{n}"
            if kc not in self.arrays or kn not in self.arrays:
                raise ModelFileError(f"{where} lacks the cells of depth {n}; the file is damaged, learn the model again.")
            cells, counts = self.arrays[kc], self.arrays[kn]
            if cells.dtype != np.uint64 or counts.dtype != np.uint32 or counts.ndim != 2 or counts.shape != (cells.size, A):
                raise ModelFileError(f"{where} has cells of depth {n} with the wrong type or shape; learn the model again.")
            if cells.size > 1 and not np.all(cells[1:] > cells[:-1]):
                raise ModelFileError(f"{where} has unsorted cells at depth {n}; learn the model again.")
            out[n] = (cells, counts)
        return out


def _digest(a: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(a).tobytes()).hexdigest()


def write_state(state: ModelState, path: str | Path, force: bool = False) -> Path:
    """Write a model state atomically (refuses to overwrite without ``force``)."""
    from fractalseq import __version__

    arrays = {k: np.ascontiguousarray(v) for k, v in state.arrays.items()}
    header = {k: v for k, v in state.header.items() if k not in _ENVELOPE}
    header.update(
        format=FORMAT, version=VERSION, sha256={k: _digest(v) for k, v in arrays.items()},
        software=f"fractalseq {__version__}",
    )
    buf = io.BytesIO()
    head = np.frombuffer(json.dumps(header, sort_keys=True).encode("utf-8"), dtype=np.uint8)
    np.savez_compressed(buf, header=head, **arrays)
    return write_bytes(path, buf.getvalue(), force=force)


def read_header(path: str | Path) -> dict:
    """The JSON header of a model file (checked like :func:`read_state`, arrays not verified)."""
    data = _read_arrays(Path(path), only_header=True)
    return _parse_header(data, Path(path))


def read_state(path: str | Path) -> ModelState:
    """Read a model file and verify its header and the checksum of every array (never uses pickle)."""
    path = Path(path)
    data = _read_arrays(path)
    header = _parse_header(data, path)
    sums = header.get("sha256")
    if not isinstance(sums, dict):
        raise ModelFileError(f"{path} has an incomplete model header; learn the model again.")
    for name, digest in sums.items():
        if name not in data:
            raise ModelFileError(f"{path} lacks the array {name!r}; the file is truncated or damaged, learn the model again.")
        if _digest(data[name]) != digest:
            raise ModelFileError(f"{path} is damaged: array {name!r} fails its checksum; learn the model again.")
    arrays = {k: v for k, v in data.items() if k in sums}
    return ModelState(header=header, arrays=arrays, origin=str(path))


def _read_arrays(path: Path, only_header: bool = False) -> dict[str, np.ndarray]:
    if not path.exists():
        raise InputError(f"Model file {path} does not exist; check the path or run 'fractalseq learn' first.")
    if path.is_dir():
        raise InputError(f"{path} is a folder, not a model file; give the file written by 'fractalseq learn'.")
    try:
        with np.load(path, allow_pickle=False) as z:
            names = list(z.files)
            if only_header:
                names = [n for n in names if n == "header"]
            return {k: z[k] for k in names}
    except (zipfile.BadZipFile, EOFError, zlib.error, OSError, ValueError, KeyError) as exc:
        what = "truncated or damaged" if not isinstance(exc, ValueError) or "pickle" not in str(exc) else "holds pickled objects"
        raise ModelFileError(f"{path} is not a readable fractalseq model file ({what}); learn the model again.") from None


def _parse_header(data: dict, path: Path) -> dict:
    if "header" not in data:
        raise ModelFileError(f"{path} has no model header; it is not a fractalseq model file.")
    try:
        header = json.loads(bytes(np.asarray(data["header"], dtype=np.uint8)).decode("utf-8"))
    except (ValueError, UnicodeDecodeError, TypeError):
        raise ModelFileError(f"{path} has a damaged model header; learn the model again.") from None
    if not isinstance(header, dict) or header.get("format") != FORMAT:
        fmt = header.get("format") if isinstance(header, dict) else None
        raise ModelFileError(f"{path} is a {fmt!r} file, not a fractalseq model; give a file written by 'fractalseq learn'.")
    if header.get("version") != VERSION:
        raise ModelFileError(
            f"{path} is model-file version {header.get('version')!r} but this fractalseq reads version {VERSION}; "
            "learn the model again with this version."
        )
    return header

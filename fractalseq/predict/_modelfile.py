"""The model file of a fitted :class:`~fractalseq.predict._predictor.CellPredictor`.

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
dtype above).  Loading checks the format name, the version, every checksum,
dtypes and shapes, and refuses anything else with one sentence
(:class:`~fractalseq.errors.ModelFileError`).
"""

from __future__ import annotations

import hashlib
import io
import json
import zipfile
import zlib
from pathlib import Path

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError, ModelFileError
from fractalseq.io._outputs import write_bytes

FORMAT = "fractalseq-model"
VERSION = 1


def _digest(a: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(a).tobytes()).hexdigest()


def save_model(model, path: str | Path, force: bool = False) -> Path:
    """Write a fitted model atomically (refuses to overwrite without ``force``)."""
    from fractalseq import __version__

    arrays: dict[str, np.ndarray] = {}
    for n in model.depths_:
        arrays[f"cells_{n}"] = np.ascontiguousarray(model.cells_[n], dtype=np.uint64)
        arrays[f"counts_{n}"] = np.ascontiguousarray(model.counts_[n], dtype=np.uint32)
    header = {
        "format": FORMAT,
        "version": VERSION,
        "alphabet": model.alphabet_.to_dict(),
        "params": {k: (list(v) if isinstance(v, tuple) else v) for k, v in model.get_params().items()},
        "ladder": list(model.ladder_),
        "depths": list(model.depths_),
        "reverse_complement": bool(model.reverse_complement_),
        "training": {
            "symbols": model.n_symbols_,
            "segments": model.n_segments_,
            "pruned_cells": model.pruned_cells_,
            "max_cells": model.max_cells_,
        },
        "baseline": {
            "max_order": model.baseline_max_order_,
            "order": model.baseline_order_,
            "bits_per_symbol_by_order": {str(k): v for k, v in model.baseline_bits_.items()},
        },
        "sha256": {k: _digest(v) for k, v in arrays.items()},
        "software": f"fractalseq {__version__}",
        # how the training data were read (numeric cut points, column), so new data are read the same way
        "reader": dict(getattr(model, "reader_", {}) or {}),
    }
    if isinstance(header["params"].get("depths"), np.ndarray):
        header["params"]["depths"] = header["params"]["depths"].tolist()
    buf = io.BytesIO()
    head = np.frombuffer(json.dumps(header, sort_keys=True).encode("utf-8"), dtype=np.uint8)
    np.savez_compressed(buf, header=head, **arrays)
    return write_bytes(path, buf.getvalue(), force=force)


def read_header(path: str | Path) -> dict:
    """The JSON header of a model file (checked like :func:`load_model`, arrays not verified)."""
    data = _read_arrays(Path(path), only_header=True)
    return _parse_header(data, Path(path))


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


def load_model(path: str | Path):
    """Read, verify and rebuild a :class:`~fractalseq.predict._predictor.CellPredictor` (never uses pickle)."""
    from fractalseq.predict._predictor import CellPredictor

    path = Path(path)
    data = _read_arrays(path)
    header = _parse_header(data, path)
    try:
        alphabet = Alphabet.from_dict(header["alphabet"])
        depths = [int(n) for n in header["depths"]]
        ladder = [int(n) for n in header["ladder"]]
        params = dict(header["params"])
        training = header["training"]
        baseline = header["baseline"]
        sums = header["sha256"]
    except (KeyError, TypeError, ValueError, InputError):
        raise ModelFileError(f"{path} has an incomplete model header; learn the model again.") from None
    for name, digest in sums.items():
        if name not in data:
            raise ModelFileError(f"{path} lacks the array {name!r}; the file is truncated or damaged, learn the model again.")
        if _digest(data[name]) != digest:
            raise ModelFileError(f"{path} is damaged: array {name!r} fails its checksum; learn the model again.")
    A = alphabet.size
    tables = {}
    for n in depths:
        kc, kn = f"cells_{n}", f"counts_{n}"
        if kc not in sums or kn not in sums:
            raise ModelFileError(f"{path} lacks the cells of depth {n}; the file is damaged, learn the model again.")
        cells, counts = data[kc], data[kn]
        if cells.dtype != np.uint64 or counts.dtype != np.uint32 or counts.ndim != 2 or counts.shape != (cells.size, A):
            raise ModelFileError(f"{path} has cells of depth {n} with the wrong type or shape; learn the model again.")
        if cells.size > 1 and not np.all(cells[1:] > cells[:-1]):
            raise ModelFileError(f"{path} has unsorted cells at depth {n}; learn the model again.")
        tables[n] = (cells, counts)
    known = set(CellPredictor().get_params())
    model = CellPredictor(**{k: v for k, v in params.items() if k in known})
    try:
        K_b = int(baseline["max_order"])
        model._install(
            alphabet, tuple(ladder), bool(header["reverse_complement"]), K_b, tables,
            int(training["symbols"]), int(training["segments"]), 0,
        )
    except (KeyError, TypeError, ValueError) as exc:
        raise ModelFileError(f"{path} does not describe a consistent model ({exc}); learn the model again.") from None
    model.pruned_cells_ = int(training.get("pruned_cells", 0))
    reader = header.get("reader", {})
    if not isinstance(reader, dict):
        raise ModelFileError(f"{path} has a damaged reader section in its header; learn the model again.")
    model.reader_ = reader
    return model

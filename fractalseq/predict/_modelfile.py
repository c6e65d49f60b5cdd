"""The model file: a plain state (a JSON header and arrays) written and read with checksums, never pickled.

This module knows nothing of the predictor: it writes and reads a
:class:`ModelState` (a header dictionary plus named arrays).  The predictor
turns itself into a state (:meth:`~fractalseq.predict._predictor.CellPredictor.to_state`)
and builds itself from one (:meth:`~fractalseq.predict._predictor.CellPredictor.from_state`).

Format (version 2; version 1 stored a ``(cells, A)`` count matrix per depth and is refused)
------------------
A ZIP archive in numpy's ``.npz`` layout written and read by the
checksummed container (:mod:`fractalseq.io._npz`), whose members are plain
numeric arrays only; the header also lists each array's dtype and shape
(``arrays``), checked before anything is decompressed:

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
          "sha256": {"words_0": "<hex>", "counts_0": "<hex>", ...},
          "software": "fractalseq <version>"
        }

``words_<n>``
    ``uint64``, sorted strictly increasing addresses of the words of length
    ``n + 1`` seen in training: a stored cell of depth ``n`` (its ``n``
    symbols packed ``b`` bits each, first symbol most significant) followed
    by one symbol that followed it.
``counts_<n>``
    ``uint32``, one per word, positive: how often that symbol followed that cell.
    Only symbols seen are stored, so the file's size does not grow with the alphabet.

The checksum of an array is the SHA-256 of its raw bytes (C order, the
dtype above).  Reading checks the format name, the version, every checksum,
the dtypes and shapes of the cell tables and their order, and refuses
anything else with one sentence (:class:`~fractalseq.errors.ModelFileError`).
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from fractalseq.errors import InputError, ModelFileError
from fractalseq.io._npz import DEFAULT_MAX_BYTES, ArrayPieces, read_container, write_container

FORMAT = "fractalseq-model"
VERSION = 2
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
        ``words_<n>`` (uint64 sorted (n+1)-word addresses) and ``counts_<n>`` (uint32, one per word) of every stored depth.
    origin:
        Where the state was read from (for messages); empty for a state built in memory.
    """

    header: dict[str, Any]
    arrays: dict[str, np.ndarray] = field(default_factory=dict)
    origin: str = ""

    def tables(self, depths, alphabet) -> dict[int, tuple[np.ndarray, np.ndarray]]:
        """``{n: (words, counts)}`` of the given depths, checked for type, shape, order and symbols."""
        where = self.origin or "The model state"
        A, b = alphabet.size, alphabet.bits
        out = {}
        for n in depths:
            kw, kn = f"words_{n}", f"counts_{n}"
            if kw not in self.arrays or kn not in self.arrays:
                raise ModelFileError(f"{where} lacks the cells of depth {n}; the file is damaged, learn the model again.")
            words, counts = self.arrays[kw], self.arrays[kn]
            if words.dtype != np.uint64 or counts.dtype != np.uint32 or words.ndim != 1 or counts.shape != words.shape:
                raise ModelFileError(f"{where} has cells of depth {n} with the wrong type or shape; learn the model again.")
            if words.size > 1 and not np.all(words[1:] > words[:-1]):
                raise ModelFileError(f"{where} has unsorted cells at depth {n}; learn the model again.")
            if counts.size and int(counts.min()) == 0:
                raise ModelFileError(f"{where} stores a zero count at depth {n}; learn the model again.")
            groups = [(words >> np.uint64(b * g)) & np.uint64((1 << b) - 1) for g in range(n + 1)] if words.size else []
            if words.size and (max(int(g.max()) for g in groups) >= A
                               or (b * (n + 1) < 64 and int(words[-1]) >> (b * (n + 1)) != 0)):
                raise ModelFileError(f"{where} has words of depth {n} outside its {A}-symbol alphabet; learn the model again.")
            out[n] = (words, counts)
        return out


def _digest(a: np.ndarray) -> str:
    return hashlib.sha256(np.ascontiguousarray(a).tobytes()).hexdigest()


def write_state(state: ModelState, path: str | Path, force: bool = False) -> Path:
    """Write a model state atomically through the checksummed container (refuses to overwrite without ``force``)."""
    from fractalseq import __version__

    # an array may be given as a function that makes it (see write_container): made when written
    arrays = {k: v if callable(v) or isinstance(v, ArrayPieces) else np.ascontiguousarray(v) for k, v in state.arrays.items()}
    header = {k: v for k, v in state.header.items() if k not in _ENVELOPE}
    header.update(format=FORMAT, version=VERSION, software=f"fractalseq {__version__}")
    return write_container(path, header, arrays, force=force)


def read_header(path: str | Path, max_bytes: int = DEFAULT_MAX_BYTES) -> dict:
    """The JSON header of a model file (the whole file is checked as by :func:`read_state`)."""
    return read_state(path, max_bytes).header


def read_state(path: str | Path, max_bytes: int = DEFAULT_MAX_BYTES) -> ModelState:
    """Read a model file as hostile input: members, dtypes, shapes and declared sizes are checked before
    anything is decompressed (:func:`fractalseq.io._npz.read_container`), then every checksum; never pickle.

    Parameters
    ----------
    path:
        The model file.
    max_bytes:
        Cap on the arrays' total declared size (a file declaring more is refused before reading).
    """
    path = Path(path)
    if not path.exists():
        from fractalseq.guards import path_problem

        why = path_problem(str(path))
        if why and not why.startswith("does not exist"):
            raise InputError(f"Model file {path} {why}.")
        raise InputError(f"Model file {path} does not exist; check the path or run 'fractalseq learn' first.")
    if path.is_dir():
        raise InputError(f"{path} is a folder, not a model file; give the file written by 'fractalseq learn'.")
    header, arrays = read_container(path, FORMAT, max_bytes=max_bytes, expected_version=VERSION,
                                    remedy="learn the model again (fractalseq learn)")
    return ModelState(header=header, arrays=arrays, origin=str(path))

"""Large square matrices kept beside a JSON document, in a checksummed ``.npz`` the document references.

A survey of thousands of sources has two ``n x n`` distance matrices; as nested JSON lists they
would be hundreds of megabytes of text (234 MB at 2,000 sources).  Above a size the JSON document
holds a *reference* instead of the matrix::

    "matrix_file": {"file": "distances.npz", "array": "js", "shape": [n, n],
                    "dtype": "<f8", "sha256": "<hex SHA-256 of the array's raw C-order bytes>"}

``file`` is relative to the folder of the JSON document.  The ``.npz`` is written by
:func:`fractalseq.io._npz.write_container` (numpy's ``.npz`` layout, so ``numpy.load(path)[array]``
opens it too; every array checksummed, never pickle); its header has ``format`` =
:data:`MATRIX_FORMAT` and the row names.  The reference's checksum is computed from the array
itself, so a document printed without its folder (``--json``) carries the same reference.
Values are the float64 numbers of the computation, unrounded; NaN (not computed) stays NaN
in the file where the JSON writes ``null``.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from fractalseq.errors import InputError, ModelFileError
from fractalseq.io._npz import array_sha256, read_container, write_container

__all__ = ["MATRIX_FORMAT", "matrix_reference", "read_matrix", "write_matrices"]

#: The ``format`` of the header of a matrices file.
MATRIX_FORMAT = "fractalseq-matrices"
MATRIX_VERSION = 1


def matrix_reference(file: str, array: str, matrix: np.ndarray) -> dict[str, Any]:
    """The JSON object that stands for ``matrix``, stored as ``array`` in ``file`` (relative path)."""
    a = np.ascontiguousarray(matrix, dtype=np.float64)
    return {"file": file, "array": array, "shape": list(a.shape), "dtype": a.dtype.str, "sha256": array_sha256(a)}


def write_matrices(path: str | Path, names: Sequence[str], arrays: Mapping[str, np.ndarray], force: bool = False) -> Path:
    """Write square float64 matrices (rows and columns in the order of ``names``) as one checksummed ``.npz``."""
    plain = {k: np.ascontiguousarray(v, dtype=np.float64) for k, v in arrays.items()}
    header = {"format": MATRIX_FORMAT, "version": MATRIX_VERSION, "names": [str(n) for n in names]}
    return write_container(path, header, plain, force=force)


def read_matrix(entry: Mapping[str, Any], folder: str | Path, key: str = "matrix") -> np.ndarray:
    """The matrix a JSON object holds: inline (``entry[key]``, nested lists, ``null`` as NaN) or by reference.

    Parameters
    ----------
    entry:
        A JSON object with ``key`` (the inline matrix) or ``key + "_file"`` (a reference written by
        :func:`matrix_reference`).
    folder:
        Folder of the JSON document (a reference's ``file`` is relative to it).
    key:
        Name of the inline matrix.

    Raises
    ------
    InputError
        Neither form is present, or the referenced file is missing.
    ModelFileError
        The referenced file is damaged, or its array is not the one the reference describes.
    """
    if key in entry:
        return np.array([[np.nan if v is None else float(v) for v in row] for row in entry[key]], dtype=float)
    ref = entry.get(f"{key}_file")
    if not isinstance(ref, Mapping):
        raise InputError(f"The document holds neither {key!r} nor {key + '_file'!r}; it is not a fractalseq matrix document.")
    name = str(ref.get("file", ""))
    if not name or Path(name).name != name:
        raise InputError(f"The matrix reference names {name!r}, not a file beside the document.")
    _, arrays = read_container(Path(folder) / name, MATRIX_FORMAT, expected_version=MATRIX_VERSION)
    a = arrays.get(str(ref.get("array")))
    if a is None or list(a.shape) != list(ref.get("shape", [])) or array_sha256(a) != ref.get("sha256"):
        raise ModelFileError(f"{name} does not hold the matrix {ref.get('array')!r} the document describes (shape or SHA-256 differ); write the survey again.")
    return a

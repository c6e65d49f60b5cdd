"""Files in and out: atomic outputs, deterministic JSON, and the survey's result cache.

Every file the package writes goes through :func:`write_bytes` (temporary name,
then rename), so an interrupted run never leaves a half-written file, and
nothing is overwritten without ``force``.
"""

from fractalseq.io._cache import ResultCache, array_hash, cache_key, file_hash
from fractalseq.io._matrices import MATRIX_FORMAT, matrix_reference, read_matrix, write_matrices
from fractalseq.io._npz import DEFAULT_MAX_BYTES, array_sha256, read_container, write_container
from fractalseq.io._outputs import (
    check_writable,
    prepare_folder,
    to_json,
    tracking_folders,
    write_bytes,
    write_csv,
    write_json,
    write_npz,
    write_text,
)

__all__ = [
    "DEFAULT_MAX_BYTES", "ResultCache", "array_hash", "cache_key", "check_writable", "file_hash", "prepare_folder", "to_json",
    "tracking_folders", "write_bytes", "write_csv", "write_json", "write_npz", "write_text",
    "read_container", "write_container", "array_sha256", "MATRIX_FORMAT", "matrix_reference", "read_matrix", "write_matrices",
]

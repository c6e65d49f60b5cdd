"""A checksummed ``.npz`` container that is safe to open when it comes from someone else.

Layout
------
A ZIP archive in numpy's ``.npz`` layout: one ``.npy`` member per array, plus a
member ``header.npy`` holding the ``uint8`` bytes of a UTF-8 JSON object::

    {
      "format": "<the file's kind>", "version": <int>,
      "sha256": {"<array name>": "<hex SHA-256 of its raw C-order bytes>", ...},
      "arrays": {"<array name>": {"dtype": "<u8", "shape": [n, ...]}, ...},
      ... whatever else the file's kind needs ...
    }

This is the layout model files (:mod:`fractalseq.predict._modelfile`) and count
files (:meth:`fractalseq.words._counts.WordCounts.save`) already use; the
``arrays`` section (declared dtype and shape of every array) is new, and
:func:`read_container` still reads files written without it (the ``.npy``
header of each member is then the only declaration, and is checked the same way).

Reading
-------
:func:`read_container` never trusts a size it has not checked:

1. the file must be a ZIP archive (a single ``.npy`` or a text file named
   ``.npz`` is refused by name), with no duplicate, encrypted or oddly
   compressed members;
2. the header member is read first, with a hard cap (:data:`HEADER_MAX_BYTES`),
   and its format and version are checked;
3. the members must be exactly the header plus the arrays the header lists
   (an unlisted member, however big, is refused without being decompressed);
4. for each listed array, the ``.npy`` header (capped at
   :data:`NPY_HEADER_MAX_BYTES`) must give a plain numeric dtype (never object,
   string or structured), C order, and the dtype and shape of the JSON header;
   its size must match the ZIP entry's declared uncompressed size, and all the
   declared sizes together must not exceed ``max_bytes`` — all before any data
   is decompressed;
5. the data are decompressed in chunks into an array of exactly the declared
   size (decompression stops at the declared size), then checked against the
   ZIP entry's CRC and the header's SHA-256.

Every refusal is one sentence in a :class:`~fractalseq.errors.ModelFileError`.

Switching a file kind to the container
--------------------------------------
* saving: ``write_container(path, header, arrays, force)`` with the header the
  module builds today (``format``, ``version`` and the rest; ``sha256`` may be
  left out, the container computes it and adds ``arrays``) instead of
  ``np.savez_compressed`` + ``write_bytes``;
* loading: ``header, arrays = read_container(path, FORMAT, max_bytes=...)``
  instead of ``np.load``; the returned ``arrays`` are verified, so the module
  keeps only its own checks (which arrays it needs, sortedness, shapes that
  depend on the alphabet, values). A generous ``max_bytes`` is
  :data:`DEFAULT_MAX_BYTES`; a caller that knows a bound (a model's
  ``max_cells``) can pass a tighter one. Missing files and folders are refused
  as :class:`~fractalseq.errors.InputError` here too.
"""

from __future__ import annotations

import ast
import hashlib
import json
import re
import zipfile
import zlib
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable

import numpy as np

from fractalseq.errors import InputError, ModelFileError
from fractalseq.io._outputs import write_bytes

__all__ = ["DEFAULT_MAX_BYTES", "ArrayPieces", "array_sha256", "read_container", "write_container"]

HEADER_NAME = "header"
#: largest JSON header accepted (the alphabet and reader sections live there)
HEADER_MAX_BYTES = 32 << 20
#: largest ``.npy`` header accepted (numpy writes a few hundred bytes; it caps at 10 000 itself)
NPY_HEADER_MAX_BYTES = 1 << 16
#: the default cap on the total declared size of the arrays of one file
DEFAULT_MAX_BYTES = 8 << 30
_CHUNK = 1 << 20
_NAME = re.compile(r"^[A-Za-z0-9_]{1,64}$")
_NUMERIC_KINDS = "biufc"
_FIXED_TIME = (1980, 1, 1, 0, 0, 0)  # fixed member times: same content, same bytes


def array_sha256(a: np.ndarray) -> str:
    """SHA-256 (hex) of an array's raw C-order bytes (same value as over ``tobytes()``, without the copy)."""
    return hashlib.sha256(np.array(a, order="C", copy=None).reshape(-1).view(np.uint8)).hexdigest()


_digest = array_sha256


# ------------------------------------------------------------------ writing
@dataclass(frozen=True)
class ArrayPieces:
    """A one-dimensional array given as consecutive pieces, made when needed (see :func:`write_container`).

    Attributes
    ----------
    dtype:
        The array's type (every piece has it).
    size:
        The array's length (the pieces' lengths add up to it).
    pieces:
        A function returning an iterable of the pieces in order; called once for the checksum
        and once when the array is written, so no more than one piece is held at a time.
    """

    dtype: np.dtype
    size: int
    pieces: Callable[[], Iterable[np.ndarray]]

    def made(self) -> Iterable[np.ndarray]:
        """The pieces, each checked for its type, and a ValueError if they do not add up to ``size``."""
        seen = 0
        for a in self.pieces():
            a = np.ascontiguousarray(a)
            if a.dtype != self.dtype or a.ndim != 1:
                raise ValueError(f"a piece of {a.dtype} and {a.ndim} dimensions where one-dimensional {self.dtype} was declared")
            seen += a.size
            yield a
        if seen != self.size:
            raise ValueError(f"pieces of {seen} items where {self.size} were declared")


def _pieces_digest(given: ArrayPieces) -> str:
    h = hashlib.sha256()
    for a in given.made():
        h.update(a.view(np.uint8))
    return h.hexdigest()


def _plain_array(name: str, a: Any) -> np.ndarray:
    """``a`` as a C-ordered numeric array, or a ValueError naming the array."""
    a = np.asarray(a)
    a = a if a.flags.c_contiguous else np.array(a, order="C")  # (ascontiguousarray would make 0-d arrays 1-d)
    if a.dtype.kind not in _NUMERIC_KINDS or a.dtype.fields is not None:
        raise ValueError(f"array {name!r} has dtype {a.dtype}, which the container does not store")
    return a


def write_container(path: str | Path, header: dict[str, Any],
                    arrays: dict[str, np.ndarray | Callable[[], np.ndarray]], force: bool = False, sync: bool = True) -> Path:
    """Write ``arrays`` and a JSON ``header`` as a checksummed ``.npz`` file, atomically.

    Parameters
    ----------
    path:
        Destination; written through a temporary file and renamed into place.
    header:
        JSON-ready dictionary with at least ``format`` (str) and ``version`` (int).
        Its ``sha256`` and ``arrays`` entries are (re)computed from ``arrays``.
    arrays:
        Plain numeric arrays (names of letters, digits and ``_``; no object dtype), or functions
        that make one: such an array is made for its checksum and again when it is written (it must
        come out the same), so a caller whose arrays are derived from tables it holds never holds
        them all at once; or :class:`ArrayPieces`, made piece by piece likewise, so not even one
        whole array is held (the file's bytes are those of the whole array).
    force:
        Replace an existing file.
    sync:
        ``fsync`` before the rename (:func:`fractalseq.io._outputs.write_bytes`).

    Returns
    -------
    Path
        The path written.
    """
    if not isinstance(header.get("format"), str) or not isinstance(header.get("version"), int):
        raise ValueError("the header needs a string 'format' and an integer 'version'")
    plain: dict[str, np.ndarray | Callable[[], np.ndarray]] = {}
    digests: dict[str, str] = {}
    layout: dict[str, dict[str, Any]] = {}
    for name, given in arrays.items():
        if name == HEADER_NAME or not _NAME.match(name):
            raise ValueError(f"array name {name!r} is reserved or not made of letters, digits and '_'")
        if isinstance(given, ArrayPieces):
            if np.dtype(given.dtype).kind not in _NUMERIC_KINDS:
                raise ValueError(f"array {name!r} has dtype {given.dtype}, which the container does not store")
            digests[name] = _pieces_digest(given)
            layout[name] = {"dtype": np.dtype(given.dtype).str, "shape": [int(given.size)]}
            plain[name] = given
            continue
        a = _plain_array(name, given() if callable(given) else given)
        digests[name] = _digest(a)
        layout[name] = {"dtype": a.dtype.str, "shape": list(a.shape)}
        plain[name] = given if callable(given) else a
        del a  # a made array is made again when written: no two of them are held at once
    head = dict(header)
    head["sha256"] = digests
    head["arrays"] = layout
    text = json.dumps(head, sort_keys=True).encode("utf-8")

    def members():
        yield HEADER_NAME, np.frombuffer(text, dtype=np.uint8)
        for name in sorted(plain):
            given = plain[name]
            if isinstance(given, ArrayPieces):
                yield name, given
                continue
            if not callable(given):
                yield name, given
                continue
            a = _plain_array(name, given())
            if _digest(a) != digests[name]:
                raise ValueError(f"array {name!r} came out different when made a second time")
            yield name, a

    def emit(out: Any) -> None:  # streamed into the temporary file: a large array is never held twice
        with zipfile.ZipFile(out, "w", compression=zipfile.ZIP_DEFLATED, allowZip64=True) as zf:
            for name, a in members():
                info = zipfile.ZipInfo(f"{name}.npy", date_time=_FIXED_TIME)
                info.compress_type = zipfile.ZIP_DEFLATED
                info.external_attr = 0o644 << 16
                with zf.open(info, "w", force_zip64=True) as fh:
                    if isinstance(a, ArrayPieces):
                        _write_pieces(fh, name, a, digests[name])
                    else:
                        np.lib.format.write_array(fh, a, allow_pickle=False)

    return write_bytes(path, emit, force=force, sync=sync)


def _write_pieces(fh: Any, name: str, given: ArrayPieces, digest: str) -> None:
    """Write ``given`` as ``numpy.lib.format.write_array`` writes the whole array (same header, same bytes), piece by piece."""
    head = {"descr": np.lib.format.dtype_to_descr(np.dtype(given.dtype)), "fortran_order": False, "shape": (int(given.size),)}
    np.lib.format.write_array_header_1_0(fh, head)
    h = hashlib.sha256()
    for a in given.made():
        h.update(a.view(np.uint8))
        fh.write(a.view(np.uint8).data)
    if h.hexdigest() != digest:
        raise ValueError(f"array {name!r} came out different when made a second time")


# ------------------------------------------------------------------ reading
def read_container(path: str | Path, expected_format: str, max_bytes: int = DEFAULT_MAX_BYTES,
                   expected_version: int = 1, remedy: str | None = None) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Read and verify a file written by :func:`write_container` (or numpy's ``savez`` with the same layout).

    Parameters
    ----------
    path:
        The ``.npz`` file.
    expected_format:
        The header's ``format`` the caller reads (``"fractalseq-model"``, ``"fractalseq-words"``...).
    max_bytes:
        Cap on the total declared uncompressed size of the listed arrays; a file
        declaring more is refused before anything is decompressed.
    expected_version:
        The header's ``version`` the caller reads.
    remedy:
        The fix to name in a refusal instead of the generic one (e.g. "learn the model
        again"); each refusal is "problem; fix."

    Returns
    -------
    tuple
        The JSON header (a dict) and the verified arrays by name.

    Raises
    ------
    InputError
        The path does not exist or is a folder.
    ModelFileError
        The file is not such a container, or is damaged, oversized or inconsistent.
    """
    path = Path(path)
    if not path.exists():
        from fractalseq.guards import path_problem

        raise InputError(f"{path} {path_problem(str(path)) or 'cannot be opened; check the path'}.")
    if path.is_dir():
        raise InputError(f"{path} is a folder, not a {expected_format} file; give the .npz file.")
    try:
        return _read_file(path, expected_format, int(max_bytes), expected_version)
    except ModelFileError as exc:
        if remedy is None:
            raise
        problem = str(exc).rsplit("; ", 1)[0]
        raise ModelFileError(f"{problem}; {remedy}.") from None


def _read_file(path: Path, kind: str, max_bytes: int, version: int) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    try:
        with open(path, "rb") as raw:
            start = raw.read(8)
            _refuse_non_zip(path, start, kind)
            raw.seek(0)
            with zipfile.ZipFile(raw) as zf:
                return _read_zip(path, zf, kind, max_bytes, version)
    except ModelFileError:
        raise
    except (zipfile.BadZipFile, zipfile.LargeZipFile, EOFError, zlib.error, OSError, ValueError,
            NotImplementedError, RuntimeError, KeyError, OverflowError):
        raise ModelFileError(f"{path} is truncated or damaged (its ZIP structure cannot be read); write the file again.") from None


def _refuse_non_zip(path: Path, start: bytes, kind: str) -> None:
    if start.startswith(b"\x93NUMPY"):
        raise ModelFileError(f"{path} is a single numpy array (.npy), not a {kind} file; give the .npz file written by fractalseq.")
    if not start.startswith(b"PK"):
        what = "an empty file" if not start else (
            "a text file" if all(b in b"\t\n\r" or 32 <= b < 127 for b in start) else "not a ZIP archive")
        raise ModelFileError(f"{path} is {what}, not a {kind} file; give the .npz file written by fractalseq.")


def _read_zip(path: Path, zf: zipfile.ZipFile, kind: str, max_bytes: int,
              version: int) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    infos = zf.infolist()
    names = [i.filename for i in infos]
    if len(set(names)) != len(names):
        raise ModelFileError(f"{path} holds two members with the same name; it is not a file fractalseq wrote.")
    for info in infos:
        if info.flag_bits & 0x1 or info.compress_type not in (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED):
            raise ModelFileError(f"{path} has an encrypted or unusually compressed member {info.filename!r}; it is not a file fractalseq wrote.")
    by_name = {i.filename: i for i in infos}
    if f"{HEADER_NAME}.npy" not in by_name:
        raise ModelFileError(f"{path} has no header; it is not a {kind} file.")
    header = _read_header(path, zf, by_name[f"{HEADER_NAME}.npy"], kind, version)
    sums, declared = _listed_arrays(path, header)
    listed = {f"{n}.npy" for n in sums} | {f"{HEADER_NAME}.npy"}
    extra = sorted(set(by_name) - listed)
    if extra:
        raise ModelFileError(f"{path} holds a member {extra[0]!r} its header does not list; the file was altered, write it again.")
    missing = sorted(set(listed) - set(by_name))
    if missing:
        raise ModelFileError(f"{path} lacks the array {missing[0][:-4]!r} its header lists; the file is truncated or damaged.")
    plans = []
    total = 0
    for name in sorted(sums):
        info = by_name[f"{name}.npy"]
        with zf.open(info) as fh:
            dtype, shape, head_len = _npy_header(path, name, fh)
        if name in declared and (declared[name][0] != dtype or declared[name][1] != shape):
            raise ModelFileError(
                f"{path} stores array {name!r} as {dtype.str} {list(shape)} but its header declares "
                f"{declared[name][0].str} {list(declared[name][1])}; the file was altered.")
        nbytes = dtype.itemsize * _prod(shape)
        if head_len + nbytes != info.file_size:
            raise ModelFileError(
                f"{path} declares array {name!r} as {nbytes} bytes but its ZIP entry holds {info.file_size - head_len}; "
                "the file was altered or damaged.")
        total += nbytes
        if total > max_bytes:
            raise ModelFileError(
                f"{path} declares more than {max_bytes} bytes of arrays (at {name!r}); it is larger than a {kind} file may be.")
        plans.append((name, info, dtype, shape, head_len))
    arrays: dict[str, np.ndarray] = {}
    for name, info, dtype, shape, head_len in plans:
        a = _read_data(path, zf, info, dtype, shape, head_len)
        if _digest(a) != sums[name]:
            raise ModelFileError(f"{path} is damaged: array {name!r} fails its checksum; write the file again.")
        arrays[name] = a
    return header, arrays


def _read_header(path: Path, zf: zipfile.ZipFile, info: zipfile.ZipInfo, kind: str, version: int) -> dict[str, Any]:
    if info.file_size > HEADER_MAX_BYTES:
        raise ModelFileError(f"{path} declares a header of {info.file_size} bytes, more than a {kind} file has; it was altered.")
    with zf.open(info) as fh:
        dtype, shape, head_len = _npy_header(path, HEADER_NAME, fh)
        if dtype != np.dtype(np.uint8) or len(shape) != 1 or head_len + shape[0] != info.file_size:
            raise ModelFileError(f"{path} has a header that is not a byte string of its declared size; it was altered.")
        data = _read_exact(fh, shape[0], path, HEADER_NAME)
    try:
        header = json.loads(data.decode("utf-8"))
    except (ValueError, UnicodeDecodeError):
        raise ModelFileError(f"{path} has a damaged header (not UTF-8 JSON); write the file again.") from None
    if not isinstance(header, dict) or header.get("format") != kind:
        fmt = header.get("format") if isinstance(header, dict) else None
        if isinstance(fmt, str):
            raise ModelFileError(f"{path} is a {fmt[:60]!r} file, not a {kind} file; give the right file.")
        raise ModelFileError(f"{path} names no format in its header, so it is not a {kind} file.")
    if header.get("version") != version or isinstance(header.get("version"), bool):
        raise ModelFileError(
            f"{path} is {kind} version {header.get('version')!r} but this fractalseq reads version {version}; write the file again.")
    return header


def _listed_arrays(path: Path, header: dict[str, Any]) -> tuple[dict[str, str], dict[str, tuple[np.dtype, tuple[int, ...]]]]:
    sums = header.get("sha256")
    if not isinstance(sums, dict) or not all(
        isinstance(k, str) and _NAME.match(k) and k != HEADER_NAME and isinstance(v, str) and re.fullmatch(r"[0-9a-f]{64}", v)
        for k, v in sums.items()
    ):
        raise ModelFileError(f"{path} has a header whose checksum list is damaged; write the file again.")
    layout = header.get("arrays")
    declared: dict[str, tuple[np.dtype, tuple[int, ...]]] = {}
    if layout is None:
        return sums, declared  # files written before the 'arrays' section: the .npy headers declare
    if not isinstance(layout, dict) or set(layout) != set(sums):
        raise ModelFileError(f"{path} has a header whose array list and checksum list differ; the file was altered.")
    for name, spec in layout.items():
        try:
            dtype = _numeric_dtype(spec["dtype"])
            shape = spec["shape"]
            if not isinstance(shape, list) or not all(type(d) is int and d >= 0 for d in shape):
                raise ValueError
        except (KeyError, TypeError, ValueError):
            raise ModelFileError(f"{path} declares an impossible dtype or shape for array {name!r}; the file was altered.") from None
        declared[name] = (dtype, tuple(shape))
    return sums, declared


def _numeric_dtype(descr: Any) -> np.dtype:
    if not isinstance(descr, str) or len(descr) > 8:
        raise ValueError("not a plain dtype string")
    dtype = np.dtype(descr)
    if dtype.kind not in _NUMERIC_KINDS or dtype.fields is not None or dtype.subdtype is not None:
        raise ValueError("not a numeric dtype")
    return dtype


def _npy_header(path: Path, name: str, fh) -> tuple[np.dtype, tuple[int, ...], int]:
    """Dtype, shape and header length of the ``.npy`` member open in ``fh`` (reads only the header)."""
    pre = fh.read(8)
    if len(pre) != 8 or not pre.startswith(b"\x93NUMPY") or pre[6] not in (1, 2, 3):
        raise ModelFileError(f"{path} has a member {name!r} that is not a numpy array; the file was altered.")
    size_len = 2 if pre[6] == 1 else 4
    raw = fh.read(size_len)
    if len(raw) != size_len:
        raise ModelFileError(f"{path} has a cut array header in {name!r}; the file is truncated or damaged.")
    hlen = int.from_bytes(raw, "little")
    if hlen > NPY_HEADER_MAX_BYTES:
        raise ModelFileError(f"{path} has an array header of {hlen} bytes in {name!r}; the file was altered.")
    text = fh.read(hlen)
    if len(text) != hlen:
        raise ModelFileError(f"{path} has a cut array header in {name!r}; the file is truncated or damaged.")
    try:
        d = ast.literal_eval(text.decode("utf-8" if pre[6] == 3 else "latin-1").strip())
        if not isinstance(d, dict) or set(d) != {"descr", "fortran_order", "shape"}:
            raise ValueError
        shape = d["shape"]
        if not isinstance(shape, tuple) or not all(type(s) is int and s >= 0 for s in shape):
            raise ValueError
    except (ValueError, SyntaxError, UnicodeDecodeError, TypeError, MemoryError, RecursionError):
        raise ModelFileError(f"{path} has an unreadable array header in {name!r}; the file was altered or damaged.") from None
    try:
        dtype = _numeric_dtype(d["descr"])
    except (ValueError, TypeError):
        raise ModelFileError(
            f"{path} stores array {name!r} with dtype {str(d['descr'])[:40]!r}, not a plain number type "
            "(object, text and structured arrays are refused); the file was altered.") from None
    if d["fortran_order"] is not False:
        raise ModelFileError(f"{path} stores array {name!r} in Fortran order, which fractalseq never writes; the file was altered.")
    return dtype, shape, 8 + size_len + hlen


def _prod(shape: tuple[int, ...]) -> int:
    n = 1
    for s in shape:
        n *= s
    return n


def _read_exact(fh, n: int, path: Path, name: str) -> bytes:
    out = bytearray(n)
    _fill(fh, memoryview(out), path, name)
    return bytes(out)


def _fill(fh, view: memoryview, path: Path, name: str) -> None:
    got = 0
    n = len(view)
    while got < n:
        k = fh.readinto(view[got:got + min(_CHUNK, n - got)])
        if not k:
            raise ModelFileError(f"{path} has array {name!r} shorter than declared; the file is truncated or damaged.")
        got += k
    if fh.read(1):  # at the declared end; this also makes zipfile check the CRC
        raise ModelFileError(f"{path} has array {name!r} longer than declared; the file was altered.")


def _read_data(path: Path, zf: zipfile.ZipFile, info: zipfile.ZipInfo, dtype: np.dtype,
               shape: tuple[int, ...], head_len: int) -> np.ndarray:
    try:
        a = np.empty(shape, dtype=dtype)
    except MemoryError:
        raise ModelFileError(
            f"{path} declares array {info.filename[:-4]!r} of {info.file_size} bytes, more than this machine can hold.") from None
    with zf.open(info) as fh:
        skipped = fh.read(head_len)
        if len(skipped) != head_len:
            raise ModelFileError(f"{path} has array {info.filename[:-4]!r} shorter than declared; the file is truncated or damaged.")
        _fill(fh, memoryview(a.reshape(-1).view(np.uint8)), path, info.filename[:-4])
    return a

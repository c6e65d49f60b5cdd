"""Opening inputs: paths, standard input and transparent decompression.

Compression is recognised by the first bytes of the file (its *magic*), never
by the file name: gzip (``1f 8b``), bzip2 (``BZh``), xz (``fd 37 7a 58 5a 00``)
and Zstandard (``28 b5 2f fd``).  Concatenated members / frames are read in
sequence.  A truncated or damaged archive raises :class:`InputError` while it
is read.

Standard input (path ``-``) is read once, whole, into memory the first time it
is opened and then served from memory for every later pass (a reader that
learns its alphabet reads its input twice; a pipe can only be read once).

Any other input that is not a regular file (a named pipe, ``<(command)``,
``/dev/stdin``, a character device) is opened exactly once (:class:`Pipe`):
the bytes read to recognise it are kept and replayed to the reader, which then
continues from the open pipe.  A reader that needs a second pass (learned
alphabets, log templates, quantile bins) calls :func:`spool` first, which copies
the pipe to a temporary file (removed when the input is no longer used) and
notes it in the read report; reading a pipe a second time without it is refused
with one sentence.
"""

from __future__ import annotations

import bz2
import gzip
import io
import lzma
import os
import stat
import sys
import tempfile
import weakref
import zlib
from dataclasses import dataclass, field
from pathlib import Path
from typing import BinaryIO, Iterator

from fractalseq.errors import InputError

#: Bytes read for format sniffing.
SNIFF_BYTES = 1 << 16

_MAGIC: tuple[tuple[bytes, str], ...] = (
    (b"\x1f\x8b", "gzip"),
    (b"BZh", "bzip2"),
    (b"\xfd7zXZ\x00", "xz"),
    (b"\x28\xb5\x2f\xfd", "zstd"),
)
_UNSUPPORTED_MAGIC: tuple[tuple[bytes, str], ...] = (
    (b"PK\x03\x04", "zip archive"),
    (b"\x89HDF", "HDF5 file"),
    (b"%PDF", "PDF document"),
    (b"\x93NUMPY", "numpy array file"),
)
_BOM = b"\xef\xbb\xbf"


@dataclass
class Origin:
    """Where the bytes come from: a checked path, or standard input held in memory.

    Attributes
    ----------
    name:
        Display name (the path as given, or ``-``).
    path:
        The file path, or ``None`` for standard input.
    data:
        The whole raw (possibly compressed) content of standard input.
    compression:
        ``None``, ``"gzip"``, ``"bzip2"``, ``"xz"`` or ``"zstd"``.
    pipe:
        For an input that is not a regular file: the one open handle on it
        (see :class:`Pipe`); ``path`` is then only its name.
    """

    name: str
    path: Path | None = None
    data: bytes | None = None
    compression: str | None = None
    notes: list[str] = field(default_factory=list)
    pipe: "Pipe | None" = None


#: Pipes open in this process, by (device, inode): a second open of the same pipe (a format check, then the
#: reading; shared bin edges, then the reading) shares its state.  An entry keeps its pipe open, so the
#: inode cannot be reused by another pipe while listed; it is dropped when a full pass reaches the end
#: without a copy (a named pipe opened again later then waits for its next writer, as usual).
_PIPES: dict[tuple[int, int], "Pipe"] = {}
_SPOOL_BLOCK = 1 << 20


class Pipe:
    """An input that can be opened only once (named pipe, ``<(command)``, ``/dev/stdin``...).

    The file is opened once.  Bytes read while recognising the input are kept
    and replayed to the first full pass, which then continues from the open
    file.  :meth:`spool` copies everything to a temporary file so that the
    input can be read again; without it a second full pass is refused.
    """

    def __init__(self, name: str, raw: BinaryIO, key: tuple[int, int] = (0, 0)) -> None:
        self.name = name
        self.key = key
        self._raw: BinaryIO | None = raw
        self._eof = False
        self._peek = bytearray()
        self._taken = False
        self.spooled: str | None = None
        self.spooled_bytes = 0

    def peek_reader(self) -> "_PipeReader":
        """A reader from the start that keeps what it reads for the next reader (for sniffing)."""
        if self.spooled is not None:
            return _PipeReader(self, record=True, spool=open(self.spooled, "rb"))
        if self._taken:
            raise self._read_twice()
        return _PipeReader(self, record=True)

    def open_reader(self) -> BinaryIO:
        """A full pass: the spooled copy, or the kept bytes followed by the rest of the pipe (once)."""
        if self.spooled is not None:
            return open(self.spooled, "rb")
        if self._taken:
            raise self._read_twice()
        self._taken = True
        return _PipeReader(self, record=False)  # type: ignore[return-value]

    def _read_twice(self) -> InputError:
        return InputError(
            f"{self.name} is a pipe that was already read once and this reading needs it again; "
            "save its content to a file and give the file."
        )

    def _read_raw(self, size: int) -> bytes:
        if self._raw is not None and not self._eof:
            try:
                data = self._raw.read(size)
            except OSError as exc:
                raise InputError(f"{self.name} cannot be read ({exc.strerror or exc}); check the pipe.") from None
            if data:
                return data
            self._eof = True
        if self._taken and self.spooled is None:  # a full pass reached the end, no copy: forget the pipe
            self.close()
        return b""

    def spool(self) -> bool:
        """Copy the whole input to a temporary file for later passes; ``True`` when it copied now."""
        if self.spooled is not None:
            return False
        if self._taken:
            raise self._read_twice()
        fd, tmp = tempfile.mkstemp(prefix="fractalseq-pipe-", suffix=".spool")
        weakref.finalize(self, _unlink, tmp)
        total = 0
        try:
            with os.fdopen(fd, "wb") as out:
                out.write(self._peek)
                total += len(self._peek)
                while True:
                    data = self._read_raw(_SPOOL_BLOCK)
                    if not data:
                        break
                    out.write(data)
                    total += len(data)
        except OSError as exc:
            raise InputError(
                f"{self.name} could not be copied to a temporary file for a second pass ({exc.strerror or exc}); "
                "save it to a file and give the file."
            ) from None
        self.spooled, self.spooled_bytes = tmp, total
        self._peek = bytearray()
        self._taken = True
        return True

    def close(self) -> None:
        """Close the pipe and forget it (a later open of the same path opens it again)."""
        if _PIPES.get(self.key) is self:
            del _PIPES[self.key]
        if self._raw is not None:
            try:
                self._raw.close()
            finally:
                self._raw = None


def close_pipes() -> None:
    """Close and forget every pipe this process opened (their temporary copies are removed).

    For long-running processes that read many pipes; a command exits instead.
    """
    for pipe in list(_PIPES.values()):
        pipe.close()
        if pipe.spooled is not None:
            _unlink(pipe.spooled)
            pipe.spooled = None  # a later pass is refused in one sentence


def _unlink(path: str) -> None:
    try:
        os.unlink(path)
    except OSError:
        pass


class _PipeReader(io.RawIOBase):
    """Reads a :class:`Pipe` from its start: the kept bytes, then the open pipe (or its spooled copy)."""

    def __init__(self, pipe: Pipe, record: bool, spool: BinaryIO | None = None) -> None:
        self._pipe = pipe
        self._record = record
        self._spool = spool
        self._pos = 0

    def readable(self) -> bool:
        return True

    def readinto(self, b) -> int:  # type: ignore[override]
        data = self.read(len(b))
        b[: len(data)] = data
        return len(data)

    def read(self, size: int = -1) -> bytes:  # type: ignore[override]
        if size is None or size < 0:
            size = 1 << 62
        if self._spool is not None:
            return self._spool.read(size)
        p = self._pipe
        if self._pos < len(p._peek):
            out = bytes(p._peek[self._pos : self._pos + size])
            self._pos += len(out)
            return out
        data = p._read_raw(min(size, _SPOOL_BLOCK))
        if self._record:
            p._peek += data
            self._pos += len(data)
        elif p._peek:
            p._peek = bytearray()  # replayed: the kept bytes are no longer needed
        return data

    def close(self) -> None:
        if self._spool is not None:
            self._spool.close()
        super().close()


def spool(origin: Origin) -> None:
    """Make an input readable twice: a pipe is copied to a temporary file (noted in the read report).

    Regular files and standard input (held in memory) need nothing.
    """
    if origin.pipe is not None and origin.pipe.spool():
        origin.notes.append(
            f"read from a pipe and copied to a temporary file ({origin.pipe.spooled_bytes} bytes) for a second pass"
        )


def _open_pipe(name: str, p: Path, st: os.stat_result) -> Pipe:
    key = (st.st_dev, st.st_ino)
    pipe = _PIPES.get(key)
    if pipe is not None:
        return pipe
    try:
        raw = open(p, "rb", buffering=0)
    except PermissionError:
        raise InputError(f"{name} cannot be read (permission denied); check its permissions.") from None
    except OSError as exc:
        raise InputError(f"{name} cannot be read ({exc.strerror or exc}); check the path.") from None
    pipe = Pipe(name, raw, key)  # type: ignore[arg-type]
    _PIPES[key] = pipe
    return pipe


def _stdin_bytes() -> bytes:
    stream = getattr(sys.stdin, "buffer", None)
    if stream is None:  # pragma: no cover - replaced stdin without a buffer
        return sys.stdin.read().encode("utf-8")
    return stream.read()


def locate(path: str | os.PathLike) -> Origin:
    """Check that ``path`` can be read and detect its compression.

    Parameters
    ----------
    path:
        A file path, or ``"-"`` for standard input (read whole into memory).

    Returns
    -------
    Origin
        The checked origin with its compression kind.

    Raises
    ------
    InputError
        When the path is missing, a folder, unreadable, or an unsupported kind
        of archive.
    """
    name = os.fspath(path)
    if isinstance(name, bytes):
        name = os.fsdecode(name)
    if name == "-":
        origin = Origin(name="-", data=_stdin_bytes())
        origin.notes.append("read from standard input (held in memory)")
        head = origin.data[:8]
    else:
        p = Path(name)
        if name == "":
            raise InputError("The input path is empty; give a file name or - for standard input.")
        if not p.exists():
            from fractalseq.guards import path_problem

            raise InputError(f"{name} {path_problem(name) or 'cannot be opened; check the path'}.")
        if p.is_dir():
            raise InputError(f"{name} is a folder, not a file; give a file inside it.")
        st = p.stat()
        if not stat.S_ISREG(st.st_mode):
            # a pipe or device: open it once, keep what sniffing reads (see Pipe)
            pipe = _open_pipe(name, p, st)
            origin = Origin(name=name, path=p, pipe=pipe)
            origin.notes.append("read from a pipe (opened once)" if pipe.spooled is None else
                                "read from a pipe (its temporary copy)")
            with pipe.peek_reader() as fh:
                head = fh.read(8)
        else:
            try:
                with open(p, "rb") as fh:
                    head = fh.read(8)
            except PermissionError:
                raise InputError(f"{name} cannot be read (permission denied); check its permissions.") from None
            except OSError as exc:
                raise InputError(f"{name} cannot be read ({exc.strerror or exc}); check the path.") from None
            origin = Origin(name=name, path=p)
    for magic, kind in _MAGIC:
        if head.startswith(magic):
            origin.compression = kind
            origin.notes.append(f"decompressed {kind}")
            break
    else:
        for magic, kind in _UNSUPPORTED_MAGIC:
            if head.startswith(magic):
                raise InputError(
                    f"{origin.name} is a {kind}, which is not read directly; extract the file inside it first."
                )
    return origin


# --------------------------------------------------------------- zstandard
class _ZstdReader:
    """Multi-frame Zstandard reader that notices truncation.

    ``zstandard``'s own stream reader ends quietly on a truncated frame, so
    this one drives ``decompressobj`` and checks that every frame reached
    its end marker.  Output waits in a list of pieces (no repeated copying).
    """

    _IN = 1 << 16

    def __init__(self, raw: BinaryIO) -> None:
        import zstandard

        self._zstd = zstandard
        self._raw = raw
        self._dec = zstandard.ZstdDecompressor().decompressobj()
        self._pieces: list[bytes] = []
        self._head = 0  # bytes of _pieces[0] already handed out
        self._avail = 0
        self._started = False
        self._done = False

    def _pull(self) -> None:
        data = self._raw.read(self._IN)
        if not data:
            if self._started and not self._dec.eof:
                raise EOFError("Compressed file ended before the end-of-stream marker was reached")
            self._done = True
            return
        while data:
            self._started = True
            out = self._dec.decompress(data)
            if out:
                self._pieces.append(out)
                self._avail += len(out)
            if self._dec.eof:
                data = self._dec.unused_data
                self._dec = self._zstd.ZstdDecompressor().decompressobj()
                self._started = False
                if data.strip(b"\x00") == b"":
                    data = b""
            else:
                data = b""

    def read(self, size: int) -> bytes:
        while self._avail - self._head < size and not self._done:
            self._pull()
        out: list[bytes] = []
        want = size
        while want > 0 and self._pieces:
            first = self._pieces[0]
            left = len(first) - self._head
            if left <= want:
                out.append(first[self._head:] if self._head else first)
                want -= left
                self._pieces.pop(0)
                self._avail -= len(first)
                self._head = 0
            else:
                out.append(first[self._head : self._head + want])
                self._head += want
                want = 0
        return out[0] if len(out) == 1 else b"".join(out)

    def close(self) -> None:
        self._raw.close()


def _zstd_errors() -> tuple[type[BaseException], ...]:
    try:
        import zstandard

        return (zstandard.ZstdError,)
    except ImportError:  # pragma: no cover
        return ()


_DAMAGE: tuple[type[BaseException], ...] = (
    EOFError,
    zlib.error,
    gzip.BadGzipFile,
    lzma.LZMAError,
) + _zstd_errors()


class ByteSource:
    """Decompressed bytes of an :class:`Origin`, read block by block.

    Use as a context manager.  Decompression errors become :class:`InputError`
    naming the file and the archive kind.
    """

    def __init__(self, origin: Origin, peek: bool = False) -> None:
        self.origin = origin
        self._peek = peek  # only looking at the start (a pipe keeps what is read for the real pass)
        self._fh: BinaryIO | None = None
        self._first = True
        self.offset = 0  # decompressed bytes handed out so far

    def __enter__(self) -> "ByteSource":
        o = self.origin
        try:
            if o.data is not None:
                raw: BinaryIO = io.BytesIO(o.data)
            elif o.pipe is not None:
                raw = o.pipe.peek_reader() if self._peek else o.pipe.open_reader()  # type: ignore[assignment]
            else:
                raw = open(o.path, "rb")  # type: ignore[arg-type]
        except OSError as exc:
            raise InputError(f"{o.name} cannot be read ({exc.strerror or exc}); check the path.") from None
        if o.compression == "gzip":
            fh: BinaryIO = gzip.GzipFile(fileobj=raw, mode="rb")  # type: ignore[assignment]
        elif o.compression == "bzip2":
            fh = bz2.BZ2File(raw, mode="rb")  # type: ignore[assignment]
        elif o.compression == "xz":
            fh = lzma.LZMAFile(raw, mode="rb")  # type: ignore[assignment]
        elif o.compression == "zstd":
            fh = _ZstdReader(raw)  # type: ignore[assignment]
        else:
            fh = raw
        self._fh = fh
        self._raw = raw
        return self

    def __exit__(self, *exc: object) -> None:
        for h in (self._fh, self._raw):
            try:
                if h is not None:
                    h.close()
            except Exception:  # closing a damaged archive may complain again
                pass

    def _damaged(self, exc: BaseException) -> InputError:
        kind = self.origin.compression or "compressed"
        detail = str(exc).rstrip(".") or type(exc).__name__
        return InputError(
            f"{self.origin.name} is a truncated or damaged {kind} file ({detail}); "
            "download or compress it again."
        )

    def read(self, size: int) -> bytes:
        """Read up to ``size`` decompressed bytes (fewer only at the end); BOM removed at the start."""
        assert self._fh is not None, "use ByteSource as a context manager"
        parts: list[bytes] = []
        got = 0
        try:
            while got < size:
                data = self._fh.read(size - got)
                if not data:
                    break
                parts.append(data)
                got += len(data)
        except _DAMAGE as exc:
            raise self._damaged(exc) from None
        except OSError as exc:  # bz2 "Invalid data stream", gzip CRC errors
            if self.origin.compression:
                raise self._damaged(exc) from None
            raise InputError(f"{self.origin.name} cannot be read ({exc.strerror or exc}); check the file.") from None
        out = b"".join(parts)
        if self._first:
            self._first = False
            if out.startswith(_BOM):
                out = out[len(_BOM):]
        self.offset += len(out)
        return out

    def blocks(self, size: int) -> Iterator[bytes]:
        """Iterate over decompressed blocks of ``size`` bytes (the last may be shorter)."""
        while True:
            block = self.read(size)
            if not block:
                return
            yield block
            if len(block) < size:  # read() only returns short at the end of the data
                return


def head(origin: Origin, size: int = SNIFF_BYTES) -> bytes:
    """The first ``size`` decompressed bytes (used for sniffing; a pipe replays them to the reader)."""
    with ByteSource(origin, peek=True) as src:
        return src.read(size)


def line_blocks(origin: Origin, size: int, separators: bytes = b"\n") -> Iterator[tuple[int, bytes]]:
    """Blocks that end at a separator byte, about ``size`` bytes each.

    With the default separator every block holds whole lines (a line longer
    than ``size`` is kept whole); with ``separators=b" \\t\\n\\r\\f\\v"`` blocks
    end at whitespace, so whitespace-separated tokens are never cut.

    Yields ``(first_line_number, block)`` with 1-based line numbers; every
    block but the last ends with a separator.
    """
    size = max(1, size)
    line_no = 1
    pending: list[bytes] = []
    with ByteSource(origin) as src:
        for block in src.blocks(size):
            cut = max(block.rfind(bytes([s])) for s in separators)
            if cut < 0:
                pending.append(block)
                continue
            pending.append(block[: cut + 1])
            out = b"".join(pending)
            pending = [block[cut + 1:]] if cut + 1 < len(block) else []
            yield line_no, out
            line_no += out.count(b"\n")
        if pending:
            yield line_no, b"".join(pending)

"""BGZF (block gzip) files: the list of blocks from their headers, and reading at any decompressed offset.

A BGZF file is a series of gzip members, each with an extra field ``BC``
holding the member's size minus one and a trailer holding its decompressed
size (the SAM/BAM format specification, section 4.1).  The blocks can
therefore be listed by reading a few bytes per block, and any stretch of the
decompressed data can be read by decompressing only the blocks that hold it
(each member stands alone).  A gzip file whose members lack the ``BC`` field
is not BGZF: :func:`block_index` returns ``None`` and the file is read from
its start as usual.
"""

from __future__ import annotations

import struct
import zlib
from typing import BinaryIO

import numpy as np

from fractalseq.errors import InputError

__all__ = ["BlockView", "block_index"]

_HEAD = 12  # ID1 ID2 CM FLG MTIME(4) XFL OS XLEN(2)


def block_index(fh: BinaryIO, size: int) -> np.ndarray | None:
    """``(k + 1, 2)`` int64 table of (file offset, decompressed offset) per block, plus the end; ``None`` if not BGZF.

    Reads the header and the size field of every block (no decompression).
    """
    rows: list[tuple[int, int]] = []
    pos = out = 0
    while pos < size:
        fh.seek(pos)
        head = fh.read(_HEAD)
        if len(head) < _HEAD or head[:4] != b"\x1f\x8b\x08\x04":
            return None
        xlen = struct.unpack_from("<H", head, 10)[0]
        extra = fh.read(xlen)
        bsize = _bc_size(extra)
        if bsize is None or pos + bsize > size or bsize < _HEAD + xlen + 8:
            return None
        fh.seek(pos + bsize - 4)
        isize = struct.unpack("<I", fh.read(4))[0]
        rows.append((pos, out))
        pos += bsize
        out += isize
    if not rows:
        return None
    rows.append((pos, out))
    return np.array(rows, dtype=np.int64)


def _bc_size(extra: bytes) -> int | None:
    """The block size from the ``BC`` subfield of a gzip extra field, or ``None``."""
    i = 0
    while i + 4 <= len(extra):
        si1, si2, slen = extra[i], extra[i + 1], struct.unpack_from("<H", extra, i + 2)[0]
        if si1 == 66 and si2 == 67 and slen == 2 and i + 6 <= len(extra):
            return struct.unpack_from("<H", extra, i + 4)[0] + 1
        i += 4 + slen
    return None


class BlockView:
    """Decompressed bytes of a BGZF file at any offset (only the blocks needed are decompressed)."""

    def __init__(self, fh: BinaryIO, index: np.ndarray, name: str) -> None:
        self.fh = fh
        self.index = index
        self.name = name
        self.size = int(index[-1, 1])
        self._cached = (-1, b"")

    def _block(self, k: int) -> bytes:
        if self._cached[0] == k:
            return self._cached[1]
        a, b = int(self.index[k, 0]), int(self.index[k + 1, 0])
        self.fh.seek(a)
        raw = self.fh.read(b - a)
        try:
            data = zlib.decompress(raw, 31)  # gzip wrapper: the trailer's CRC and size are checked
        except zlib.error as exc:
            raise InputError(f"{self.name} is a truncated or damaged gzip file ({exc}); download or compress it again.") from None
        if len(data) != int(self.index[k + 1, 1] - self.index[k, 1]):
            raise InputError(f"{self.name} is a damaged gzip file (a block's size does not match); download or compress it again.")
        self._cached = (k, data)
        return data

    def read_at(self, pos: int, n: int) -> bytes:
        """Up to ``n`` decompressed bytes from offset ``pos`` (fewer only at the end)."""
        end = min(self.size, pos + n)
        if pos >= end:
            return b""
        k = int(np.searchsorted(self.index[:, 1], pos, side="right")) - 1
        parts = []
        while pos < end:
            start = int(self.index[k, 1])
            data = self._block(k)
            take = data[pos - start : end - start]
            parts.append(take)
            pos += len(take)
            k += 1
        return b"".join(parts)

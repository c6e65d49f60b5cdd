"""An outside upper bound on the entropy rate: the best of general-purpose compressors (lzma, bz2, zlib)."""

from __future__ import annotations

import bz2
import lzma
import math
import zlib

import numpy as np

from fractalseq.entropy._entropy_estimate import EntropyEstimate
from fractalseq.errors import InputError, ParameterError


#: Default cap of the compressor bound (symbols compressed).
COMPRESS_MAX_LENGTH = 1 << 24


def _pack(codes: np.ndarray, bits: int) -> bytes:
    """Pack codes of ``bits`` bits each (1, 2 or 4) into bytes, first code in the high bits."""
    per = 8 // bits
    pad = (-codes.size) % per
    c = np.concatenate([codes.astype(np.uint8), np.zeros(pad, np.uint8)]).reshape(-1, per)
    out = np.zeros(c.shape[0], np.uint8)
    for j in range(per):
        out |= (c[:, j] << np.uint8(bits * (per - 1 - j))).astype(np.uint8)
    return out.tobytes()


def h_compressors(data, alphabet_size: int | None = None, max_length: int | None = COMPRESS_MAX_LENGTH) -> EntropyEstimate:
    """Outside upper bound on the entropy rate from general-purpose compressors (bits per symbol).

    The codes are written one byte per symbol (two or four bytes beyond 256
    symbols) and, for ``A <= 16``, also packed 1, 2 or 4 bits per symbol;
    each layout is compressed with ``lzma`` (raw LZMA2, preset 9 | EXTREME),
    ``bz2`` (level 9) and ``zlib`` (level 9) from the standard library.
    ``estimate`` is the smallest ``8 * compressed_bytes / symbols``;
    ``details`` lists every combination.  Segment breaks are ignored (the
    codes are concatenated).  Short streams are dominated by container
    overhead (tens of bytes), flagged below 10,000 symbols.
    """
    if hasattr(data, "codes"):
        codes = np.asarray(data.codes)
        if alphabet_size is None:
            alphabet_size = data.alphabet.size
    else:
        codes = np.asarray(data)
    if codes.ndim != 1 or codes.size == 0:
        raise InputError("The compressor bound needs a non-empty 1-D stream of codes.")
    A = int(alphabet_size) if alphabet_size is not None else int(codes.max()) + 1
    if A < 2:
        raise ParameterError("The compressor bound needs an alphabet of at least 2 symbols.", parameter="alphabet_size")
    total = int(codes.size)
    notes: list[str] = []
    if max_length is not None and total > max_length:
        codes = codes[: int(max_length)]
        notes.append(f"compressed the first {int(max_length)} of {total} symbols (max_length)")
    n = int(codes.size)
    layouts: dict[str, bytes] = {}
    if A <= 256:
        layouts["byte"] = codes.astype(np.uint8).tobytes()
    elif A <= 65536:
        layouts["uint16"] = codes.astype("<u2").tobytes()
    else:
        layouts["uint32"] = codes.astype("<u4").tobytes()
    b = max(1, math.ceil(math.log2(A)))
    for pb in (1, 2, 4):
        if b <= pb:
            layouts[f"{pb}-bit"] = _pack(codes, pb)
            break
    sizes: dict[str, int] = {}
    for name, raw in layouts.items():
        # preset 9 extreme, with the dictionary no larger than the input (same output, far less set-up)
        dict_size = min(max(4096, len(raw)), 1 << 26)
        filters = [{"id": lzma.FILTER_LZMA2, "preset": 9 | lzma.PRESET_EXTREME, "dict_size": dict_size}]
        sizes[f"lzma/{name}"] = len(lzma.compress(raw, format=lzma.FORMAT_RAW, filters=filters))
        sizes[f"bz2/{name}"] = len(bz2.compress(raw, 9))
        sizes[f"zlib/{name}"] = len(zlib.compress(raw, 9))
    rates = {k: 8.0 * v / n for k, v in sizes.items()}
    best = min(rates, key=lambda k: (rates[k], k))
    reliable = n >= 10_000
    if not reliable:
        notes.append(f"too short: {n} < 10000 symbols, container overhead inflates the bound")
    notes.append(f"best: {best}")
    return EntropyEstimate(
        quantity="entropy rate upper bound", method="compressors", estimate=rates[best], unit="bits/symbol",
        fraction_of_max=rates[best] / math.log2(A), depth=None, reliable=reliable, note="; ".join(notes),
        details={"bits_per_symbol": rates, "compressed_bytes": sizes, "best": best, "symbols": n, "length": total},
    )

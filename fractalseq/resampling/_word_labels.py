"""Every position of a stream labelled with the index of the word starting there (the union table of words).

Labels are computed once per depth; a replicate's table is then a sum over
the positions of its blocks, never a recount.  A dense rank table when
``A**n <= DENSE_LABEL_CELLS``, else one sort of ``address << b | position`` keys.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from fractalseq.errors import ParameterError
from fractalseq.stream import SymbolArray
from fractalseq.words._kernels import AT_START, _segment_words


@njit(cache=True)
def _word_addresses(codes, starts, depth, bits, out, valid):
    """Address of the ``depth``-word starting at each position, if it fits inside its segment."""
    _segment_words(codes, starts, depth, bits, codes.shape[0], AT_START, 0, out, valid)


#: Word lengths whose address table has at most this many cells are labelled densely (no sort).
DENSE_LABEL_CELLS = 1 << 24


@njit(cache=True)
def rank_sorted_keys(keys, shift, labels, words):
    """``keys`` sorted, each ``item << shift | position``: label each position with the rank of its item.

    The distinct items are written to ``words`` too when it is long enough
    (pass an empty array to skip them).  Returns the number of distinct items.
    """
    pmask = (np.uint64(1) << np.uint64(shift)) - np.uint64(1)
    keep_words = words.shape[0] >= keys.shape[0]
    k = -1
    prev = np.uint64(0)
    for i in range(keys.shape[0]):
        a = keys[i] >> np.uint64(shift)
        if i == 0 or a != prev:
            k += 1
            if keep_words:
                words[k] = a
            prev = a
        labels[np.int64(keys[i] & pmask)] = k
    return k + 1


#: Positions labelled per chunk (the address temporaries live for one chunk only).
LABEL_CHUNK = 1 << 22


@njit(cache=True)
def _mark_dense(addr, valid, table):
    """``table[addr[t]] = 1`` for every valid position."""
    for t in range(addr.shape[0]):
        if valid[t]:
            table[addr[t]] = 1


@njit(cache=True)
def _rank_dense(table):
    """Turn the marks of ``table`` into ranks (-1: absent); returns the present addresses in order."""
    k = 0
    for a in range(table.shape[0]):
        if table[a]:
            table[a] = k
            k += 1
        else:
            table[a] = -1
    words = np.empty(k, dtype=np.uint64)
    for a in range(table.shape[0]):
        if table[a] >= 0:
            words[table[a]] = a
    return words


@njit(cache=True)
def _label_dense(addr, valid, table, labels):
    """``labels[t] = table[addr[t]]`` for valid positions, -1 elsewhere."""
    for t in range(addr.shape[0]):
        labels[t] = table[addr[t]] if valid[t] else -1


def _chunk_addresses(arr: SymbolArray, depth: int, a: int, b: int) -> tuple[np.ndarray, np.ndarray]:
    """Addresses and validity of the ``depth``-words starting at positions ``a..b-1``.

    The slice carries ``depth - 1`` lookahead symbols and the segment starts inside it
    (plus its own first position), so every word gets the address and validity it has
    in the whole stream.
    """
    T = len(arr)
    e = min(b + depth - 1, T)
    st = arr.starts
    inner = st[(st > a) & (st < e)] - a
    starts = np.concatenate([np.zeros(1, np.int64), inner.astype(np.int64)])
    addr = np.zeros(e - a, dtype=np.uint64)
    valid = np.zeros(e - a, dtype=bool)
    _word_addresses(arr.codes[a:e], starts, int(depth), int(arr.alphabet.bits), addr, valid)
    return addr[: b - a], valid[: b - a]


def _chunks(T: int, chunk: int):
    for a in range(0, T, chunk):
        yield a, min(a + chunk, T)


def word_labels(arr: SymbolArray, depth: int, chunk: int = LABEL_CHUNK) -> tuple[np.ndarray, np.ndarray]:
    """Label every position with the index of the ``depth``-word starting there.

    Short words (``A**depth`` at most :data:`DENSE_LABEL_CELLS` addresses) are
    ranked in a dense table; longer ones against the sorted distinct words
    (collected chunk by chunk, then one :func:`numpy.searchsorted` per chunk).
    Addresses are computed ``chunk`` positions at a time, so beyond the labels
    themselves memory is bounded by the distinct words, not by the length.

    Returns
    -------
    labels : int32 (int64 beyond 2**31 words) array of length ``len(arr)``; -1 where the word would cross a segment end
    words : sorted unique addresses (``uint64``), so ``words[labels[t]]`` is the word at ``t``;
        the same order as :meth:`fractalseq.words._counts.WordCounts.words`.
    """
    T = len(arr)
    bits = arr.alphabet.bits
    if depth < 1 or bits * depth > 64:
        raise ParameterError(f"Depth {depth} is outside 1..{arr.alphabet.max_depth} for this alphabet.", parameter="depth")
    chunk = max(int(chunk), 1)
    cells = 1 << (bits * depth) if bits * depth <= 62 else 0
    if 0 < cells <= DENSE_LABEL_CELLS:
        table = np.zeros(cells, dtype=np.int32)
        for a, b in _chunks(T, chunk):
            _mark_dense(*_chunk_addresses(arr, depth, a, b), table)
        words = _rank_dense(table)
        labels = np.empty(T, dtype=np.int32)
        for a, b in _chunks(T, chunk):
            _label_dense(*_chunk_addresses(arr, depth, a, b), table, labels[a:b])
        return labels, words
    parts = []
    for a, b in _chunks(T, chunk):
        addr, valid = _chunk_addresses(arr, depth, a, b)
        parts.append(np.unique(addr[valid]))
    words = np.unique(np.concatenate(parts)) if parts else np.zeros(0, np.uint64)
    del parts
    dtype = np.int32 if words.size < 2**31 - 1 else np.int64
    labels = np.full(T, -1, dtype=dtype)
    for a, b in _chunks(T, chunk):
        addr, valid = _chunk_addresses(arr, depth, a, b)
        pos = np.flatnonzero(valid)
        labels[a + pos] = np.searchsorted(words, addr[pos]).astype(dtype)
    return labels, words.astype(np.uint64, copy=False)


#: Positions per chunk of the streamed passes (:class:`WordIndex`): labels live one chunk at a time.
STREAM_CHUNK = 1 << 22


class WordIndex:
    """One depth's union table of words, labelling any stretch of positions on demand.

    The streamed form of :func:`word_labels`: the table is built in one pass over the
    stream (chunks of :data:`STREAM_CHUNK` positions), and :meth:`labels` gives the labels of
    positions ``a..b-1``, equal to ``word_labels(arr, depth)[0][a:b]``, so no length-sized
    label array is ever held.

    Parameters
    ----------
    arr:
        The stream.
    depth:
        Word length.
    chunk:
        Positions per chunk of :meth:`chunks` (default :data:`STREAM_CHUNK`).
    """

    def __init__(self, arr: SymbolArray, depth: int, chunk: int | None = None) -> None:
        T = len(arr)
        bits = arr.alphabet.bits
        if depth < 1 or bits * depth > 64:
            raise ParameterError(f"Depth {depth} is outside 1..{arr.alphabet.max_depth} for this alphabet.", parameter="depth")
        self.arr, self.depth, self.length = arr, int(depth), T
        self.chunk = max(int(STREAM_CHUNK if chunk is None else chunk), 1)
        cells = 1 << (bits * depth) if bits * depth <= 62 else 0
        self.table: np.ndarray | None = None
        if 0 < cells <= DENSE_LABEL_CELLS:
            table = np.zeros(cells, dtype=np.int32)
            for a, b in _chunks(T, self.chunk):
                _mark_dense(*_chunk_addresses(arr, depth, a, b), table)
            self.words = _rank_dense(table)
            self.table = table
            self.dtype = np.dtype(np.int32)
            return
        parts = []
        for a, b in _chunks(T, self.chunk):
            addr, valid = _chunk_addresses(arr, depth, a, b)
            parts.append(np.unique(addr[valid]))
        words = np.unique(np.concatenate(parts)) if parts else np.zeros(0, np.uint64)
        del parts
        self.words = words.astype(np.uint64, copy=False)
        self.dtype = np.dtype(np.int32 if words.size < 2**31 - 1 else np.int64)

    @property
    def size(self) -> int:
        """Number of distinct words (labels run over ``0..size-1``)."""
        return int(self.words.size)

    def labels(self, a: int, b: int) -> np.ndarray:
        """Labels of positions ``a..b-1`` (-1 where the word would cross a segment end)."""
        addr, valid = _chunk_addresses(self.arr, self.depth, a, b)
        if self.table is not None:
            out = np.empty(b - a, dtype=np.int32)
            _label_dense(addr, valid, self.table, out)
            return out
        out = np.full(b - a, -1, dtype=self.dtype)
        pos = np.flatnonzero(valid)
        out[pos] = np.searchsorted(self.words, addr[pos]).astype(self.dtype)
        return out

    def chunks(self, multiple: int = 1):
        """``(a, labels of a..b-1)`` over the whole stream, chunks a whole multiple of ``multiple`` long."""
        m = max(int(multiple), 1)
        step = max(self.chunk // m, 1) * m
        for a, b in _chunks(self.length, step):
            yield a, self.labels(a, b)

    def counts(self) -> np.ndarray:
        """Occurrences of each word (int64, ``size`` long), as ``bincount`` of the whole label array."""
        out = np.zeros(self.size, dtype=np.int64)
        for _, lab in self.chunks():
            out += np.bincount(lab[lab >= 0], minlength=self.size)
        return out

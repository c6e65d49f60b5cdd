"""Per-block word tables of the batches of a drift test.

Each batch (one or more streams) is cut into blocks of ``B`` symbols; the
n-words starting in each block are counted once (words crossing a block edge
belong to the block they start in; no word crosses a stream or segment end).
Word counts add, so the table of any set of blocks is the sum of their block
tables.  Counting runs on any engine with the :class:`fractalseq.runner.Engine`
contract (map :func:`block_tables` over pieces, results in piece order).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.compare._distances import remap_words
from fractalseq.runner import Engine
from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.words._kernels import segment_word_addresses
from fractalseq.words._pieces import DEFAULT_PIECE, Piece, iter_pieces


def block_tables(task: tuple[Piece, int, int]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Map step: per-block counts of the depth-words starting in a piece's core.

    Parameters
    ----------
    task:
        ``(piece, depth, block)``; pieces come from :func:`fractalseq.words._pieces.iter_pieces`
        with overlap ``depth - 1`` and a piece size that is a multiple of ``block``.

    Returns
    -------
    blocks, words, counts:
        One entry per (block, word) present, sorted by block then address;
        block ids are positions in the stream divided by ``block``.
    """
    piece, depth, block = task
    oa, pos = segment_word_addresses(piece.codes, piece.starts, int(depth), int(piece.alphabet.bits), limit=int(piece.core))
    ob = (int(piece.offset) + pos) // int(block)
    k = oa.size
    if k == 0:
        return ob, oa, np.zeros(0, np.int64)
    order = np.lexsort((oa, ob))
    ob, oa = ob[order], oa[order]
    new = np.ones(k, dtype=bool)
    new[1:] = (ob[1:] != ob[:-1]) | (oa[1:] != oa[:-1])
    idx = np.flatnonzero(new)
    counts = np.diff(np.append(idx, k)).astype(np.int64)
    return ob[idx], oa[idx], counts


@dataclass(frozen=True)
class BatchTables:
    """Block tables of one batch over the joint alphabet (one entry per block and word present)."""

    names: list[str]
    lengths: list[int]
    blocks: int
    block_ids: np.ndarray  # per entry, block index within the batch
    words: np.ndarray  # per entry, word address (joint alphabet)
    counts: np.ndarray


def tables_for(
    streams: Sequence[SymbolArray | SymbolStream],
    depth: int,
    block: int,
    engine: Engine,
    joint: Alphabet,
    on_done: Callable[[int, object], None] | None,
) -> BatchTables:
    """Count the block tables of one batch on ``engine``, words re-addressed over the ``joint`` alphabet.

    Blocks are numbered through the batch (the first stream's blocks, then the
    next stream's); ``on_done(index, result)`` is called per counted piece.
    """
    chunk = block * max(1, DEFAULT_PIECE // block)
    ids, words, counts = [], [], []
    names, lengths = [], []
    base = 0
    for s in streams:
        lengths_box = [0]

        def pieces(s=s, box=lengths_box):
            for p in iter_pieces(s, chunk, depth - 1):
                box[0] += p.core
                yield (p, depth, block)

        got: dict[int, tuple] = {}
        for i, res in engine.imap(block_tables, pieces()):
            got[i] = res
            if on_done is not None:
                on_done(i, res)
        results = [got[i] for i in sorted(got)]
        L = lengths_box[0]
        nblocks = int(math.ceil(L / block)) if L else 0
        for b, w, c in results:
            if w.size and not s.alphabet.same_symbols(joint):
                w = remap_words(w, depth, s.alphabet, joint)
            ids.append(b + base)
            words.append(w)
            counts.append(c)
        names.append(s.name)
        lengths.append(L)
        base += nblocks
    cat = lambda xs, dt: np.concatenate(xs).astype(dt) if xs else np.zeros(0, dt)  # noqa: E731
    return BatchTables(names, lengths, base, cat(ids, np.int64), cat(words, np.uint64), cat(counts, np.int64))


def batch_length(s: SymbolArray | SymbolStream) -> int:
    """Number of symbols of a stream (a stream not in memory is read once to count them)."""
    if isinstance(s, SymbolArray):
        return len(s)
    return int(sum(len(ch.codes) for ch in s.chunks()))

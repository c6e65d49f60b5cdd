"""Where the jobs that split one large source get their pieces (one place, so the cutting can change here).

Today the parent process reads the source and ships each piece to the
workers (:func:`fractalseq.words._pieces.iter_pieces`); every job that splits
a source for an engine (fitted scoring, windowed scans) takes its pieces from
:func:`worker_pieces`.
"""

from __future__ import annotations

from typing import Iterator

from fractalseq.stream import SymbolArray, SymbolStream
from fractalseq.words._pieces import Piece, iter_pieces


def worker_pieces(source: SymbolStream | SymbolArray, chunk: int, overlap: int) -> Iterator[Piece]:
    """Pieces of ``chunk`` symbols, each followed by up to ``overlap`` symbols of the next (see :func:`iter_pieces`)."""
    return iter_pieces(source, chunk, overlap)

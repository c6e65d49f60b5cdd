"""Exact word (k-mer) counts of every depth 1..N: the one structure every estimator reads.

For hypercube corners and ratio k <= 1/2 the occupied boxes of the encoded
point cloud at scale k^n are the distinct n-words, and box masses are word
frequencies; :class:`WordCounts` holds them for all depths at once, merges by
``+``, and splits a large source into overlapping pieces
(:func:`count_words_split`).  Absent and over/under-represented words live here
too, because they are read straight off the counts.
"""

from importlib import import_module
from typing import Any

#: Where each public name lives; loaded on first use (PEP 562), so that counting words does not
#: import scipy (the absent-word statistics need it).
_WHERE = {
    **dict.fromkeys(("WordReport", "WordRow", "absent_words", "observed_expected", "word_deviations"), "_absent"),
    **dict.fromkeys(("Spectrum", "WordCounter", "WordCounts", "check_depth", "count_words", "decode_address",
                     "encode_address"), "_counts"),
    "count_inputs": "_corpus",
    **dict.fromkeys(("DEFAULT_PIECE", "Piece", "count_piece", "count_range", "count_words_split", "iter_pieces", "read_piece",
                     "source_pieces"), "_pieces"),
}


def __getattr__(name: str) -> Any:
    if name in _WHERE:
        value = getattr(import_module(f"{__name__}.{_WHERE[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "DEFAULT_PIECE", "Piece", "Spectrum", "WordCounter", "WordCounts", "WordReport", "WordRow", "absent_words",
    "check_depth", "count_inputs", "count_piece", "count_range", "count_words", "count_words_split", "decode_address",
    "encode_address", "iter_pieces", "observed_expected", "read_piece", "source_pieces", "word_deviations",
]

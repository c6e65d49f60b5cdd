"""Exact word (k-mer) counts of every depth 1..N: the one structure every estimator reads.

For hypercube corners and ratio k <= 1/2 the occupied boxes of the encoded
point cloud at scale k^n are the distinct n-words, and box masses are word
frequencies; :class:`WordCounts` holds them for all depths at once, merges by
``+``, and splits a large source into overlapping pieces
(:func:`count_words_split`).  Absent and over/under-represented words live here
too, because they are read straight off the counts.
"""

from fractalseq.words._absent import WordReport, WordRow, absent_words, observed_expected, word_deviations
from fractalseq.words._counts import (
    Spectrum,
    WordCounter,
    WordCounts,
    check_depth,
    count_words,
    decode_address,
    encode_address,
)
from fractalseq.words._corpus import count_inputs
from fractalseq.words._pieces import DEFAULT_PIECE, Piece, count_piece, count_words_split, iter_pieces

__all__ = [
    "DEFAULT_PIECE", "Piece", "Spectrum", "WordCounter", "WordCounts", "WordReport", "WordRow", "absent_words",
    "check_depth", "count_inputs", "count_piece", "count_words", "count_words_split", "decode_address",
    "encode_address", "iter_pieces", "observed_expected", "word_deviations",
]

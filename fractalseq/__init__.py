"""fractalseq: complexity, comparison and prediction of long symbolic streams.

A stream of symbols is encoded by iterating contractive maps towards the
corners of a hypercube (the chaos-game / iterated-function-system encoding).
Occupied boxes of that encoding at scale k**n are the distinct n-words of the
stream, so box counts, Rényi partition sums, block entropies, drift tests and
the predictor's context counts are all read off one structure: exact word
counts for every depth (:class:`fractalseq.words.WordCounts`).

Genomic output is for research, not for clinical decisions.
"""

from fractalseq.alphabet import Alphabet
from fractalseq.errors import FractalseqError, InputError, ParameterError
from fractalseq.stream import Chunk, SymbolArray, SymbolStream

__version__ = "0.1.0"

__all__ = [
    "Alphabet",
    "Chunk",
    "FractalseqError",
    "InputError",
    "ParameterError",
    "SymbolArray",
    "SymbolStream",
    "__version__",
]

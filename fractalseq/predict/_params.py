"""Parameters of the predictor: default ladders of cell depths, their checks, strands, depth classes, inputs."""

from __future__ import annotations

import math
from typing import Iterator, Sequence

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import ParameterError
from fractalseq.stream import Chunk, SymbolArray, SymbolStream

DNA_DEPTHS = (3, 6, 10, 14, 20)
#: Fractions of the maximum depth forming the default ladder of depths.
LADDER_FRACTIONS = (0.15, 0.3, 0.45, 0.6, 0.8, 1.0)
#: Default budget of table memory (bytes) when ``max_cells`` is not given.
DEFAULT_TABLE_BYTES = 1 << 28
#: Online mode: alphabets larger than this use top-k cells (:mod:`fractalseq.predict._online_sparse`).
DENSE_MAX_SYMBOLS = 256
#: Online top-k cells: log2 of the rows a depth's region starts with (doubled as it fills).
SPARSE_START_BITS = 10
#: Default cap on the rows of the online tables.
DEFAULT_ONLINE_CELLS = 1 << 24
#: Default cap on the cells a fitted model keeps.
DEFAULT_FITTED_CELLS = 1 << 23
#: Counts limits by depth class (shallow, middle, deep) and the divisors of the smoothing.
COUNT_LIMITS = (4095, 255, 31)
ALPHA_DIV = (1.0, 4.0, 16.0)
#: Depth classes: cells are shallow while A**n <= 2**20, middle while <= 2**26.
CLASS_BITS = (20.0, 26.0)
#: Baseline orders 0..K with b (K + 1) <= this many bits.
BASELINE_BITS = 22
#: Fitted blend: concentrations A alpha 2**k (k = 0..17, and down to about 1/2 when A alpha > 64) and discounts tried by leave-one-out likelihood.
BETA_STEPS = 18
DISCOUNTS = (0.0, 0.25, 0.5, 0.75)
#: Cells per depth used to choose the blend parameters (a regular subsample beyond).
GRID_CELLS = 100_000
#: Online mode: shallower cells are estimated well from one strand and get no reverse-complement updates.
IR_MIN_DEPTH = 5
#: Private arrays of a fitted model's cell index (rebuilt by every fit).

Source = SymbolStream | SymbolArray

# ------------------------------------------------------------------ params
def default_max_depth(alphabet: Alphabet) -> int:
    """Deepest cell by default: about 40 bits of context (20 for DNA), within the address width."""
    return int(max(1, min(alphabet.max_depth - 1, round(40 / alphabet.bits))))


def default_depths(alphabet: Alphabet, max_depth: int | None = None) -> tuple[int, ...]:
    """The ladder of cell depths used when none are given.

    DNA-like alphabets (4 symbols) use :data:`DNA_DEPTHS` up to ``max_depth``;
    otherwise the depths are 1 and the fractions 0.15, 0.3, 0.45, 0.6, 0.8 and
    1 of ``max_depth`` (rounded, at least 1), plus depth 2 when the next depth
    after 1 is deeper than 3.
    """
    D = default_max_depth(alphabet) if max_depth is None else int(max_depth)
    if alphabet.size == 4 and max_depth is None:
        return DNA_DEPTHS
    if alphabet.size == 4 and D >= 3:
        ladder = sorted({d for d in DNA_DEPTHS if d <= D} | {D})
        return tuple(ladder)
    ladder = {max(1, int(round(D * f))) for f in LADDER_FRACTIONS} | {1}
    if sorted(ladder)[1:2] and sorted(ladder)[1] > 3:
        ladder |= {2}
    return tuple(sorted(ladder))


def check_depths(depths: Sequence[int], alphabet: Alphabet, reverse: bool) -> tuple[int, ...]:
    try:
        ds = tuple(sorted({int(d) for d in depths}))
    except (TypeError, ValueError):
        raise ParameterError(f"Cell depths must be whole numbers, not {depths!r}.", parameter="depths") from None
    if not ds:
        raise ParameterError("At least one cell depth is needed; give e.g. depths 2, 4, 8.", parameter="depths")
    limit = alphabet.max_depth - 1
    if ds[0] < 0 or ds[-1] > limit:
        raise ParameterError(
            f"Cell depths must lie in 0..{limit} for the {alphabet.name} alphabet ({alphabet.bits} bits a symbol); "
            f"got {ds[0]}..{ds[-1]}.",
            parameter="depths",
        )
    return ds


def complement_map(alphabet: Alphabet) -> np.ndarray | None:
    """Code of each symbol's complement for DNA/RNA (A-T/U, C-G), else ``None``."""
    syms = tuple(s.upper() for s in alphabet.symbols)
    if syms in (("A", "C", "G", "T"), ("A", "C", "G", "U")):
        return np.array([3, 2, 1, 0], dtype=np.int64)
    return None


def use_reverse(alphabet: Alphabet, setting: bool | str) -> bool:
    if setting == "auto":
        return complement_map(alphabet) is not None
    if setting in (True, "on", "yes"):
        if complement_map(alphabet) is None:
            raise ParameterError(
                f"Reverse-complement counting needs a DNA or RNA alphabet (ACGT/ACGU), not {alphabet.name}; "
                "turn it off.",
                parameter="reverse_complement",
            )
        return True
    if setting in (False, "off", "no"):
        return False
    raise ParameterError(f"reverse_complement must be 'auto', True or False, not {setting!r}.", parameter="reverse_complement")


def depth_class(alphabet: Alphabet, depth: int) -> int:
    volume = depth * math.log2(max(alphabet.size, 2))
    if volume <= CLASS_BITS[0]:
        return 0
    return 1 if volume <= CLASS_BITS[1] else 2


def as_source(source) -> Source:
    if isinstance(source, (SymbolStream, SymbolArray)):
        return source
    raise ParameterError(
        f"Expected a SymbolStream or SymbolArray (see fractalseq.sources.open_source), not {type(source).__name__}.",
        parameter="source",
    )


def known_length(source: Source) -> int | None:
    """Symbols of an in-memory source, or an upper bound a lazy stream knows (an event log's lines), else ``None``."""
    return len(source) if isinstance(source, SymbolArray) else getattr(source, "length_hint", None)


def source_chunks(source: Source) -> Iterator[Chunk]:
    """Chunks of either kind of source (a SymbolArray yields pieces of DEFAULT_CHUNK symbols)."""
    return source.chunks()

def baseline_orders(alphabet: Alphabet) -> int:
    """Largest order K of the Markov baseline (orders 0..K): ``b (K + 1) <= 22`` bits, at most 12."""
    return int(max(0, min(12, BASELINE_BITS // alphabet.bits - 1, alphabet.max_depth - 1)))

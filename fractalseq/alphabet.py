"""Symbols and their integer codes.

An :class:`Alphabet` is an ordered tuple of symbols; a symbol's code is its
index.  Symbols are strings: single characters for DNA, protein, text and
bytes (bytes use the Latin-1 character of each value), whole strings for
tokens and log templates.

For byte-oriented readers an alphabet also provides a 256-entry lookup table
from input byte to code, with three negative classes:

``UNKNOWN``  a byte that is not a symbol (handled by the unknown-symbol policy),
``AMBIGUOUS`` a byte the alphabet knows as a non-symbol, such as the IUPAC
             ambiguity codes and ``N`` for DNA (also handled by the policy, but
             counted separately),
``IGNORED``  layout bytes (newline, carriage return, space, tab) dropped silently.
"""

from __future__ import annotations

import json
import math
from collections import Counter
from dataclasses import dataclass, field
from typing import Iterable, Literal, Sequence

import numpy as np

from fractalseq.errors import InputError, ParameterError

UNKNOWN = -1
AMBIGUOUS = -2
IGNORED = -3

Policy = Literal["break", "skip", "error"]
POLICIES: tuple[str, ...] = ("break", "skip", "error")

#: Word addresses are packed into unsigned 64-bit integers.
ADDRESS_BITS = 64

_DNA_AMBIGUITY = "NRYKMSWBDHVX-"
_PROTEIN = "ACDEFGHIKLMNPQRSTVWY"
_PROTEIN_AMBIGUITY = "XBZJUO*-"
_LAYOUT = b"\n\r \t"


def check_policy(policy: str) -> Policy:
    """Return ``policy`` if it is one of ``break``, ``skip``, ``error``; raise otherwise."""
    if policy not in POLICIES:
        raise ParameterError(
            f"Unknown-symbol policy {policy!r} is not one of break, skip, error; pick one of those."
        )
    return policy  # type: ignore[return-value]


@dataclass(frozen=True)
class Alphabet:
    """An ordered set of symbols; the code of a symbol is its position.

    Parameters
    ----------
    name:
        Short name (``dna``, ``protein``, ``bytes``, ``binary``, ``learned``, ``templates``...).
    symbols:
        The symbols in code order.  Must be distinct and non-empty.
    case_insensitive:
        If true, lower-case input bytes map to the code of their upper-case
        symbol (soft-masked DNA reads as its base).
    ambiguous:
        Characters that are known non-symbols (IUPAC codes for DNA); they are
        handled by the unknown-symbol policy but reported under their own name.
    """

    name: str
    symbols: tuple[str, ...]
    case_insensitive: bool = False
    ambiguous: str = ""
    _index: dict = field(default=None, compare=False, repr=False, hash=False)  # type: ignore[assignment]

    def __post_init__(self) -> None:
        if len(self.symbols) == 0:
            raise ParameterError("An alphabet needs at least one symbol; the input may be empty.")
        if len(set(self.symbols)) != len(self.symbols):
            raise ParameterError("Alphabet symbols must be distinct; remove the repeated symbols.")
        object.__setattr__(self, "_index", {s: i for i, s in enumerate(self.symbols)})

    # ------------------------------------------------------------------ sizes
    @property
    def size(self) -> int:
        """Number of symbols A."""
        return len(self.symbols)

    def __len__(self) -> int:
        return len(self.symbols)

    @property
    def bits(self) -> int:
        """Bits per symbol in a packed word address: ``max(1, ceil(log2 A))``."""
        return max(1, math.ceil(math.log2(self.size))) if self.size > 1 else 1

    @property
    def max_depth(self) -> int:
        """Deepest word length whose address fits in 64 bits (32 for DNA)."""
        return ADDRESS_BITS // self.bits

    @property
    def code_dtype(self) -> np.dtype:
        """Smallest unsigned dtype holding every code (uint8 up to 256 symbols)."""
        return np.dtype(np.uint8) if self.size <= 256 else np.dtype(np.uint32)

    @property
    def single_characters(self) -> bool:
        """True when every symbol is one character (so words print as strings)."""
        return all(len(s) == 1 for s in self.symbols)

    # ------------------------------------------------------------- conversion
    def code(self, symbol: str) -> int:
        """Code of one symbol; raises :class:`InputError` when it is not in the alphabet."""
        key = symbol.upper() if self.case_insensitive else symbol
        try:
            return self._index[key]
        except KeyError:
            raise InputError(
                f"Symbol {symbol!r} is not in the {self.name} alphabet; use one of "
                f"{self.describe_symbols()}."
            ) from None

    def encode(self, text: str | Sequence[str]) -> np.ndarray:
        """Codes of a short string (one character per symbol) or a list of symbols."""
        items: Iterable[str] = list(text) if isinstance(text, str) and self.single_characters else text
        if isinstance(items, str):
            items = items.split()
        return np.array([self.code(s) for s in items], dtype=self.code_dtype)

    def decode(self, codes: Iterable[int]) -> list[str]:
        """Symbols of a sequence of codes."""
        return [self.symbols[int(c)] for c in codes]

    def word(self, codes: Iterable[int]) -> str:
        """A word as text: joined characters, or symbols separated by ' · ' for long symbols."""
        parts = self.decode(codes)
        return "".join(parts) if self.single_characters else " · ".join(parts)

    def describe_symbols(self, limit: int = 12) -> str:
        """Short printable list of the symbols."""
        shown = [repr(s) for s in self.symbols[:limit]]
        more = "" if self.size <= limit else f" and {self.size - limit} more"
        return ", ".join(shown) + more

    def byte_table(self) -> np.ndarray:
        """256-entry int16 lookup from input byte to code or a negative class.

        Only defined for alphabets of single characters with code points < 256.
        """
        if not self.single_characters or any(ord(s) > 255 for s in self.symbols):
            raise ParameterError(
                f"The {self.name} alphabet has symbols that are not single bytes; read this input as tokens."
            )
        table = np.full(256, UNKNOWN, dtype=np.int16)
        for b in _LAYOUT:
            table[b] = IGNORED
        for ch in self.ambiguous:
            table[ord(ch)] = AMBIGUOUS
            if self.case_insensitive:
                table[ord(ch.lower())] = AMBIGUOUS
        for i, s in enumerate(self.symbols):
            table[ord(s)] = i
            if self.case_insensitive:
                table[ord(s.lower())] = i
                table[ord(s.upper())] = i
        return table

    # ---------------------------------------------------------- serialisation
    def to_dict(self) -> dict:
        """JSON-ready description (inverse of :meth:`from_dict`)."""
        return {
            "name": self.name,
            "symbols": list(self.symbols),
            "case_insensitive": self.case_insensitive,
            "ambiguous": self.ambiguous,
        }

    @classmethod
    def from_dict(cls, data: dict) -> "Alphabet":
        """Rebuild an alphabet written by :meth:`to_dict`."""
        try:
            return cls(
                name=str(data["name"]),
                symbols=tuple(str(s) for s in data["symbols"]),
                case_insensitive=bool(data.get("case_insensitive", False)),
                ambiguous=str(data.get("ambiguous", "")),
            )
        except (KeyError, TypeError) as exc:
            raise InputError(f"The alphabet description is incomplete ({exc}); the file may be damaged.") from None

    def fingerprint(self) -> str:
        """Stable text identifying the alphabet (used in cache keys and model files)."""
        return json.dumps(self.to_dict(), sort_keys=True, ensure_ascii=True)

    def same_symbols(self, other: "Alphabet") -> bool:
        """True when both alphabets have the same symbols in the same order."""
        return self.symbols == other.symbols


# ---------------------------------------------------------------- presets
def dna() -> Alphabet:
    """DNA: A C G T; lower case (soft-masked) reads as its base; IUPAC codes and N are ambiguous."""
    return Alphabet("dna", tuple("ACGT"), case_insensitive=True, ambiguous=_DNA_AMBIGUITY)


def rna() -> Alphabet:
    """RNA: A C G U, otherwise like :func:`dna`."""
    return Alphabet("rna", tuple("ACGU"), case_insensitive=True, ambiguous=_DNA_AMBIGUITY)


def protein() -> Alphabet:
    """The 20 standard amino acids; X, B, Z, J, U, O, * and - are ambiguous."""
    return Alphabet("protein", tuple(_PROTEIN), case_insensitive=True, ambiguous=_PROTEIN_AMBIGUITY)


def binary() -> Alphabet:
    """The two symbols 0 and 1."""
    return Alphabet("binary", ("0", "1"))


def all_bytes() -> Alphabet:
    """All 256 byte values (symbol = the Latin-1 character of the byte)."""
    return Alphabet("bytes", tuple(chr(i) for i in range(256)))


PRESETS = {"dna": dna, "rna": rna, "protein": protein, "binary": binary, "bytes": all_bytes}


def preset(name: str) -> Alphabet:
    """Return a preset alphabet by name (``dna``, ``rna``, ``protein``, ``binary``, ``bytes``)."""
    try:
        return PRESETS[name]()
    except KeyError:
        raise ParameterError(
            f"Alphabet {name!r} is not known; use one of {', '.join(sorted(PRESETS))}, 'learn' or a list like 'symbols:abc'."
        ) from None


def from_symbols(symbols: str | Sequence[str], name: str = "custom") -> Alphabet:
    """An alphabet from explicit symbols: a string of characters or a list of strings."""
    return Alphabet(name, tuple(symbols))


def learned(counts: Counter | dict, name: str = "learned") -> Alphabet:
    """An alphabet learned from data: symbols by decreasing frequency, ties by code point."""
    if not counts:
        raise InputError("No symbols were found to learn an alphabet from; the input is empty.")
    order = sorted(counts.items(), key=lambda kv: (-kv[1], tuple(ord(c) for c in kv[0])))
    return Alphabet(name, tuple(s for s, _ in order))


def resolve(spec: str) -> Alphabet | None:
    """Parse a command-line alphabet spec; ``None`` means learn it from the data.

    Accepted: a preset name, ``learn``/``auto``, or ``symbols:XYZ`` for explicit
    one-character symbols.
    """
    if spec in ("learn", "auto"):
        return None
    if spec.startswith("symbols:"):
        chars = spec[len("symbols:"):]
        if not chars:
            raise ParameterError("The alphabet 'symbols:' lists no symbols; write e.g. symbols:abc.")
        return from_symbols(chars)
    return preset(spec)


def require_two_symbols(alphabet: "Alphabet", name: str = "The input") -> None:
    """Refuse an alphabet of fewer than two symbols (every word is the same: nothing to measure).

    The one rule of every measuring job (profile, survey, scan, drift), so the
    message names the cause instead of an automatic depth running away.

    Raises
    ------
    InputError
        When ``alphabet`` has fewer than two symbols.
    """
    if alphabet.size < 2:
        only = f" ({alphabet.symbols[0]!r})" if alphabet.size == 1 else ""
        raise InputError(
            f"{name} uses only {alphabet.size} distinct symbol{only}, so there is no complexity to measure; "
            "give data with at least two different symbols, or read it with a fixed alphabet (e.g. dna)."
        )

"""Plain text as Unicode characters, and whitespace-separated tokens.

Characters
----------
The input is decoded as UTF-8 (strict: invalid bytes raise
:class:`InputError`; read such files with the ``bytes`` alphabet).  Each
character is looked up in a code-point table; space, tab, line feed and
carriage return are symbols when the alphabet has them and skipped otherwise.
A learned text alphabet holds every character that occurs except carriage
return (so CRLF and LF files read the same): spaces and line feeds are
symbols.  Ambiguous and unknown characters follow the policy.

Tokens
------
Every run of non-whitespace is one symbol.  Line ends are whitespace and do
not break the segment.  The alphabet is learned (decreasing count, ties by
code points) unless an explicit alphabet is given; unknown tokens follow the
policy.  Tokens are mapped with ``np.unique`` per block (no per-token Python
loop in the hot path).
"""

from __future__ import annotations

import codecs
from collections import Counter
from typing import Iterator

import numpy as np

from fractalseq.alphabet import AMBIGUOUS, IGNORED, UNKNOWN, Alphabet, learned
from fractalseq.errors import InputError
from fractalseq.sources import kernels as K
from fractalseq.sources.base import drop_reason, symbol_label
from fractalseq.sources.rawio import ByteSource, Origin, line_blocks
from fractalseq.stream import Chunk, ReadReport, Record

_UNSET = -9
_CODEPOINTS = 0x110000
_WHITESPACE = b" \t\n\r\x0b\x0c"


def _utf8_error(origin: Origin, exc: UnicodeDecodeError, offset: int, data: bytes) -> InputError:
    line = data[: exc.start].count(b"\n")
    return InputError(
        f"{origin.name} is not valid UTF-8 text (byte 0x{data[exc.start]:02x} after {offset + exc.start} bytes, "
        f"{line} line ends into the block); convert it to UTF-8 or read raw bytes with the bytes alphabet."
    )


class _CodepointTable:
    """Lazily filled class table over all Unicode code points."""

    def __init__(self, alphabet: Alphabet, ignore: str = " \t\r\n") -> None:
        self.alphabet = alphabet
        self.ignore = ignore
        self.lut = np.full(_CODEPOINTS, _UNSET, dtype=np.int32)
        self._index = {s: i for i, s in enumerate(alphabet.symbols)}

    def classify(self, ch: str) -> int:
        a = self.alphabet
        if ch in self._index:
            return self._index[ch]
        if a.case_insensitive:
            for alt in (ch.upper(), ch.lower()):
                if alt in self._index:
                    return self._index[alt]
        if ch in a.ambiguous or (a.case_insensitive and ch.upper() in a.ambiguous):
            return AMBIGUOUS
        if ch in self.ignore:
            return IGNORED
        return UNKNOWN

    def prepare(self, cps: np.ndarray) -> None:
        new = cps[self.lut[cps] == _UNSET]
        for c in np.unique(new).tolist():
            self.lut[c] = self.classify(chr(c))


def _codepoints(text: str) -> np.ndarray:
    return np.frombuffer(text.encode("utf-32-le"), dtype="<u4")


def char_chunks(
    origin: Origin, alphabet: Alphabet, policy: str, block_size: int, report: ReadReport, ignore: str = " \t\r\n"
) -> Iterator[Chunk]:
    """Characters of UTF-8 text as codes (see the module rules)."""
    table = _CodepointTable(alphabet, ignore)
    pol = K.POLICY_CODES[policy]
    state = K.new_state(K.PLAIN)
    dropped = np.zeros(_CODEPOINTS, dtype=np.int64)
    events = np.zeros((1, 3), dtype=np.int64)
    dec = codecs.getincrementaldecoder("utf-8")("strict")
    total = segments = 0
    offset = 0
    with ByteSource(origin) as src:
        blocks = src.blocks(block_size)
        while True:
            block = next(blocks, None)
            try:
                text = dec.decode(block if block is not None else b"", final=block is None)
            except UnicodeDecodeError as exc:
                raise _utf8_error(origin, exc, offset, block or b"") from None
            if block is not None:
                offset += len(block)
            if text:
                cps = _codepoints(text)
                table.prepare(cps)
                codes = np.empty(cps.size, dtype=alphabet.code_dtype)
                starts = np.empty(cps.size + 1, dtype=np.int64)
                state[K.S_NCODES] = 0
                state[K.S_NSTARTS] = 0
                K.scan_symbols(cps, 0, table.lut, K.PLAIN, pol, 10, state, codes, starts, dropped, events)
                if state[K.S_ERR_KIND] != K.E_NONE:
                    ch = chr(int(cps[int(state[K.S_ERR_POS])]))
                    what = "ambiguous symbol" if table.lut[ord(ch)] == AMBIGUOUS else "unknown symbol"
                    raise InputError(
                        f"{origin.name} has the {what} {symbol_label(ch)} on line {int(state[K.S_LINE])}, which the "
                        f"{alphabet.name} alphabet cannot read under the error policy; use the break or skip "
                        "policy, or another alphabet."
                    )
                nc = int(state[K.S_NCODES])
                ns = int(state[K.S_NSTARTS])
                if nc:
                    yield Chunk(codes[:nc], starts[:ns].copy())
                total += nc
                segments += ns
            if block is None:
                break
    report.symbols = total
    report.segments = segments
    for c in np.flatnonzero(dropped):
        report.drop(drop_reason(chr(int(c)), table.lut[c] == AMBIGUOUS, alphabet), int(dropped[c]))
    report.records = [Record(origin.name, 0, total)]


def learn_chars(origin: Origin, block_size: int, ignore: str = "\r") -> Alphabet:
    """First pass: every character of the UTF-8 text except those in ``ignore``."""
    counts = np.zeros(_CODEPOINTS, dtype=np.int64)
    dec = codecs.getincrementaldecoder("utf-8")("strict")
    offset = 0
    with ByteSource(origin) as src:
        for block in list_blocks(src, block_size):
            try:
                text = dec.decode(block, final=not block)
            except UnicodeDecodeError as exc:
                raise _utf8_error(origin, exc, offset, block) from None
            offset += len(block)
            if text:
                uniq, cnt = np.unique(_codepoints(text), return_counts=True)
                counts[uniq] += cnt
    for ch in ignore:
        counts[ord(ch)] = 0
    found = Counter({chr(int(c)): int(counts[c]) for c in np.flatnonzero(counts)})
    if not found:
        raise InputError(f"{origin.name} holds no characters to read; give a file with text.")
    return learned(found)


def list_blocks(src: ByteSource, block_size: int) -> Iterator[bytes]:
    """Blocks of ``src`` followed by one empty block (so a decoder can be finalised)."""
    yield from src.blocks(block_size)
    yield b""


# ------------------------------------------------------------------ tokens
def _token_blocks(origin: Origin, block_size: int) -> Iterator[tuple[int, str, list[str]]]:
    for first_line, block in line_blocks(origin, block_size, separators=_WHITESPACE):
        try:
            text = block.decode("utf-8")
        except UnicodeDecodeError as exc:
            line = first_line + block[: exc.start].count(b"\n")
            raise InputError(
                f"{origin.name} line {line} is not valid UTF-8; convert the file to UTF-8 and read it again."
            ) from None
        toks = text.split()
        if toks:
            yield first_line, text, toks


def _line_of_token(text: str, k: int) -> int:
    """0-based line (within ``text``) of its ``k``-th whitespace-separated token."""
    seen = 0
    for j, line in enumerate(text.split("\n")):
        seen += len(line.split())
        if seen > k:
            return j
    return 0


def learn_tokens(origin: Origin, block_size: int) -> Alphabet:
    """First pass: the distinct tokens by decreasing count, ties by code points."""
    counts: Counter = Counter()
    for _, _, toks in _token_blocks(origin, block_size):
        uniq, cnt = np.unique(np.array(toks, dtype=str), return_counts=True)
        counts.update(dict(zip(uniq.tolist(), cnt.tolist())))
    if not counts:
        raise InputError(f"{origin.name} holds no tokens; give a file with text.")
    return learned(counts)


def item_scanner(alphabet: Alphabet, policy: str):
    """A function mapping blocks of items (tokens, log templates) to codes under a policy, block after block.

    The returned ``scan(items)`` gives ``(codes, segment_starts, dropped, err)``:
    the codes of the known items, where new segments start (the break policy
    starts one after every dropped run), ``{item: count}`` of the items
    dropped, and the index of the first unknown item under the error policy
    (-1 if none).  The policy state carries from one block to the next.
    """
    index = {s: i for i, s in enumerate(alphabet.symbols)}
    pol = K.POLICY_CODES[policy]
    state = K.new_state(K.PLAIN)
    events = np.zeros((1, 3), dtype=np.int64)

    def scan(items: list[str]) -> tuple[np.ndarray, np.ndarray, dict[str, int], int]:
        uniq, inv = np.unique(np.array(items, dtype=str), return_inverse=True)
        names = uniq.tolist()
        lut = np.array([index.get(t, UNKNOWN) for t in names], dtype=np.int32)
        dropped = np.zeros(len(names), dtype=np.int64)
        codes = np.empty(len(items), dtype=alphabet.code_dtype)
        starts = np.empty(len(items) + 1, dtype=np.int64)
        state[K.S_NCODES] = 0
        state[K.S_NSTARTS] = 0
        K.scan_symbols(inv.astype(np.int64).ravel(), 0, lut, K.PLAIN, pol, -1, state, codes, starts, dropped, events)
        err = int(state[K.S_ERR_POS]) if state[K.S_ERR_KIND] != K.E_NONE else -1
        drops = {names[int(k)]: int(dropped[k]) for k in np.flatnonzero(dropped)}
        return codes[: int(state[K.S_NCODES])], starts[: int(state[K.S_NSTARTS])].copy(), drops, err

    return scan


def token_chunks(origin: Origin, alphabet: Alphabet, policy: str, block_size: int, report: ReadReport) -> Iterator[Chunk]:
    """Whitespace-separated tokens as codes (see the module rules)."""
    scan = item_scanner(alphabet, policy)
    drops: Counter = Counter()
    total = segments = 0
    for first_line, text, toks in _token_blocks(origin, block_size):
        codes, starts, dropped, err = scan(toks)
        if err >= 0:
            raise InputError(
                f"{origin.name} has the unknown token {symbol_label(toks[err])} on line "
                f"{first_line + _line_of_token(text, err)}, which the "
                f"{alphabet.name} alphabet does not list, under the error policy; use the break or skip policy "
                "or learn the alphabet."
            )
        drops.update(dropped)
        if codes.size:
            yield Chunk(codes, starts)
        total += codes.size
        segments += starts.size
    report.symbols = total
    report.segments = segments
    for tok, n in drops.items():
        report.drop(drop_reason(tok, False, alphabet), n)
    report.records = [Record(origin.name, 0, total)]

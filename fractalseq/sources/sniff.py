"""Recognising what an input holds from its first (decompressed) block.

Rules of ``fmt="auto"``, applied to the first 64 KiB after decompression:

1. Empty, or only blank lines: :class:`InputError`.
2. Binary content (a NUL byte outside runs of 8 or more; NUL runs making up
   half the block or more, or a block without a line end once they are set
   aside; or, in the rest, more than 5 % control characters other
   than tab, line feed, vertical tab, form feed, carriage return and escape
   (colour codes in logs); or not
   UTF-8 with more than 30 % bytes above 127): :class:`InputError`, unless the
   alphabet is ``bytes`` and the format is ``auto`` or ``text``.
3. First non-blank character ``>``: **fasta**.
4. First non-blank line starts with ``@``, followed by one or more sequence
   lines (letters, ``.``, ``*``, ``-``) and then a line starting with ``+``:
   **fastq**.
5. Alphabet ``bytes``, a sequence preset (``dna``, ``rna``, ``protein``,
   ``binary``) or explicit symbols: **text** (plain sequence: every character
   is read; layout characters not in the alphabet are skipped).  With
   ``auto`` a plain-sequence guess is refused when fewer than half of the
   first block's non-layout characters belong to the alphabet (probably a log
   or a table read with the default ``dna``).
6. Alphabet learned: **numeric** when every sampled non-comment line is a
   row of the same table and some column holds only numbers or missing
   marks; else **log** when at least half of the sampled non-comment lines
   carry a timestamp in their first 80 characters; else **text**.

A declared format is checked against the content: FASTA must start with
``>``, FASTQ with ``@`` and a ``+`` third line.
"""

from __future__ import annotations

import codecs
import re

import numpy as np

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError
from fractalseq.sources import numeric
from fractalseq.sources.templates import has_timestamp

FORMATS: tuple[str, ...] = ("auto", "fasta", "fastq", "text", "tokens", "log", "numeric")
_NUL_RUN = re.compile(rb"\x00{8,}")
_CONTROL = np.ones(256, dtype=bool)
_CONTROL[32:127] = False
_CONTROL[128:] = False
for _b in b"\t\n\x0b\x0c\r\x1b":
    _CONTROL[_b] = False


def is_binary(block: bytes) -> bool:
    """True when ``block`` looks like binary data rather than text (rule 2 above)."""
    if not block:
        return False
    if b"\x00" in block:
        # a text log may hold blocks of NUL bytes (a file preallocated or cut by a crash): judge the rest
        rest = _NUL_RUN.sub(b"", block)
        if b"\x00" in rest or len(rest) * 2 < len(block) or b"\n" not in rest:
            return True
        block = rest
    arr = np.frombuffer(block, dtype=np.uint8)
    if _CONTROL[arr].mean() > 0.05:
        return True
    high = (arr >= 128).mean()
    if high > 0.30:
        try:
            codecs.getincrementaldecoder("utf-8")().decode(block, final=False)
        except UnicodeDecodeError:
            return True
    return False


def check_content(block: bytes, name: str, allow_binary: bool) -> None:
    """Raise :class:`InputError` for an empty, blank or (unless allowed) binary first block."""
    if not block:
        raise InputError(f"{name} is empty; give a file that holds data.")
    if not allow_binary and is_binary(block):
        raise InputError(
            f"{name} looks like binary data, not text; check the file, or read raw bytes with the bytes alphabet."
        )
    if not allow_binary and not block.strip():
        raise InputError(f"{name} holds only blank lines; give a file that holds data.")


def _lines(block: bytes, limit: int = 200) -> list[str]:
    """Complete, non-blank lines of the block (the last, maybe cut, line dropped when the block is full)."""
    text = block.decode("utf-8", errors="replace")
    lines = text.splitlines()
    if lines and not text.endswith(("\n", "\r")) and len(block) >= (1 << 16):
        lines = lines[:-1]
    return [ln for ln in lines if ln.strip()][:limit]


def looks_fasta(block: bytes) -> bool:
    s = block.lstrip()
    return s[:1] == b">"


_SEQ_LINE = re.compile(rb"^[A-Za-z.*-]*\r?$")


def looks_fastq(block: bytes) -> bool:
    """First line starts with '@', then sequence lines (letters, '.', '*', '-'), then a '+' line."""
    s = block.lstrip()
    if s[:1] != b"@":
        return False
    lines = s.split(b"\n", 200)[1:200]
    for k, line in enumerate(lines):
        if line[:1] == b"+":
            return k >= 1
        if not _SEQ_LINE.match(line):
            return False
    return False


def _first_char(block: bytes) -> str:
    s = block.lstrip()[:1]
    return s.decode("latin-1") if s else ""


def check_declared(fmt: str, block: bytes, name: str) -> None:
    """Raise :class:`InputError` when the content contradicts a declared FASTA/FASTQ format."""
    if fmt == "fasta" and not looks_fasta(block):
        if looks_fastq(block):
            raise InputError(
                f"{name} is FASTQ (a '@' line followed by a '+' line), not FASTA; use the fastq or auto format."
            )
        raise InputError(
            f"{name} is not FASTA: it starts with {_first_char(block)!r} instead of '>'; "
            "use the text format for plain sequence, or auto."
        )
    if fmt == "fastq" and not looks_fastq(block):
        if looks_fasta(block):
            raise InputError(f"{name} is FASTA (it starts with '>'), not FASTQ; use the fasta or auto format.")
        raise InputError(
            f"{name} is not FASTQ: a record must be an '@' line, sequence, a '+' line and qualities; "
            "check the file or choose another format."
        )


def alphabet_share(block: bytes, alphabet: Alphabet) -> float:
    """Share of non-layout bytes of ``block`` that are symbols or ambiguity codes of ``alphabet``."""
    arr = np.frombuffer(block, dtype=np.uint8)
    lut = alphabet.byte_table()
    cls = lut[arr]
    body = cls != -3
    if not body.any():
        return 0.0
    return float(((cls >= 0) | (cls == -2))[body].mean())


def detect(block: bytes, alphabet: Alphabet | None, name: str) -> str:
    """Pick a format for ``fmt="auto"`` by the module rules; raise when a plain-sequence guess fails."""
    if looks_fasta(block):
        return "fasta"
    if looks_fastq(block):
        return "fastq"
    if alphabet is not None:
        if alphabet.name != "bytes" and alphabet.single_characters and all(ord(s) < 128 for s in alphabet.symbols):
            share = alphabet_share(block, alphabet)
            if share < 0.5:
                raise InputError(
                    f"{name} does not look like {alphabet.name} sequence (only {share:.0%} of its first "
                    "characters are symbols of that alphabet); choose the format (log, numeric, text, tokens) "
                    "and the alphabet (e.g. learn) explicitly."
                )
        return "text"
    lines = [ln for ln in _lines(block) if not ln.lstrip().startswith("#")]
    if lines and numeric.looks_numeric(lines):
        return "numeric"
    if lines and sum(has_timestamp(ln) for ln in lines) * 2 >= len(lines):
        return "log"
    return "text"

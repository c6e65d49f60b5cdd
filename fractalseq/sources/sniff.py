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
5. Alphabet learned, or a sequence preset (``dna``, ``rna``, ``protein``,
   ``binary``) given by name, as the command line's default ``dna`` is,
   when fewer than half of the first block's non-layout characters are its
   symbols (for DNA/RNA counting ``N``; ambiguity codes not counted): the
   sampled lines (the first 200 non-blank lines of the block
   whose first non-blank character is not ``#``) are judged:

   * **numeric** when they form one table (a delimiter or whitespace, an
     optional header row) with at least one column holding only numbers or
     missing marks (:func:`fractalseq.sources.numeric.looks_numeric`);
   * else **log** when at least half of them start with a log header: a
     header set aside by :func:`fractalseq.sources.headers.split_header`
     that holds a time or a syslog ``<PRI>`` (ISO 8601 / ``YYYY-MM-DD
     HH:MM:SS``, RFC 3164 ``Mmm dd hh:mm:ss host prog[pid]:``, RFC 5424
     ``<pri>1 ...``, bracketed ``[dd/Mon/yyyy:hh:mm:ss +zone]`` and the
     other times listed there), a first word that is a time (epoch seconds,
     TAI64N ``@4000...``), or a JSON object (``{...}`` on one line);
   * else, for the learned alphabet, **text**; for a preset, **text**
     (plain sequence, as in rule 6) with a note naming the formats to
     choose when symbols and ambiguity codes together make up at least half
     of the characters, otherwise an :class:`InputError` naming them.  A
     test or build log whose lines carry no time is not recognised as an
     event log: read it with ``log`` explicitly, or as text.

   The format so chosen brings its own alphabet (the log's templates, the
   numeric symbolization's bins), as with an explicit ``log`` or
   ``numeric``; the reason is kept as a note of the read report
   (e.g. ``detected as an event log: 198 of 200 sampled lines start with a
   timestamp or log header``).
6. Alphabet ``bytes``, explicit symbols, an :class:`Alphabet` object, or a
   preset whose symbols hold at least half of the characters: **text**
   (plain sequence: every character is read; layout characters not in the
   alphabet are skipped).  With ``auto`` a single-character alphabet given
   as symbols or an object is refused when fewer than half of the
   characters are its symbols or ambiguity codes.

7. An alphabet a log or numeric reader made (named ``templates``, or
   ``quantileN``/``thresholdN``/``ordinalN``, as a model keeps it): its own
   format when the sampled lines are judged so by rule 5, before rule 6.

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
from fractalseq.sources.headers import split_header
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


def symbol_share(block: bytes, alphabet: Alphabet) -> float:
    """Share of non-layout bytes of ``block`` that are symbols of ``alphabet`` or its unknown mark (N for DNA/RNA)."""
    arr = np.frombuffer(block, dtype=np.uint8)
    cls = alphabet.byte_table()[arr]
    body = cls != -3
    if not body.any():
        return 0.0
    ok = cls >= 0
    if alphabet.name in ("dna", "rna"):
        ok |= (arr == ord("N")) | (arr == ord("n"))
    return float(ok[body].mean())


def alphabet_share(block: bytes, alphabet: Alphabet) -> float:
    """Share of non-layout bytes of ``block`` that are symbols or ambiguity codes of ``alphabet``."""
    arr = np.frombuffer(block, dtype=np.uint8)
    lut = alphabet.byte_table()
    cls = lut[arr]
    body = cls != -3
    if not body.any():
        return 0.0
    return float(((cls >= 0) | (cls == -2))[body].mean())


SEQUENCE_PRESETS: tuple[str, ...] = ("dna", "rna", "protein", "binary")


def starts_with_header(line: str) -> bool:
    """True when ``line`` starts with a log header holding a time or ``<PRI>``, or is a JSON object (rule 5)."""
    body = line.strip()
    if body[:1] == "{" and body[-1:] == "}":
        return True
    _, msg = split_header(body)
    if not body.endswith(msg):
        return True  # a common-log date was taken from after the first fields
    removed = body[: len(body) - len(msg)]
    if removed[:1] == "<" and removed[1:2].isdigit():
        return True
    if removed and has_timestamp(removed, within=len(removed)):
        return True
    first = body.split(None, 1)[0] if body else ""
    return has_timestamp(first, within=len(first)) and len(first) >= 10


def sample_lines(block: bytes) -> list[str]:
    """The sampled lines of rule 5: up to 200 non-blank, non-comment lines of the block."""
    return [ln for ln in _lines(block) if not ln.lstrip().startswith("#")]


def classify(block: bytes) -> tuple[str, str]:
    """``(format, reason)`` for a block that is not a sequence: numeric, log or ``""`` (neither), by rule 5.

    Parameters
    ----------
    block:
        The first (decompressed) block of the input.

    Returns
    -------
    (str, str)
        The format (``"numeric"``, ``"log"`` or ``""``) and a sentence saying why,
        e.g. ``"detected as an event log: 198 of 200 sampled lines start with a timestamp or log header"``.
    """
    lines = sample_lines(block)
    if not lines:
        return "", "no line to judge"
    if numeric.looks_numeric(lines):
        lay = numeric.detect_layout(lines)
        rows = numeric.split_rows(lines[1:] if lay.header else lines, lay.delimiter)
        width = max(len(r) for r in rows)
        cols = numeric._numeric_columns(rows, width)
        head = "a header row and " if lay.header else ""
        return "numeric", (
            f"detected as a numeric table: {head}{len(rows)} sampled rows, "
            f"{len(cols)} of {width} column{'s' if width != 1 else ''} holding only numbers"
        )
    k = sum(starts_with_header(ln) for ln in lines)
    reason = f"{k} of {len(lines)} sampled lines start with a timestamp or log header"
    if k * 2 >= len(lines):
        return "log", "detected as an event log: " + reason
    return "", reason


_NUMERIC_ALPHABET = re.compile(r"(?:quantile|threshold|ordinal)\d+")


def own_format(alphabet: Alphabet) -> str:
    """``"log"`` for a template alphabet, ``"numeric"`` for a numeric symbolization's, else ``""`` (rule 7)."""
    if alphabet.name == "templates":
        return "log"
    if _NUMERIC_ALPHABET.fullmatch(alphabet.name):
        return "numeric"
    return ""


def detect_with_reason(block: bytes, alphabet: Alphabet | None, name: str, follow: bool = False) -> tuple[str, str]:
    """Pick a format for ``fmt="auto"`` by the module rules, with the reason for the read report.

    Parameters
    ----------
    block:
        The first (decompressed) block of the input.
    alphabet:
        The resolved alphabet, ``None`` when it is learned.
    name:
        The input's name, for messages.
    follow:
        True when the alphabet is a sequence preset given by name (as the
        command line's default ``dna``), which a detected log or numeric
        table replaces by its own alphabet.

    Raises
    ------
    InputError
        A preset alphabet holds too few of the characters and the content is
        neither a log nor a numeric table.
    """
    if looks_fasta(block):
        return "fasta", "detected as FASTA: the first character is '>'"
    if looks_fastq(block):
        return "fastq", "detected as FASTQ: an '@' line, sequence and a '+' line"
    if alphabet is not None:
        own = own_format(alphabet)
        if own:
            fmt, why = classify(block)
            if fmt == own:
                return fmt, f"{why}; read with the given {alphabet.name} alphabet"
        if alphabet.name != "bytes" and alphabet.single_characters and all(ord(s) < 128 for s in alphabet.symbols):
            share = alphabet_share(block, alphabet)
            if share < 0.5:
                why = ""
                if follow:
                    fmt, why = classify(block)
                    if fmt:
                        return fmt, f"{why}; the {alphabet.name} alphabet does not apply, the format's own is used"
                    why = f" nor like an event log ({why})"
                raise InputError(
                    f"{name} does not look like {alphabet.name} sequence (only {share:.0%} of its first "
                    f"characters are symbols of that alphabet){why}; choose the format (log for an event log "
                    "whose lines carry no time, numeric, text, tokens) and the alphabet (e.g. learn) explicitly."
                )
            strict = symbol_share(block, alphabet)
            if follow and strict < 0.5:
                fmt, why = classify(block)
                if fmt:
                    return fmt, f"{why}; the {alphabet.name} alphabet does not apply, the format's own is used"
                return "text", (
                    f"read as plain {alphabet.name} sequence, but only {strict:.0%} of its first characters are "
                    f"{alphabet.name} symbols ({share:.0%} with ambiguity codes) and {why}: for a log or prose "
                    "choose the format (log, text, tokens) and the alphabet (learn)"
                )
        return "text", f"read as plain {alphabet.name} sequence"
    fmt, why = classify(block)
    if fmt:
        return fmt, why
    return "text", f"read as text: not a numeric table, and {why}"


def detect(block: bytes, alphabet: Alphabet | None, name: str, follow: bool = False) -> str:
    """Pick a format for ``fmt="auto"`` by the module rules (see :func:`detect_with_reason`)."""
    return detect_with_reason(block, alphabet, name, follow)[0]

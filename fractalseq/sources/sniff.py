"""Recognising what an input holds from its first (decompressed) block.

Rules of ``fmt="auto"``, applied to the first 64 KiB after decompression:

1. Empty, or only blank lines: :class:`InputError`.
2. Binary content: :class:`InputError`, unless the alphabet is ``bytes`` and
   the format is ``auto`` or ``text``.  Judged by lines (cut at line feeds),
   so that a text log holding a run of NUL bytes or a block of binary junk
   (as a crash leaves) stays text: a line is junk when it holds a NUL byte or
   when control bytes other than tab, line feed, vertical tab, form feed,
   carriage return and escape (colour codes in logs) make up more than 2 %
   of it once its NULs are set aside.  Binary when junk lines make up half
   of the non-blank lines or more (an executable, an image, compressed or
   random data: nearly every line), or when the other lines are not UTF-8
   with more than 30 % bytes above 127.  The rules below judge the block
   without its junk lines and NUL bytes (:func:`text_part`); the log reader
   skips them and counts them (:mod:`fractalseq.sources.logs`).
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
   * else, for a preset only, **log** (a line-oriented log, one template
     per line) when fewer than half of the characters are the preset's
     symbols (ambiguity codes not counted) and the sampled lines are lines
     of words (:func:`line_oriented`): at least one sampled line, at least
     half of them holding two or more words (whitespace-separated tokens
     holding a letter), and a median sampled line of at most 1,000
     characters.  Build and test logs (DejaGnu ``PASS: ...``, jtreg
     ``Passed: ...``, apt's ``term.log``) are read so; the note says why and
     how to read characters instead (``text`` with the learned alphabet);
   * else, for the learned alphabet, **text**; for a preset, **text**
     (plain sequence, as in rule 6) with a note naming the formats to
     choose when symbols and ambiguity codes together make up at least half
     of the characters, otherwise an :class:`InputError` naming them.

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
_CONTROL = np.ones(256, dtype=bool)
_CONTROL[32:127] = False
_CONTROL[128:] = False
for _b in b"\t\n\x0b\x0c\r\x1b":
    _CONTROL[_b] = False
#: the bytes that are not control bytes (deleted by ``bytes.translate``, they leave the control bytes)
_NOT_CONTROL = bytes(np.flatnonzero(~_CONTROL).tolist())
_HIGH = bytes(range(128, 256))


#: a line whose control bytes (NUL aside) exceed this share of its bytes is binary junk
JUNK_CONTROL_SHARE = 0.02


def line_junk(block: bytes) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per line of ``block`` (cut at line feeds): ``(length, NUL bytes, other control bytes)``.

    Control bytes are those other than tab, line feed, vertical tab, form
    feed, carriage return and escape (colour codes in logs).
    """
    arr = np.frombuffer(block, dtype=np.uint8)
    nl = arr == 10
    line = np.cumsum(nl) - nl  # a line feed belongs to the line it ends
    n = int(line[-1]) + 1 if arr.size else 0
    length = np.bincount(line, minlength=n)
    nul = np.bincount(line, weights=arr == 0, minlength=n).astype(np.int64)
    control = np.bincount(line, weights=_CONTROL[arr], minlength=n).astype(np.int64) - nul
    return length, nul, control


def junk_line_mask(length: np.ndarray, nul: np.ndarray, control: np.ndarray) -> np.ndarray:
    """Lines that are binary junk: control bytes (NUL aside) over 2 % of the line once its NULs are set aside."""
    return control > JUNK_CONTROL_SHARE * np.maximum(length - nul, 1)


def text_part(block: bytes) -> bytes:
    """The block without its junk lines and NUL bytes (what rule 3 onwards judge)."""
    arr = np.frombuffer(block, dtype=np.uint8)
    if not _CONTROL[arr].any():
        return block
    length, nul, control = line_junk(block)
    bad = junk_line_mask(length, nul, control)
    nl = arr == 10
    keep = ~bad[np.cumsum(nl) - nl] & (arr != 0)
    return arr[keep].tobytes()


def is_binary(block: bytes) -> bool:
    """True when ``block`` looks like binary data rather than text (rule 2 above).

    Judged by lines, so that a text log with a run of NUL bytes or a block of
    junk inside it is still text: binary when the lines holding a NUL byte
    or junk make up half of the non-blank lines or more, or when the rest is
    not UTF-8 with more than 30 % bytes above 127.
    """
    if not block:
        return False
    if not block.translate(None, _NOT_CONTROL):  # no NUL or other control byte
        bad = None
    else:
        length, nul, control = line_junk(block)
        bad = (nul > 0) | junk_line_mask(length, nul, control)
        arr = np.frombuffer(block, dtype=np.uint8)
        nl = arr == 10
        line = np.cumsum(nl) - nl
        visible = np.bincount(line, weights=arr > 32, minlength=length.size)
        nonblank = (visible > 0) | bad
        if not nonblank.any():
            return False
        if 2 * int(np.count_nonzero(bad & nonblank)) >= int(np.count_nonzero(nonblank)):
            return True
        keep = ~bad[line]
        block = arr[keep].tobytes()
    if block and (len(block) - len(block.translate(None, _HIGH))) / len(block) > 0.30:
        try:
            codecs.getincrementaldecoder("utf-8")().decode(block, final=False)
        except UnicodeDecodeError:
            return True
    return False


def check_content(block: bytes, name: str, allow_binary: bool, binary: bool | None = None) -> None:
    """Raise :class:`InputError` for an empty, blank or (unless allowed) binary first block.

    ``binary``: :func:`is_binary` of the block when the caller has it already (judged here when ``None``).
    """
    if not block:
        raise InputError(f"{name} is empty; give a file that holds data.")
    if not allow_binary and (is_binary(block) if binary is None else binary):
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


#: the line-oriented rule: at least this many sampled lines, half or more of them holding two or more words,
#: and a median sampled line of at most this many characters
LINE_RULE_MIN_LINES = 1
LINE_RULE_MAX_MEDIAN = 1000


def line_features(block: bytes) -> dict:
    """Measurable features of the sampled lines (rule 5): count, lines of two or more words, median length.

    A word is a whitespace-separated token holding a letter.
    """
    lines = sample_lines(block)
    worded = sum(sum(any(c.isalpha() for c in tok) for tok in ln.split()) >= 2 for ln in lines)
    lengths = sorted(len(ln) for ln in lines)
    median = lengths[len(lengths) // 2] if lengths else 0
    return {"lines": len(lines), "worded": worded, "median": median}


def line_oriented(block: bytes) -> tuple[bool, dict]:
    """True when the sampled lines are lines of words (rule 5's line-oriented log), with the features."""
    f = line_features(block)
    ok = f["lines"] >= LINE_RULE_MIN_LINES and 2 * f["worded"] >= f["lines"] and f["median"] <= LINE_RULE_MAX_MEDIAN
    return ok, f


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
    block = text_part(block)  # junk lines (text with junk inside passed rule 2) are not judged
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
            strict = symbol_share(block, alphabet)
            why = ""
            if follow and strict < 0.5:
                fmt, why = classify(block)
                if fmt:
                    return fmt, f"{why}; the {alphabet.name} alphabet does not apply, the format's own is used"
                ok, f = line_oriented(block)
                if ok:
                    return "log", (
                        f"read as a line-oriented log, one template per line: only {strict:.0%} of its first "
                        f"characters are {alphabet.name} symbols and {f['worded']} of {f['lines']} sampled lines "
                        f"hold two or more words (median {f['median']} characters a line; {why}); "
                        "for characters choose the text format and the learn alphabet"
                    )
            if share < 0.5:
                extra = f" nor like an event log ({why})" if why else ""
                raise InputError(
                    f"{name} does not look like {alphabet.name} sequence (only {share:.0%} of its first "
                    f"characters are symbols of that alphabet){extra}; choose the format (log for an event log "
                    "whose lines carry no time, numeric, text, tokens) and the alphabet (e.g. learn) explicitly."
                )
            if follow and strict < 0.5:
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

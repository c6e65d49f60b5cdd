"""FASTA, FASTQ and plain sequence read byte by byte through a lookup table.

The hot loop is :func:`fractalseq.sources.kernels.scan_symbols`; this module
feeds it decompressed blocks, turns its header events into
:class:`~fractalseq.stream.Record` entries and its drop counts into report
reasons, and raises the errors it flags.

Layout rules
------------
FASTA
    A line whose first character is ``>`` is a header and starts a new
    record (and a new segment); its first word is the record name.  A line
    whose first character is ``;`` is an old-style comment and is skipped
    (it neither starts a record nor breaks the segment).  Every other line
    is sequence.  Line ends (LF or CRLF), spaces and tabs inside
    sequence are layout and skipped.
FASTQ
    Records of an ``@`` header line, sequence lines, a ``+`` line and quality
    lines holding as many characters as the sequence (so a quality line that
    starts with ``@`` is still quality).  Only sequence is read; each read
    starts a new segment.
plain
    Every byte is looked up; layout bytes not in the alphabet are skipped.

Records are listed with the start and length of their *kept* symbols (stream
positions), up to :data:`~fractalseq.sources.base.MAX_RECORDS` of them.

Ambiguity codes (``N``, IUPAC) and unknown bytes follow the policy:
``break`` ends the segment (a run of them gives one break), ``skip`` drops
them without a break, ``error`` raises :class:`InputError` naming the symbol,
line and record.  Both ``break`` and ``skip`` count them by reason.
"""

from __future__ import annotations

from collections import Counter
from typing import Iterator

import numpy as np

from fractalseq.alphabet import IGNORED, Alphabet, learned
from fractalseq.errors import InputError
from fractalseq.sources import kernels as K
from fractalseq.sources.base import RecordLog, drop_reason, note_heavy_drops, require_symbols, symbol_label
from fractalseq.sources.rawio import ByteSource, Origin
from fractalseq.stream import Chunk, ReadReport, Record

LAYOUTS = {"plain": K.PLAIN, "fasta": K.FASTA, "fastq": K.FASTQ}
_EVENTS = 4096


def _identity_table() -> np.ndarray:
    """Every byte its own code, layout bytes ignored (used to learn an alphabet)."""
    t = np.arange(256, dtype=np.int16)
    for b in b"\n\r \t":
        t[b] = IGNORED
    return t


def scan(
    origin: Origin,
    layout: str,
    lut: np.ndarray,
    code_dtype: np.dtype,
    policy: str,
    block_size: int,
    report: ReadReport,
    alphabet: Alphabet | None,
) -> Iterator[Chunk]:
    """Scan the whole input and yield chunks; fill ``report`` (records, drops, counts).

    Parameters
    ----------
    origin:
        The input.
    layout:
        ``"fasta"``, ``"fastq"`` or ``"plain"``.
    lut:
        256-entry int16 table (:meth:`Alphabet.byte_table`).
    code_dtype:
        dtype of the output codes.
    policy:
        ``"break"``, ``"skip"`` or ``"error"``.
    block_size:
        Decompressed bytes per block; each chunk holds at most this many codes.
    report:
        Filled while reading.
    alphabet:
        Used for the wording of drop reasons and errors (``None`` while learning).
    """
    mode = LAYOUTS[layout]
    pol = K.POLICY_CODES[policy]
    lut = layout_table(layout, lut)
    state = K.new_state(mode)
    dropped = np.zeros(256, dtype=np.int64)
    events = np.zeros((_EVENTS, 3), dtype=np.int64)
    recs = RecordLog()
    total = 0
    segments = 0
    with ByteSource(origin) as src:
        for block in src.blocks(block_size):
            raw = np.frombuffer(block, dtype=np.uint8)
            n = raw.shape[0]
            codes = np.empty(n, dtype=code_dtype)
            starts = np.empty(n + 1, dtype=np.int64)
            state[K.S_NCODES] = 0
            state[K.S_NSTARTS] = 0
            pos = 0
            # a header continuing from the previous block
            head_from = 0
            while True:
                state[K.S_NEV] = 0
                pos = K.scan_symbols(raw, pos, lut, mode, pol, 10, state, codes, starts, dropped, events)
                for k in range(int(state[K.S_NEV])):
                    kind, at, before = (int(v) for v in events[k])
                    if kind == K.EV_HEADER_START:
                        recs.start(total + before)
                        head_from = at
                    else:
                        recs.header_bytes(block[head_from:at])
                        recs.end_header()
                        head_from = n
                if state[K.S_ERR_KIND] != K.E_NONE:
                    _raise_scan_error(origin, layout, state, raw, lut, alphabet, recs, policy)
                if pos >= n:
                    break
            if state[K.S_PHASE] == K.P_HEADER:
                recs.header_bytes(block[head_from:])
            nc = int(state[K.S_NCODES])
            ns = int(state[K.S_NSTARTS])
            if nc:
                yield Chunk(codes[:nc], starts[:ns].copy())
            total += nc
            segments += ns
    if layout == "fastq" and state[K.S_PHASE] not in (K.P_EXPECT, K.P_QUAL):
        raise InputError(
            f"{origin.name} ends inside read {recs.current} before its quality line; the FASTQ file may be truncated."
        )
    if layout == "fastq" and state[K.S_PHASE] == K.P_QUAL and state[K.S_QUAL_LEN] < state[K.S_SEQ_LEN]:
        raise InputError(
            f"{origin.name} ends inside the quality line of read {recs.current}; the FASTQ file may be truncated."
        )
    fill_report(report, origin.name, layout, lut, alphabet, total, segments, dropped, recs)


def layout_table(layout: str, lut: np.ndarray) -> np.ndarray:
    """The lookup table the scanner uses: line ends are layout in FASTA/FASTQ whatever the alphabet."""
    if LAYOUTS[layout] == K.PLAIN:
        return lut
    lut = lut.copy()
    lut[10] = IGNORED
    lut[13] = IGNORED
    return lut


def fill_report(
    report: ReadReport,
    name: str,
    layout: str,
    lut: np.ndarray,
    alphabet: Alphabet | None,
    total: int,
    segments: int,
    dropped: np.ndarray,
    recs: RecordLog,
) -> None:
    """Symbols, segments, drop reasons and records of a complete pass into ``report``.

    Shared by the one-pass reader and the assembly of byte ranges read apart
    (:mod:`fractalseq.sources.ranges`), so both write the same report.
    """
    report.symbols = int(total)
    report.segments = int(segments)
    for b in np.flatnonzero(dropped):
        ch = chr(int(b))
        report.drop(drop_reason(ch, lut[b] == -2, alphabet), int(dropped[b]))
    if layout == "plain":
        report.records = [Record(name, 0, int(total))]
    else:
        recs.fill(report, int(total), "reads" if layout == "fastq" else "records")


def _raise_scan_error(
    origin: Origin,
    layout: str,
    state: np.ndarray,
    raw: np.ndarray,
    lut: np.ndarray,
    alphabet: Alphabet | None,
    recs: RecordLog,
    policy: str,
) -> None:
    kind = int(state[K.S_ERR_KIND])
    pos = int(state[K.S_ERR_POS])
    line = int(state[K.S_LINE])
    b = int(raw[pos])
    where = f"line {line}" + (f" (record {recs.current})" if layout != "plain" and recs.count else "")
    if kind == K.E_SYMBOL:
        what = "ambiguous symbol" if lut[b] == -2 else "unknown symbol"
        aname = alphabet.name if alphabet is not None else "chosen"
        raise InputError(
            f"{origin.name} has the {what} {symbol_label(chr(b))} on {where}, which the {aname} alphabet "
            "cannot read under the error policy; use the break or skip policy, or another alphabet."
        )
    if kind == K.E_FASTQ_START:
        raise InputError(
            f"{origin.name} line {line} should start a FASTQ record with '@' but starts with "
            f"{symbol_label(chr(b))}; the FASTQ file is malformed."
        )
    raise InputError(
        f"{origin.name} line {line}: the quality of read {recs.current} is longer than its sequence; "
        "the FASTQ file is malformed."
    )


def learn(origin: Origin, layout: str, block_size: int, name: str = "learned") -> Alphabet:
    """First pass: an alphabet of the bytes found in sequence (headers, qualities, layout excluded).

    Symbols are ordered by decreasing count, ties by code point; case is kept
    (soft-masked ``acgt`` become their own symbols).
    """
    lut = _identity_table()
    counts = np.zeros(256, dtype=np.int64)
    scratch = ReadReport()
    for chunk in scan(origin, layout, lut, np.dtype(np.uint8), "skip", block_size, scratch, None):
        counts += np.bincount(chunk.codes, minlength=256)
    found = Counter({chr(int(b)): int(counts[b]) for b in np.flatnonzero(counts)})
    if not found:
        raise InputError(f"{origin.name} holds no sequence characters to learn an alphabet from; check the file.")
    return learned(found, name=name)


def finish(report: ReadReport, origin: Origin, alphabet: Alphabet) -> None:
    """Final checks of a complete pass."""
    require_symbols(report, origin.name, alphabet)
    note_heavy_drops(report, alphabet)

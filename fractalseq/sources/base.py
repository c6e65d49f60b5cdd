"""Pieces shared by the readers: records, drop reasons, final checks."""

from __future__ import annotations

from fractalseq.alphabet import Alphabet
from fractalseq.errors import InputError
from fractalseq.stream import ReadReport, Record

#: At most this many records are listed in a report (the rest are only counted).
MAX_RECORDS = 100_000
#: Header bytes kept per record for its name.
_NAME_BYTES = 512


def symbol_label(ch: str) -> str:
    """How a dropped symbol is named in a report: its repr (``'N'``, ``'\\x00'``), cut to 24 characters."""
    r = repr(ch)
    return r if len(r) <= 24 else r[:20] + "...'"


def drop_reason(ch: str, ambiguous: bool, alphabet: Alphabet | None) -> str:
    """``"ambiguous 'N'"`` or ``"unknown 'J'"`` (ambiguity codes in upper case for case-insensitive alphabets)."""
    if ambiguous:
        if alphabet is not None and alphabet.case_insensitive:
            ch = ch.upper()
        return f"ambiguous {symbol_label(ch)}"
    return f"unknown {symbol_label(ch)}"


class RecordLog:
    """Collects records (FASTA records, FASTQ reads) while a stream is scanned."""

    def __init__(self, cap: int = MAX_RECORDS) -> None:
        self.cap = cap
        self.records: list[Record] = []
        self.count = 0
        self._open = False
        self._start = 0
        self._name = ""
        self._buf = bytearray()
        self._in_name = False

    @property
    def current(self) -> str:
        """Name of the record being read (``"record N"`` when it has no name yet)."""
        return self._name or f"record {self.count}"

    def start(self, position: int) -> None:
        """A record begins at stream position ``position`` (its header starts now)."""
        self.close(position)
        self.count += 1
        self._open = True
        self._start = position
        self._name = ""
        self._buf = bytearray()
        self._in_name = True

    def header_bytes(self, data: bytes) -> None:
        """More bytes of the current header line."""
        if self._in_name and len(self._buf) < _NAME_BYTES:
            self._buf += data[: _NAME_BYTES - len(self._buf)]

    def end_header(self) -> None:
        """The current header line is complete: its first word becomes the record name."""
        if self._in_name:
            words = self._buf.decode("utf-8", errors="replace").split()
            self._name = words[0] if words else f"record {self.count}"
            self._in_name = False

    def close(self, position: int) -> None:
        """Close the open record at stream position ``position``."""
        if self._open:
            self.end_header()
            if len(self.records) < self.cap:
                self.records.append(Record(self._name, self._start, position - self._start))
            self._open = False

    def fill(self, report: ReadReport, total: int, what: str = "records") -> None:
        """Close the last record and put the list into ``report``."""
        self.close(total)
        report.records = self.records
        if self.count > len(self.records):
            report.notes.append(f"{self.count} {what} read; only the first {len(self.records)} are listed")
        report.extra[f"{what}_total"] = self.count


def require_symbols(report: ReadReport, name: str, alphabet: Alphabet) -> None:
    """Raise :class:`InputError` when a full pass kept no symbol at all."""
    if report.symbols > 0:
        return
    if report.dropped:
        top = sorted(report.dropped.items(), key=lambda kv: -kv[1])[:3]
        what = ", ".join(f"{k} x{v}" for k, v in top)
        raise InputError(
            f"{name} holds no {alphabet.name} symbols (everything was dropped: {what}); "
            "check the file or choose another alphabet."
        )
    raise InputError(f"{name} holds no symbols to read; give a file with data.")


def note_heavy_drops(report: ReadReport, alphabet: Alphabet) -> None:
    """Add a note when most of the input was dropped (the alphabet may be wrong)."""
    dropped = report.dropped_total
    if dropped > report.symbols:
        report.notes.append(
            f"more symbols were dropped ({dropped}) than kept ({report.symbols}); "
            f"check that the {alphabet.name} alphabet fits this input"
        )

"""Per-record sources: the records of an input (chromosomes of an assembly, contigs of a
metagenome, reads) each taken as a source of its own.

An input is read once; its reader lists the records with the start and length of their kept
symbols (:class:`~fractalseq.stream.Record`), and each record becomes a
:class:`~fractalseq.stream.SymbolArray` of its own symbols and segment breaks, named
``INPUT:RECORD``.  Its figures are those of the record written to a file of its own: a record
always starts a new segment, and no word spans two records.  What the reader dropped
(ambiguous or unknown symbols) is counted per input, not per record; each record's read report
says so in a note.  An input without records (plain text, a log) is one source.
"""

from __future__ import annotations

from typing import Iterator, Sequence

from fractalseq.errors import InputError
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.jobs._sources import SourceSpec
from fractalseq.sources.base import MAX_RECORDS
from fractalseq.stream import ReadReport, Record, SymbolArray

__all__ = ["per_record", "record_arrays", "record_sources"]

#: The note each record's read report carries.
DROPS_NOTE = "dropped symbols are counted for the whole input, not per record"


def record_arrays(arr: SymbolArray, name: str | None = None) -> Iterator[SymbolArray]:
    """The records of an input read whole, each as a :class:`SymbolArray` named ``NAME:RECORD``.

    Records without a kept symbol are left out (the caller may note them).  Record names that
    repeat within the input get ``#2``, ``#3`` ... appended.

    Raises
    ------
    InputError
        When the reader counted more records than it lists (see
        :data:`~fractalseq.sources.base.MAX_RECORDS`).
    """
    name = name or arr.name
    report = arr.report or ReadReport()
    records = list(report.records)
    total = int(report.extra.get("records_total", report.extra.get("reads_total", len(records))) or len(records))
    if total > len(records):
        raise InputError(
            f"{name} holds {total} records, more than the {MAX_RECORDS} that can be taken one by one; split the file first."
        )
    if not records:
        records = [Record(name, 0, len(arr))]
    seen: dict[str, int] = {}
    for rec in records:
        if rec.length <= 0:
            continue
        k = seen.get(rec.name, 0) + 1
        seen[rec.name] = k
        label = rec.name if k == 1 else f"{rec.name}#{k}"
        part = arr.slice(rec.start, rec.start + rec.length)
        part.name = f"{name}:{label}"
        starts = part.starts
        part.report = ReadReport(
            symbols=len(part), segments=int(starts.size), records=[Record(rec.name, 0, len(part))],
            notes=[n for n in report.notes if n.startswith("format ")] + ([DROPS_NOTE] if report.dropped else []),
            extra={k: v for k, v in report.extra.items() if k in ("format", "compression")},
        )
        yield part


def record_sources(
    specs: Sequence[SourceSpec], reader: ReaderOptions
) -> Iterator[tuple[SourceSpec, SymbolArray]]:
    """Every record of every input as ``(spec, symbols)``; each input is read once, when reached."""
    for spec in specs:
        arr = reader.read(spec.path, name=spec.name)
        for part in record_arrays(arr, spec.name):
            yield SourceSpec(spec.path, part.name), part


def per_record(specs: Sequence[SourceSpec], reader: ReaderOptions) -> tuple[list[SourceSpec], list[SymbolArray]]:
    """:func:`record_sources` as two lists (sources and their symbols), refusing inputs with no record."""
    pairs = list(record_sources(specs, reader))
    if not pairs:
        raise InputError("The inputs hold no record with symbols; check the files, their format and the alphabet.")
    return [p[0] for p in pairs], [p[1] for p in pairs]

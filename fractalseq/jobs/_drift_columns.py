"""Drift of several columns of numeric tables: one drift test per column, one verdict across them.

``fractalseq drift BASE NEW --column a,b`` (or ``--column all``) tests each column
of the baseline batch against the same column of the new batch, as
:func:`fractalseq.jobs._files.drift_files` tests one.  The columns come from the
first file of the baseline (:meth:`ReaderOptions.per_column`).  Each column's
smallest adjusted p-value (over its figures) is adjusted again across the columns
by Holm's step-down rule (Holm 1979, Scand. J. Statist. 6:65), and the batches
have changed when one of those is below ``alpha``: testing k columns does not
raise the chance of a false alarm above ``alpha``.

Drift reports are no security guarantee.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Callable, Sequence

from fractalseq.jobs._files import Batch, DriftReport, batch_specs, drift_files
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.results import Result
from fractalseq.runner import Engine

if TYPE_CHECKING:
    from fractalseq.compare._drift import DriftOptions

__all__ = ["DriftColumnsReport", "batch_columns", "drift_columns", "holm"]

FORMAT = "fractalseq-drift-columns"
VERSION = 1


def holm(p_values: Sequence[float]) -> list[float]:
    """Holm's step-down adjusted p-values (Holm 1979), in the order given.

    The i-th smallest p-value p_(i) of k becomes ``max_{j <= i} min(1, (k - j + 1) p_(j))``.
    """
    k = len(p_values)
    order = sorted(range(k), key=lambda i: p_values[i])
    out = [1.0] * k
    running = 0.0
    for rank, i in enumerate(order):
        running = max(running, min(1.0, (k - rank) * float(p_values[i])))
        out[i] = running
    return out


def batch_columns(baseline: Batch, reader: ReaderOptions, stdin_lines: Sequence[str] | None = None) -> list[str] | None:
    """The columns a multi-column choice names in the baseline's first file, else ``None`` (one drift test)."""
    column = reader.column
    if not isinstance(column, str) or not ("," in column or column.strip().lower() == "all"):
        return None
    first = batch_specs(baseline, stdin_lines)[0]
    cols = [c for c, _ in reader.per_column(first.path)]
    return None if cols == [None] else [str(c) for c in cols]


@dataclass(frozen=True, eq=False)
class DriftColumnsReport(Result):
    """One drift test per column and the verdict across them (the ``drift --column a,b --json`` document).

    Attributes
    ----------
    columns:
        The columns tested, in order.
    reports:
        One :class:`~fractalseq.jobs._files.DriftReport` per column.
    p_across:
        Each column's smallest adjusted p-value, adjusted again across the columns (Holm).
    alpha:
        The level of the verdicts.
    """

    columns: tuple[str, ...]
    reports: tuple[DriftReport, ...]
    p_across: tuple[float, ...]
    alpha: float

    @property
    def changed(self) -> bool:
        """True when a column's p-value adjusted across columns is below ``alpha`` (and its test is conclusive)."""
        return any(p < self.alpha and not r.drift.inconclusive for p, r in zip(self.p_across, self.reports))

    @property
    def verdict(self) -> str:
        """One line: which columns changed, at which level."""
        hit = [c for c, p, r in zip(self.columns, self.p_across, self.reports) if p < self.alpha and not r.drift.inconclusive]
        if hit:
            return (f"CHANGED in {len(hit)} of {len(self.columns)} columns ({', '.join(hit)}) at level {self.alpha:g}, "
                    "p-values adjusted across the columns (Holm).")
        return (f"no change detected in any of {len(self.columns)} columns at level {self.alpha:g}, "
                "p-values adjusted across the columns (Holm).")

    def to_dict(self) -> dict:
        caution = self.reports[0].drift.caution if self.reports else ""
        return {
            "format": FORMAT, "version": VERSION, "command": "drift", "caution": caution,
            "alpha": self.alpha, "adjust_across_columns": "holm", "changed": self.changed, "verdict": self.verdict,
            "columns": [
                {"column": c, "p_value_across_columns": p, "drift": r.to_dict()}
                for c, p, r in zip(self.columns, self.p_across, self.reports)
            ],
        }

    def to_json(self) -> str:
        from fractalseq.io._outputs import to_json

        return to_json(self.to_dict())


def drift_columns(
    baseline: Batch,
    new: Batch,
    columns: Sequence[str],
    options: "DriftOptions",
    reader: ReaderOptions,
    *,
    engine: Engine | None = None,
    stdin_lines: Sequence[str] | None = None,
    on_done: Callable[[int, object], None] | None = None,
) -> DriftColumnsReport:
    """Drift of each column of ``columns`` (see the module docstring); other arguments as in ``drift_files``."""
    from dataclasses import replace

    reports = tuple(
        drift_files(baseline, new, options, replace(reader, column=c), engine=engine, stdin_lines=stdin_lines, on_done=on_done)
        for c in columns
    )
    p_across = tuple(holm([r.drift.p_value for r in reports]))
    return DriftColumnsReport(tuple(columns), reports, p_across, float(options.alpha))

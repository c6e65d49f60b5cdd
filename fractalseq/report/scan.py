"""Reports of a windowed scan: the figure along the stream, the HTML page, and the folder writer.

The numbers come from :func:`fractalseq.compare._scan.scan_stream`; nothing
here computes a figure of complexity.  Genomic output is for research, not
for clinical decisions.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from fractalseq.compare._scan import CAUTION, ScanResult
from fractalseq.io._outputs import write_bytes, write_csv, write_text
from fractalseq.report.figures import PALETTE, fig_to_png, figure, short, style
from fractalseq.report.html import HtmlReport

def scan_figure(result: ScanResult):
    """A :class:`matplotlib.figure.Figure` of the figures along the position axis.

    Change points are dashed and low-complexity intervals shaded; one panel per figure.
    """
    names = list(result.series)
    units = {"entropy_rate": "bits/symbol", "D0": "dimension", "surprise": "bits/symbol"}
    with style():
        fig, axes = figure(8.4, 2.1 * len(names) + 0.8, nrows=len(names))
        axes = np.atleast_1d(axes)
        x = _axis(result, result.centers)
        for ax, (i, name) in zip(axes, enumerate(names)):
            ax.plot(x, result.series[name], color=PALETTE[i % len(PALETTE)], lw=1.2)
            for iv in result.low_complexity:
                lo, hi = _axis(result, np.array([iv["start"], iv["end"]], dtype=float))
                ax.axvspan(lo, hi, color=PALETTE[1], alpha=0.18, lw=0)
            for p in _axis(result, np.array(result.change_positions(), dtype=float)):
                ax.axvline(p, color="#555555", ls="--", lw=0.9)
            ax.set_ylabel(f"{name}\n({units.get(name, '')})", fontsize=9)
        axes[-1].set_xlabel({"line": "file line", "row": "file line of the row"}.get(result.unit, "position (symbols)"))
        axes[0].set_title(f"Scan of {short(result.name, 40)}: window {result.window}, step {result.step}, depth {result.depth}")
    return fig


def _axis(result: ScanResult, x: np.ndarray) -> np.ndarray:
    """Symbol positions mapped to file lines (line-oriented inputs) by interpolation; symbols otherwise."""
    pos = result.positions
    if pos is None or len(pos) == 0 or x.size == 0:
        return x
    return np.interp(x, np.arange(len(pos), dtype=float), pos.values.astype(float))


def _span(iv: dict, unit: str) -> list:
    if unit == "symbol":
        return [iv["start"], iv["end"]]
    first, last = iv[f"first_{unit}"], iv[f"last_{unit}"]
    if iv.get("first_time") is not None:
        return [f"{first} ({iv['first_time']})", f"{last} ({iv['last_time']})"]
    return [first, last]


def _templates(iv: dict) -> str:
    return "; ".join(f"{e['template']} ({e['count']:,} lines)" for e in iv.get("templates", ()))


def scan_png(result: ScanResult) -> bytes:
    """PNG bytes of :func:`scan_figure` (house style, no software metadata)."""
    with style():
        return fig_to_png(scan_figure(result))


def html_report(result: ScanResult):
    """The scan as an HTML page: verdict-style summary, intervals table, figure."""
    unit = result.unit
    what = {"line": "lines", "row": "rows"}.get(unit, "symbols")
    page = HtmlReport(f"Scan of {result.name}", f"{result.length:,} {what}; window {result.window:,}, step {result.step:,}, depth {result.depth}",
                      caution=result.caution or CAUTION)
    low = result.low_complexity
    page.section("Intervals")
    page.paragraph(
        f"{len(result.segmentation.breaks)} change points; {len(low)} low-complexity interval(s). "
        f"Method: {result.segmentation.method}. Penalty: {result.segmentation.penalty_rule}."
    )
    edges = ["start", "end"] if unit == "symbol" else [f"first {unit}", f"last {unit}"]
    logs = any("templates" in iv for iv in result.intervals)
    header = edges + ["windows"] + list(result.series) + ["low complexity"] + (["dominant templates"] if logs else [])
    rows = [_span(iv, unit) + [iv["windows"]] + [iv.get(k) for k in result.series] + ["yes" if iv["low_complexity"] else "no"]
            + ([_templates(iv)] if logs else []) for iv in result.intervals]
    page.table(header, rows, caption="Segments between change points" + ("" if unit == "symbol" else " (file line numbers)"))
    if low:
        page.table(edges + list(result.series) + (["dominant templates"] if logs else []),
                   [_span(iv, unit) + [iv.get(k) for k in result.series] + ([_templates(iv)] if logs else []) for iv in low],
                   caption="Low-complexity regions (edges at half height)")
    page.section("Figures along the stream")
    page.figure(scan_png(result), "Window figures against position; dashed: change points; shaded: low-complexity intervals.", "Scan plot")
    if result.notes or result.read_notes:
        page.section("Notes")
        page.note("", list(result.notes) + [f"read: {n}" for n in result.read_notes])
    return page


def write_outputs(result: ScanResult, folder: str | Path, force: bool = False) -> list[Path]:
    """Write scan.csv (one row per window), scan.png, scan.html and scan.json into ``folder`` (atomically)."""
    folder = Path(folder)
    names = list(result.series)
    where = [k for k in result.windows if k.startswith(("first_", "last_"))]
    return [
        write_csv(
            folder / "scan.csv",
            ["start", "end"] + where + names,
            [[int(s), int(s) + result.window] + [int(result.windows[k][i]) for k in where] + [result.series[k][i] for k in names]
             for i, s in enumerate(result.starts)],
            force=force,
        ),
        write_bytes(folder / "scan.png", scan_png(result), force=force),
        write_text(folder / "scan.html", html_report(result).render(), force=force),
        write_text(folder / "scan.json", result.to_json(), force=force),
    ]

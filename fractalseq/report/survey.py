"""The survey report: overlaid D_q spectra, the dendrogram and the heat map (PNG), and survey.html.

The report takes a :class:`SurveyView` (plain data: names, matrices, the
clustering, the per-source table); it computes nothing.  Genomic output is for
research, not for clinical decisions.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from fractalseq.compare._distances import Clustering
from fractalseq.io._outputs import write_bytes, write_csv, write_text
from fractalseq.report import figures
from fractalseq.report.html import HtmlReport

__all__ = ["MATRICES_IN_JSON", "MATRIX_CSV_MAX", "MATRIX_FILE", "MATRIX_IN_PAGE", "NAMED_LEAVES", "TABLE_ROWS", "SurveyView", "block_means", "dendrogram_png", "heatmap_png", "html_report", "spectra_png", "write_report"]

#: Sources drawn in colour with a legend in the overlaid spectra (more: thin lines, no legend).
LABELLED_SOURCES = 12
#: Sources named on the dendrogram and heat map axes (more: unlabelled, fixed-size figures).
NAMED_LEAVES = 60
#: Sources whose distance matrices are shown as tables in survey.html (more: the matrix files only).
MATRIX_IN_PAGE = 40
#: Rows of the per-source table in survey.html (more: the first ones, the rest in survey.csv).
TABLE_ROWS = 500
#: Cells per side of the heat map (more sources: the ordered matrix averaged over blocks of sources).
HEATMAP_CELLS = 400
#: Leaves of the dendrogram (more sources: the last merges only, small clusters drawn as one leaf).
DENDROGRAM_LEAVES = 400
#: Sources whose distance matrices survey.json holds as nested lists (more: in MATRIX_FILE, referenced by checksum).
MATRICES_IN_JSON = 200
#: Sources whose Jensen–Shannon matrix is also written as distances.csv (more: MATRIX_FILE only).
MATRIX_CSV_MAX = 1000
#: The file holding both matrices of a survey of more than MATRICES_IN_JSON sources.
MATRIX_FILE = "distances.npz"


@dataclass(frozen=True, eq=False)
class SurveyView:
    """What the survey report shows.

    Attributes
    ----------
    sources:
        Per source: ``name`` and ``spectrum`` (rows with ``q``, ``estimate``, ``low``, ``high``).
    names:
        Source names (row/column order of the matrices).
    js, js_depth:
        Jensen–Shannon divergences (bits) of the depth-``js_depth`` word distributions.
    spectrum:
        RMS distances between the D_q spectra.
    clustering:
        The clustering on the Jensen–Shannon distance.
    header, rows:
        The one-row-per-source table.
    notes:
        Notes of the survey.
    subtitle, caution:
        Page subtitle (settings) and the caution shown on the page.
    """

    sources: tuple[Mapping[str, Any], ...]
    names: tuple[str, ...]
    js: np.ndarray
    spectrum: np.ndarray
    js_depth: int
    clustering: Clustering
    header: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...]
    notes: tuple[str, ...]
    subtitle: str
    caution: str


def spectra_png(view: SurveyView) -> bytes:
    """D_q against q for every source, overlaid (intervals as bands)."""
    from matplotlib.collections import LineCollection

    crowded = len(view.sources) > LABELLED_SOURCES
    with figures.style():
        fig, ax = figures.figure(7.6, 4.6)
        drawn = False
        lines = []
        for i, s in enumerate(view.sources):
            dims = [d for d in s["spectrum"] if d.get("estimate") is not None]
            if not dims:
                continue
            drawn = True
            q = np.array([float(d["q"]) for d in dims])
            est = np.array([float(d["estimate"]) for d in dims])
            if crowded:  # many sources: thin lines of one colour, no bands or legend, drawn as one collection
                lines.append(np.column_stack([q, est]))
                continue
            color = figures.PALETTE[i % len(figures.PALETTE)]
            ax.plot(q, est, marker="o", color=color, label=figures.short(s["name"], 28))
            lo = np.array([np.nan if d.get("low") is None else float(d["low"]) for d in dims])
            hi = np.array([np.nan if d.get("high") is None else float(d["high"]) for d in dims])
            if np.isfinite(lo).any():
                ax.fill_between(q, lo, hi, color=color, alpha=0.15, lw=0)
        if lines:  # one artist for thousands of sources (one line each took ~8 ms to draw)
            ax.add_collection(LineCollection(lines, colors="#0b6e69", linewidths=0.8, alpha=max(0.08, min(0.6, 12.0 / len(view.sources)))))
            ax.autoscale_view()
        ax.set_xlabel("order q")
        ax.set_ylabel("D_q")
        ax.set_title("Rényi dimension spectra" + (f" of {len(view.sources)} sources" if crowded else ""))
        if drawn and not crowded:  # no source may have an estimate (all too short): then there is nothing to label
            ax.legend(loc="best", fontsize=8)
        return figures.fig_to_png(fig)


def dendrogram_png(view: SurveyView) -> bytes:
    """Dendrogram of the clustering (Jensen–Shannon distance)."""
    from scipy.cluster.hierarchy import dendrogram

    n = len(view.names)
    named = n <= NAMED_LEAVES  # beyond that the leaves are too many to label; the CSV and JSON name them
    with figures.style():
        fig, ax = figures.figure(7.6, max(3.0, 0.32 * n + 1.5) if named else 12.0)
        truncate = {"truncate_mode": "lastp", "p": DENDROGRAM_LEAVES} if n > DENDROGRAM_LEAVES else {}
        if view.clustering.linkage.shape[0]:
            dendrogram(
                view.clustering.linkage, labels=[figures.short(nm, 32) for nm in view.names] if named else None,
                no_labels=not named, orientation="right", ax=ax, color_threshold=0, above_threshold_color="#0b6e69",
                **truncate,
            )
        ax.set_xlabel("Jensen–Shannon distance (bits^½)")
        ax.set_title(f"Clustering ({view.clustering.method} linkage), depth-{view.js_depth} words")
        ax.grid(False)
        return figures.fig_to_png(fig)


def heatmap_png(view: SurveyView) -> bytes:
    """Heat map of the Jensen–Shannon divergences, rows in dendrogram order."""
    order = np.asarray(view.clustering.order or list(range(len(view.names))), dtype=np.int64)
    labels = [view.names[i] for i in order] if len(order) <= NAMED_LEAVES else None
    title = f"Jensen–Shannon divergence, depth-{view.js_depth} words"
    if len(order) > HEATMAP_CELLS:
        title += f" (means over blocks of about {len(order) / HEATMAP_CELLS:.1f} sources)"
    return figures.heatmap_png(block_means(view.js, order, HEATMAP_CELLS), labels, title, "bits")


def block_means(matrix: np.ndarray, order: np.ndarray, cells: int) -> np.ndarray:
    """``matrix`` with rows and columns in ``order``, averaged over ``cells`` x ``cells`` blocks when larger.

    Built row block by row block, so no reordered copy of a large matrix is made.
    """
    n = len(order)
    if n <= cells:
        return np.asarray(matrix, float)[np.ix_(order, order)]
    edges = np.linspace(0, n, cells + 1).round().astype(np.int64)
    out = np.zeros((cells, cells))
    for a in range(cells):
        rows = np.asarray(matrix[order[edges[a] : edges[a + 1]]], float)[:, order]
        sums = np.add.reduceat(rows.sum(axis=0), edges[:-1])
        out[a] = sums / ((edges[a + 1] - edges[a]) * np.diff(edges))
    return out


def html_report(view: SurveyView, drawn: Mapping[str, bytes] | None = None) -> HtmlReport:
    """The survey page (sortable tables, figures).

    ``drawn`` (``spectra``, ``heatmap``, ``dendrogram`` PNG bytes) are drawn here when not given.
    Distance matrices of more than :data:`MATRIX_IN_PAGE` sources are left to the matrix files (:func:`matrix_files`).
    """
    figs = dict(drawn or {})
    n = len(view.sources)
    page = HtmlReport(f"Survey of {n} source{'s' if n != 1 else ''}", view.subtitle, caution=view.caution)
    page.section("Sources")
    page.paragraph(
        "One row per source: length, alphabet size, the Rényi dimensions D_0, D_1, D_2, entropy-rate estimates, "
        "topological entropy and the online predictor's bits per symbol, each with its interval (low, high). "
        "Click a heading to sort."
    )
    shown = [list(r) for r in view.rows[:TABLE_ROWS]]
    if len(view.rows) > TABLE_ROWS:
        page.paragraph(f"The first {TABLE_ROWS} of {len(view.rows)} sources are listed (input order); survey.csv holds every row.")
    page.table(list(view.header), shown, sortable=True, caption="Per-source figures")
    page.section("Spectra")
    page.figure(figs.get("spectra") or spectra_png(view), "D_q against q for every source (bands: intervals).", "Overlaid D_q spectra")
    page.section("Distances")
    page.paragraph(
        f"Jensen–Shannon divergence (bits, 0 to 1) between the depth-{view.js_depth} word distributions; "
        "clustering uses its square root, which is a metric."
    )
    names = list(view.names)
    if len(names) <= MATRIX_IN_PAGE:
        page.table(["source"] + names, [[nm] + list(r) for nm, r in zip(names, view.js.tolist())], caption="Jensen–Shannon divergence (bits)")
        page.table(["source"] + names, [[nm] + list(r) for nm, r in zip(names, view.spectrum.tolist())], caption="RMS distance between D_q spectra")
    else:
        page.paragraph(f"The {n} × {n} distance matrices are in {matrix_files(n)} (too large for this page).")
    if len(names) >= 2:
        page.figure(figs.get("heatmap") or heatmap_png(view), "Jensen–Shannon divergences, rows and columns in dendrogram order.", "Distance heat map")
        page.figure(figs.get("dendrogram") or dendrogram_png(view), "Hierarchical clustering of the sources"
                    + (f" (the last {DENDROGRAM_LEAVES} merges; a leaf may stand for a cluster)." if n > DENDROGRAM_LEAVES else "."),
                    "Dendrogram")
    if view.notes:
        page.section("Notes")
        page.note("", list(view.notes))
    return page


def matrix_files(n: int) -> str:
    """Where the distance matrices of a survey of ``n`` sources are written (words for the page)."""
    where = [f"{MATRIX_FILE} (both matrices, referenced from survey.json)" if n > MATRICES_IN_JSON else "survey.json"]
    if n <= MATRIX_CSV_MAX:
        where.insert(0, "distances.csv (Jensen–Shannon)")
    return " and ".join(where)


def write_report(view: SurveyView, folder: Path, force: bool = False) -> list[Path]:
    """Write survey.csv, the distance matrices, the PNG figures and survey.html into ``folder`` (atomically).

    The matrices: distances.csv (Jensen–Shannon) up to :data:`MATRIX_CSV_MAX` sources, and both
    matrices in :data:`MATRIX_FILE` (checksummed ``.npz``) above :data:`MATRICES_IN_JSON`.
    """
    from fractalseq.io._matrices import write_matrices

    folder = Path(folder)
    names = list(view.names)
    written = [write_csv(folder / "survey.csv", list(view.header), [list(r) for r in view.rows], force=force)]
    if len(names) <= MATRIX_CSV_MAX:
        written.append(write_csv(folder / "distances.csv", ["source"] + names,
                                 [[nm] + list(r) for nm, r in zip(names, view.js.tolist())], force=force))
    if len(names) > MATRICES_IN_JSON:
        written.append(write_matrices(folder / MATRIX_FILE, names, {"js": view.js, "spectrum": view.spectrum}, force=force))
    drawn = {"spectra": spectra_png(view)}  # drawn once, written as PNG files and embedded in the page
    if len(names) >= 2:
        drawn["heatmap"], drawn["dendrogram"] = heatmap_png(view), dendrogram_png(view)
    for name, png in drawn.items():
        written.append(write_bytes(folder / f"{name}.png", png, force=force))
    written.append(write_text(folder / "survey.html", html_report(view, drawn).render(), force=force))
    return written


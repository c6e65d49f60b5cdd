"""Figures of a survey of many sources, from plain numbers.

The survey job (:mod:`fractalseq.jobs._survey`) sits above the report, so
these functions take what they draw as arguments — names, per-source D_q
rows, the linkage matrix, the divergence matrix — and never a survey result.
Each ``*_figure`` returns a :class:`matplotlib.figure.Figure`; each ``*_png``
returns its PNG bytes in the house style (:mod:`fractalseq.report.figures`).
"""

from __future__ import annotations

from typing import Mapping, Sequence

import numpy as np

from fractalseq.report.figures import PALETTE, fig_to_png, figure, heatmap_png, short, style

#: More sources than this: thin lines of one colour, no bands, no legend.
LABELLED_SOURCES = 12
#: More leaves than this: the dendrogram and the heat map carry no names.
NAMED_LEAVES = 60


def _float_or_nan(v) -> float:
    return np.nan if v is None else float(v)


def spectra_figure(sources: Sequence[tuple[str, Sequence[Mapping]]], labelled: int = LABELLED_SOURCES):
    """D_q against q for every source, overlaid (intervals as bands).

    Parameters
    ----------
    sources:
        ``(name, rows)`` per source; each row a mapping with ``q``, ``estimate``, ``low`` and ``high``
        (``None`` where missing; rows without an estimate are skipped).
    labelled:
        Above this many sources the lines are thin, of one colour and unlabelled.
    """
    n = len(sources)
    crowded = n > labelled
    with style():
        fig, ax = figure(7.6, 4.6)
        drawn = False
        for i, (name, rows) in enumerate(sources):
            dims = [d for d in rows if d.get("estimate") is not None]
            if not dims:
                continue
            drawn = True
            q = np.array([float(d["q"]) for d in dims])
            est = np.array([float(d["estimate"]) for d in dims])
            if crowded:
                ax.plot(q, est, color="#0b6e69", lw=0.8, alpha=max(0.08, min(0.6, 12.0 / n)))
                continue
            color = PALETTE[i % len(PALETTE)]
            ax.plot(q, est, marker="o", color=color, label=short(name, 28))
            lo = np.array([_float_or_nan(d.get("low")) for d in dims])
            hi = np.array([_float_or_nan(d.get("high")) for d in dims])
            if np.isfinite(lo).any():
                ax.fill_between(q, lo, hi, color=color, alpha=0.15, lw=0)
        ax.set_xlabel("order q")
        ax.set_ylabel("D_q")
        ax.set_title("Rényi dimension spectra" + (f" of {n} sources" if crowded else ""))
        if drawn and not crowded:  # no source may have an estimate (all too short): nothing to label then
            ax.legend(loc="best", fontsize=8)
    return fig


def spectra_png(sources: Sequence[tuple[str, Sequence[Mapping]]], labelled: int = LABELLED_SOURCES) -> bytes:
    """PNG bytes of :func:`spectra_figure`."""
    with style():
        return fig_to_png(spectra_figure(sources, labelled))


def dendrogram_figure(linkage: np.ndarray, names: Sequence[str], method: str, depth: int, named_leaves: int = NAMED_LEAVES):
    """Dendrogram of a hierarchical clustering on the Jensen–Shannon distance.

    Parameters
    ----------
    linkage:
        The scipy linkage matrix (``(n - 1, 4)``; empty for one source).
    names:
        Source names in input order.
    method, depth:
        Linkage method and word length, for the title.
    named_leaves:
        Above this many sources the leaves carry no names.
    """
    from scipy.cluster.hierarchy import dendrogram

    n = len(names)
    named = n <= named_leaves
    with style():
        fig, ax = figure(7.6, max(3.0, 0.32 * n + 1.5) if named else 12.0)
        if np.asarray(linkage).shape[0]:
            dendrogram(
                linkage, labels=[short(nm, 32) for nm in names] if named else None,
                no_labels=not named, orientation="right", ax=ax, color_threshold=0, above_threshold_color="#0b6e69",
            )
        ax.set_xlabel("Jensen–Shannon distance (bits^½)")
        ax.set_title(f"Clustering ({method} linkage), depth-{depth} words")
        ax.grid(False)
    return fig


def dendrogram_png(linkage: np.ndarray, names: Sequence[str], method: str, depth: int, named_leaves: int = NAMED_LEAVES) -> bytes:
    """PNG bytes of :func:`dendrogram_figure`."""
    with style():
        return fig_to_png(dendrogram_figure(linkage, names, method, depth, named_leaves))


def divergence_heatmap_png(js: np.ndarray, names: Sequence[str], order: Sequence[int] | None, depth: int,
                           named_leaves: int = NAMED_LEAVES) -> bytes:
    """Heat map of the Jensen–Shannon divergences (bits), rows and columns in ``order`` (dendrogram order)."""
    order = list(order) if order else list(range(len(names)))
    m = np.asarray(js)[np.ix_(order, order)]
    labels = [names[i] for i in order] if len(order) <= named_leaves else None
    return heatmap_png(m, labels, f"Jensen–Shannon divergence, depth-{depth} words", "bits")

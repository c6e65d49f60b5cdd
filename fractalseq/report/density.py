"""The density image of the contractive encoding as written by ``fractalseq render``.

The counts come from :func:`fractalseq.encoding.density_image`; this module
only draws them (log-scaled, corners labelled) and writes the PNG.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from fractalseq.encoding import density_image
from fractalseq.io._outputs import write_bytes
from fractalseq.report.figures import new_figure


def density_figure(
    pts: np.ndarray,
    title: str,
    labels: tuple[str, ...] = (),
    corners: np.ndarray | None = None,
    size: int = 512,
):
    """A :class:`matplotlib.figure.Figure` of the points' density (log-scaled counts, labelled corners).

    Parameters
    ----------
    pts:
        Points of the encoding, ``(n, D)`` (:func:`fractalseq.encoding.points`).
    title:
        Figure title.
    labels, corners:
        Symbol labels and their corner coordinates (drawn for at most 16 symbols).
    size:
        Pixels per side of the counting grid (8..8192).
    """
    img = density_image(pts, size)
    fig = new_figure(6.4, 6.4, layout=None, dpi=100)
    ax = fig.subplots()
    shown = np.log1p(img.astype(float))
    im = ax.imshow(shown, origin="lower", extent=(0, 1, 0, 1), cmap="magma", interpolation="nearest")
    cb = fig.colorbar(im, ax=ax, fraction=0.046, pad=0.04)
    cb.set_label("ln(1 + points per pixel)")
    ax.set_xlabel("coordinate 1 (unit cube)")
    ax.set_ylabel("coordinate 2 (unit cube)" if pts.shape[1] >= 2 else "(one-dimensional encoding)")
    ax.set_title(title)
    if corners is not None and labels and corners.shape[1] >= 1 and len(labels) <= 16:
        for lab, c in zip(labels, corners):
            y = c[1] if corners.shape[1] >= 2 else 0.0
            ax.annotate(
                lab, (c[0], y), xytext=(4 if c[0] < 0.5 else -12, 4 if y < 0.5 else -12),
                textcoords="offset points", color="tab:cyan", fontsize=11, fontweight="bold",
            )
    return fig


def render_png(
    pts: np.ndarray,
    path: str | Path,
    title: str,
    labels: tuple[str, ...] = (),
    corners: np.ndarray | None = None,
    size: int = 512,
    force: bool = False,
) -> Path:
    """Write :func:`density_figure` as a PNG file (atomically; ``force`` to overwrite)."""
    fig = density_figure(pts, title, labels, corners, size)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", bbox_inches="tight")
    return write_bytes(path, buf.getvalue(), force=force)

"""Figures as PNG bytes, in one house style, with byte-stable output.

Every function here takes plain numbers (arrays, lists) and returns the bytes
of a PNG; none computes an estimate.  Titles name the source, axes carry
units.  :func:`fig_to_png` strips the software version from the PNG metadata
so the same figure gives the same bytes on every run.

Other reports (survey, drift, scan, demo) can draw with :func:`figure` and
:func:`fig_to_png` and the colours in :data:`PALETTE` to share the look.
"""

from __future__ import annotations

import io
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Iterator, Mapping, Sequence

import numpy as np

#: Line colours, in order of use.
PALETTE = ("#0b6e69", "#b4541a", "#3d4f9f", "#7a8b2e", "#8e3b73", "#5b6770", "#c99a16")
INK = "#1d2b36"
GRID = "#e4dfd3"

_RC = {
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "axes.edgecolor": "#55606a",
    "axes.labelcolor": INK,
    "axes.titlesize": 11.5,
    "axes.titleweight": "bold",
    "axes.labelsize": 10.5,
    "axes.grid": True,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.prop_cycle": None,  # filled in lazily (needs cycler)
    "grid.color": GRID,
    "grid.linewidth": 0.8,
    "xtick.color": "#3b4650",
    "ytick.color": "#3b4650",
    "xtick.labelsize": 9.5,
    "ytick.labelsize": 9.5,
    "legend.fontsize": 9,
    "legend.frameon": False,
    "font.family": "DejaVu Sans",
    "lines.linewidth": 1.8,
    "lines.markersize": 5,
    "savefig.dpi": 110,
    "svg.hashsalt": "fractalseq",
}


def new_figure(width: float, height: float, layout: str | None = "constrained", dpi: float | None = None):
    """A new :class:`matplotlib.figure.Figure` drawn by its own Agg canvas.

    No figure manager and no global backend switch: the figure is registered nowhere,
    so nothing needs closing and the caller's matplotlib state is untouched.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout=layout, dpi=dpi)
    FigureCanvasAgg(fig)
    return fig


@contextmanager
def style() -> Iterator[None]:
    """Context in which matplotlib uses the house style."""
    import matplotlib
    from cycler import cycler

    rc = dict(_RC)
    rc["axes.prop_cycle"] = cycler(color=list(PALETTE))
    with matplotlib.rc_context(rc):
        yield


def figure(width: float = 7.2, height: float = 4.4, ncols: int = 1, nrows: int = 1):
    """A new figure and its axes in the house style (call inside :func:`style`); see :func:`new_figure`."""
    fig = new_figure(width, height)
    return fig, fig.subplots(nrows, ncols, squeeze=True)


def fig_to_png(fig, dpi: int = 110) -> bytes:
    """PNG bytes of a figure; no software/version metadata, so bytes are stable."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def short(name: str, limit: int = 48) -> str:
    """A source name cut to ``limit`` characters for titles ('…' in the middle)."""
    name = str(name)
    if len(name) <= limit:
        return name
    half = (limit - 1) // 2
    return name[:half] + "…" + name[-(limit - 1 - half):]


def title_for(kind: str, source: str, limit: int = 60) -> str:
    """A figure title naming the source: ``"kind — name"``, or two lines when that is long.

    A path is shown by its file name; names longer than ``limit`` are cut in the middle.
    """
    name = str(source)
    if "/" in name and not name.endswith("/"):
        name = name.rsplit("/", 1)[1]
    name = short(name, limit)
    one = f"{kind} — {name}"
    return one if len(one) <= 56 else f"{kind}\n{name}"


def density_cmap():
    """The sequential colour map of density images (paper white → teal → ink)."""
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list(
        "fractalseq_density", ["#fbfaf7", "#a9dcd4", "#2f9a90", "#0b6e69", "#173c4a", "#10161b"]
    )


# --------------------------------------------------------------- encoding
def encoding_png(
    image: np.ndarray,
    source: str,
    labels: Sequence[str] = (),
    corners: np.ndarray | None = None,
    ratio: float = 0.5,
    one_dimensional: bool = False,
) -> bytes:
    """Density image of the encoding (points per pixel, log colour scale) with labelled corners.

    Parameters
    ----------
    image:
        ``(size, size)`` counts from :func:`fractalseq.encoding.density_image`
        (row index = second coordinate).
    source:
        Name of the source (goes in the title).
    labels, corners:
        Symbol labels and their corner coordinates (first two used).
    """
    from matplotlib.colors import LogNorm

    img = np.asarray(image, dtype=float)
    with style():
        fig = new_figure(6.6, 5.6, layout="compressed")
        ax = fig.subplots()
        shown = np.where(img > 0, img, np.nan)
        vmax = max(float(np.nanmax(shown)) if np.isfinite(shown).any() else 1.0, 1.0)
        cmap = density_cmap().with_extremes(bad="#ffffff")
        im = ax.imshow(
            shown, origin="lower", extent=(0, 1, 0, 1), cmap=cmap, norm=LogNorm(vmin=1, vmax=max(vmax, 1.0001)),
            interpolation="nearest", aspect="auto" if one_dimensional else "equal",
        )
        ax.grid(False)
        cb = fig.colorbar(im, ax=ax, shrink=0.9)
        cb.set_label("points per pixel (log scale)")
        from matplotlib.ticker import FuncFormatter, NullFormatter

        cb.ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
        cb.ax.yaxis.set_minor_formatter(NullFormatter())
        ax.set_xlabel("coordinate 1 (unit square)")
        ax.set_ylabel("(one-dimensional encoding)" if one_dimensional else "coordinate 2 (unit square)")
        ax.set_title(title_for(f"Encoding (k = {ratio:g})", source))
        if corners is not None and len(labels) and len(labels) <= 16:
            c = np.asarray(corners, float)
            for lab, row in zip(labels, c):
                x = float(row[0])
                y = float(row[1]) if c.shape[1] >= 2 else 0.0
                ax.annotate(
                    str(lab), (x, y), xytext=(6 if x < 0.5 else -6, 6 if y < 0.5 else -6), textcoords="offset points",
                    ha="left" if x < 0.5 else "right", va="bottom" if y < 0.5 else "top",
                    color="#b4541a", fontsize=12, fontweight="bold", annotation_clip=False,
                    bbox=dict(boxstyle="round,pad=0.18", fc="white", ec="#b4541a", lw=0.8, alpha=0.9),
                )
        return fig_to_png(fig)


# ---------------------------------------------------------------- scaling
@dataclass(frozen=True)
class ScalingSeries:
    """One log–log scaling curve: ``y`` against ``x`` with the fitted range and line.

    ``x`` is ``ln(1/ε)`` (nats), ``y`` the quantity whose slope is the
    dimension (e.g. ``ln N(ε)`` for q = 0, ``−Σ p ln p`` for q = 1,
    ``ln Σ p^q / (1 − q)`` otherwise), in nats.  ``fit_lo``/``fit_hi`` index
    the first and last point of the fitted range (inclusive).
    """

    label: str
    x: np.ndarray
    y: np.ndarray
    fit_lo: int
    fit_hi: int
    slope: float
    intercept: float


def scaling_png(source: str, series: Sequence[ScalingSeries], ylabel: str, unit_note: str = "") -> bytes:
    """Log–log scaling plots, one panel per curve: points, the fitted line, and the fitted range marked.

    Points inside the fitted range are filled and the range is shaded; points
    outside it are open.  The thick line has the fitted slope.
    """
    k = max(len(series), 1)
    ncols = min(k, 3)
    nrows = -(-k // ncols)
    with style():
        fig = new_figure(3.6 * ncols + 0.6, 3.3 * nrows + 0.5)
        axes = fig.subplots(nrows, ncols, squeeze=False)
        for i, ax in enumerate(axes.ravel()):
            if i >= len(series):
                ax.set_visible(False)
                continue
            s = series[i]
            col = PALETTE[i % len(PALETTE)]
            x = np.asarray(s.x, float)
            y = np.asarray(s.y, float)
            inside = np.zeros(x.size, bool)
            if s.fit_hi >= s.fit_lo >= 0:
                inside[s.fit_lo : s.fit_hi + 1] = True
            if inside.any():
                ax.axvspan(x[inside].min(), x[inside].max(), color=PALETTE[0], alpha=0.08, lw=0, label="fitted range")
            ax.plot(x, y, color=col, lw=0.8, alpha=0.5)
            ax.plot(x[~inside], y[~inside], "o", mfc="white", mec=col, mew=1.2, label="outside the range")
            ax.plot(x[inside], y[inside], "o", color=col, label="fitted levels")
            if np.isfinite(s.slope) and np.isfinite(s.intercept) and inside.any():
                xs = np.array([x.min(), x.max()])
                ax.plot(xs, s.intercept + s.slope * xs, "--", color=INK, lw=1.0, alpha=0.7,
                        label=f"slope {s.slope:.4g}")
            ax.set_title(f"{s.label}: slope {s.slope:.4g}" if np.isfinite(s.slope) else f"{s.label}: no fit",
                         fontsize=10.5)
            ax.set_xlabel("ln(1/ε), box side ε = k^n (nats)")
            if i % ncols == 0:
                ax.set_ylabel(ylabel)
            if i == 0:
                ax.legend(loc="upper left", fontsize=8)
        fig.suptitle(title_for("Scaling" + (f" ({unit_note})" if unit_note else ""), source), fontweight="bold",
                     fontsize=11.5)
        return fig_to_png(fig)


# --------------------------------------------------------------- spectrum
def spectrum_png(
    source: str,
    q: Sequence[float],
    estimate: Sequence[float],
    low: Sequence[float],
    high: Sequence[float],
    level: float = 0.95,
    reference: float | None = None,
    reference_label: str = "",
    dense: tuple[np.ndarray, np.ndarray] | None = None,
) -> bytes:
    """Generalised dimensions D_q with their interval band (and an optional reference line)."""
    q = np.asarray(q, float)
    est = np.asarray(estimate, float)
    lo = np.asarray(low, float)
    hi = np.asarray(high, float)
    order = np.argsort(q)
    q, est, lo, hi = q[order], est[order], lo[order], hi[order]
    with style():
        fig, ax = figure(7.2, 4.4)
        ok = np.isfinite(lo) & np.isfinite(hi)
        if ok.sum() >= 2:
            ax.fill_between(q[ok], lo[ok], hi[ok], color=PALETTE[0], alpha=0.18, lw=0, label=f"{level:.0%} interval")
        if ok.any():
            ax.errorbar(q[ok], est[ok], yerr=[est[ok] - lo[ok], hi[ok] - est[ok]], fmt="none", ecolor=PALETTE[0],
                        elinewidth=1.2, capsize=3)
        if dense is not None:
            ax.plot(dense[0], dense[1], "-", color=PALETTE[0], lw=1.0, alpha=0.7)
        ax.plot(q, est, "o-", color=PALETTE[0], label="D_q estimate")
        if reference is not None and np.isfinite(reference):
            ax.axhline(reference, color=PALETTE[1], ls="--", lw=1.2, label=reference_label or "reference")
        ax.set_xlabel("order q (dimensionless)")
        ax.set_ylabel("generalised dimension D_q")
        ax.set_title(title_for("Dimension spectrum", source))
        ax.legend(loc="best")
        return fig_to_png(fig)


def falpha_png(
    source: str,
    alpha: Sequence[float],
    f: Sequence[float],
    q: Sequence[float] | None = None,
    dimension_limit: float | None = None,
    limit_label: str = "embedding dimension",
) -> bytes:
    """Singularity spectrum f(α) (direct method), points labelled by q where given.

    ``dimension_limit`` draws a horizontal ceiling (e.g. the full-shift dimension ln A / ln(1/k)).
    """
    a = np.asarray(alpha, float)
    fa = np.asarray(f, float)
    with style():
        fig, ax = figure(6.6, 4.6)
        ok = np.isfinite(a) & np.isfinite(fa)
        if ok.any():
            ax.plot(a[ok], fa[ok], "o-", color=PALETTE[2], label="f(α)")
            lo, hi = float(a[ok].min()), float(a[ok].max())
            pad = max(0.05 * (hi - lo), 0.01)
            xs = np.array([lo - pad, hi + pad])
            ax.plot(xs, xs, ":", color=PALETTE[5], lw=1.0, label="f = α")
        if q is not None:
            qq = np.asarray(q, float)
            for qi, ai, fi in zip(qq, a, fa):
                if np.isfinite(ai) and np.isfinite(fi) and float(qi).is_integer() and abs(qi) <= 4:
                    ax.annotate(f"q={qi:g}", (ai, fi), xytext=(4, -12), textcoords="offset points", fontsize=8,
                                color=PALETTE[5])
        if dimension_limit is not None:
            ax.axhline(dimension_limit, color=PALETTE[1], ls="--", lw=1.0, label=f"{limit_label} {dimension_limit:.4g}")
        ax.set_xlabel("singularity strength α (dimensionless)")
        ax.set_ylabel("f(α) (dimension of the set with strength α)")
        ax.set_title(title_for("Singularity spectrum f(α)", source))
        ax.legend(loc="lower center")
        return fig_to_png(fig)


# ---------------------------------------------------------------- entropy
def entropy_png(
    source: str,
    n: Sequence[int],
    curves: Mapping[str, Sequence[float]],
    levels: Mapping[str, float] = {},
    unit: str = "bits per symbol",
    max_bits: float | None = None,
    valid_upto: int | None = None,
) -> bytes:
    """Entropy-rate estimates against block length, with horizontal levels (LZ, compressors, predictor).

    Parameters
    ----------
    n:
        Block lengths.
    curves:
        Estimator name → estimate at each block length (NaN where not defined).
    levels:
        Name → a single value drawn as a horizontal line (e.g. predictor code length).
    max_bits:
        The ceiling log2(A), drawn as a thin line.
    valid_upto:
        Largest block length that the data support; longer lengths are shaded.
    """
    nn = np.asarray(n, float)
    with style():
        fig, ax = figure(7.4, 4.6)
        markers = "osd^v<>"
        for i, (name, vals) in enumerate(curves.items()):
            v = np.asarray(vals, float)
            ok = np.isfinite(v)
            ax.plot(nn[ok], v[ok], marker=markers[i % len(markers)], color=PALETTE[i % len(PALETTE)], label=name)
        styles = ["--", "-.", ":", (0, (5, 2, 1, 2))]
        for j, (name, val) in enumerate(levels.items()):
            if val is not None and np.isfinite(val):
                ax.axhline(val, ls=styles[j % len(styles)], lw=1.3, color=PALETTE[(len(curves) + j) % len(PALETTE)],
                           label=f"{name} ({val:.4g})")
        if max_bits is not None:
            ax.axhline(max_bits, color="#9aa3a8", lw=0.9, label=f"log2 A = {max_bits:.4g}")
        if valid_upto is not None and nn.size and valid_upto < nn.max():
            ax.axvspan(valid_upto + 0.5, nn.max() + 0.5, color="#b4541a", alpha=0.07, lw=0,
                       label="undersampled block lengths")
        ax.set_xlabel("block length n (symbols)")
        ax.set_ylabel(f"entropy rate estimate ({unit})")
        ax.set_title(title_for("Entropy rate by block length", source))
        if nn.size:
            ax.set_xlim(nn.min() - 0.5, nn.max() + 0.5)
        ax.legend(loc="best", ncols=2 if len(curves) + len(levels) > 5 else 1)
        return fig_to_png(fig)


# ------------------------------------------------------- general purpose
def heatmap_png(
    matrix: np.ndarray,
    labels: Sequence[str] | None,
    title: str,
    colorbar_label: str,
    col_labels: Sequence[str] | None = None,
) -> bytes:
    """A labelled matrix (e.g. distances between sources) with a colour bar.

    ``labels=None``: a large matrix drawn at a fixed size without tick labels (rows/columns by index).
    """
    m = np.asarray(matrix, float)
    named = labels is not None
    cols = list(col_labels) if col_labels is not None else (list(labels) if named else [])
    size = max(4.5, 0.35 * max(m.shape) + 3) if named else 9.0
    with style():
        fig, ax = figure(size + 1.2, size)
        cmap = density_cmap()
        im = ax.imshow(m, cmap=cmap, interpolation="nearest", aspect="auto")
        ax.grid(False)
        if named:
            ax.set_xticks(range(len(cols)), [short(c, 20) for c in cols], rotation=60, ha="right")
            ax.set_yticks(range(len(labels)), [short(c, 20) for c in labels])
        else:
            ax.set_xlabel("source (dendrogram order)")
            ax.set_ylabel("source (dendrogram order)")
        cb = fig.colorbar(im, ax=ax, fraction=0.046, pad=0.03)
        cb.set_label(colorbar_label)
        ax.set_title(title)
        return fig_to_png(fig)


def series_png(
    x: Sequence[float],
    series: Mapping[str, Sequence[float]],
    title: str,
    xlabel: str,
    ylabel: str,
    marks: Sequence[float] = (),
    mark_label: str = "",
) -> bytes:
    """Lines against a common x (e.g. a sliding-window scan), with optional vertical marks."""
    xx = np.asarray(x, float)
    with style():
        fig, ax = figure(8.0, 4.2)
        for i, (name, vals) in enumerate(series.items()):
            ax.plot(xx, np.asarray(vals, float), color=PALETTE[i % len(PALETTE)], label=name)
        for j, m in enumerate(marks):
            ax.axvline(m, color=PALETTE[1], ls="--", lw=1.1, label=mark_label if (j == 0 and mark_label) else None)
        ax.set_xlabel(xlabel)
        ax.set_ylabel(ylabel)
        ax.set_title(title)
        if series or (marks and mark_label):
            ax.legend(loc="best")
        return fig_to_png(fig)

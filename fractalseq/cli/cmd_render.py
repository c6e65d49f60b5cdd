"""``fractalseq render``: a density image (PNG) of the contractive encoding."""

from __future__ import annotations

from pathlib import Path

from typing import Optional

import typer

from fractalseq.cli import common
from fractalseq.cli.inputs import reader
from fractalseq.errors import ParameterError


def render(
    path: str = typer.Argument(..., help="Input file (any supported format, optionally compressed); - reads standard input."),
    out: Path = typer.Option(..., "--out", "-o", help="PNG file to write."),
    ratio: float = common.RATIO,
    size: int = typer.Option(512, "--size", min=8, max=8192, help="Image width and height in pixels (8..8192)."),
    alphabet: str = common.ALPHABET,
    fmt: str = common.FORMAT,
    policy: str = common.POLICY,
    column: Optional[str] = common.COLUMN,
    bins: int = common.BINS,
    thresholds: Optional[str] = common.THRESHOLDS,
    ordinal: int = common.ORDINAL,
    delay: int = common.DELAY,
    ties: str = common.TIES,
    drop: int = typer.Option(20, "--drop", min=0, help="Points dropped at each segment start (the transient remembering the start)."),
    quiet: bool = common.QUIET,
    force: bool = common.FORCE,
) -> None:
    """Draw the point cloud x_t = k x_(t-1) + (1-k) corner(s_t) as a log-scaled density image.

    Symbols sit on the corners of a hypercube (binary digits of their code); for more than
    four symbols the first two coordinates are drawn. The title says whether the maps overlap.

    Example: fractalseq render reference/lambda_virus.fa --out lambda.png --ratio 0.5
    """
    common.protect_inputs(path)  # no output may replace an input, even with --force
    from fractalseq import encoding
    from fractalseq.report.density import render_png
    from fractalseq.io._outputs import check_writable

    if out.suffix.lower() != ".png":
        raise ParameterError(f"{out} does not end in .png; render writes PNG images.")
    check_writable(out, force)
    k = encoding.check_ratio(ratio)
    arr = reader(fmt, alphabet, policy, column, bins, thresholds, ordinal, delay, ties).read(path)
    corners = encoding.corner_layout(arr.alphabet.size)
    check = encoding.overlap_check(k, corners)
    pts = encoding.points(arr, k, drop=drop)
    label = "non-overlapping maps" if not check.overlapping else "overlapping maps"
    title = f"{arr.name}: encoding, k = {k:g} ({label}), {len(arr):,} symbols"
    labels = tuple(arr.alphabet.symbols) if arr.alphabet.size <= 16 and arr.alphabet.single_characters else ()
    render_png(pts, out, title, labels, corners, size=size, force=force)
    if not quiet:
        common.err_console.print(f"wrote {out}")


def register(app: typer.Typer) -> None:
    app.command("render")(render)

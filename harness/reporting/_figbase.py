"""Shared figure plumbing: greyscale style, Agg figures without pyplot, saving, panel grids."""

from __future__ import annotations

import math
from pathlib import Path

from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from harness.errors import DataError

__all__ = ["INK", "MID", "LIGHT", "ACCENT", "STYLE", "NothingToPlot", "save"]

INK, MID, LIGHT, ACCENT = "#111111", "#6b6b6b", "#d9d9d9", "#0b5d6b"
STYLE = {
    "font.size": 9,
    "axes.titlesize": 9.5,
    "axes.titleweight": "bold",
    "axes.labelsize": 9,
    "xtick.labelsize": 8.5,
    "ytick.labelsize": 8.5,
    "legend.fontsize": 8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.edgecolor": MID,
    "axes.linewidth": 0.8,
    "svg.hashsalt": "harness",
    "figure.dpi": 100,
}


class NothingToPlot(DataError):
    """The input holds nothing a figure can show; the message says why in one line."""


def save(fig, directory, stem: str, *, dpi: int = 150) -> tuple[Path, Path]:
    """Write ``stem.png`` (``dpi``) and ``stem.svg`` into ``directory``.

    Returns
    -------
    (Path, Path)
        The PNG and SVG paths.
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    png, svg = directory / f"{stem}.png", directory / f"{stem}.svg"
    with rc_context(STYLE):
        fig.savefig(png, dpi=dpi, metadata={"Software": None})
        fig.savefig(svg, metadata={"Date": None})
    return png, svg


def new_figure(size) -> Figure:
    """A figure outside pyplot (no global state, no window), drawn by Agg."""
    fig = Figure(figsize=size, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def grid(n: int, ncols: int, width: float, heights) -> tuple:
    ncols = max(1, min(ncols, n))
    nrows = math.ceil(n / ncols)
    row_h = [max(heights[r * ncols : (r + 1) * ncols]) for r in range(nrows)]
    fig = new_figure((width * ncols, sum(row_h) + 0.9))
    axes = fig.subplots(nrows, ncols, squeeze=False, gridspec_kw={"height_ratios": row_h})
    for ax in axes.flat[n:]:
        ax.set_visible(False)
    return fig, list(axes.flat[:n])


def usable(comparisons, min_datasets: int, what: str) -> list:
    comps = [c for c in comparisons if c.matrix.n_datasets >= min_datasets and len(c.matrix.encoders) >= 2]
    if not comps:
        raise NothingToPlot(f"{what}: no model has at least {min_datasets} complete dataset(s) and 2 encoders.")
    return comps

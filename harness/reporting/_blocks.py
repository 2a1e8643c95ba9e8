"""Small helpers shared by the report sections: figures, tables, number phrases."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from harness.reporting import figures, tables
from harness.reporting._html import Figure, Note, Table

__all__ = ["slug", "figure", "table", "fmt_p", "pct", "cost_phrase", "family"]


def slug(text: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in str(text))


def figure(fig_fn, root: Path, stem: str, caption: str, alt: str) -> list:
    """Draw and save one figure, or return a one-line note saying why it was skipped."""
    try:
        fig = fig_fn()
    except figures.NothingToPlot as exc:
        return [Note(f"Figure skipped: {exc}")]
    png, svg = figures.save(fig, root / "figures", stem)
    return [Figure(str(png.relative_to(root)), str(svg.relative_to(root)), caption, alt)]


def table(frame, root: Path, stem: str, caption: str, shown=None, tex=None) -> Table:
    csv, texp = tables.write_table(
        frame, root / "tables", stem, caption=caption, tex_frame=tex if tex is not None else shown
    )
    shown = tables.display(frame if shown is None else shown)
    return Table(shown, caption, (str(csv.relative_to(root)), str(texp.relative_to(root))))


def fmt_p(p: float) -> str:
    """``p = 0.0123`` or ``p < 0.0001``; never ``p = 0``."""
    if not np.isfinite(p):
        return "p not computable"
    return "p < 0.0001" if p < 1e-4 else f"p = {p:.3g}"


def pct(value: float, signed: bool = True) -> str:
    """A unit-free effect as a percentage: ``+1.23 %``."""
    if not np.isfinite(value):
        return "−∞ %" if value < 0 else ("+∞ %" if value > 0 else "n/a")
    return f"{100 * value:+.2f} %" if signed else f"{100 * value:.2f} %"


def cost_phrase(cost_ratio: float, saving_s: float) -> str:
    """``cheaper by 0.02 s per fold (9 %)`` or ``not cheaper (1.09 × the time)``."""
    if not (np.isfinite(cost_ratio) and np.isfinite(saving_s)):
        return "of unknown cost"
    if cost_ratio < 1 and saving_s > 0:
        return f"cheaper by {saving_s:.3g} s per fold ({100 * (1 - cost_ratio):.0f} %)"
    return f"not cheaper ({cost_ratio:.2f} × the reference's time per fold)"


def family(run, model: str) -> str:
    fam = run.manifest.model_family(model)
    if fam is None:
        fams = run.results.loc[run.results["model"] == model, "model_family"].dropna()
        fam = fams.iloc[0] if len(fams) else "?"
    return fam

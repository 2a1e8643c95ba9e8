"""Figures of a run: pure functions of ``harness.stats`` objects returning matplotlib figures.

Every figure reads in greyscale: marker shapes, fills and line styles carry the meaning,
never colour alone, and points are labelled directly. Each function raises
:class:`NothingToPlot` when its input holds nothing to draw (one encoder, no complete
dataset, ...); the report writer turns that into a one-line note. :func:`save` writes
a figure as PNG (150 dpi) and SVG.

Figures
-------
rank_plot         average rank per encoder with bootstrap whiskers, a panel per model
cd_diagram        critical-difference diagram (Demšar 2006), a panel per model
cost_plot         average rank against median seconds (log), Pareto front marked
relative_heatmap  per-dataset shortfall from the best encoder, datasets by cardinality
leakage_plot      optimism gap (train minus test) per encoder setting, flags marked
"""

from __future__ import annotations

import math
from pathlib import Path

import matplotlib
import matplotlib.ticker
import matplotlib.transforms
import numpy as np
import pandas as pd
from matplotlib import rc_context
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import PowerNorm
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle

from harness import stats
from harness.errors import DataError
from harness.metrics import REGRESSION_METRICS
from harness.reporting.tables import metric_name

__all__ = ["NothingToPlot", "rank_plot", "cd_diagram", "cost_plot", "relative_heatmap",
           "leakage_plot", "shortfall_matrix", "pareto_front", "cliques", "place_labels",
           "save"]

INK, MID, LIGHT, ACCENT = "#111111", "#6b6b6b", "#d9d9d9", "#0b5d6b"
STYLE = {
    "font.size": 9, "axes.titlesize": 9.5, "axes.titleweight": "bold", "axes.labelsize": 9,
    "xtick.labelsize": 8.5, "ytick.labelsize": 8.5, "legend.fontsize": 8,
    "axes.spines.top": False, "axes.spines.right": False, "axes.edgecolor": MID,
    "axes.linewidth": 0.8, "svg.hashsalt": "harness", "figure.dpi": 100,
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


def _figure(size) -> Figure:
    """A figure outside pyplot (no global state, no window), drawn by Agg."""
    fig = Figure(figsize=size, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _grid(n: int, ncols: int, width: float, heights) -> tuple:
    ncols = max(1, min(ncols, n))
    nrows = math.ceil(n / ncols)
    row_h = [max(heights[r * ncols:(r + 1) * ncols]) for r in range(nrows)]
    fig = _figure((width * ncols, sum(row_h) + 0.9))
    axes = fig.subplots(nrows, ncols, squeeze=False, gridspec_kw={"height_ratios": row_h})
    for ax in axes.flat[n:]:
        ax.set_visible(False)
    return fig, list(axes.flat[:n])


def _usable(comparisons, min_datasets: int, what: str) -> list:
    comps = [c for c in comparisons if c.matrix.n_datasets >= min_datasets
             and len(c.matrix.encoders) >= 2]
    if not comps:
        raise NothingToPlot(f"{what}: no model has at least {min_datasets} complete "
                            "dataset(s) and 2 encoders.")
    return comps


# ------------------------------------------------------------------------------ ranks
def _rank_panel(ax, comp, rec) -> None:
    r = comp.ranks
    k = len(r)
    y = np.arange(k)
    equiv = (rec.evidence["equivalent"].reindex(r.index).fillna(False).to_numpy(bool)
             if rec is not None and len(rec.evidence) else np.zeros(k, bool))
    chosen = r.index == (rec.choice if rec is not None else None)
    if np.isfinite(r["ci_low"]).any():
        ax.hlines(y, r["ci_low"], r["ci_high"], color=INK, lw=1.2)
        ax.plot(r["ci_low"], y, "|", color=INK, ms=6)
        ax.plot(r["ci_high"], y, "|", color=INK, ms=6)
    base = ~chosen
    ax.plot(r["avg_rank"][base & ~equiv], y[base & ~equiv], "o", mfc="white", mec=INK, ms=6)
    ax.plot(r["avg_rank"][base & equiv], y[base & equiv], "o", mfc=MID, mec=INK, ms=6)
    ax.plot(r["avg_rank"][chosen], y[chosen], "D", mfc=ACCENT, mec=INK, ms=8)
    right = np.fmax(r["ci_high"].fillna(r["avg_rank"]), r["avg_rank"])
    for yi, xi, v in zip(y, right, r["avg_rank"]):  # loop over encoders
        ax.annotate(f"{v:.2f}", (xi, yi), xytext=(6, 0), textcoords="offset points",
                    va="center", fontsize=7.5, color=MID)
    ax.set_yticks(y, [str(e) for e in r.index])
    ax.set_ylim(k - 0.4, -0.6)
    ax.set_xlim(0.7, k + 0.6)
    ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(integer=True))
    ax.grid(axis="x", color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    ax.set_xlabel("average rank  (1 = best; further left is better)")
    n = comp.matrix.n_datasets
    ax.set_title(f"{comp.matrix.model} · {metric_name(comp.matrix.metric)} · {n} dataset(s)"
                 + ("  (no interval: 1 dataset)" if n == 1 else ""), loc="left")


def rank_plot(comparisons, recommendations=None, *, ncols: int = 2):
    """Average rank of each encoder with its bootstrap interval, one panel per model.

    Parameters
    ----------
    comparisons : iterable of harness.stats.Comparison
    recommendations : mapping (model, metric) -> Recommendation, optional
        Marks the recommended encoder and those not significantly different from the
        best-ranked one.
    ncols : int
        Panels per row.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    NothingToPlot
        No comparison has a complete dataset and two encoders.

    References
    ----------
    Demšar (2006), JMLR 7:1-30 (average ranks); Efron & Tibshirani (1993), Ch. 13
    (percentile bootstrap).
    """
    comps = _usable(comparisons, 1, "average-rank plot")
    recs = recommendations or {}
    with rc_context(STYLE):
        heights = [0.3 * len(c.ranks) + 1.0 for c in comps]
        fig, axes = _grid(len(comps), ncols, 5.6, heights)
        for ax, comp in zip(axes, comps):  # loop over panels
            _rank_panel(ax, comp, recs.get((comp.matrix.model, comp.matrix.metric)))
        handles = [
            Line2D([], [], ls="", marker="D", mfc=ACCENT, mec=INK, ms=7, label="recommended"),
            Line2D([], [], ls="", marker="o", mfc=MID, mec=INK, ms=6,
                   label="equivalent: not significantly worse (Holm–Wilcoxon), within 1 %"),
            Line2D([], [], ls="", marker="o", mfc="white", mec=INK, ms=6,
                   label="worse than the best, or not equivalent"),
            Line2D([], [], color=INK, lw=1.2, label="95% bootstrap interval over datasets")]
        fig.legend(handles=handles, loc="outside lower center", ncols=2, frameon=False)
        fig.suptitle("Average rank of each encoder across datasets (lower is better)",
                     fontweight="bold", fontsize=10.5)
    return fig


# --------------------------------------------------------------------- critical difference
def cliques(avg_ranks: pd.Series, cd: float) -> list[tuple]:
    """Maximal runs of rank-sorted encoders whose rank spread is below ``cd``.

    Parameters
    ----------
    avg_ranks : Series
        Average rank per encoder.
    cd : float
        Critical difference; NaN gives no clique.

    Returns
    -------
    list of tuple of str
        Each run of two or more encoders not significantly different by the Nemenyi
        test (Demšar 2006, Sec. 3.2.2 and Fig. 1), none contained in another.
    """
    r = avg_ranks.sort_values(kind="stable")
    v = r.to_numpy(float)
    if not np.isfinite(cd) or len(v) < 2:
        return []
    # for each start, the last encoder within cd (searchsorted: vectorised over starts)
    ends = np.searchsorted(v, v + cd, side="left") - 1
    ends = np.maximum(ends, np.arange(len(v)))
    keep = (ends > np.arange(len(v))) & np.r_[True, ends[1:] > ends[:-1]]
    return [tuple(r.index[s:e + 1]) for s, e in zip(np.flatnonzero(keep), ends[keep])]


def _label_inches(names, fontsize: float = 8.5) -> float:
    """Rough printed width of the longest label (DejaVu Sans averages ~0.6 em a glyph)."""
    return max((len(str(n)) for n in names), default=0) * 0.6 * fontsize / 72


def _cd_panel(ax, comp, alpha: float, margin: float) -> None:
    r = comp.ranks["avg_rank"].sort_values(kind="stable")
    k, cd = len(r), comp.critical_difference
    groups = cliques(r, cd)
    half = math.ceil(k / 2)
    step, g_step = 1.0, 0.55
    g0 = -0.9
    label_top = g0 - g_step * max(len(groups), 1) - 0.5
    ax.hlines(0, 1, k, color=INK, lw=1.2)
    for t in range(1, k + 1):  # loop over tick positions
        ax.vlines(t, 0, 0.25, color=INK, lw=1)
        ax.text(t, 0.45, str(t), ha="center", va="bottom", fontsize=8.5)
    if np.isfinite(cd):
        left = 1.0
        ax.hlines(1.9, left, left + cd, color=INK, lw=2)
        ax.vlines([left, left + cd], 1.65, 2.15, color=INK, lw=1.2)
        ax.text(left + cd + 0.1, 1.9, f"critical difference = {cd:.2f} "
                f"(Nemenyi, α = {alpha:g})", va="center", fontsize=8)
    for i, (enc, v) in enumerate(r.items()):  # loop over encoders
        on_left = i < half
        depth = label_top - step * (i if on_left else k - 1 - i)
        end = 0.35 if on_left else k + 0.65
        ax.plot([v, v, end], [0, depth, depth], color=MID, lw=0.8)
        ax.plot(v, 0, "o", ms=4.5, mfc="white", mec=INK, zorder=3)
        ax.text(end + (-0.08 if on_left else 0.08), depth, f"{enc}  ({v:.2f})",
                ha="right" if on_left else "left", va="center", fontsize=8.5)
    for j, g in enumerate(groups):  # loop over cliques
        lo, hi = r[g[0]], r[g[-1]]
        ax.hlines(g0 - g_step * j, lo - 0.05, hi + 0.05, color=INK, lw=4, capstyle="round")
    bottom = label_top - step * (half - 1) - 0.6
    ax.set_ylim(bottom, 2.6)
    ax.set_xlim(0.35 - margin, k + 0.65 + margin)
    ax.axis("off")
    f = comp.friedman
    ax.set_title(f"{comp.matrix.model} · {metric_name(comp.matrix.metric)} · {comp.matrix.n_datasets} "
                 f"datasets · Friedman/Iman–Davenport p = {f.f_p_value:.3g}", loc="left")


def cd_diagram(comparisons, *, alpha: float = 0.05):
    """Critical-difference diagram of the average ranks, one panel per model.

    Encoders sit on a rank axis (1 = best, on the left); thick bars join encoders whose
    average ranks differ by less than the Nemenyi critical difference, drawn to scale
    above the axis.

    Raises
    ------
    NothingToPlot
        No comparison has two complete datasets and two encoders.

    References
    ----------
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets.
    JMLR 7:1-30, Sec. 3.2.2 (Nemenyi CD) and Fig. 1-2 (the diagram).
    """
    comps = _usable(comparisons, 2, "critical-difference diagram")
    with rc_context(STYLE):
        heights = []
        for c in comps:  # loop over panels: height grows with labels and cliques
            k = len(c.ranks)
            n_groups = len(cliques(c.ranks["avg_rank"], c.critical_difference))
            heights.append(0.2 * math.ceil(k / 2) + 0.11 * n_groups + 1.1)
        k = max(len(c.ranks) for c in comps)
        label = _label_inches([f"{e}  (10.00)" for c in comps for e in c.ranks.index]) + 0.15
        width = max(7.5, 2 * label + 0.4 * k + 1.0)
        # data units per inch of the axes (about width - 0.4 in wide), so labels fit
        per_inch = (k + 0.3) / (width - 0.4 - 2 * label)
        fig, axes = _grid(len(comps), 1, width, heights)
        for ax, comp in zip(axes, comps):
            _cd_panel(ax, comp, alpha, label * per_inch)
        fig.suptitle("Critical-difference diagram (average rank; lower is better)\n"
                     "encoders joined by a thick bar are not significantly different",
                     fontweight="bold", fontsize=10.5)
    return fig


# ---------------------------------------------------------------------------------- cost
def pareto_front(cost, score) -> np.ndarray:
    """Boolean mask of the points no other point beats on both axes (both minimised).

    A point is on the front when every cheaper-or-equal point has a worse score; ties
    in both coordinates keep all tied points.
    """
    c, s = np.asarray(cost, float), np.asarray(score, float)
    order = np.lexsort((s, c))
    best_before = np.minimum.accumulate(np.r_[np.inf, s[order]])[:-1]
    mask = np.zeros(len(c), bool)
    mask[order] = s[order] < best_before
    # an exact tie with a front point is also on the front
    front_pts = set(zip(c[mask], s[mask]))
    return mask | np.array([(ci, si) in front_pts for ci, si in zip(c, s)], bool)


# label offsets in points, tried in order: right, left, above, below, then diagonals
_OFFSETS = [(7, 0, "left", "center"), (-7, 0, "right", "center"), (0, 8, "center", "bottom"),
            (0, -8, "center", "top"), (7, 8, "left", "bottom"), (7, -8, "left", "top"),
            (-7, 8, "right", "bottom"), (-7, -8, "right", "top"), (7, 18, "left", "bottom"),
            (7, -18, "left", "top"), (-7, 18, "right", "bottom"), (-7, -18, "right", "top"),
            (0, 26, "center", "bottom"), (0, -26, "center", "top")]


def _overlap(a, b) -> float:
    w = min(a.x1, b.x1) - max(a.x0, b.x0)
    h = min(a.y1, b.y1) - max(a.y0, b.y0)
    return w * h if w > 0 and h > 0 else 0.0


def place_labels(ax, x, y, names, *, bold=None, fontsize: float = 8) -> list:
    """Label points directly, choosing for each label the first free spot around its point.

    Candidates are tried right, left, above, below, then diagonally and further out; a
    spot is free when it overlaps no placed label, no other point and stays inside the
    axes. When no spot is free the least-overlapping one is used with a leader line.
    Call after the figure's layout is final.

    Returns
    -------
    list of matplotlib.text.Annotation
    """
    fig = ax.figure
    renderer = fig.canvas.get_renderer()
    pts = ax.transData.transform(np.column_stack([x, y]))
    r = 6.0 * fig.dpi / 72  # marker half-size in pixels
    marks = [matplotlib.transforms.Bbox([[px - r, py - r], [px + r, py + r]]) for px, py in pts]
    frame = ax.get_window_extent(renderer)
    placed, out = [], []
    bold = np.zeros(len(names), bool) if bold is None else np.asarray(bold, bool)
    for i, name in enumerate(names):  # loop over labels (at most a few dozen)
        best = None
        for dx, dy, ha, va in _OFFSETS:
            t = ax.annotate(str(name), (x[i], y[i]), xytext=(dx, dy), textcoords="offset points",
                            ha=ha, va=va, fontsize=fontsize,
                            fontweight="bold" if bold[i] else "normal")
            box = t.get_window_extent(renderer)
            cost = sum(_overlap(box, b) for b in placed)
            cost += sum(_overlap(box, m) for j, m in enumerate(marks) if j != i)
            inside = frame.x0 <= box.x0 and box.x1 <= frame.x1 and frame.y0 <= box.y0 \
                and box.y1 <= frame.y1
            cost += 0 if inside else 1e6
            if best is None or cost < best[0]:
                if best is not None:
                    best[1].remove()
                best = (cost, t, box, abs(dy) > 10)
            else:
                t.remove()
            if cost == 0:
                break
        cost, t, box, far = best
        if far or cost > 0:
            t.remove()
            t = ax.annotate(t.get_text(), (x[i], y[i]), xytext=t.xyann, textcoords="offset points",
                            ha=t.get_ha(), va=t.get_va(), fontsize=fontsize,
                            fontweight=t.get_fontweight(),
                            arrowprops={"arrowstyle": "-", "color": MID, "lw": 0.6,
                                        "shrinkA": 0, "shrinkB": 4})
        t.set_bbox({"boxstyle": "square,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
        placed.append(box)
        out.append(t)
    return out


def _seconds(value, _pos) -> str:
    return f"{value:g} s"


def _cost_panel(ax, comp, cost: pd.DataFrame, model_column: str):
    r = comp.ranks
    c = cost.loc[cost[model_column] == comp.matrix.model].set_index("encoder")["total_s"]
    d = r.assign(sec=c.reindex(r.index)).dropna(subset=["sec"])
    d = d.loc[d["sec"] > 0]
    front = pareto_front(d["sec"], d["avg_rank"])
    x, y = d["sec"].to_numpy(), d["avg_rank"].to_numpy()
    if np.isfinite(d["ci_low"]).any():
        ax.vlines(x, d["ci_low"], d["ci_high"], color=MID, lw=0.9)
    f = d.loc[front].sort_values("sec")
    ax.plot(f["sec"], f["avg_rank"], drawstyle="steps-post", ls="--", color=INK, lw=1)
    ax.plot(x[~front], y[~front], "o", mfc="white", mec=INK, ms=6)
    ax.plot(x[front], y[front], "^", mfc=INK, mec=INK, ms=7)
    ax.set_xscale("log")
    span = max(x.max() / x.min(), 1.0)
    pad = max(span ** 0.25, 1.6)  # room for labels on both sides of narrow ranges
    ax.set_xlim(x.min() / pad, x.max() * pad)
    ax.xaxis.set_major_locator(matplotlib.ticker.LogLocator(subs=(1, 2, 5)))
    ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(_seconds))
    ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
    k = len(comp.ranks)
    ax.set_ylim(k + 0.6, 0.4)  # rank 1 at the top: up is better
    ax.yaxis.set_major_locator(matplotlib.ticker.MaxNLocator(integer=True))
    ax.grid(color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    ax.set_xlabel("median seconds per fold, encoder + model fit (log scale; left is cheaper)")
    ax.set_ylabel("average rank (up is better)")
    ax.set_title(f"{comp.matrix.model} · {metric_name(comp.matrix.metric)} · "
                 f"{comp.matrix.n_datasets} dataset(s)", loc="left")
    return x, y, list(d.index), front


def cost_plot(comparisons, cost: pd.DataFrame, *, model_column: str = "model",
              ncols: int = 2):
    """Average rank against median encoder+model seconds, with the Pareto front.

    Parameters
    ----------
    comparisons : iterable of harness.stats.Comparison
    cost : DataFrame
        ``harness.stats.cost_table`` output (columns ``encoder, <model_column>,
        total_s``).

    Raises
    ------
    NothingToPlot
        No comparison with two encoders and a complete dataset, or no timing.
    """
    comps = _usable(comparisons, 1, "score-versus-cost plot")
    if not np.isfinite(cost["total_s"].astype(float)).any():
        raise NothingToPlot("score-versus-cost plot: no cell recorded its timing.")
    with rc_context(STYLE):
        heights = [max(3.2, 0.26 * len(c.ranks) + 1.2) for c in comps]
        fig, axes = _grid(len(comps), ncols, 6.0, heights)
        points = [_cost_panel(ax, comp, cost, model_column) for ax, comp in zip(axes, comps)]
        handles = [Line2D([], [], ls="--", marker="^", color=INK, ms=7,
                          label="Pareto front: no encoder is both faster and better ranked"),
                   Line2D([], [], ls="", marker="o", mfc="white", mec=INK, ms=6,
                          label="dominated"),
                   Line2D([], [], color=MID, lw=0.9, label="95% bootstrap interval of the rank")]
        fig.legend(handles=handles, loc="outside lower center", ncols=3, frameon=False)
        fig.suptitle("Quality against cost: average rank versus median seconds per fold "
                     "(best corner: top left)", fontweight="bold", fontsize=10.5)
        fig.canvas.draw()  # settle the layout, then freeze it so labels can be measured
        fig.set_layout_engine("none")
        for ax, (x, y, names, front) in zip(axes, points):
            place_labels(ax, x, y, names, bold=front)
    return fig


# ------------------------------------------------------------------------------ heatmap
def shortfall_matrix(results: pd.DataFrame, model: str, *,
                     model_column: str = "model") -> pd.DataFrame:
    """Percent by which each encoder falls short of the best one on each dataset.

    Each dataset is scored on its row's ``primary_metric``; the shortfall is
    ``100 * (best - score) / |best|`` in oriented terms (0 = best; larger is worse).

    Returns
    -------
    DataFrame
        Datasets (index) x encoders (columns); NaN where a cell has no score.
    """
    ok = stats.ok_rows(results)
    ok = ok.loc[ok[model_column] == model]
    parts = []
    for metric in pd.unique(ok["primary_metric"]):  # loop over metric names
        rows = ok.loc[ok["primary_metric"] == metric]
        mean = rows.groupby(["dataset", "encoder"])[metric].mean().unstack("encoder")
        o = mean * stats.orientation(metric)
        best = o.max(axis=1)
        parts.append(o.rsub(best, axis=0).div(best.abs().where(best != 0), axis=0) * 100)
    return pd.concat(parts) if parts else pd.DataFrame()


def _heat_labels(ax, short: pd.DataFrame, norm) -> None:
    values = short.to_numpy(float)
    for (i, j), v in np.ndenumerate(values):  # loop over cells of a small summary grid
        if not np.isfinite(v):
            ax.text(j, i, "—", ha="center", va="center", fontsize=8, color=MID)
            continue
        dark = norm(v) > 0.55
        text = "best" if v <= 1e-12 else (f"{v:.1f}" if v < 10 else f"{v:.0f}")
        ax.text(j, i, text, ha="center", va="center", fontsize=7.5,
                fontweight="bold" if text == "best" else "normal",
                color="white" if dark else INK)


def relative_heatmap(results: pd.DataFrame, model: str, *, low: int = 10, high: int = 100,
                     model_column: str = "model"):
    """Per-dataset shortfall from the best encoder for one model, datasets by cardinality.

    Rows are datasets sorted by their largest categorical cardinality and labelled with
    it and its regime; columns are encoders, best on average first. Each cell prints its
    value; missing cells are hatched.

    Raises
    ------
    NothingToPlot
        The model has no scored cell, or only one encoder.
    """
    short = shortfall_matrix(results, model, model_column=model_column)
    if short.empty or short.shape[1] < 2:
        raise NothingToPlot(f"per-dataset heatmap for '{model}': needs scores of at least "
                            "2 encoders.")
    card = results.groupby("dataset")["max_cardinality"].max().reindex(short.index)
    order = card.sort_values(kind="stable").index
    short = short.loc[order, short.mean().sort_values(kind="stable").index]
    regime = stats.cardinality_regime(card.loc[order].to_numpy(float), low=low, high=high)
    labels = [f"{d}  (max {int(c) if np.isfinite(c) else '?'} levels, {g})"
              for d, c, g in zip(order, card.loc[order].to_numpy(float), regime)]
    n, k = short.shape
    with rc_context(STYLE):
        fig = _figure((max(5.5, 0.62 * k + 3.8), 0.34 * n + 2.2))
        ax = fig.subplots()
        vmax = max(float(np.nanmax(short.to_numpy(float))), 0.5)
        norm = PowerNorm(0.5, vmin=0, vmax=vmax)
        img = ax.imshow(np.ma.masked_invalid(short.to_numpy(float)), cmap="Greys", norm=norm,
                        aspect="auto")
        ax.set_facecolor("white")
        miss = np.argwhere(~np.isfinite(short.to_numpy(float)))
        for i, j in miss:  # loop over missing cells only
            ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, hatch="///",
                                       ec=LIGHT, lw=0))
        _heat_labels(ax, short, norm)
        ax.set_xticks(range(k), [str(e) for e in short.columns], rotation=35, ha="right",
                      rotation_mode="anchor")
        ax.set_yticks(range(n), labels)
        changes = np.flatnonzero(regime[1:] != regime[:-1])
        ax.hlines(changes + 0.5, -0.5, k - 0.5, color=ACCENT, lw=1.6)
        ax.tick_params(length=0)
        for s in ax.spines.values():
            s.set_visible(False)
        bar = fig.colorbar(img, ax=ax, shrink=0.8, pad=0.02)
        bar.set_label("% worse than the best encoder")
        fig.suptitle(f"{model}: % shortfall from the best encoder on each dataset\n"
                     "(lighter is better; rows by largest cardinality; lines split regimes; "
                     "— = no score)", fontweight="bold", fontsize=9.5)
    return fig


# ------------------------------------------------------------------------------ leakage
def _leak_panel(ax, part: pd.DataFrame, model: str, metric: str) -> None:
    part = part.sort_values("gap_mean", ascending=False, kind="stable")
    y = np.arange(len(part))
    ax.hlines(y, part["ci_low"], part["ci_high"], color=INK, lw=1.1)
    ref = part["reference"].to_numpy(bool)
    flag = part["flagged"].to_numpy(bool)
    other = ~ref & ~flag
    ax.plot(part["gap_mean"][ref], y[ref], "o", mfc="white", mec=INK, ms=6)
    ax.plot(part["gap_mean"][other], y[other], "^", mfc="white", mec=INK, ms=7)
    ax.plot(part["gap_mean"][flag], y[flag], "s", mfc=INK, mec=INK, ms=7)
    limit = part["reference_max"].dropna()
    if len(limit):
        ax.axvline(float(limit.iloc[0]), color=INK, ls="--", lw=1)
    ax.axvline(0, color=MID, lw=0.7)
    names = [f"{e}  [{c}]" if c else str(e) for e, c in zip(part["encoder"], part["crossfit"])]
    ax.set_yticks(y, names)
    for yi, hi, fl in zip(y, part["ci_high"].fillna(part["gap_mean"]), flag):  # per setting
        if fl:
            ax.text(hi, yi, "  flagged", va="center", fontsize=8, fontweight="bold")
    ax.set_ylim(len(part) - 0.4, -0.6)
    ax.margins(x=0.18)
    ax.grid(axis="x", color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    if stats.orientation(metric) > 0:
        label = f"optimism gap: train − test {metric_name(metric)}"
    else:
        label = f"optimism gap: (test − train) / test {metric_name(metric)}"
    ax.set_xlabel(f"{label}  (right = more optimistic)")
    ax.set_title(f"{model} · {metric_name(metric)}", loc="left")


def leakage_plot(audit: pd.DataFrame, *, models=None, model_column: str = "model",
                 ncols: int = 2):
    """Optimism gap per encoder setting with its interval; flagged settings marked.

    Parameters
    ----------
    audit : DataFrame
        ``harness.stats.leakage_audit`` output.
    models : list of str, optional
        Panel order (default: order of appearance).

    Raises
    ------
    NothingToPlot
        The audit is empty (no ok cell with a training score).

    References
    ----------
    Prokhorenkova, L. et al. (2018). CatBoost: unbiased boosting with categorical
    features. NeurIPS (target leakage without cross-fitting).
    """
    audit = audit.dropna(subset=["gap_mean"])
    if audit.empty:
        raise NothingToPlot("leakage audit plot: no cell recorded a training score.")
    keys = list(audit.groupby([model_column, "primary_metric"], sort=False).groups)
    if models is not None:
        order = {m: i for i, m in enumerate(models)}
        keys.sort(key=lambda k: (order.get(k[0], len(order)), k[1] in REGRESSION_METRICS))
    with rc_context(STYLE):
        heights = [0.3 * int(((audit[model_column] == m) & (audit["primary_metric"] == p)).sum())
                   + 1.1 for m, p in keys]
        fig, axes = _grid(len(keys), ncols, 5.8, heights)
        for ax, (model, metric) in zip(axes, keys):  # loop over panels
            part = audit.loc[(audit[model_column] == model) & (audit["primary_metric"] == metric)]
            _leak_panel(ax, part, model, metric)
        handles = [
            Line2D([], [], ls="", marker="o", mfc="white", mec=INK, ms=6,
                   label="reference (target not used, or cross-fitted)"),
            Line2D([], [], ls="", marker="^", mfc="white", mec=INK, ms=7,
                   label="uses the target without cross-fitting, not flagged"),
            Line2D([], [], ls="", marker="s", mfc=INK, mec=INK, ms=7,
                   label="flagged: interval lies right of every reference interval"),
            Line2D([], [], ls="--", color=INK, lw=1, label="largest reference upper bound")]
        fig.legend(handles=handles, loc="outside lower center", ncols=2, frameon=False)
        fig.suptitle("Leakage audit: how much better each setting scores on its training "
                     "folds than on test folds (95% corrected-t intervals)",
                     fontweight="bold", fontsize=10.5)
    return fig

"""Figures of a run: pure functions of ``harness.stats`` objects returning matplotlib figures.

Every figure reads in greyscale: marker shapes, fills and line styles carry the meaning,
never colour alone, and points are labelled directly. Each function raises
:class:`NothingToPlot` when its input holds nothing to draw (one encoder, no complete
dataset, ...); the report writer turns that into a one-line note. :func:`save` writes
a figure as PNG (150 dpi) and SVG.

Figures
-------
rank_plot         average rank per encoder with bootstrap whiskers, a panel per model
cd_diagram        Nemenyi groups of the average ranks (Demšar 2006), a panel per model
delta_plot        each candidate's effect against the reference, margin and verdicts
cost_plot         average rank against seconds per fold (log), Pareto front marked
relative_heatmap  per-dataset shortfall from the best encoder, datasets by cardinality
leakage_plot      optimism gap (train minus test) per encoder setting, flags marked
"""

from __future__ import annotations

import matplotlib
import matplotlib.ticker
import matplotlib.transforms
import numpy as np
import pandas as pd
from matplotlib import rc_context
from matplotlib.colors import PowerNorm
from matplotlib.lines import Line2D
from matplotlib.patches import Rectangle

from harness import stats
from harness.reporting._figbase import ACCENT, INK, LIGHT, MID, STYLE, NothingToPlot, grid, new_figure, save, usable
from harness.reporting._figdecision import cd_diagram, cliques, delta_plot, rank_plot
from harness.reporting.tables import metric_name

__all__ = [
    "NothingToPlot",
    "rank_plot",
    "cd_diagram",
    "delta_plot",
    "cost_plot",
    "relative_heatmap",
    "heatmap_note",
    "leakage_plot",
    "shortfall_matrix",
    "pareto_front",
    "cliques",
    "place_labels",
    "save",
]


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
_OFFSETS = [
    (7, 0, "left", "center"),
    (-7, 0, "right", "center"),
    (0, 8, "center", "bottom"),
    (0, -8, "center", "top"),
    (7, 8, "left", "bottom"),
    (7, -8, "left", "top"),
    (-7, 8, "right", "bottom"),
    (-7, -8, "right", "top"),
    (7, 18, "left", "bottom"),
    (7, -18, "left", "top"),
    (-7, 18, "right", "bottom"),
    (-7, -18, "right", "top"),
    (0, 26, "center", "bottom"),
    (0, -26, "center", "top"),
]


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
        others = [m for j, m in enumerate(marks) if j != i]
        cost, t, box, far = _best_spot(ax, (x[i], y[i]), str(name), placed + others, frame, fontsize, bold[i])
        if far or cost > 0:
            t.remove()
            t = ax.annotate(
                t.get_text(),
                (x[i], y[i]),
                xytext=t.xyann,
                textcoords="offset points",
                ha=t.get_ha(),
                va=t.get_va(),
                fontsize=fontsize,
                fontweight=t.get_fontweight(),
                arrowprops={"arrowstyle": "-", "color": MID, "lw": 0.6, "shrinkA": 0, "shrinkB": 4},
            )
        t.set_bbox({"boxstyle": "square,pad=0.1", "fc": "white", "ec": "none", "alpha": 0.8})
        placed.append(box)
        out.append(t)
    return out


def _best_spot(ax, xy, name: str, taken: list, frame, fontsize: float, bold: bool):
    """Try the spots of ``_OFFSETS`` in turn: ``(cost, annotation, box, far)`` of the first free
    one, or else of the least-overlapping one; the other trial annotations are removed."""
    renderer = ax.figure.canvas.get_renderer()
    best = None
    for dx, dy, ha, va in _OFFSETS:
        t = ax.annotate(
            name,
            xy,
            xytext=(dx, dy),
            textcoords="offset points",
            ha=ha,
            va=va,
            fontsize=fontsize,
            fontweight="bold" if bold else "normal",
        )
        box = t.get_window_extent(renderer)
        cost = sum(_overlap(box, b) for b in taken)
        inside = frame.x0 <= box.x0 and box.x1 <= frame.x1 and frame.y0 <= box.y0 and box.y1 <= frame.y1
        cost += 0 if inside else 1e6
        if best is None or cost < best[0]:
            if best is not None:
                best[1].remove()
            best = (cost, t, box, abs(dy) > 10)
        else:
            t.remove()
        if cost == 0:
            break
    return best


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
    pad = max(span**0.25, 1.6)  # room for labels on both sides of narrow ranges
    ax.set_xlim(x.min() / pad, x.max() * pad)
    ax.xaxis.set_major_locator(matplotlib.ticker.LogLocator(subs=(1, 2, 5)))
    ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(_seconds))
    ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
    k = len(comp.ranks)
    ax.set_ylim(k + 0.6, 0.4)  # rank 1 at the top: up is better
    ax.yaxis.set_major_locator(matplotlib.ticker.MaxNLocator(integer=True))
    ax.grid(color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    ax.set_xlabel("seconds per fold: median encoding + median model fit (log scale; left is cheaper)")
    ax.set_ylabel("average rank (up is better)")
    ax.set_title(
        f"{comp.matrix.model} · {metric_name(comp.matrix.metric)} · {comp.matrix.n_datasets} dataset(s)", loc="left"
    )
    return x, y, list(d.index), front


def cost_plot(comparisons, cost: pd.DataFrame, *, model_column: str = "model", ncols: int = 2):
    """Average rank against seconds per fold (``total_s``), with the Pareto front.

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
    comps = usable(comparisons, 1, "score-versus-cost plot")
    if not np.isfinite(cost["total_s"].astype(float)).any():
        raise NothingToPlot("score-versus-cost plot: no cell recorded its timing.")
    with rc_context(STYLE):
        heights = [max(3.2, 0.26 * len(c.ranks) + 1.2) for c in comps]
        fig, axes = grid(len(comps), ncols, 6.0, heights)
        points = [_cost_panel(ax, comp, cost, model_column) for ax, comp in zip(axes, comps)]
        handles = [
            Line2D(
                [],
                [],
                ls="--",
                marker="^",
                color=INK,
                ms=7,
                label="Pareto front: no encoder is both faster and better ranked",
            ),
            Line2D([], [], ls="", marker="o", mfc="white", mec=INK, ms=6, label="dominated"),
            Line2D([], [], color=MID, lw=0.9, label="95% bootstrap interval of the rank"),
        ]
        fig.legend(handles=handles, loc="outside lower center", ncols=3, frameon=False)
        fig.suptitle(
            "Quality against cost: average rank versus seconds per fold (best corner: top left)",
            fontweight="bold",
            fontsize=10.5,
        )
        fig.canvas.draw()  # settle the layout, then freeze it so labels can be measured
        fig.set_layout_engine("none")
        for ax, (x, y, names, front) in zip(axes, points):
            place_labels(ax, x, y, names, bold=front)
    return fig


# ------------------------------------------------------------------------------ heatmap
def shortfall_matrix(results: pd.DataFrame, model: str, *, eligible=None, model_column: str = "model") -> pd.DataFrame:
    """Percent by which each encoder falls short of the best eligible one on each dataset.

    Each dataset is scored on its row's ``primary_metric``; the shortfall is
    ``100 * (best - score) / |best|`` in oriented terms (0 = best; larger is worse), where
    ``best`` is the best of the ``eligible`` encoders (default: all). An excluded setting
    that scores better than every eligible one gets a negative value.

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
        cols = [c for c in o.columns if eligible is None or c in set(eligible)] or list(o.columns)
        best = o[cols].max(axis=1)
        parts.append(o.rsub(best, axis=0).div(best.abs().where(best != 0), axis=0) * 100)
    return pd.concat(parts) if parts else pd.DataFrame()


def _heat_labels(ax, short: pd.DataFrame, norm) -> None:
    values = short.to_numpy(float)
    for (i, j), v in np.ndenumerate(values):  # loop over cells of a small summary grid
        if not np.isfinite(v):
            ax.text(j, i, "—", ha="center", va="center", fontsize=8, color=MID)
            continue
        dark = norm(max(v, 0.0)) > 0.55
        text = "best" if abs(v) <= 1e-12 else (f"{v:.1f}" if abs(v) < 10 else f"{v:.0f}")
        ax.text(
            j,
            i,
            text,
            ha="center",
            va="center",
            fontsize=7.5,
            fontweight="bold" if text == "best" else "normal",
            color="white" if dark else INK,
        )


def relative_heatmap(
    results: pd.DataFrame, model: str, *, low: int = 10, high: int = 100, eligible=None, model_column: str = "model"
):
    """Per-dataset shortfall from the best eligible encoder for one model, by cardinality.

    Rows are datasets sorted by their largest categorical cardinality and labelled with
    it and its regime; columns are encoders, best on average first. Each cell prints its
    value; missing cells are hatched.

    Raises
    ------
    NothingToPlot
        The model has no scored cell, or only one encoder.
    """
    short = shortfall_matrix(results, model, eligible=eligible, model_column=model_column)
    if short.empty or short.shape[1] < 2:
        raise NothingToPlot(f"per-dataset heatmap for '{model}': needs scores of at least 2 encoders.")
    card = results.groupby("dataset")["max_cardinality"].max().reindex(short.index)
    order = card.sort_values(kind="stable").index
    short = short.loc[order, short.mean().sort_values(kind="stable").index]
    regime = stats.cardinality_regime(card.loc[order].to_numpy(float), low=low, high=high)
    labels = [
        f"{d}  (max {int(c) if np.isfinite(c) else '?'} levels, {g})"
        for d, c, g in zip(order, card.loc[order].to_numpy(float), regime)
    ]
    n, k = short.shape
    with rc_context(STYLE):
        fig = new_figure((max(5.5, 0.62 * k + 3.8), 0.34 * n + 2.2))
        ax = fig.subplots()
        vmax = max(float(np.nanmax(short.to_numpy(float))), 0.5)
        norm = PowerNorm(0.5, vmin=0, vmax=vmax)
        shown = np.ma.masked_invalid(short.to_numpy(float).clip(min=0))
        img = ax.imshow(shown, cmap="Greys", norm=norm, aspect="auto")
        ax.set_facecolor("white")
        miss = np.argwhere(~np.isfinite(short.to_numpy(float)))
        for i, j in miss:  # loop over missing cells only
            ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, hatch="///", ec=LIGHT, lw=0))
        _heat_labels(ax, short, norm)
        names = [str(e) if eligible is None or e in set(eligible) else f"{e} (excluded)" for e in short.columns]
        ax.set_xticks(range(k), names, rotation=35, ha="right", rotation_mode="anchor")
        ax.set_yticks(range(n), labels)
        changes = np.flatnonzero(regime[1:] != regime[:-1])
        ax.hlines(changes + 0.5, -0.5, k - 0.5, color=ACCENT, lw=1.6)
        ax.tick_params(length=0)
        for s in ax.spines.values():
            s.set_visible(False)
        bar = fig.colorbar(img, ax=ax, shrink=0.8, pad=0.02)
        bar.set_label("% worse than the best eligible encoder")
        fig.suptitle(
            f"{model}: % shortfall from the best eligible encoder on each dataset\n(lighter is better; — = no score)",
            fontweight="bold",
            fontsize=9.5,
        )
        fig.supxlabel(heatmap_note(low, high, lines=len(changes) > 0), fontsize=8, color=MID)
    return fig


def heatmap_note(low: int, high: int, *, lines: bool = True) -> str:
    """The heatmap's footnote: how rows are ordered and what a horizontal line means."""
    text = "Rows are ordered by each dataset's largest number of levels in one categorical column, fewest at the top."
    if lines:
        text += (
            f"\nA horizontal line separates datasets with fewer than {low}, {low} to {high}, "
            f"and more than {high} levels."
        )
    return text


# ------------------------------------------------------------------------------ leakage
def _leak_panel(ax, part: pd.DataFrame, model: str) -> None:
    part = part.sort_values(["encoder", "gap_diff"], ascending=[True, False], kind="stable")
    y = np.arange(len(part))
    ax.hlines(y, part["gap_low"], part["gap_high"], color=INK, lw=1.1)
    flag = part["flagged"].to_numpy(bool)
    ax.plot(part["gap_diff"][~flag], y[~flag], "o", mfc="white", mec=INK, ms=6, ls="")
    ax.plot(part["gap_diff"][flag], y[flag], "s", mfc=INK, mec=INK, ms=7, ls="")
    ax.axvline(0, color=INK, ls="--", lw=1)
    ax.set_yticks(y, [f"{e} vs {t} · {d}" for e, t, d in zip(part["encoder"], part["twin"], part["dataset"])])
    for yi, hi, fl, eff in zip(y, part["gap_high"], flag, part["test_effect"]):  # per row
        if fl:
            ax.text(hi, yi, f"  flagged (test {100 * eff:+.1f} %)", va="center", fontsize=7.5, fontweight="bold")
    ax.set_ylim(len(part) - 0.4, -0.6)
    ax.margins(x=0.25)
    ax.grid(axis="x", color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    ax.set_xlabel("optimism gap minus its cross-fitted twin's  (right = more optimistic)")
    ax.set_title(model, loc="left")


def leakage_plot(audit: pd.DataFrame, *, models=None, ncols: int = 1):
    """Per dataset, each setting's optimism gap minus its cross-fitted twin's, with its
    corrected-t bounds; flagged rows (gap larger and test score worse) are filled squares.

    Raises
    ------
    NothingToPlot
        The audit is empty (no target-statistics setting with a cross-fitted twin).

    References
    ----------
    Prokhorenkova, L. et al. (2018). CatBoost: unbiased boosting with categorical
    features. NeurIPS (target leakage without cross-fitting).
    """
    audit = audit.dropna(subset=["gap_diff"])
    if audit.empty:
        raise NothingToPlot(
            "leakage audit plot: no target-statistics setting has a cross-fitted twin with training scores."
        )
    keys = list(pd.unique(audit["model"]))
    if models is not None:
        keys = [m for m in models if m in keys] + [m for m in keys if m not in models]
    with rc_context(STYLE):
        heights = [0.28 * int((audit["model"] == m).sum()) + 1.1 for m in keys]
        fig, axes = grid(len(keys), ncols, 7.5, heights)
        for ax, model in zip(axes, keys):  # loop over panels
            _leak_panel(ax, audit.loc[audit["model"] == model], model)
        handles = [
            Line2D([], [], ls="", marker="o", mfc="white", mec=INK, ms=6, label="not flagged"),
            Line2D(
                [],
                [],
                ls="",
                marker="s",
                mfc=INK,
                mec=INK,
                ms=7,
                label="flagged: larger gap and worse test score, both beyond the bounds",
            ),
        ]
        fig.legend(handles=handles, loc="outside lower center", ncols=2, frameon=False)
        fig.suptitle(
            "Leakage audit: each target-statistics setting against its k-fold twin, per dataset",
            fontweight="bold",
            fontsize=10.5,
        )
    return fig

"""Figures of the decision and of the ranks: effects against the reference, average ranks,
Nemenyi groups. Greyscale-readable: marker shapes and fills carry every meaning."""

from __future__ import annotations

import matplotlib.ticker
import numpy as np
import pandas as pd
from matplotlib import rc_context
from matplotlib.lines import Line2D

from harness.reporting._figbase import INK, LIGHT, MID, STYLE, NothingToPlot, grid, usable
from harness.reporting.tables import metric_name

__all__ = ["rank_plot", "cd_diagram", "cliques", "delta_plot", "VERDICT_MARKERS"]

#: verdict -> (marker, face colour, size): distinct shapes, so no colour is needed
VERDICT_MARKERS = {
    "superior": ("^", INK, 8),
    "equivalent": ("D", MID, 7),
    "non-inferior": ("o", INK, 7),
    "inferior": ("v", "white", 8),
    "inconclusive": ("o", "white", 7),
}


# ------------------------------------------------------------------------------ effects
def _delta_panel(ax, d) -> None:
    t = d.table.drop(index=d.reference).sort_values("effect", kind="stable", na_position="last")
    y = np.arange(len(t))
    eff = 100 * t["effect"].to_numpy(float)
    lo = 100 * t["lower"].replace(-np.inf, np.nan).to_numpy(float)
    hi = 100 * t["upper"].replace(np.inf, np.nan).to_numpy(float)
    # the window shows every estimate and the margin; longer bounds end in an arrow
    m100 = 100 * d.rule.margin
    span = max(np.nanmax(np.abs(eff)) if np.isfinite(eff).any() else 0.0, 4 * m100)
    left, right = -1.15 * span, 1.15 * span
    a, b = np.where(np.isfinite(lo), lo, eff), np.where(np.isfinite(hi), hi, eff)
    ax.hlines(y, np.clip(a, left, right), np.clip(b, left, right), color=INK, lw=1.2)
    ax.plot(np.full((a < left).sum(), left), y[a < left], "<", color=INK, ms=5, ls="")
    ax.plot(np.full((b > right).sum(), right), y[b > right], ">", color=INK, ms=5, ls="")
    ax.set_xlim(left * 1.03, right * 1.03)
    unbounded = ~(np.isfinite(lo) & np.isfinite(hi))
    if unbounded.any() and not unbounded.all():
        for yi, e in zip(y[unbounded], eff[unbounded]):  # rows without a finite bound
            ax.annotate(
                "no bound", (e, yi), xytext=(0, 7), textcoords="offset points", ha="center", fontsize=7, color=MID
            )
    for verdict, (mk, face, ms) in VERDICT_MARKERS.items():  # loop over verdict kinds
        sel = (t["verdict"] == verdict).to_numpy()
        ax.plot(eff[sel], y[sel], mk, mfc=face, mec=INK, ms=ms, ls="")
    ax.axvline(-100 * d.rule.margin, color=INK, ls="--", lw=1)
    ax.axvline(0, color=MID, lw=0.8)
    names = [
        f"{e}{'  (chosen)' if c else ''}{'' if ok else '  (excluded: leaky)'}"
        for e, c, ok in zip(t.index, t["chosen"], t["eligible"])
    ]
    ax.set_yticks(y, names)
    ax.set_ylim(len(t) - 0.4, -0.6)
    ax.grid(axis="x", color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    n = d.n_datasets if d.method == "datasets" else int(t["n_folds"].max())
    unit = "datasets" if d.method == "datasets" else "folds of one dataset"
    ax.set_xlabel(f"effect against {d.reference}, %  (right = better)")
    note = "\n(no bounds: too few datasets for any test to reject)" if unbounded.all() else ""
    ax.set_title(f"{d.model} · {metric_name(d.metric)} · {n} {unit}{note}", loc="left")


def delta_plot(decisions, *, ncols: int = 1):
    """Each candidate's effect against the reference with its one-sided bounds, per model.

    The dashed line is the non-inferiority margin; marker shapes give the verdict
    (:data:`VERDICT_MARKERS`); the chosen encoder is named so.

    Raises
    ------
    NothingToPlot
        No decision has a candidate besides its reference.
    """
    ds = [d for d in decisions if len(d.table) > 1]
    if not ds:
        raise NothingToPlot("decision effects: no model has a candidate besides its reference.")
    with rc_context(STYLE):
        fig, axes = grid(len(ds), ncols, 7.5, [0.32 * len(d.table) + 1.1 for d in ds])
        for ax, d in zip(axes, ds):  # loop over panels
            _delta_panel(ax, d)
        handles = [
            Line2D([], [], ls="", marker=mk, mfc=face, mec=INK, ms=ms, label=v)
            for v, (mk, face, ms) in VERDICT_MARKERS.items()
        ]
        handles.append(Line2D([], [], ls="--", color=INK, lw=1, label="margin"))
        fig.legend(handles=handles, loc="outside lower center", ncols=6, frameon=False)
        fig.suptitle(
            "Effect against the reference\nsimultaneous one-sided bounds (arrow: "
            "the bound runs off the window)\ndashed line: the margin",
            fontweight="bold",
            fontsize=10.5,
        )
    return fig


# -------------------------------------------------------------------------------- ranks
def _rank_panel(ax, comp, decision) -> None:
    r = comp.ranks
    k = len(r)
    y = np.arange(k)
    ref = r.index == (decision.reference if decision is not None else None)
    chosen = r.index.isin(list(decision.choice) if decision is not None else []) & ~ref
    if np.isfinite(r["ci_low"]).any():
        ax.hlines(y, r["ci_low"], r["ci_high"], color=INK, lw=1.2)
    other = ~ref & ~chosen
    ax.plot(r["avg_rank"][other], y[other], "o", mfc="white", mec=INK, ms=6, ls="")
    ax.plot(r["avg_rank"][ref], y[ref], "s", mfc=MID, mec=INK, ms=7, ls="")
    ax.plot(r["avg_rank"][chosen], y[chosen], "D", mfc=INK, mec=INK, ms=6, ls="")
    for yi, v in zip(y, r["avg_rank"]):  # loop over encoders
        ax.annotate(f"{v:.2f}", (v, yi), xytext=(0, 6), textcoords="offset points", ha="center", fontsize=7, color=MID)
    ax.set_yticks(y, [str(e) for e in r.index])
    ax.set_ylim(k - 0.4, -0.7)
    ax.set_xlim(0.7, k + 0.3)
    ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(integer=True))
    ax.grid(axis="x", color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    ax.set_xlabel("average rank  (1 = best; further left is better)")
    n = comp.matrix.n_datasets
    ax.set_title(
        f"{comp.matrix.model} · {metric_name(comp.matrix.metric)} · {n} dataset(s)"
        + ("" if np.isfinite(r["ci_low"]).any() else "\nno interval: too few datasets for its coverage"),
        loc="left",
    )


def rank_plot(comparisons, decisions=None, *, ncols: int = 1):
    """Average rank of each encoder with its bootstrap interval, one panel per model.

    The reference and the choice of the decision are marked; the figure makes no claim
    of equivalence (that is the decision's, in the effects figure).

    Raises
    ------
    NothingToPlot
        No comparison has a complete dataset and two encoders.

    References
    ----------
    Demšar (2006), JMLR 7:1-30 (average ranks); Hesterberg (2015), The American
    Statistician 69(4) (expanded percentile bootstrap).
    """
    comps = usable(comparisons, 1, "average-rank plot")
    decs = decisions or {}
    with rc_context(STYLE):
        fig, axes = grid(len(comps), ncols, 6.5, [0.3 * len(c.ranks) + 1.2 for c in comps])
        for ax, comp in zip(axes, comps):  # loop over panels
            _rank_panel(ax, comp, decs.get((comp.matrix.model, comp.matrix.metric)))
        handles = [
            Line2D([], [], ls="", marker="s", mfc=MID, mec=INK, ms=7, label="reference"),
            Line2D([], [], ls="", marker="D", mfc=INK, mec=INK, ms=6, label="chosen (when not the reference)"),
            Line2D([], [], ls="", marker="o", mfc="white", mec=INK, ms=6, label="other"),
            Line2D([], [], color=INK, lw=1.2, label="95% bootstrap interval over datasets"),
        ]
        fig.legend(handles=handles, loc="outside lower center", ncols=2, frameon=False)
        fig.suptitle("Average rank of each encoder across datasets (lower is better)", fontweight="bold", fontsize=10.5)
    return fig


# ----------------------------------------------------------------------- Nemenyi groups
def cliques(avg_ranks: pd.Series, cd: float) -> list[tuple]:
    """Maximal runs of rank-sorted encoders whose rank spread is below ``cd``.

    Returns
    -------
    list of tuple of str
        Each run of two or more encoders not separated by the Nemenyi test (Demšar 2006,
        Sec. 3.2.2), none contained in another.
    """
    r = avg_ranks.sort_values(kind="stable")
    v = r.to_numpy(float)
    if not np.isfinite(cd) or len(v) < 2:
        return []
    ends = np.searchsorted(v, v + cd, side="left") - 1
    ends = np.maximum(ends, np.arange(len(v)))
    keep = (ends > np.arange(len(v))) & np.r_[True, ends[1:] > ends[:-1]]
    return [tuple(r.index[s : e + 1]) for s, e in zip(np.flatnonzero(keep), ends[keep])]


def group_letters(avg_ranks: pd.Series, cd: float) -> pd.Series:
    """Letters per encoder: two encoders share a letter when no test separates them."""
    r = avg_ranks.sort_values(kind="stable")
    groups = cliques(r, cd)
    letters = {e: "" for e in r.index}
    singles = [e for e in r.index if not any(e in g for g in groups)]
    runs = sorted(groups + [(e,) for e in singles], key=lambda g: r[g[0]])
    for i, g in enumerate(runs):  # loop over groups
        for e in g:
            letters[e] += "abcdefghijklmnopqrstuvwxyz"[i % 26]
    return pd.Series(letters).reindex(r.index)


def _cd_panel(ax, comp, alpha: float) -> None:
    r = comp.ranks["avg_rank"].sort_values(kind="stable")
    k, cd = len(r), comp.critical_difference
    letters = group_letters(r, cd)
    y = np.arange(k)
    reach = float(np.nanmax(r + cd)) if np.isfinite(cd) else float(k)
    for yi, v in zip(y, r):  # loop over encoders: reach of the critical difference
        if np.isfinite(cd):
            ax.fill_betweenx([yi - 0.28, yi + 0.28], v, v + cd, color=LIGHT, lw=0)
    ax.plot(r, y, "o", mfc=INK, mec=INK, ms=5, ls="")
    for yi, e in zip(y, r.index):  # loop over encoders
        ax.text(reach + 0.2, yi, letters[e], va="center", ha="left", fontsize=9, family="monospace", fontweight="bold")
    ax.set_yticks(y, [f"{e}  ({v:.2f})" for e, v in r.items()])
    ax.set_ylim(k - 0.4, -0.6)
    ax.set_xlim(0.6, reach + 0.8)
    ax.xaxis.set_major_locator(matplotlib.ticker.MaxNLocator(integer=True))
    ax.grid(axis="x", color=LIGHT, lw=0.4, ls=":")
    ax.set_xlabel(f"average rank (lower is better); grey band = critical difference {cd:.2f} (Nemenyi, α = {alpha:g})")
    f = comp.friedman
    p = f.p
    ptext = "p < 0.0001" if p < 1e-4 else f"p = {p:.3g}"
    kind = "exact permutation" if f.perm_exact else "permutation" if np.isfinite(f.perm_p) else "Iman–Davenport"
    ax.set_title(
        f"{comp.matrix.model} · {metric_name(comp.matrix.metric)} · "
        f"{comp.matrix.n_datasets} datasets\nFriedman test, {kind} {ptext}",
        loc="left",
    )


def cd_diagram(comparisons, *, alpha: float = 0.05):
    """Nemenyi groups of the average ranks: a dot per encoder, its critical-difference
    reach as a grey band, and group letters (encoders sharing a letter are not separated).

    Raises
    ------
    NothingToPlot
        No comparison has two complete datasets and two encoders.

    References
    ----------
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets.
    JMLR 7:1-30, Sec. 3.2.2 (Nemenyi critical difference); letter display: Piepho, H.-P.
    (2004). Journal of Computational and Graphical Statistics 13(2):456-466 [recalled].
    """
    comps = usable(comparisons, 2, "critical-difference diagram")
    with rc_context(STYLE):
        fig, axes = grid(len(comps), 1, 7.0, [0.3 * len(c.ranks) + 1.4 for c in comps])
        for ax, comp in zip(axes, comps):  # loop over panels
            _cd_panel(ax, comp, alpha)
        fig.suptitle(
            "Which average ranks the Nemenyi test separates\n(a shared letter: not "
            "separated, which is not a claim of equivalence)",
            fontweight="bold",
            fontsize=10,
        )
    return fig

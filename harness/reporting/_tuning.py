"""The tuning section: does each model's choice survive tuning?

The decision rule of the report is applied to each tuning regime on its own rows (the
outer folds are the same in every regime, so the regimes are paired cell by cell). Per
model, a table lists the choice and each encoder's verdict under every regime, a sentence
says whether the choice changes, a figure draws each encoder's effect per regime, and a
cost table gives each regime's time per cell with the tuning time apart.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib import rc_context
from matplotlib.lines import Line2D

from harness import stats
from harness.reporting._blocks import figure, pct, table
from harness.reporting._figbase import INK, LIGHT, MID, STYLE, NothingToPlot, grid
from harness.reporting._html import Heading, Para
from harness.reporting.tables import metric_name
from harness.schema import OK
from harness.tuning import DEFAULT_REGIME, REGIMES

__all__ = ["regime_decisions", "tuning_section", "regime_plot", "regime_cost"]

#: regime -> (marker, face colour): shapes and fills, readable in greyscale
REGIME_MARKERS = {"defaults": ("o", "white"), "tuned-model": ("s", INK), "tuned-both": ("D", MID)}


def _regimes(all_results: pd.DataFrame | None) -> list[str]:
    if all_results is None or "regime" not in all_results:
        return []
    present = set(all_results["regime"].dropna())
    return [r for r in REGIMES if r in present]


def regime_decisions(run, a) -> dict:
    """``{(model, regime): Decision}`` on the headline metric, for models with tuned rows."""
    out = {}
    rows = run.all_results
    metric = a.metrics[0]
    for model in a.models:
        mine = rows[rows["model"] == model]
        regimes = [r for r in _regimes(mine)]
        if len(regimes) < 2:
            continue
        for r in regimes:
            out[(model, r)] = stats.decide(mine[mine["regime"] == r], model, metric, a.rule)
    return out


def _verdicts(d: stats.Decision) -> str:
    t = d.table.drop(index=d.reference, errors="ignore")
    return "; ".join(f"{e}: {v} ({pct(x)})" for e, v, x in zip(t.index, t["verdict"], t["effect"]))


def _choice_row(d: stats.Decision) -> dict:
    chosen = " or ".join(d.choice) or "none"
    row = d.table.loc[d.choice[0]] if d.choice and d.choice[0] in d.table.index else None
    switch = d.switch
    return {
        "choice": chosen,
        "switch from reference": "yes" if switch else "no",
        "effect of choice": pct(row["effect"]) if switch and row is not None else "—",
        "verdicts (effect against the reference)": _verdicts(d),
    }


def _decision_frame(decs: dict) -> pd.DataFrame:
    rows = []
    for (model, regime), d in decs.items():
        rows.append(
            {"model": model, "regime": regime, "reference": d.reference, "datasets": d.n_datasets, **_choice_row(d)}
        )
    return pd.DataFrame(rows)


def _change_sentence(model: str, decs: dict, regimes: list) -> str:
    per = {r: decs[(model, r)] for r in regimes if (model, r) in decs}
    choices = {r: " or ".join(d.choice) or "none" for r, d in per.items()}
    listed = "; ".join(f"{r}: **{c}**" for r, c in choices.items())
    moved = [e for e in _encoders(per) if len({_verdict(d, e) for d in per.values()}) > 1]
    tail = (
        ""
        if not moved
        else " Verdicts that differ between regimes: "
        + "; ".join(
            f"{e} " + ", ".join(f"{_verdict(d, e)} ({_effect(d, e)}) under {r}" for r, d in per.items()) for e in moved
        )
        + "."
    )
    if len(set(choices.values())) == 1:
        return f"**{model}**: the choice is the same under every regime ({listed}).{tail}"
    return (
        f"**{model}**: the choice **changes** with tuning ({listed}). A default chosen without "
        f"tuning does not carry over to a tuned model; cite the regime the team will deploy.{tail}"
    )


def _effect(d: stats.Decision, encoder: str) -> str:
    return pct(d.table.loc[encoder, "effect"]) if encoder in d.table.index else "n/a"


def _encoders(per: dict) -> list:
    names = []
    for d in per.values():
        names += [e for e in d.table.index if e not in names and e != d.reference]
    return names


def _verdict(d: stats.Decision, encoder: str) -> str:
    return str(d.table.loc[encoder, "verdict"]) if encoder in d.table.index else "absent"


def regime_cost(all_results: pd.DataFrame) -> pd.DataFrame:
    """Per model and regime: median seconds per cell, the tuning share, the multiplier."""
    ok = all_results[all_results["status"] == OK].copy()
    if ok.empty:
        return pd.DataFrame()
    parts = ["encoder_fit_s", "encoder_transform_s", "model_fit_s", "predict_s", "score_s"]
    ok["final_s"] = ok[parts].fillna(0.0).sum(axis=1)
    ok["cell_s"] = ok["final_s"] + ok["tune_s"].fillna(0.0)
    g = ok.groupby(["model", "regime"], sort=False)
    out = g.agg(
        cells=("cell_id", "size"),
        tune_s=("tune_s", "median"),
        final_s=("final_s", "median"),
        cell_s=("cell_s", "median"),
        total_s=("cell_s", "sum"),
    ).reset_index()
    out["order"] = out["regime"].map({r: i for i, r in enumerate(REGIMES)})
    out = out.sort_values(["model", "order"], kind="stable").drop(columns="order").reset_index(drop=True)
    base = out[out["regime"] == DEFAULT_REGIME].set_index("model")["cell_s"]
    out["multiplier"] = [
        c / base[m] if m in base.index and base[m] > 0 else np.nan for m, c in zip(out["model"], out["cell_s"])
    ]
    return out


def _space_text(run) -> str:
    t = run.manifest.tuning
    regimes = _regimes(run.all_results)
    kinds = ("models", "encoders") if "tuned-both" in regimes else ("models",)  # tuned-model keeps encoders fixed
    spaces = [
        f"{kind[:-1]} {label}: " + ", ".join(f"{k} {_fmt_dim(v)}" for k, v in search.items())
        for kind in kinds
        for label, search in run.manifest.search_spaces(kind).items()
    ]
    paired = (
        " The outer folds are those of the untuned cells, so the regimes are paired cell by cell."
        if DEFAULT_REGIME in regimes
        else ""
    )
    method = {"random": "random search", "halving": "successive halving (a third kept per round)"}.get(
        t.method, t.method
    )
    return (
        f"Each tuned cell searched {t.budget} candidates by {method}, scored by "
        f"{t.inner_folds}-fold cross-validation inside the outer training fold; encoder and "
        "model were refitted on every inner training split, so no target statistic saw the targets "
        "of its validation rows, and the winner was refitted on the whole outer training fold and "
        f"scored on the outer test fold.{paired} Search spaces: " + ("; ".join(spaces) or "none recorded") + "."
    )


def _fmt_dim(spec) -> str:
    if isinstance(spec, list):
        return "in " + json.dumps(spec)
    return f"from {spec.get('low')} to {spec.get('high')} ({spec.get('scale', 'linear')} scale)"


def tuning_section(a, root: Path) -> list:
    """The section, or nothing when the run has a single regime."""
    run = a.run
    regimes = _regimes(run.all_results)
    if regimes in ([], [DEFAULT_REGIME]):
        return []
    out = [Heading("Does the choice survive tuning?", 2, "tuning"), Para(_space_text(run))]
    if len(regimes) < 2:
        out.append(
            Para(
                f"This run has only the {regimes[0]} regime, so there is nothing to compare the "
                'choice with; add "defaults" to tuning.regimes to see whether tuning changes it.'
            )
        )
    decs = regime_decisions(run, a)
    frame = _decision_frame(decs)
    if len(frame):
        out.append(
            table(
                frame,
                root,
                "tuning_decisions",
                f"The decision rule applied to each regime on its own rows ({metric_name(a.metrics[0])}; "
                "reference and margin as in the answer).",
            )
        )
        out += [Para(_change_sentence(m, decs, regimes)) for m in dict.fromkeys(k[0] for k in decs)]
        out += figure(
            lambda: regime_plot(decs),
            root,
            "tuning_effects",
            "Each encoder's effect against the reference under each regime, with its "
            "one-sided bound; shapes mark the regime.",
            "Dot plot of encoder effects per tuning regime.",
        )
    cost = regime_cost(run.all_results)
    if len(cost):
        out.append(
            table(
                cost,
                root,
                "tuning_cost",
                "Seconds per cell (median) by regime: tune_s is the search (every candidate on "
                "every inner fold), final_s the refit and scoring of the winner, multiplier the "
                "cell time against the untuned cell of the same model.",
            )
        )
    return out


def regime_plot(decs: dict):
    """One panel per model: each encoder's effect per regime, with its lower bound."""
    models = list(dict.fromkeys(m for m, _ in decs))
    if not models:
        raise NothingToPlot("tuning effects: no model ran under two regimes.")
    sizes = []
    for m in models:
        per = {r: d for (mm, r), d in decs.items() if mm == m}
        sizes.append(max(1, len(_encoders(per))) * 0.34 + 0.9)
    with rc_context(STYLE):
        fig, axes = grid(len(models), 2, 4.6, sizes)
        for ax, m in zip(axes, models):
            _regime_panel(ax, m, {r: d for (mm, r), d in decs.items() if mm == m})
        shown = [r for r in REGIMES if any(rr == r for _, rr in decs)]
        handles = [
            Line2D([], [], marker=REGIME_MARKERS[r][0], mfc=REGIME_MARKERS[r][1], mec=INK, ls="", ms=6) for r in shown
        ]
        fig.legend(
            handles,
            shown,
            loc="outside lower center",
            ncols=len(shown),
            frameon=False,
            title="tuning regime (line: to the one-sided lower bound)",
            title_fontsize=8,
        )
    return fig


def _regime_panel(ax, model: str, per: dict) -> None:
    encoders = _encoders(per)
    y = np.arange(len(encoders), dtype=float)
    offsets = np.linspace(-0.22, 0.22, len(per)) if len(per) > 1 else [0.0]
    margin = next(iter(per.values())).rule.margin
    for off, (regime, d) in zip(offsets, per.items()):
        t = d.table.reindex(encoders)
        eff = 100 * t["effect"].to_numpy(float)
        lo = 100 * t["lower"].replace(-np.inf, np.nan).to_numpy(float)
        yy = y + off
        ax.hlines(yy, np.where(np.isfinite(lo), lo, eff), eff, color=MID, lw=1)
        mk, face = REGIME_MARKERS.get(regime, ("o", MID))
        ax.plot(eff, yy, mk, mfc=face, mec=INK, ms=6, ls="")
    ax.axvline(-100 * margin, color=INK, ls="--", lw=1)
    ax.axvline(0, color=MID, lw=0.8)
    ax.set_yticks(y, encoders)
    ax.set_ylim(len(encoders) - 0.5, -0.5)
    ax.grid(axis="x", color=LIGHT, lw=0.6)
    ax.set_axisbelow(True)
    ref = next(iter(per.values())).reference
    ax.set_xlabel(f"effect against {ref}, % (right = better; dashed: margin)")
    ax.set_title(f"{model}", loc="left")

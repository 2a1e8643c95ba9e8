"""Tables of a run: pure functions of the results table (or of ``harness.stats`` objects).

Each ``*_table`` function returns a numeric ``DataFrame`` (what the CSV export holds);
:func:`display` formats one for reading and :func:`write_table` writes the CSV and a
LaTeX ``booktabs`` version. Nothing here reads the store or draws.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from harness import stats

__all__ = [
    "dataset_means_table",
    "means_wide",
    "rank_table",
    "robustness_table",
    "robustness_wide",
    "cost_summary",
    "leakage_table",
    "status_table",
    "scrub_error",
    "fmt_interval",
    "metric_name",
    "display",
    "to_latex",
    "write_table",
]

METRIC_NAMES = {"roc_auc": "ROC AUC", "log_loss": "log loss", "accuracy": "accuracy",
                "balanced_accuracy": "balanced accuracy", "rmse": "RMSE", "mae": "MAE",
                "r2": "R²", "primary": "primary metric (per dataset)"}
NOT_RUN = ("failed", "timeout", "out-of-memory", "skipped", "not-applicable")


def metric_name(metric: str) -> str:
    """Readable name of a metric column (``roc_auc`` -> ``ROC AUC``)."""
    return METRIC_NAMES.get(metric, metric)


def fmt_interval(mean, low, high, digits: int = 3) -> str:
    """``"0.812 [0.790, 0.834]"``; the interval is left out when it is NaN."""
    if not np.isfinite(mean):
        return "n/a"
    if not (np.isfinite(low) and np.isfinite(high)):
        return f"{mean:.{digits}f}"
    return f"{mean:.{digits}f} [{low:.{digits}f}, {high:.{digits}f}]"


# ------------------------------------------------------------------------ main results
def dataset_means_table(results: pd.DataFrame, metric: str, *, alpha: float = 0.05,
                        model_column: str = "model") -> pd.DataFrame:
    """Mean of ``metric`` per dataset, encoder and model with its corrected-t interval.

    Returns
    -------
    DataFrame
        Columns ``dataset, model, encoder, metric, mean, ci_low, ci_high, n`` (long).

    References
    ----------
    Nadeau, C. & Bengio, Y. (2003). Inference for the generalization error. Machine
    Learning 52:239-281; Bouckaert, R. & Frank, E. (2004), PAKDD (J = k*r resamples).
    """
    s = stats.summarize_cells(results, metrics=[metric], alpha=alpha, model_column=model_column)
    s = s.rename(columns={model_column: "model"})
    return s[["dataset", "model", "encoder", "metric", "mean", "ci_low", "ci_high", "n"]]


def means_wide(long: pd.DataFrame, model: str, *, digits: int = 3,
               encoder_order=None) -> pd.DataFrame:
    """One model's per-dataset means as text, datasets down and encoders across."""
    part = long.loc[long["model"] == model]
    text = [fmt_interval(m, lo, hi, digits) for m, lo, hi in
            zip(part["mean"], part["ci_low"], part["ci_high"])]  # loop over summary cells
    wide = part.assign(text=text).pivot(index="dataset", columns="encoder", values="text")
    if encoder_order is not None:
        wide = wide.reindex(columns=[e for e in encoder_order if e in wide.columns])
    return wide.fillna("—").reset_index()


def rank_table(comparisons, recommendations=None) -> pd.DataFrame:
    """Average rank with bootstrap interval and the test against the best, per model.

    Parameters
    ----------
    comparisons : iterable of harness.stats.Comparison
    recommendations : mapping (model, metric) -> harness.stats.Recommendation, optional

    Returns
    -------
    DataFrame
        Columns ``model, metric, encoder, avg_rank, ci_low, ci_high, median_rank,
        n_datasets, wilcoxon_p_holm, equivalent, recommended``.

    References
    ----------
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets.
    JMLR 7:1-30 (average ranks; Wilcoxon signed-rank; Holm).
    """
    frames = []
    for comp in comparisons:  # loop over models
        m = comp.matrix
        r = comp.ranks.copy()
        p = comp.pairwise["wilcoxon_p_holm"] if len(comp.pairwise) else pd.Series(dtype=float)
        r["wilcoxon_p_holm"] = p.reindex(r.index)
        rec = (recommendations or {}).get((m.model, m.metric))
        if rec is not None and len(rec.evidence):
            # the recommendation's own rule: not significantly worse and practically close
            r["equivalent"] = rec.evidence["equivalent"].reindex(r.index).fillna(False).astype(bool)
        else:
            r["equivalent"] = ~(r["wilcoxon_p_holm"] < 0.05)
        r["recommended"] = r.index == (rec.choice if rec is not None else None)
        frames.append(r.reset_index().assign(model=m.model, metric=m.metric))
    cols = ["model", "metric", "encoder", "avg_rank", "ci_low", "ci_high", "median_rank",
            "n_datasets", "wilcoxon_p_holm", "equivalent", "recommended"]
    return pd.concat(frames, ignore_index=True)[cols] if frames else pd.DataFrame(columns=cols)


def robustness_table(results: pd.DataFrame, headline, *, metrics=None, low: int = 10,
                     high: int = 100, model_column: str = "model") -> pd.DataFrame:
    """Top encoder per aggregation x metric x model x regime (``stats.verdict_robustness``)."""
    return stats.verdict_robustness(results, headline, metrics=metrics, low=low, high=high,
                                    model_column=model_column)


def robustness_wide(robust: pd.DataFrame) -> pd.DataFrame:
    """Aggregations across, one row per model x metric x regime; ``(≠)`` marks a change."""
    if robust.empty:
        return pd.DataFrame(columns=["model", "metric", "regime", "N"])
    mark = np.where(robust["agrees"].eq(False), " (≠)", "")
    cell = (robust["top_encoder"].replace("", "—") + mark)
    r = robust.assign(cell=cell, metric=robust["metric"].map(metric_name))
    wide = r.pivot_table(index=["model", "metric", "regime", "n_datasets"],
                         columns="aggregation", values="cell", aggfunc="first", sort=False)
    wide = wide.reindex(columns=[a for a in stats.AGGREGATIONS if a in wide.columns])
    return wide.reset_index().rename(columns={"n_datasets": "N"})


def cost_summary(results: pd.DataFrame, *, reference: str | None = None,
                 model_column: str = "model") -> pd.DataFrame:
    """Median cost per encoder and model (``stats.cost_table``), sorted by total seconds."""
    c = stats.cost_table(results, reference=reference, model_column=model_column)
    return c.sort_values([model_column, "total_s"], kind="stable").reset_index(drop=True)


def leakage_table(results: pd.DataFrame, *, model_column: str = "model") -> pd.DataFrame:
    """Optimism gap per encoder setting (``stats.leakage_audit``), largest gap first."""
    a = stats.leakage_audit(results, model_column=model_column)
    return a.sort_values([model_column, "primary_metric", "gap_mean"],
                         ascending=[True, True, False], kind="stable").reset_index(drop=True)


# ------------------------------------------------------------------------ cells not run
_TYPE = re.compile(r"^\s*([A-Za-z_][\w.]*(?:Error|Exception|Warning|Exit|Timeout))\b")
_TEMPLATED = ("skipped", "not-applicable", "timeout")


def scrub_error(error: pd.Series, status: pd.Series, private: pd.Series) -> pd.Series:
    """Error texts safe to show: on private datasets a failure keeps its exception type only.

    Messages of skipped, not-applicable and timed-out cells are harness templates
    (sizes, limits, family names) and are kept; a failure's message may quote a data
    value, so for a private dataset only its exception type is shown.
    """
    text = error.fillna("").astype(str)
    kind = text.str.extract(_TYPE, expand=False).fillna("error")
    hidden = kind + " (message withheld: private dataset)"
    keep = ~private.astype(bool) | status.isin(_TEMPLATED) | (text == "")
    return text.where(keep, hidden).str.slice(0, 240)


def status_table(results: pd.DataFrame, private=()) -> pd.DataFrame:
    """Cells that produced no score, grouped by status, model, encoder and reason.

    Parameters
    ----------
    results : DataFrame
        The results table.
    private : iterable of str
        Dataset names whose failure messages must not be shown (:func:`scrub_error`).

    Returns
    -------
    DataFrame
        Columns ``status, model, encoder, reason, cells, datasets`` (``datasets`` a
        comma-separated list), most cells first.
    """
    bad = results.loc[results["status"].isin(NOT_RUN)]
    cols = ["status", "model", "encoder", "reason", "cells", "datasets"]
    if bad.empty:
        return pd.DataFrame(columns=cols)
    reason = scrub_error(bad["error"], bad["status"], bad["dataset"].isin(list(private)))
    g = bad.assign(reason=reason).groupby(["status", "model", "encoder", "reason"], sort=True)
    out = g.agg(cells=("dataset", "size"),
                datasets=("dataset", lambda s: ", ".join(sorted(map(str, s.unique())))))
    return out.reset_index().sort_values("cells", ascending=False, kind="stable")[cols]


# ------------------------------------------------------------------------------ export
_TEX = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
        "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
        "^": r"\textasciicircum{}", "≠": r"$\neq$", "—": "---", "²": r"$^2$",
        "×": r"$\times$", "α": r"$\alpha$", "−": "-"}
_TEX_RE = re.compile("|".join(re.escape(k) for k in _TEX))


def _tex(value) -> str:
    return _TEX_RE.sub(lambda m: _TEX[m.group(0)], str(value))


def _fmt(value, digits: int) -> str:
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (float, np.floating)):
        return "" if np.isnan(value) else f"{value:.{digits}g}" if abs(value) >= 1e4 \
            else f"{value:.{digits}f}"
    return str(value)


def _fmt_column(col: pd.Series, digits: int) -> pd.Series:
    values = pd.to_numeric(col, errors="coerce") if pd.api.types.is_float_dtype(col) else None
    if values is not None and values.notna().any() and (values.dropna() % 1 == 0).all():
        return values.map(lambda v: "" if np.isnan(v) else f"{v:.0f}")  # counts stored as float
    return col.map(lambda v: _fmt(v, digits))


def display(frame: pd.DataFrame, digits: int = 3) -> pd.DataFrame:
    """Every cell as text: floats rounded (whole-number columns as integers), booleans
    yes/no, NaN empty."""
    return frame.apply(lambda col: _fmt_column(col, digits))  # per column


def to_latex(frame: pd.DataFrame, caption: str = "", label: str = "", digits: int = 3) -> str:
    """A ``booktabs`` LaTeX table (needs ``\\usepackage{booktabs}``); text columns left,
    numeric columns right-aligned."""
    numeric = [pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c])
               for c in frame.columns]
    spec = "".join("r" if n else "l" for n in numeric)
    text = display(frame, digits)
    lines = [r"\begin{table}[htbp]", r"\centering"]
    if caption:
        lines.append(rf"\caption{{{_tex(caption)}}}")
    if label:
        lines.append(rf"\label{{{label}}}")
    lines += [rf"\begin{{tabular}}{{{spec}}}", r"\toprule",
              " & ".join(_tex(c) for c in frame.columns) + r" \\", r"\midrule"]
    lines += [" & ".join(_tex(v) for v in row) + r" \\" for row in text.to_numpy().tolist()]
    lines += [r"\bottomrule", r"\end{tabular}", r"\end{table}"]
    return "\n".join(lines) + "\n"


def write_table(frame: pd.DataFrame, directory, stem: str, *, caption: str = "",
                tex_frame: pd.DataFrame | None = None, digits: int = 3) -> tuple[Path, Path]:
    """Write ``stem.csv`` (``frame`` as is) and ``stem.tex`` (``tex_frame`` or ``frame``).

    Returns
    -------
    (Path, Path)
        The CSV and TeX paths.
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    csv, tex = directory / f"{stem}.csv", directory / f"{stem}.tex"
    frame.to_csv(csv, index=False)
    shown = frame if tex_frame is None else tex_frame
    tex.write_text(to_latex(shown, caption, f"tab:{stem}", digits), encoding="utf-8")
    return csv, tex

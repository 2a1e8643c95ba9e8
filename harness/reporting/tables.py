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
from harness.schema import NOT_RUN, TEMPLATED_STATUSES

__all__ = [
    "dataset_means_table",
    "means_wide",
    "rank_table",
    "cost_summary",
    "status_table",
    "scrub_error",
    "fmt_interval",
    "metric_name",
    "display",
    "to_latex",
    "write_table",
]

METRIC_NAMES = {
    "roc_auc": "ROC AUC",
    "log_loss": "log loss",
    "accuracy": "accuracy",
    "balanced_accuracy": "balanced accuracy",
    "rmse": "RMSE",
    "mae": "MAE",
    "r2": "R²",
    stats.POOLED: "each dataset's own metric",
}


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
def dataset_means_table(
    results: pd.DataFrame, metric: str, *, alpha: float = 0.05, model_column: str = "model"
) -> pd.DataFrame:
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
    if metric == stats.POOLED:  # each dataset in its own metric and units, not negated
        raw = results.assign(**{stats.POOLED: stats.metric_values(results, stats.POOLED)[0]})
        s = stats.summarize_cells(raw, metrics=[metric], alpha=alpha, model_column=model_column)
        own = results.groupby("dataset")["primary_metric"].first()
        s["metric"] = s["dataset"].map(own)
    else:
        s = stats.summarize_cells(results, metrics=[metric], alpha=alpha, model_column=model_column)
    s = s.rename(columns={model_column: "model"})
    return s[["dataset", "model", "encoder", "metric", "mean", "ci_low", "ci_high", "n"]]


def means_wide(long: pd.DataFrame, model: str, *, digits: int = 3, encoder_order=None, excluded=()) -> pd.DataFrame:
    """One model's per-dataset means as text, datasets down and encoders across.

    Settings in ``excluded`` (leaky) are kept, their columns marked ``(excluded)``, so
    that a reader sees what leaking costs on the test folds.
    """
    part = long.loc[long["model"] == model]
    text = [
        fmt_interval(m, lo, hi, digits) for m, lo, hi in zip(part["mean"], part["ci_low"], part["ci_high"])
    ]  # loop over summary cells
    wide = part.assign(text=text).pivot(index="dataset", columns="encoder", values="text")
    if encoder_order is not None:
        order = [e for e in encoder_order if e in wide.columns]
        wide = wide.reindex(columns=order + [e for e in wide.columns if e not in order])
    if "metric" in part and part["metric"].nunique() > 1:
        wide.index = [
            f"{d} ({metric_name(m)})"
            for d, m in zip(wide.index, part.groupby("dataset")["metric"].first().reindex(wide.index))
        ]
        wide.index.name = "dataset"
    wide = wide.rename(columns={e: f"{e} (excluded)" for e in excluded})
    return wide.fillna("—").reset_index()


def rank_table(comparisons, decisions=None) -> pd.DataFrame:
    """Average rank with its bootstrap interval per model, reference and choice marked.

    Returns
    -------
    DataFrame
        Columns ``model, metric, encoder, avg_rank, ci_low, ci_high, median_rank,
        n_datasets, reference, chosen``.

    References
    ----------
    Demšar, J. (2006). Statistical comparisons of classifiers over multiple data sets.
    JMLR 7:1-30 (average ranks).
    """
    frames = []
    for comp in comparisons:  # loop over models
        m = comp.matrix
        d = (decisions or {}).get((m.model, m.metric))
        r = comp.ranks.copy()
        r["reference"] = r.index == (d.reference if d is not None else None)
        r["chosen"] = r.index.isin(list(d.choice) if d is not None else [])
        frames.append(r.reset_index().assign(model=m.model, metric=m.metric))
    cols = [
        "model",
        "metric",
        "encoder",
        "avg_rank",
        "ci_low",
        "ci_high",
        "median_rank",
        "n_datasets",
        "reference",
        "chosen",
    ]
    return pd.concat(frames, ignore_index=True)[cols] if frames else pd.DataFrame(columns=cols)


def cost_summary(results: pd.DataFrame, *, reference: str | None = None, model_column: str = "model") -> pd.DataFrame:
    """Median cost per encoder and model (``stats.cost_table``), sorted by total seconds."""
    c = stats.cost_table(results, reference=reference, model_column=model_column)
    return c.sort_values([model_column, "total_s"], kind="stable").reset_index(drop=True)


# ------------------------------------------------------------------------ cells not run
_TYPE = re.compile(r"^\s*([A-Za-z_][\w.]*(?:Error|Exception|Warning|Exit|Timeout))\b")


def scrub_error(error: pd.Series, status: pd.Series, private: pd.Series) -> pd.Series:
    """Error texts safe to show: on private datasets a failure keeps its exception type only.

    Messages of skipped, not-applicable and timed-out cells are harness templates
    (sizes, limits, family names) and are kept; a failure's message may quote a data
    value, so for a private dataset only its exception type is shown.
    """
    text = error.fillna("").astype(str)
    kind = text.str.extract(_TYPE, expand=False).fillna("error")
    hidden = kind + " (message withheld: private dataset)"
    keep = ~private.astype(bool) | status.isin(TEMPLATED_STATUSES) | (text == "")
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
    out = g.agg(cells=("dataset", "size"), datasets=("dataset", lambda s: ", ".join(sorted(map(str, s.unique())))))
    return out.reset_index().sort_values("cells", ascending=False, kind="stable")[cols]


# ------------------------------------------------------------------------------ export
_TEX = {
    "\\": r"\textbackslash{}",
    "&": r"\&",
    "%": r"\%",
    "$": r"\$",
    "#": r"\#",
    "_": r"\_",
    "{": r"\{",
    "}": r"\}",
    "~": r"\textasciitilde{}",
    "^": r"\textasciicircum{}",
    "≠": r"$\neq$",
    "—": "---",
    "²": r"$^2$",
    "×": r"$\times$",
    "α": r"$\alpha$",
    "−": "-",
}
_TEX_RE = re.compile("|".join(re.escape(k) for k in _TEX))


def _tex(value) -> str:
    return _TEX_RE.sub(lambda m: _TEX[m.group(0)], str(value))


def _fmt(value, digits: int) -> str:
    if value is pd.NA:  # a nullable integer column's missing count
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (float, np.floating)):
        return "" if np.isnan(value) else f"{value:.{digits}g}" if abs(value) >= 1e4 else f"{value:.{digits}f}"
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
    numeric = [
        pd.api.types.is_numeric_dtype(frame[c]) and not pd.api.types.is_bool_dtype(frame[c]) for c in frame.columns
    ]
    spec = "".join("r" if n else "l" for n in numeric)
    text = display(frame, digits)
    lines = [r"\begin{table}[htbp]", r"\centering"]
    if caption:
        lines.append(rf"\caption{{{_tex(caption)}}}")
    if label:
        lines.append(rf"\label{{{label}}}")
    lines += [
        rf"\begin{{tabular}}{{{spec}}}",
        r"\toprule",
        " & ".join(_tex(c) for c in frame.columns) + r" \\",
        r"\midrule",
    ]
    lines += [" & ".join(_tex(v) for v in row) + r" \\" for row in text.to_numpy().tolist()]
    lines += [r"\bottomrule", r"\end{tabular}", r"\end{table}"]
    return "\n".join(lines) + "\n"


def write_table(
    frame: pd.DataFrame,
    directory,
    stem: str,
    *,
    caption: str = "",
    tex_frame: pd.DataFrame | None = None,
    digits: int = 3,
) -> tuple[Path, Path]:
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

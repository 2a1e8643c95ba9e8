"""The report writer: ``harness report DIR [--compare OTHER]`` -> ``DIR/report/``.

Order of the report: the answer (a recommendation per model with its evidence and
caveats), a methods paragraph generated from the manifest, figures and tables, the
verdict-robustness table, the leakage audit, the cells that produced no score, an
optional comparison with another run, and the references with BibTeX.

Privacy: a dataset marked ``private`` in the manifest (a user's file) appears under its
config alias, and only its column names, counts and aggregates are shown. The results
store holds no raw data, but a failure message may quote a value: for private datasets
only the exception type is kept (:func:`harness.reporting.tables.scrub_error`).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from harness import stats
from harness._outputs import swap_in_dir
from harness.errors import ConfigError, StoreError
from harness.metrics import CLASSIFICATION_METRICS, REGRESSION_METRICS
from harness.reporting import _bib, figures, tables
from harness.reporting._html import (Bullets, Code, Figure, Heading, Note, Para, Table,
                                     to_html, to_markdown)
from harness.reporting.tables import metric_name
from harness.store import read_results

__all__ = ["Run", "Analysis", "load_run", "analyse", "write_report"]


# ------------------------------------------------------------------------------- loading
@dataclass(frozen=True)
class Run:
    """A results directory as the report sees it (private datasets under their alias)."""

    directory: Path
    results: pd.DataFrame = field(repr=False)
    manifest: dict = field(repr=False)
    private: tuple = ()


def _aliases(manifest: dict) -> dict:
    """Config label -> report name (``alias`` when the dataset sets one)."""
    raw = (manifest.get("config") or {}).get("datasets") or {}
    return {label: (raw.get(label) or {}).get("alias") or label
            for label in manifest.get("datasets", {})}


def load_run(directory) -> Run:
    """Read a run's results and manifest, renaming private datasets to their alias.

    Raises
    ------
    StoreError
        No results store, or a manifest that cannot be read.
    ConfigError
        No manifest (the directory was not written by ``harness run``).
    """
    directory = Path(directory)
    results = read_results(directory)
    path = directory / "manifest.json"
    if not path.exists():
        raise ConfigError(
            f"{directory} has a results store but no manifest.json, which the report needs (datasets, "
            f"protocol, models). Rerun `harness run CONFIG --out {directory}` with the config that made it: "
            "it computes nothing already stored and writes the manifest."
        )
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise StoreError(f"the manifest {path} cannot be read ({exc}); rerun `harness run` "
                         "with the same config to rewrite it.") from None
    names = _aliases(manifest)
    private = tuple(names[d] for d, v in manifest.get("datasets", {}).items() if v.get("private"))
    results = results.assign(dataset=results["dataset"].map(lambda d: names.get(d, d)))
    bad = results["dataset"].isin(private)
    results.loc[bad, "error"] = tables.scrub_error(results.loc[bad, "error"],
                                                   results.loc[bad, "status"], bad[bad])
    manifest = {**manifest, "datasets": {names[d]: v for d, v in
                                         manifest.get("datasets", {}).items()}}
    return Run(directory, stats.pool_primary(results), manifest, private)


# ------------------------------------------------------------------------------ analysis
@dataclass(frozen=True)
class Analysis:
    """Everything the report shows, computed once from a :class:`Run`.

    ``comparisons`` and ``recommendations`` are keyed by ``(model, metric)`` in model
    order (config order), classification primary metric first.
    """

    run: Run
    metrics: tuple
    models: tuple
    bands: tuple
    comparisons: dict
    recommendations: dict
    robustness: pd.DataFrame
    cost: pd.DataFrame
    audit: pd.DataFrame
    regimes: pd.Series


def _primary_metrics(results: pd.DataFrame, manifest: dict) -> tuple:
    """The headline metric first: pooled over all datasets when tasks are mixed."""
    prot = manifest.get("protocol") or {}
    seen = set(stats.ok_rows(results)["primary_metric"].dropna())
    wanted = [prot.get("primary", "roc_auc"), prot.get("primary_regression", "rmse")]
    own = [m for m in wanted if m in seen] + sorted(seen - set(wanted))
    return tuple(([stats.POOLED] if len(own) > 1 else []) + own)


def _models(results: pd.DataFrame, manifest: dict) -> tuple:
    order = list(manifest.get("models") or {})
    present = list(pd.unique(results["model"]))
    return tuple([m for m in order if m in present] + [m for m in present if m not in order])


def _robustness(results, recs, metrics, low, high) -> pd.DataFrame:
    """Verdict robustness per primary metric, over the metrics of the same task type."""
    frames = []
    for metric in metrics:  # one headline per primary metric
        family = REGRESSION_METRICS if metric in REGRESSION_METRICS else CLASSIFICATION_METRICS
        if metric == stats.POOLED:  # the pooled headline varies over the per-task primaries
            family = (stats.POOLED,) + tuple(m for m in metrics if m != stats.POOLED)
        related = [m for m in family if m in results.columns]
        head = {mod: r.best_by_rank for (mod, met), r in recs.items()
                if met == metric and r.best_by_rank is not None}
        if head:
            rob = tables.robustness_table(results, head, metrics=related, low=low, high=high)
            frames.append(rob.loc[rob["model"].isin(list(head))])
    cols = ["model", "metric", "regime", "aggregation", "top_encoder", "n_datasets",
            "headline", "agrees"]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=cols)


def analyse(run: Run, *, n_boot: int = 2000, seed: int = 0) -> Analysis:
    """Compare the encoders for every model and primary metric of a run."""
    res, man = run.results, run.manifest
    bands = tuple((man.get("protocol") or {}).get("cardinality_bands") or (10, 100))
    low, high = int(bands[0]), int(bands[1])
    metrics, models = _primary_metrics(res, man), _models(res, man)
    comps, recs = {}, {}
    # ranks shown are those the recommendation uses: leaky settings are not ranked
    ranked, _ = stats.eligible_rows(res)
    ok = stats.ok_rows(res)
    for metric in metrics:  # loops over metrics and models only
        for model in models:
            has = ok.loc[(ok["model"] == model) & ok[metric].notna()]
            if has.empty and metric != metrics[0]:
                continue
            rec = stats.recommend(res, model, metric, low=low, high=high, n_boot=n_boot, seed=seed)
            recs[(model, metric)] = rec
            comps[(model, metric)] = rec.comparison
    return Analysis(run, metrics, models, (low, high), comps, recs,
                    _robustness(ranked, recs, metrics, low, high), tables.cost_summary(res),
                    tables.leakage_table(res), stats.dataset_regimes(res, low=low, high=high))


# ------------------------------------------------------------------- section 1: answer
def _family(run: Run, model: str) -> str:
    spec = (run.manifest.get("models") or {}).get(model) or {}
    fam = spec.get("family")
    if fam is None:
        fams = run.results.loc[run.results["model"] == model, "model_family"].dropna()
        fam = fams.iloc[0] if len(fams) else "?"
    return fam


def _provisional(rec: stats.Recommendation) -> bool:
    """True when no Holm-corrected Wilcoxon test could reach alpha at this size."""
    return rec.choice is not None and rec.provisional


def _choice_sentence(rec: stats.Recommendation) -> str:
    ev = rec.evidence
    c, b = ev.loc[rec.choice], ev.loc[rec.best_by_rank]
    if _provisional(rec):
        return " This is provisional (see the caveats): add datasets before citing it."
    if rec.choice == rec.best_by_rank:
        return " It is also the best-ranked encoder."
    p = c["wilcoxon_p_holm"]
    return (f" The best-ranked encoder is {rec.best_by_rank} ({b['avg_rank']:.2f}, "
            f"{b['median_time_s']:.3g} s), but the Holm-corrected Wilcoxon test does not "
            f"separate the two (p = {p:.3g}), {rec.choice} is within "
            f"{100 * c['median_shortfall']:.2g} % of it on the median dataset, and it is cheaper.")


def _answer_text(a: Analysis, rec: stats.Recommendation) -> str:
    head = (f"**{rec.model}** ({_family(a.run, rec.model)}), judged on "
            f"{metric_name(rec.metric)} over {rec.n_datasets} complete dataset(s)")
    if rec.choice is None:
        return f"{head}: **no recommendation** — no dataset has a score for every encoder."
    c = rec.evidence.loc[rec.choice]
    verb = "provisionally use" if _provisional(rec) else "use"
    text = (f"{head}: {verb} **{rec.choice}** (average rank {c['avg_rank']:.2f}, median "
            f"{c['median_time_s']:.3g} s per fold, {c['median_features']:.0f} output features).")
    text += _choice_sentence(rec)
    others = [e for e in rec.equivalent if e != rec.choice]
    if others and rec.n_datasets >= 2 and not _provisional(rec):
        text += (f" Also equivalent to the best (not significantly worse, median shortfall "
                 f"within 1 %): {', '.join(map(str, others))} — any of these is defensible "
                 "on this evidence.")
    if rec.n_datasets >= 2:
        text += (f" Friedman/Iman–Davenport test that all encoders are equal: "
                 f"p = {rec.friedman.f_p_value:.3g}.")
    return text


def _leak_caveats(a: Analysis, rec: stats.Recommendation) -> list[str]:
    """Caveats for a recommended (or provisional) encoder that uses the target in-sample."""
    au = a.audit
    named = [rec.choice]
    if au.empty or rec.choice is None:
        return []
    out = []
    for enc in named:  # at most two encoders
        row = au.loc[(au["encoder"] == enc) & (au["model"] == rec.model)
                     & (au["primary_metric"] == rec.metric)]
        if row.empty or bool(row["reference"].iloc[0]):
            continue
        flagged = bool(row["flagged"].iloc[0])
        out.append(f"'{enc}' uses the target without cross-fitting (scheme "
                   f"'{row['crossfit'].iloc[0]}'){'; the leakage audit flags it' if flagged else ''}:"
                   " prefer a cross-fitted or target-free encoder of similar rank.")
    return out


def _strength(rec: stats.Recommendation) -> str:
    if rec.choice is None:
        return "none"
    if _provisional(rec):
        return "none: tests cannot reject at this size"
    if rec.n_datasets < 5:
        return "thin (fewer than 5 datasets)"
    if not rec.friedman.f_p_value < 0.05:
        return "weak (encoders not shown to differ)"
    return "moderate" if rec.n_datasets < 15 else "good"


def _summary_frame(a: Analysis) -> pd.DataFrame:
    rows = []
    for (model, metric), rec in a.recommendations.items():  # loop over models
        choice = rec.choice or "—"
        if _provisional(rec):
            choice = f"{rec.choice} (provisional)"
        rows.append({"model": model, "family": _family(a.run, model),
                     "metric": metric_name(metric), "recommended": choice,
                     "best by rank": rec.best_by_rank or "—",
                     "equivalent to the best": ", ".join(map(str, rec.equivalent)) or "—",
                     "datasets": rec.n_datasets, "evidence": _strength(rec)})
    return pd.DataFrame(rows)


def answer_section(a: Analysis) -> list:
    """Section 1: the question, the recommendation per model, evidence and caveats."""
    out = [Heading("1. Which encoding should be the default?", 2, "answer"),
           Para("Question: for each model in this run, which categorical encoding should be "
                "the default, and at what cost? Decision rule, applied per model: "
                + stats.RULE)]
    if not a.recommendations:
        return out + [Note("No cell of this run produced a score: there is nothing to "
                           "recommend. See the list of cells that did not run below.")]
    out.append(Table(_summary_frame(a), "Recommendation per model and primary metric."))
    headline = a.metrics[0]
    if headline == stats.POOLED:
        out.append(Para("Rows judged on the 'primary metric (per dataset)' rank the encoders "
                        "on every dataset with that dataset's own primary metric (ROC AUC for "
                        "classification, the regression primary otherwise; ranks are taken "
                        "within each dataset, so the scales need not match). They are the "
                        "headline; the rows per metric repeat the analysis on each task type "
                        "alone, with fewer datasets. The text below covers the headline."))
    for (model, metric), rec in a.recommendations.items():  # loop over models
        if metric != headline:
            continue
        out.append(Para(_answer_text(a, rec)))
        caveats = list(rec.caveats) + _leak_caveats(a, rec)
        if caveats:
            out.append(Bullets(tuple("Caveat: " + c for c in caveats)))
    return out


# ------------------------------------------------------------------- section 2: methods
def _params(spec: dict, skip: str) -> str:
    items = [f"{k}={v}" for k, v in spec.items() if k != skip]
    return ", ".join(items) if items else "defaults"


def _dataset_rows(run: Run) -> pd.DataFrame:
    rows = []
    for name, d in run.manifest.get("datasets", {}).items():  # loop over datasets
        fp = d.get("fingerprint") or {}
        card = fp.get("cardinality") or {}
        private = bool(d.get("private"))
        cats = ", ".join(f"{c} ({n})" for c, n in card.items()) or "none"
        rows.append({"dataset": name, "source": "private file" if private else d.get("source", ""),
                     "task": d.get("task", ""), "rows": fp.get("rows", ""),
                     "max cardinality": fp.get("max_cardinality", ""),
                     "categorical columns (levels)": cats,
                     "numeric columns": len(d.get("numeric") or [])})
    return pd.DataFrame(rows)


def _protocol_text(man: dict) -> str:
    p = man.get("protocol") or {}
    folds, repeats = p.get("folds", "?"), p.get("repeats", 1)
    strat = ("stratified by class for classification" if p.get("stratify", True)
             else "not stratified")
    group = f", grouped by column '{p['group']}'" if p.get("group") else ""
    return (f"{repeats} × {folds}-fold cross-validation ({strat}{group}; seed "
            f"{man.get('seed', '?')}; encoders are fitted on the training folds only)")


def _methods_text(a: Analysis) -> str:
    man, run = a.run.manifest, a.run
    ds = man.get("datasets", {})
    dtext = "; ".join(
        f"{n} ({'private file, ' if d.get('private') else ''}{d.get('task')}, "
        f"{(d.get('fingerprint') or {}).get('rows', '?')} rows, largest categorical "
        f"cardinality {(d.get('fingerprint') or {}).get('max_cardinality', '?')})"
        for n, d in ds.items())
    enc = "; ".join(f"{lab} ({s.get('kind')}: {_params(s, 'kind')})"
                    for lab, s in (man.get("encoders") or {}).items())
    mod = "; ".join(f"{lab} ({s.get('family')}: {_params(s, 'family')})"
                    for lab, s in (man.get("models") or {}).items())
    pk = man.get("packages") or {}
    soft = ", ".join(f"{k} {v}" for k, v in pk.items() if v and k in
                     ("python", "harness", "numpy", "pandas", "scipy", "scikit-learn", "lightgbm"))
    mets = " and ".join(metric_name(m) for m in a.metrics) or "the primary metric"
    low, high = a.bands
    return (
        f"We compared {len(man.get('encoders') or {})} categorical encodings ({enc}) with "
        f"{len(man.get('models') or {})} model(s) ({mod}) on {len(ds)} dataset(s): {dtext}. "
        f"Each dataset × encoder × model was evaluated by {_protocol_text(man)}. The primary "
        f"metric was {mets} (ROC AUC: macro one-vs-rest average for multiclass targets). "
        f"Per-dataset means carry corrected resampled t intervals ({_bib.cite('nadeau2003')}; "
        f"J = repeats × folds resamples, {_bib.cite('bouckaert2004')}). Across datasets, "
        f"encoders were ranked per dataset (1 = best, ties averaged) and compared by average "
        f"rank with a 95% percentile bootstrap interval over datasets "
        f"({_bib.cite('efron1993')}), the Friedman test with the Iman–Davenport correction "
        f"({_bib.cite('iman1980')}), the Nemenyi critical difference and Wilcoxon signed-rank "
        f"tests against the best-ranked encoder with Holm's correction "
        f"({_bib.cite('demsar2006')}; {_bib.cite('holm1979')}). Datasets with a missing "
        f"cell were left out of a model's comparison. Cardinality regimes: low < {low} ≤ "
        f"medium ≤ {high} < high levels. Leakage was audited as the train-minus-test gap of "
        f"the primary metric per encoder setting. Software: {soft}. Run "
        f"{man.get('started', '?')} to {man.get('finished', '?')} on "
        f"{(man.get('machine') or {}).get('cpus', '?')} CPU(s); config hash "
        f"{man.get('config_hash', '?')}.")


def methods_section(a: Analysis) -> list:
    """Section 2: a paste-ready methods paragraph and the dataset table."""
    out = [Heading("2. Methods (ready to paste)", 2, "methods"), Para(_methods_text(a))]
    rows = _dataset_rows(a.run)
    if len(rows):
        out.append(Table(rows, "Datasets (private datasets: alias, counts and column "
                               "names only)."))
    notes = [f"{n}: {note}" for n, d in a.run.manifest.get("datasets", {}).items()
             for note in d.get("notes") or []]
    if notes:
        out.append(Bullets(tuple(notes)))
    return out


# ------------------------------------------------------------ section 3: figures, tables
def _slug(text: str) -> str:
    return "".join(ch if ch.isalnum() or ch in "-_" else "_" for ch in str(text))


def _figure(fig_fn, root: Path, stem: str, caption: str, alt: str) -> list:
    """Draw and save one figure, or return a one-line note saying why it was skipped."""
    try:
        fig = fig_fn()
    except figures.NothingToPlot as exc:
        return [Note(f"Figure skipped: {exc}")]
    png, svg = figures.save(fig, root / "figures", stem)
    return [Figure(str(png.relative_to(root)), str(svg.relative_to(root)), caption, alt)]


def _table(frame, root: Path, stem: str, caption: str, shown=None, tex=None) -> Table:
    csv, texp = tables.write_table(frame, root / "tables", stem, caption=caption,
                                   tex_frame=tex if tex is not None else shown)
    shown = tables.display(frame if shown is None else shown)
    return Table(shown, caption, (str(csv.relative_to(root)), str(texp.relative_to(root))))


def _heatmaps(a: Analysis, root: Path) -> list:
    out = []
    for model in a.models:  # loop over models
        out += _figure(lambda m=model: figures.relative_heatmap(
            a.run.results, m, low=a.bands[0], high=a.bands[1]), root, f"heatmap_{_slug(model)}",
            f"Per-dataset shortfall of each encoder from the best one for {model}, in percent "
            "of the best score on that dataset's primary metric; datasets ordered by "
            "largest cardinality.", f"heatmap {model}")
    return out


def figures_section(a: Analysis, root: Path) -> list:
    """Section 3: the four result figures and the main tables."""
    recs = a.recommendations
    # figures show the headline metric; the per-task analyses are in the tables
    comps = [c for (model, metric), c in a.comparisons.items() if metric == a.metrics[0]]
    out = [Heading("3. Results", 2, "results")]
    out += _figure(lambda: figures.rank_plot(comps, recs), root, "average_ranks",
                   "Average rank per encoder (1 = best) with 95% bootstrap intervals over "
                   "datasets, one panel per model. Settings that fit target statistics on the "
                   "rows they encode are not ranked (see the leakage audit).", "average rank plot")
    out += _figure(lambda: figures.cd_diagram(comps), root, "critical_difference",
                   "Critical-difference diagrams (Demšar 2006): encoders joined by a bar do "
                   "not differ by more than the Nemenyi critical difference.",
                   "critical difference diagram")
    out += _figure(lambda: figures.cost_plot(comps, a.cost), root, "score_vs_cost",
                   "Average rank against median encoder + model-fit seconds per fold (log "
                   "scale); filled triangles form the Pareto front.", "score versus cost")
    out += _heatmaps(a, root)
    out += _main_tables(a, root)
    return out


def _main_tables(a: Analysis, root: Path) -> list:
    out = [Heading("Average ranks", 3)]
    ranks = tables.rank_table(a.comparisons.values(), a.recommendations)
    out.append(_table(ranks, root, "average_ranks", "Average rank per encoder and model "
                      "with 95% bootstrap interval; wilcoxon_p_holm tests against the "
                      "best-ranked encoder."))
    out.append(Heading("Per-dataset means", 3))
    for metric in a.metrics:  # loop over primary metrics
        long = tables.dataset_means_table(a.run.results, metric)
        for model in pd.unique(long["model"]):  # loop over models
            comp = a.comparisons.get((model, metric))
            order = list(comp.ranks.index) if comp is not None else None
            wide = tables.means_wide(long, model, encoder_order=order)
            stem = f"dataset_means_{_slug(model)}_{metric}"
            out.append(_table(long.loc[long["model"] == model], root, stem,
                              f"{model}: mean test {metric_name(metric)} per dataset with "
                              "95% corrected resampled t interval.", shown=wide))
    out.append(Heading("Cost", 3))
    cost = a.cost[["encoder", "model", "encoder_s", "model_fit_s", "total_s",
                   "n_features_out", "encoded_mb", "n_rows"]]
    out.append(_table(cost, root, "cost", "Median cost per fold: seconds to encode, to fit "
                      "the model, both; output features; encoded megabytes; cells counted."))
    return out


# --------------------------------------------------------------- section 4: robustness
def _one_axis_slices(rob: pd.DataFrame, metrics) -> pd.DataFrame:
    """Slices that change one choice at a time from the headline analysis.

    Headline: mean rank, primary metric, all datasets. Kept: every aggregation and every
    metric over all datasets, and every regime under the primary metric; empty slices
    are dropped.
    """
    primary = rob["metric"].isin(list(metrics))
    keep = (rob["regime"] == "all") | primary
    return rob.loc[keep & (rob["n_datasets"] > 0)]


def _robustness_sentence(rob: pd.DataFrame) -> str:
    known = rob.dropna(subset=["agrees"])
    if known.empty:
        return "No slice had a complete dataset: robustness could not be checked."
    agree = known["agrees"].astype(bool)
    n, k = int(agree.sum()), len(known)
    if n == k:
        return (f"The best-ranked encoder stays top (or tied top) in all {k} slices: the "
                "verdict does not depend on the aggregation, metric or cardinality regime.")
    diff = known.loc[~agree]
    where = []
    for col in ("aggregation", "metric", "regime", "model"):  # loop over the four axes
        counts = diff[col].value_counts()
        where.append(f"{col} '{counts.index[0]}' ({counts.iloc[0]} of {len(diff)})")
    return (f"The headline best-ranked encoder stays top (or tied top) in {n} of {k} slices; "
            "the changes concentrate in " + ", ".join(where) + ". Where the top encoder "
            "changes, the verdict depends on that choice and the memo should say so.")


def robustness_section(a: Analysis, root: Path) -> list:
    """Section 4: does the top encoder change with aggregation, metric, model, regime?"""
    out = [Heading("4. Does the verdict survive other choices?", 2, "robustness")]
    rob = a.robustness
    if rob.empty:
        return out + [Note("Robustness table skipped: no recommendation to check.")]
    shown = _one_axis_slices(rob, a.metrics)
    out.append(Para(_robustness_sentence(shown)))
    out.append(_table(rob, root, "robustness", "Top encoder per aggregation (columns) for "
                      "each model, metric and cardinality regime, one choice changed at a time "
                      "(the CSV has every combination); (≠) marks a top encoder other than "
                      "the headline best-ranked one; N = complete datasets in the slice.",
                      shown=tables.robustness_wide(shown)))
    return out


# ------------------------------------------------------------------ section 5: leakage
def leakage_section(a: Analysis, root: Path) -> list:
    """Section 5: the optimism gap per encoder setting and the flagged settings."""
    out = [Heading("5. Leakage audit", 2, "leakage"),
           Para("The optimism gap is the training-fold score minus the test-fold score of "
                "the primary metric (oriented so that positive means the training score looks "
                "better); for error metrics (RMSE, MAE, log loss) it is relative, "
                "(test − train) / test, so that datasets with targets in different units "
                "can be pooled. Encoders that do not use the target, and target statistics that are "
                "cross-fitted, are the reference. A setting that uses the target without "
                "cross-fitting ('none' fits and encodes the same rows; 'loo' leaks each row's "
                f"own target, {_bib.cite('prokhorenkova2018')}) is flagged when the lower bound "
                "of its gap interval lies above every reference setting's upper bound for the "
                "same model: the model learnt from encoded values that will not exist at "
                "prediction time.")]
    audit = a.audit
    out += _figure(lambda: figures.leakage_plot(audit, models=a.models), root, "leakage_audit",
                   "Optimism gap per encoder setting and model with 95% intervals; filled "
                   "squares are flagged settings.", "leakage audit")
    if audit.empty:
        return out
    flagged = audit.loc[audit["flagged"]]
    if len(flagged):
        out.append(Bullets(tuple(
            f"**{r.encoder}** with {r.model}, {metric_name(r.primary_metric)} (cross-fitting '{r.crossfit}'): gap "
            f"{r.gap_mean:.3f} [{r.ci_low:.3f}, {r.ci_high:.3f}] versus at most "
            f"{r.reference_max:.3f} for the reference settings — its test scores are honest, "
            "but its training-time encodings leak the target; do not use it as a default."
            for r in flagged.itertuples())))
    else:
        out.append(Para("No setting is flagged."))
    cols = ["encoder", "model", "primary_metric", "encoder_kind", "crossfit", "reference",
            "gap_mean", "ci_low", "ci_high", "n", "reference_max", "flagged"]
    out.append(_table(audit[cols], root, "leakage_audit", "Optimism gap (train minus test) "
                      "per encoder setting and model."))
    return out


# ----------------------------------------------------------------- section 6: not run
def status_section(a: Analysis, root: Path) -> list:
    """Section 6: failed, timed-out, skipped and not-applicable cells with reasons."""
    res = a.run.results
    out = [Heading("6. Cells without a score", 2, "not-run")]
    counts = res["status"].value_counts()
    out.append(Para("Cells by status: " + ", ".join(f"{s} {n}" for s, n in counts.items())
                    + f" (total {len(res)})."))
    st = tables.status_table(res, a.run.private)
    if st.empty:
        return out + [Para("Every cell produced a score.")]
    out.append(_table(st, root, "cells_without_score", "Cells without a score, grouped by "
                      "status, model, encoder and reason."))
    return out


# ------------------------------------------------------------------ section 7: compare
def _rank_changes(a: Analysis, b: Analysis) -> pd.DataFrame:
    rows = []
    for key in dict.fromkeys(list(b.recommendations) + list(a.recommendations)):
        ra, rb = a.recommendations.get(key), b.recommendations.get(key)
        ca, cb = a.comparisons.get(key), b.comparisons.get(key)
        shared = (set(ca.ranks.index) & set(cb.ranks.index)) if ca and cb else set()
        delta = (ca.ranks["avg_rank"].reindex(sorted(shared))
                 - cb.ranks["avg_rank"].reindex(sorted(shared))) if shared else pd.Series()
        moved = ", ".join(f"{e} {d:+.2f}" for e, d in delta.items() if abs(d) >= 0.005)
        rows.append({"model": key[0], "metric": metric_name(key[1]),
                     "recommended before": (rb.choice if rb else None) or "—",
                     "recommended now": (ra.choice if ra else None) or "—",
                     "datasets before": rb.n_datasets if rb else 0,
                     "datasets now": ra.n_datasets if ra else 0,
                     "average-rank change (shared encoders)": moved or "none"})
    return pd.DataFrame(rows)


def _metric_deltas(a: Run, b: Run) -> pd.DataFrame:
    def means(run):
        ok = stats.ok_rows(run.results)
        parts = [ok.loc[ok["primary_metric"] == m].groupby(["dataset", "encoder", "model"])[m]
                 .mean().rename("value").reset_index().assign(metric=m)
                 for m in pd.unique(ok["primary_metric"])]  # loop over metric names
        return pd.concat(parts) if parts else pd.DataFrame(
            columns=["dataset", "encoder", "model", "value", "metric"])
    j = means(a).merge(means(b), on=["dataset", "encoder", "model", "metric"],
                       suffixes=("_now", "_before"))
    j["delta"] = j["value_now"] - j["value_before"]
    return j.reindex(j["delta"].abs().sort_values(ascending=False).index)


def _added_removed(now, before, what: str) -> str:
    add, gone = sorted(set(now) - set(before)), sorted(set(before) - set(now))
    return (f"{what}: added {', '.join(map(str, add)) or 'none'}; removed "
            f"{', '.join(map(str, gone)) or 'none'}.")


def compare_section(a: Analysis, b: Analysis, root: Path) -> list:
    """Section 7: what changed from run ``b`` (before) to run ``a`` (now)."""
    ra, rb = a.run.results, b.run.results
    ids_a, ids_b = set(ra["cell_id"]), set(rb["cell_id"])
    out = [Heading("7. Changes against the other run", 2, "compare"),
           Para(f"Before: {b.run.directory} (config hash "
                f"{b.run.manifest.get('config_hash', '?')}); now: {a.run.directory} "
                f"(config hash {a.run.manifest.get('config_hash', '?')})."),
           Bullets((_added_removed(ra["encoder"].unique(), rb["encoder"].unique(), "Encoders"),
                    _added_removed(ra["dataset"].unique(), rb["dataset"].unique(), "Datasets"),
                    _added_removed(ra["model"].unique(), rb["model"].unique(), "Models"),
                    f"Cells: {len(ids_a - ids_b)} added, {len(ids_b - ids_a)} removed, "
                    f"{len(ids_a & ids_b)} identical (same content hash)."))]
    changes = _rank_changes(a, b)
    if len(changes):
        out.append(_table(changes, root, "compare_recommendations", "Recommendation and "
                          "average-rank change per model (now minus before)."))
    deltas = _metric_deltas(a.run, b.run)
    if deltas.empty:
        return out + [Para("No dataset × encoder × model has a score in both runs.")]
    d = deltas["delta"].abs()
    out.append(Para(f"Primary-metric means on {len(deltas)} shared dataset × encoder × model "
                    f"cells: median absolute change {d.median():.3g}, largest {d.max():.3g}."))
    out.append(_table(deltas.head(15).reset_index(drop=True), root, "compare_metric_deltas",
                      "Largest changes of the mean primary metric on shared cells (now minus "
                      "before)."))
    return out


# -------------------------------------------------------------- section 8: references
def references_section(a: Analysis, root: Path) -> list:
    """Section 8: the references of the methods and encoders in the run, with BibTeX."""
    keys = _bib.used_references(a.run.manifest.get("encoders") or {})
    bib = "\n\n".join(_bib.BIB[k][1] for k in keys)
    (root / "references.bib").write_text(bib + "\n", encoding="utf-8")
    return [Heading("8. References", 2, "references"),
            Bullets(tuple(_bib.cite(k) + f" — `{k}`" for k in keys)),
            Para("BibTeX (also in references.bib):"), Code(bib, "bibtex")]


# ---------------------------------------------------------------------------- writing
def _header(a: Analysis) -> list:
    man = a.run.manifest
    title = f"Encoding benchmark report: {man.get('experiment') or a.run.directory.name}"
    desc = man.get("description") or ""
    line = (f"{len(a.run.results)} cells; {a.run.results['dataset'].nunique()} datasets, "
            f"{a.run.results['encoder'].nunique()} encoders, "
            f"{a.run.results['model'].nunique()} models; config hash "
            f"{man.get('config_hash', '?')}.")
    return [Heading(title, 1), *([Para(desc)] if desc else []), Para(line)]


def write_report(directory, compare=None, out=None) -> Path:
    """Write ``DIR/report/``: report.md, report.html, figures/, tables/, references.bib.

    The report is built in a new directory beside ``report/`` and swapped in when
    complete: a kill or a full disk leaves the previous report whole.

    Parameters
    ----------
    directory : path
        A results directory (``results.sqlite`` and ``manifest.json``).
    compare : path, optional
        Another results directory; the report then lists what changed from it.
    out : path, optional
        Where to put ``report/`` instead of ``directory`` (e.g. a store on a read-only mount).

    Returns
    -------
    Path
        The HTML report.

    Raises
    ------
    StoreError
        No readable results store in ``directory`` or ``compare``.
    """
    run = load_run(directory)
    final = Path(out or directory) / "report"
    with swap_in_dir(final) as root:  # regenerated whole: no stale figure survives
        _write_into(run, root, compare)
    return final / "report.html"


def _write_into(run: Run, root: Path, compare) -> None:
    a = analyse(run)
    blocks = _header(a) + answer_section(a) + methods_section(a) + figures_section(a, root)
    blocks += robustness_section(a, root) + leakage_section(a, root) + status_section(a, root)
    if compare is not None:
        blocks += compare_section(a, analyse(load_run(compare)), root)
    blocks += references_section(a, root)
    (root / "report.md").write_text(to_markdown(blocks), encoding="utf-8")
    (root / "report.html").write_text(to_html(blocks, blocks[0].text, root), encoding="utf-8")

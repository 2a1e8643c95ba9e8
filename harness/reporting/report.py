"""The report writer: ``levelfold report DIR [--compare OTHER]`` -> ``DIR/report/``.

Order of the report: the answer (a decision per model with its evidence and caveats), a
methods paragraph generated from the manifest (this module), figures and tables, the
robustness of the choice, the leakage audit, the cells that produced no score, an
optional comparison with another run, and the references with BibTeX. Each section
lives in its own module; section numbers are computed when the report is assembled.

Privacy: a dataset marked ``private`` in the manifest (a user's file) appears under its
config alias, and only its column names, counts and aggregates are shown. The results
store holds no raw data, but a failure message may quote a value: for private datasets
only the exception type is kept (:func:`harness.reporting.tables.scrub_error`).
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pandas as pd

from harness import stats
from harness._outputs import swap_in_dir
from harness.reporting import _bib
from harness.reporting._analysis import Analysis, analyse
from harness.reporting._answer import answer_section
from harness.reporting._compare import compare_section
from harness.reporting._html import Bullets, Heading, Note, Para, Table, to_html, to_markdown
from harness.reporting._leakage import leakage_section
from harness.reporting._references import references_section
from harness.reporting._results import results_section
from harness.reporting._robustness import robustness_section
from harness.reporting._run import Run, load_run
from harness.reporting._status import status_section
from harness.reporting._tuning import tuning_section
from harness.reporting.tables import metric_name
from harness.schema import Manifest
from harness.store import describe_set_aside

__all__ = ["Run", "Analysis", "load_run", "analyse", "write_report"]


# ------------------------------------------------------------------- section 2: methods
def _params(spec: dict, skip: str) -> str:
    items = [f"{k}={v}" for k, v in spec.items() if k != skip]
    return ", ".join(items) if items else "defaults"


def _dataset_rows(run: Run) -> pd.DataFrame:
    rows = []
    for name, d in run.manifest.datasets.items():  # loop over datasets
        cats = ", ".join(f"{c} ({n})" for c, n in d.cardinality.items()) or "none"
        rows.append(
            {
                "dataset": name,
                "source": "private file" if d.private else d.source,
                "task": d.task,
                "rows": _or(d.rows, ""),
                "max cardinality": _or(d.max_cardinality, ""),
                "categorical columns (levels)": cats,
                "numeric columns": len(d.numeric),
            }
        )
    return pd.DataFrame(rows)


def _or(value, missing="?"):
    """``value``, or ``missing`` where the manifest does not record it."""
    return missing if value is None else value


def _protocol_text(man: Manifest) -> str:
    p = man.protocol
    strat = "stratified by class for classification" if p.stratify else "not stratified"
    return (
        f"{p.repeats} × {_or(p.folds)}-fold cross-validation ({strat}; seed "
        f"{_or(man.seed)}; encoders are fitted on the training folds only)"
    )


def _grouping_text(man: Manifest) -> str:
    """Each dataset's grouping, grouped cross-fitting, and tables that look clustered."""
    ds = man.datasets
    if not man.grouping_recorded:
        return ""  # a manifest written before grouping was recorded: say nothing rather than guess
    grouped = {n: d.group for n, d in ds.items() if d.group}
    if grouped:
        parts = ", ".join(f"{n} by column '{g}'" for n, g in grouped.items())
        rest = [n for n in ds if n not in grouped]
        text = (
            f"Outer folds were grouped for {parts}: every group fell in one fold. For these datasets "
            "target statistics were cross-fitted on inner folds of whole groups (k-fold, holdout and "
            "the ordered permutation over groups; leave-one-out became leave-one-group-out), so no "
            "training row's statistic used a row of its own group. "
        )
        text += (
            f"The other datasets ({', '.join(rest)}) were split by row, their rows treated as independent. "
            if rest
            else ""
        )
    else:
        text = "No dataset was grouped: rows were split at random and treated as independent. "
    flagged = [f"{n} ({d.duplicate_test_share:.0%})" for n, d in ds.items() if d.clustered]
    if flagged:
        text += (
            "Share of test rows with an exact duplicate (features and target) in their training fold, "
            f"a sign of clustered rows that inflates scores: {', '.join(flagged)}. "
        )
    return text


def _policy_text(man: Manifest) -> str:
    """The scaling and missing-value policies as the run recorded them."""
    text = ""
    if man.scaled_models:
        text += (
            f"For the models on scaled inputs ({', '.join(man.scaled_models)}), "
            f"{man.scaling_policy}; the other models took the columns unscaled. "
        )
    rules: dict = {}
    for label, rule in man.missing_values.items():
        rules.setdefault(rule, []).append(label)
    if len(rules) == 1:
        text += f"A missing categorical value was {next(iter(rules))} under every encoder. "
    elif rules:
        text += (
            "A missing categorical value was "
            + "; ".join(f"{rule} under {', '.join(labels)}" for rule, labels in rules.items())
            + ". "
        )
    return text


#: how the Software sentence names a manifest's package keys (the import package `harness`
#: is installed as the distribution levelfold)
SOFTWARE_NAMES = {"harness": "levelfold"}


def _primary_metric_text(results: pd.DataFrame) -> str:
    """The primary-metric sentence, from the scored rows: one metric, or one per task kind."""
    ok = stats.ok_rows(results)
    kind = ok["task"].where(ok["task"] == "regression", "classification")
    by_kind = {
        k: " or ".join(metric_name(m) for m in sorted(g.dropna().unique()))
        for k, g in ok["primary_metric"].groupby(kind, sort=True)
    }  # at most two kinds
    by_kind = {k: v for k, v in by_kind.items() if v}
    if not by_kind:
        return "No cell produced a score, so no primary metric was computed."
    names = set(by_kind.values())
    if len(names) == 1:
        text = f"The primary metric was {names.pop()}"
    else:
        text = "Each dataset was scored on the primary metric of its task: " + " and ".join(
            f"{m} for {k}" for k, m in by_kind.items()
        )
    if "roc_auc" in set(ok["primary_metric"]) and (ok["task"] == "multiclass").any():
        text += " (ROC AUC: macro one-vs-rest average for multiclass targets)"
    return text + "."


def _methods_text(a: Analysis) -> str:
    man = a.run.manifest
    ds = man.datasets
    dtext = "; ".join(
        f"{n} ({'private file, ' if d.private else ''}{d.task}, "
        f"{_or(d.rows)} rows, largest categorical "
        f"cardinality {_or(d.max_cardinality)})"
        for n, d in ds.items()
    )
    enc = "; ".join(f"{lab} ({s.get('kind')}: {_params(s, 'kind')})" for lab, s in man.encoders.items())
    mod = "; ".join(f"{lab} ({s.get('family')}: {_params(s, 'family')})" for lab, s in man.models.items())
    soft = ", ".join(
        f"{SOFTWARE_NAMES.get(k, k)} {v}"
        for k, v in man.packages.items()
        if v and k in ("python", "harness", "numpy", "pandas", "scipy", "scikit-learn", "lightgbm")
    )
    low, high = a.medium_levels
    return (
        f"We compared {len(man.encoders)} categorical encodings ({enc}) with "
        f"{len(man.models)} model(s) ({mod}) on {len(ds)} dataset(s): {dtext}. "
        f"Each dataset × encoder × model was evaluated by {_protocol_text(man)}. "
        f"{_grouping_text(man)}"
        f"{_policy_text(man)}"
        f"{describe_set_aside(a.run.set_aside) + ' ' if a.run.set_aside else ''}"
        f"{_primary_metric_text(a.run.results)} "
        f"Per-dataset means carry corrected resampled t intervals ({_bib.cite('nadeau2003')}; "
        f"J = repeats × folds resamples, {_bib.cite('bouckaert2004')}). Across datasets, "
        f"encoders were ranked per dataset (1 = best, ties averaged) and compared by average "
        f"rank with a 95% expanded percentile bootstrap interval over datasets "
        f"({_bib.cite('efron1993')}; {_bib.cite('hesterberg2015')}; shown from "
        f"{stats.RANK_CI_MIN_DATASETS} datasets on, where its simulated coverage is near "
        f"nominal), the Friedman test with the Iman–Davenport correction "
        f"({_bib.cite('iman1980')}; permutation p-value, exact for small tables) and the "
        f"Nemenyi critical difference ({_bib.cite('demsar2006')}). {_decision_methods_text(a)} "
        f"Cardinality regimes, by each dataset's categorical column with the most levels: "
        f"{low} to {high} levels (inclusive) is medium, fewer is low, more is high. "
        f"Leakage was audited per dataset: each "
        f"target-statistics setting against its k-fold cross-fitted twin on the same folds. "
        f"Software: {soft}. Run "
        f"{_or(man.started)} to {_or(man.finished)} on "
        f"{_or(man.cpus)} CPU(s); config hash "
        f"{_or(man.config_hash)}."
    )


def _dropped_text(a: Analysis) -> str:
    """What the missing-cell policy dropped from the rank analysis, and why."""
    parts = []
    for (model, metric), c in a.comparisons.items():  # loop over models x metrics
        if c is None or metric != a.metrics[0]:
            continue
        m = c.matrix
        if m.dropped_datasets:
            parts.append(
                f"for {model}, dataset(s) {', '.join(map(str, m.dropped_datasets))} (an encoder without a score there)"
            )
        if m.dropped_encoders:
            parts.append(
                f"for {model}, encoder(s) {', '.join(map(str, m.dropped_encoders))} (no score on some dataset)"
            )
    if not parts:
        return "No cell was missing from the rank analysis."
    return (
        "Ranks need every encoder on every dataset, so the rank analysis left out "
        + "; ".join(parts)
        + "; the reference and the choice are never left out, and "
        "the decision pairs each candidate with the reference on the datasets where both "
        "have a score."
    )


def _decision_methods_text(a: Analysis) -> str:
    """The decision and multiplicity sentences of the methods paragraph (from the rule)."""
    r = a.rule
    return (
        f"{_dropped_text(a)} The decision compared each candidate with a reference encoder "
        f"on unit-free per-dataset effects: one-sided Wilcoxon signed-rank tests of "
        f"non-inferiority at a margin of {100 * r.margin:g} % and α = {r.alpha:g}, "
        f"Holm-adjusted across candidates ({_bib.cite('holm1979')}), with Hodges–Lehmann "
        f"estimates and bounds, equivalence by two one-sided tests "
        f"({_bib.cite('schuirmann1987')}), and the Bayesian signed-rank test with the margin "
        f"as region of practical equivalence ({_bib.cite('benavoli2017')}); on a single "
        f"dataset, the corrected resampled t and the Bayesian correlated t-test on "
        f"fold-paired effects ({_bib.cite('corani2015')}). A switch needed a median cost "
        f"saving of at least {100 * r.min_saving:g} % and {r.min_saving_s:g} s per fold. The "
        f"pooled analysis per model is confirmatory; the per-metric, per-regime, robustness "
        f"and leakage tables are exploratory and uncorrected for their number."
    )


def methods_section(a: Analysis) -> list:
    """A paste-ready methods paragraph and the dataset table."""
    out = [Heading("Methods (ready to paste)", 2, "methods"), Para(_methods_text(a))]
    rows = _dataset_rows(a.run)
    if len(rows):
        out.append(Table(rows, "Datasets (private datasets: alias, counts and column names only)."))
    notes = [f"{n}: {note}" for n, d in a.run.manifest.datasets.items() for note in d.notes]
    if notes:
        out.append(Bullets(tuple(notes)))
    return out


# ---------------------------------------------------------------------------- writing
def _header(a: Analysis) -> list:
    man = a.run.manifest
    title = f"Encoding benchmark report: {man.experiment or a.run.directory.name}"
    desc = man.description
    line = (
        f"{len(a.run.results)} cells; {a.run.results['dataset'].nunique()} datasets, "
        f"{a.run.results['encoder'].nunique()} encoders, "
        f"{a.run.results['model'].nunique()} models; config hash "
        f"{_or(man.config_hash)}."
    )
    aside = describe_set_aside(a.run.set_aside)
    return [
        Heading(title, 1),
        *([Para(desc)] if desc else []),
        Para(line + _regime_text(a)),
        *([Note(aside)] if aside else []),
    ]


def _regime_text(a: Analysis) -> str:
    """Which tuning regime the sections read, when the run has more than one."""
    rows = a.run.all_results
    if rows is None or "regime" not in rows:
        return ""
    if rows["regime"].nunique() < 2:
        return (
            ""
            if a.run.regime == "defaults"
            else (
                f" Every cell ran under the **{a.run.regime}** regime: hyperparameters were searched inside each "
                "outer training fold (see 'Does the choice survive tuning?')."
            )
        )
    others = ", ".join(
        f"{r} ({n} cells)" for r, n in rows["regime"].value_counts(sort=False).items() if r != a.run.regime
    )
    return (
        f" These are the cells of the **{a.run.regime}** regime, which every section reads except "
        f"'Does the choice survive tuning?', which also reads {others}."
    )


def _numbered(blocks: list) -> list:
    """Number the level-2 headings in order of appearance ("1. ...", "2. ...")."""
    out, n = [], 0
    for b in blocks:  # loop over blocks
        if isinstance(b, Heading) and b.level == 2:
            n += 1
            b = replace(b, text=f"{n}. {b.text}")
        out.append(b)
    return out


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
    blocks = _header(a) + answer_section(a, root) + methods_section(a)
    blocks += results_section(a, root) + robustness_section(a, root) + tuning_section(a, root)
    blocks += leakage_section(a, root)
    blocks += status_section(a, root)
    if compare is not None:
        blocks += compare_section(a, analyse(load_run(compare)), root)
    blocks = _numbered(blocks + references_section(a, root))
    (root / "report.md").write_text(to_markdown(blocks), encoding="utf-8")
    (root / "report.html").write_text(to_html(blocks, blocks[0].text, root), encoding="utf-8")

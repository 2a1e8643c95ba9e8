"""The report writer: files, section order, self-containment, degenerate runs, --compare."""

from __future__ import annotations

import re

import pytest

from harness.cli import main
from harness.errors import StoreError
from harness.reporting import _bib, load_run, write_report

from reporting_fakes import fake_results, write_fake_run

SECTIONS = [
    "1. Which encoding",
    "2. Methods",
    "3. Results",
    "4. Does the choice",
    "5. Leakage audit",
    "6. Cells without a score",
    "7. References",
]
FIGURES = [
    "decision_effects",
    "average_ranks",
    "critical_difference",
    "score_vs_cost",
    "heatmap_lin",
    "heatmap_gb",
    "leakage_audit",
]
TABLES = ["decision", "average_ranks", "robustness", "cost", "leakage_audit", "dataset_means_lin_roc_auc"]


@pytest.fixture(scope="module")
def report(sweep_dir, tmp_path_factory):
    import shutil

    out = tmp_path_factory.mktemp("report") / "run"
    shutil.copytree(sweep_dir, out)
    html = write_report(out)
    return out / "report", html


def test_files_written(report):
    root, html = report
    assert html == root / "report.html"
    for stem in FIGURES:
        assert (root / "figures" / f"{stem}.png").stat().st_size > 5000
        assert (root / "figures" / f"{stem}.svg").exists()
    for stem in TABLES:
        assert (root / "tables" / f"{stem}.csv").exists() and (root / "tables" / f"{stem}.tex").exists()
    assert (root / "references.bib").read_text().count("@") >= 6


def test_sections_in_order(report):
    md = (report[0] / "report.md").read_text()
    where = [md.index("## " + s) for s in SECTIONS]
    assert where == sorted(where)


def test_answer_names_a_choice_and_caveats(report):
    md = (report[0] / "report.md").read_text()
    answer = md[md.index("## 1.") : md.index("## 2.")]
    assert re.search(r"\*\*lin\*\* \(linear\).*: (use|keep) \*\*[\w-]+\*\*", answer)
    # the headline pools the 3 classification and 1 regression datasets of the sweep
    assert "each dataset's own metric over 4 dataset(s) against the reference" in answer
    assert "Caveat: No reference was configured" in answer
    assert "| RMSE | exploratory, uncorrected |" in answer  # the regression dataset alone
    assert "p = 0 " not in md and "p = 0)" not in md and "p = 0," not in md


def test_decision_csv_has_the_fixed_columns(report):
    import pandas as pd

    t = pd.read_csv(report[0] / "tables" / "decision.csv")
    fixed = "model encoder reference verdict chosen n_datasets effect lower upper p_noninferior prob_worse cost_ratio"
    fixed = fixed.split()  # the names outside scripts read, spelled out here on purpose
    assert list(t.columns[: len(fixed)]) == fixed
    assert set(t["verdict"]) <= {"superior", "non-inferior", "inferior", "inconclusive", "equivalent", "reference"}
    assert t.groupby("model")["chosen"].sum().ge(1).all()
    assert not t.loc[t["encoder"] == "te_none", "chosen"].any()  # leaky: never chosen
    tex = (report[0] / "tables" / "decision.tex").read_text()
    assert "p\\_noninferior" in tex


def test_leakage_audit_csv_has_the_fixed_columns(report):
    import pandas as pd

    t = pd.read_csv(report[0] / "tables" / "leakage_audit.csv")
    assert list(t.columns[:3]) == ["dataset", "model", "encoder"] and "flagged" in t
    assert set(t["encoder"]) == {"te_none"} and set(t["twin"]) == {"te_kfold"}


def test_robustness_has_one_row_per_slice(report):
    import pandas as pd

    t = pd.read_csv(report[0] / "tables" / "robustness.csv")
    assert not t.duplicated(["model", "axis", "slice"]).any()
    assert set(t["label"]) == {"exploratory, uncorrected"}


def test_methods_paragraph_from_manifest(report, sweep_dir):
    import json

    man = json.loads((sweep_dir / "manifest.json").read_text())
    md = (report[0] / "report.md").read_text()
    methods = md[md.index("## 2.") : md.index("## 3.")]
    assert man["config_hash"] in methods
    assert "1 × 3-fold cross-validation" in methods
    assert f"scikit-learn {man['packages']['scikit-learn']}" in methods
    assert "many (binary, 300 rows" in methods
    assert "primary metric was primary metric" not in methods
    # the sweep mixes tasks: each dataset is judged on its own task's metric
    assert (
        "Each dataset was scored on the primary metric of its task: ROC AUC for classification and RMSE for regression."
    ) in methods
    assert "multiclass" not in methods  # no multiclass dataset: no note on its ROC AUC
    assert f"levelfold {man['packages']['harness']}" in methods  # the distribution's name
    for cite in ("Demšar (2006)", "Nadeau & Bengio (2003)", "Bouckaert & Frank (2004)"):
        assert cite in methods


def _rows(pairs):
    import pandas as pd

    return pd.DataFrame(
        [
            {"dataset": f"d{i}", "encoder": "e", "model": "m", "status": "ok", "task": task, "primary_metric": metric}
            for i, (task, metric) in enumerate(pairs)
        ]
    )


@pytest.mark.parametrize(
    "pairs, sentence",
    [
        ([("binary", "roc_auc")], "The primary metric was ROC AUC."),
        ([("regression", "rmse")], "The primary metric was RMSE."),
        (
            [("binary", "roc_auc"), ("regression", "rmse")],
            "Each dataset was scored on the primary metric of its task: ROC AUC for classification "
            "and RMSE for regression.",
        ),
        (
            [("multiclass", "roc_auc"), ("regression", "mae")],
            "Each dataset was scored on the primary metric of its task: ROC AUC for classification "
            "and MAE for regression (ROC AUC: macro one-vs-rest average for multiclass targets).",
        ),
        ([("binary", "log_loss"), ("multiclass", "log_loss")], "The primary metric was log loss."),
    ],
)
def test_primary_metric_sentence_reads_for_every_task_mix(pairs, sentence):
    from harness.reporting.report import _primary_metric_text

    assert _primary_metric_text(_rows(pairs)) == sentence


def test_sections_are_numbered_consecutively(report):
    md = (report[0] / "report.md").read_text()
    numbers = [int(n) for n in re.findall(r"^## (\d+)\. ", md, flags=re.M)]
    assert numbers == list(range(1, len(numbers) + 1)) and len(numbers) >= len(SECTIONS)


def test_cost_table_columns_add_up_and_count_what_they_say(report):
    import pandas as pd

    md = (report[0] / "report.md").read_text()
    cost = pd.read_csv(report[0] / "tables" / "cost.csv")
    assert list(cost.columns) == [
        "encoder",
        "model",
        "encoder_s",
        "model_fit_s",
        "tune_s",
        "total_s",
        "n_features_out",
        "encoded_mb",
        "n_cells",
    ]
    assert (cost["tune_s"] == 0).all()  # an untuned run: no search time
    assert (cost["total_s"] - cost["encoder_s"] - cost["model_fit_s"] - cost["tune_s"]).abs().max() < 1e-12
    assert pd.api.types.is_integer_dtype(cost["n_features_out"])  # a count some fold had
    assert cost["n_cells"].eq(4 * 3).all()  # 4 datasets x 3 folds, every cell scored
    assert "total_s = encoder_s + model_fit_s + tune_s" in md and "n_rows" not in md


def test_heatmap_note_is_a_plain_sentence(report):
    md = (report[0] / "report.md").read_text()
    assert "lines split regimes" not in md
    assert ("A horizontal line separates datasets with fewer than 10, 10 to 100, and more than 100 levels.") in md


def test_report_of_a_run_with_rows_set_aside(run_dir):
    import json

    from reporting_fakes import SWEEP, run_sweep

    raw = json.loads(json.dumps(SWEEP))
    del raw["encoders"]["freq"]
    run_sweep(raw, run_dir)  # nothing to compute; freq's rows are set aside
    write_report(run_dir)
    md = (run_dir / "report" / "report.md").read_text()
    head = md[: md.index("## 1.")]
    assert "encoder 'freq' is no longer in the config" in head


def test_html_is_self_contained(report):
    html = (report[0] / "report.html").read_text()
    srcs = re.findall(r'<img[^>]*src="([^"]+)"', html)
    assert len(srcs) == len(FIGURES) and all(s.startswith("data:image/png;base64,") for s in srcs)
    assert not re.search(r'(src|href)="https?://', html)
    assert "<script src" not in html and "<link" not in html
    assert "<style>" in html


def test_references_follow_the_run(report):
    bib = (report[0] / "references.bib").read_text()
    for key in (
        "demsar2006",
        "nadeau2003",
        "bouckaert2004",
        "cestnik1990",
        "pargent2022",
        "prokhorenkova2018",
        "benavoli2017",
        "schuirmann1987",
        "corani2015",
    ):
        assert "{" + key + "," in bib
    for key in ("weinberger2009", "siddiqi2006", "micci2001"):
        assert key not in bib


@pytest.mark.parametrize(
    "spec, key",
    [
        ({"kind": "hashing"}, "weinberger2009"),
        ({"kind": "target", "statistic": "woe"}, "siddiqi2006"),
        ({"kind": "target", "smoothing": "sigmoid"}, "micci2001"),
        ({"kind": "target", "smoothing": "empirical-bayes"}, "micci2001"),
    ],
)
def test_encoder_references(spec, key):
    assert key in _bib.used_references({"e": spec})


def test_leakage_section_lists_the_uncrossfitted_setting(report):
    md = (report[0] / "report.md").read_text()
    leak = md[md.index("## 5.") : md.index("## 6.")]
    assert "| te_none | " in leak


# ------------------------------------------------------------------------ degenerate
def _degenerate(rng, case):
    if case == "one dataset":
        return fake_results(rng, n_datasets=1)
    if case == "one encoder":
        return fake_results(rng, encoders=("codes",))
    if case == "regression only":
        return fake_results(rng, task="regression", skill={"te": 0.05})
    df = fake_results(rng, models=("lin", "gb"))  # all failed for one model
    bad = df["model"] == "gb"
    df.loc[bad, "status"], df.loc[bad, "error"] = "failed", "ValueError: no"
    return df


@pytest.mark.parametrize(
    "case, note",
    [
        ("one dataset", "Figure skipped: critical-difference diagram"),
        ("one encoder", "Figure skipped: average-rank plot"),
        ("regression only", None),
        ("all failed for a model", "**gb** (gb)"),
    ],
)
def test_degenerate_runs_do_not_crash(tmp_path, rng, case, note):
    write_fake_run(_degenerate(rng, case), tmp_path)
    write_report(tmp_path)
    md = (tmp_path / "report" / "report.md").read_text()
    assert "## 7. References" in md
    if note:
        assert note in md
    if case == "all failed for a model":  # listed with reason, cells (4 x 3 folds), datasets
        assert "| failed | gb | codes | ValueError: no | 12 | d0, d1, d2, d3 |" in md


def test_rewrite_removes_stale_files(tmp_path, rng):
    write_fake_run(fake_results(rng, encoders=("codes",)), tmp_path)  # no figure: fast
    write_report(tmp_path)
    stale = tmp_path / "report" / "figures" / "old.png"
    stale.parent.mkdir(parents=True, exist_ok=True)
    stale.write_bytes(b"x")
    write_report(tmp_path)
    assert not stale.exists()


def test_private_alias_and_scrub_on_load(tmp_path, rng):
    df = fake_results(rng)
    df.loc[df["encoder"] == "codes", ["status", "error"]] = ["failed", "KeyError: 'hidden_level'"]
    write_fake_run(df, tmp_path, private=("d0",), aliases={"d0": "shop A"})
    run = load_run(tmp_path)
    assert "shop A" in set(run.results["dataset"]) and "d0" not in set(run.results["dataset"])
    errs = run.results.loc[run.results["dataset"] == "shop A", "error"]
    assert errs[errs != ""].eq("KeyError (message withheld: private dataset)").all()
    assert run.private == ("shop A",)


# --------------------------------------------------------------------------- compare
def test_compare_lists_changes(tmp_path, rng):
    before, now = tmp_path / "before", tmp_path / "now"
    write_fake_run(fake_results(rng, skill={"te": 0.03}), before)
    write_fake_run(
        fake_results(rng, n_datasets=5, encoders=("onehot", "codes", "te", "freq"), skill={"freq": 0.05}), now
    )
    write_report(now, compare=before)
    md = (now / "report" / "report.md").read_text()
    part = md[md.index("## 7.") : md.index("## 8.")]  # the compare section comes 7th
    assert "Encoders: added freq; removed none." in part
    assert "Datasets: added d4; removed none." in part
    row = re.search(r"\| lin \| ROC AUC \| (\w+) \| (\w+) \| 4 \| 5 \| (.*) \|", part)
    assert row and "te " in row.group(3)  # before -> now, datasets, rank changes
    assert "shared dataset × encoder × model" in part


# ------------------------------------------------------------------------------ errors
def test_missing_store_raises(tmp_path):
    with pytest.raises(StoreError, match="no results store"):
        write_report(tmp_path / "nothing")


def test_unreadable_manifest_raises(tmp_path, rng):
    write_fake_run(fake_results(rng), tmp_path)
    (tmp_path / "manifest.json").write_text("{not json")
    with pytest.raises(StoreError, match="manifest .* cannot be read"):
        load_run(tmp_path)


def test_cli_report(tmp_path, rng, capsys):
    write_fake_run(fake_results(rng, encoders=("codes",)), tmp_path)
    assert main(["report", str(tmp_path)]) == 0
    assert "report.html" in capsys.readouterr().out


def test_unknown_block_is_refused():
    from harness.reporting import _html

    with pytest.raises(TypeError, match="unknown block int"):
        _html.to_markdown([1])
    with pytest.raises(TypeError, match="unknown block str"):
        _html.to_html(["x"], "t", ".")


def test_one_dataset_answers_for_that_dataset_with_fold_pairs(tmp_path, rng):
    write_fake_run(fake_results(rng, n_datasets=1, folds=4, skill={"te": 0.05}), tmp_path)
    write_report(tmp_path)
    md = (tmp_path / "report" / "report.md").read_text()
    assert "Scope: this answer holds for the dataset d0 only" in md
    assert "corrected resampled t" in md
    assert "Only 4 outer folds in total" in md and "`protocol.repeats = 3`" in md


def test_small_concordant_tables_never_print_p_zero(tmp_path, rng):
    df = fake_results(rng, n_datasets=2, skill={"te": 0.2, "codes": -0.2})
    write_fake_run(df, tmp_path)
    write_report(tmp_path)
    md = (tmp_path / "report" / "report.md").read_text()
    assert not re.search(r"p = 0(?![.\d])", md)


def test_rescaled_regression_target_gives_an_identical_decision_csv(tmp_path, rng):
    # multiplying a regression target by 1000 multiplies its RMSE (test and train) by 1000:
    # the unit-free effects, and so every number of decision.csv, must not move
    import pandas as pd

    cls = fake_results(rng, n_datasets=5, skill={"te": 0.01, "codes": -0.003})
    reg = fake_results(rng, n_datasets=3, task="regression", skill={"te": 0.05}).assign(
        dataset=lambda d: "r" + d["dataset"], cell_id=lambda d: "r" + d["cell_id"]
    )
    df = pd.concat([cls, reg], ignore_index=True)
    scaled = df.copy()
    scaled[["rmse", "train_rmse"]] *= 1000.0
    write_fake_run(df, tmp_path / "a")
    write_fake_run(scaled, tmp_path / "b")
    write_report(tmp_path / "a")
    write_report(tmp_path / "b")
    a = (tmp_path / "a" / "report" / "tables" / "decision.csv").read_bytes()
    b = (tmp_path / "b" / "report" / "tables" / "decision.csv").read_bytes()
    assert a == b


def test_an_irrelevant_encoder_does_not_change_the_choice(tmp_path, rng):
    # removing an encoder that is neither the reference nor the choice leaves every
    # model's choice, verdict and effect in decision.csv as they were
    import pandas as pd

    df = fake_results(
        rng,
        n_datasets=10,
        encoders=("codes", "onehot", "te", "freq"),
        models=("lin", "gb"),
        skill={"codes": 0.001, "freq": -0.05},
    )
    import json

    write_fake_run(df, tmp_path / "all")
    write_fake_run(df.loc[df["encoder"] != "freq"], tmp_path / "less")
    for d in ("all", "less"):  # loop over the two runs: the incumbent is te
        path = tmp_path / d / "manifest.json"
        man = json.loads(path.read_text())
        man["config"] = {**man.get("config", {}), "decision": {"reference": "te"}}
        path.write_text(json.dumps(man))
        write_report(tmp_path / d)
    read = lambda d: pd.read_csv(tmp_path / d / "report" / "tables" / "decision.csv")  # noqa: E731
    full, less = read("all"), read("less")
    chosen = lambda t: t.loc[t["chosen"], ["model", "encoder"]].values.tolist()  # noqa: E731
    assert chosen(full) == chosen(less)
    assert ["lin", "codes"] in chosen(full)  # a switch away from the incumbent, kept

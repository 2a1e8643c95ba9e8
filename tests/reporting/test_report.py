"""The report writer: files, section order, self-containment, degenerate runs, --compare."""

from __future__ import annotations

import re

import numpy as np
import pytest

from harness.cli import main
from harness.errors import StoreError
from harness.reporting import _bib, load_run, write_report
from reporting_fakes import fake_results, write_fake_run

SECTIONS = ["1. Which encoding", "2. Methods", "3. Results", "4. Does the verdict",
            "5. Leakage audit", "6. Cells without a score", "8. References"]
FIGURES = ["average_ranks", "critical_difference", "score_vs_cost", "heatmap_lin",
           "heatmap_gb", "leakage_audit"]
TABLES = ["average_ranks", "robustness", "cost", "leakage_audit", "dataset_means_lin_roc_auc"]


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
    answer = md[md.index("## 1."):md.index("## 2.")]
    assert re.search(r"\*\*lin\*\* \(linear\).*(use|the rule.s pick is) \*\*[\w-]+\*\*", answer)
    # the headline pools the 3 classification and 1 regression datasets of the sweep
    assert "primary metric (per dataset) over 4 complete dataset(s)" in answer
    assert "Caveat: only 4 datasets" in answer
    assert "| RMSE |" in answer  # the regression dataset also gets its own row


def test_methods_paragraph_from_manifest(report, sweep_dir):
    import json

    man = json.loads((sweep_dir / "manifest.json").read_text())
    md = (report[0] / "report.md").read_text()
    methods = md[md.index("## 2."):md.index("## 3.")]
    assert man["config_hash"] in methods
    assert "1 × 3-fold cross-validation" in methods
    assert f"scikit-learn {man['packages']['scikit-learn']}" in methods
    assert "many (binary, 300 rows" in methods
    for cite in ("Demšar (2006)", "Nadeau & Bengio (2003)", "Bouckaert & Frank (2004)"):
        assert cite in methods


def test_html_is_self_contained(report):
    html = (report[0] / "report.html").read_text()
    srcs = re.findall(r'<img[^>]*src="([^"]+)"', html)
    assert len(srcs) == len(FIGURES) and all(s.startswith("data:image/png;base64,") for s in srcs)
    assert not re.search(r'(src|href)="https?://', html)
    assert "<script src" not in html and "<link" not in html
    assert "<style>" in html


def test_references_follow_the_run(report):
    bib = (report[0] / "references.bib").read_text()
    for key in ("demsar2006", "nadeau2003", "bouckaert2004", "cestnik1990", "pargent2022",
                "prokhorenkova2018"):
        assert "{" + key + "," in bib
    for key in ("weinberger2009", "siddiqi2006", "benavoli2017", "micci2001"):
        assert key not in bib


@pytest.mark.parametrize("spec, key", [
    ({"kind": "hashing"}, "weinberger2009"),
    ({"kind": "target", "statistic": "woe"}, "siddiqi2006"),
    ({"kind": "target", "smoothing": "sigmoid"}, "micci2001"),
    ({"kind": "target", "smoothing": "empirical-bayes"}, "micci2001"),
])
def test_encoder_references(spec, key):
    assert key in _bib.used_references({"e": spec})


def test_leakage_section_lists_the_uncrossfitted_setting(report):
    md = (report[0] / "report.md").read_text()
    leak = md[md.index("## 5."):md.index("## 6.")]
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


@pytest.mark.parametrize("case, note", [
    ("one dataset", "Figure skipped: critical-difference diagram"),
    ("one encoder", "Figure skipped: average-rank plot"),
    ("regression only", None),
    ("all failed for a model", "no recommendation"),
])
def test_degenerate_runs_do_not_crash(tmp_path, rng, case, note):
    write_fake_run(_degenerate(rng, case), tmp_path)
    write_report(tmp_path)
    md = (tmp_path / "report" / "report.md").read_text()
    assert "## 8. References" in md
    if note:
        assert note in md
    if case == "all failed for a model":  # listed with reason, cells (4 x 3 folds), datasets
        assert "| failed | gb | codes | ValueError: no | 12 | d0, d1, d2, d3 |" in md


def test_rewrite_removes_stale_files(tmp_path, rng):
    write_fake_run(fake_results(rng, encoders=("codes",)), tmp_path)  # no figure: fast
    write_report(tmp_path)
    stale = tmp_path / "report" / "figures" / "old.png"
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
    write_fake_run(fake_results(rng, n_datasets=5, encoders=("onehot", "codes", "te", "freq"),
                                skill={"freq": 0.05}), now)
    write_report(now, compare=before)
    md = (now / "report" / "report.md").read_text()
    part = md[md.index("## 7."):md.index("## 8.")]
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


@pytest.mark.parametrize("n", [3, 5, 6, 8])
@pytest.mark.parametrize("k", [2, 4])
def test_wilcoxon_floor_matches_exact_wilcoxon(n, k):
    from scipy import stats as sps

    from harness import stats

    # scipy's exact signed-rank test: all N differences positive is the most extreme case
    floor = sps.wilcoxon(np.arange(1.0, n + 1), method="exact").pvalue
    assert stats.wilcoxon_floor(n, k) == pytest.approx(min(1.0, (k - 1) * floor))  # Holm (1979)


def test_powerless_comparison_is_reported_as_provisional(tmp_path, rng):
    # two datasets: no Wilcoxon test can reach p < 0.05, so the best rank is reported as
    # provisional instead of rewarding the cheapest encoder for the tests' lack of power
    write_fake_run(fake_results(rng, n_datasets=2, skill={"te": 0.05, "codes": -0.05}), tmp_path)
    write_report(tmp_path)
    md = (tmp_path / "report" / "report.md").read_text()
    assert "te (provisional)" in md
    assert "This is provisional" in md and "provisionally use **te**" in md
    assert "no Holm-corrected Wilcoxon test can reach p < 0.05" in md

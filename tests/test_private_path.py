"""`levelfold run --data FILE`: alias and description, no absolute path in any output, and a
default output directory of its own per config hash."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from harness.cli import main
from harness.config import private_config

BASE = """
[experiment]
name = "borrowed"
description = "A borrowed description that must not title a private run."
seed = 3
[protocol]
folds = 2
[encoders.codes]
kind = "integer"
[encoders.te]
kind = "target"
[models.lin]
family = "linear"
"""


@pytest.fixture
def workspace(tmp_path, monkeypatch):
    rng = np.random.default_rng(4)
    # invented data: a shop column, a spend column and a churn flag
    frame = pd.DataFrame(
        {
            "shop": [f"s{i}" for i in rng.integers(0, 8, 120)],
            "spend": rng.normal(size=120),
            "churned": rng.integers(0, 2, 120),
        }
    )
    data = tmp_path / "deep" / "folder" / "secret_customers.csv"
    data.parent.mkdir(parents=True)
    frame.to_csv(data, index=False)
    (tmp_path / "base.toml").write_text(BASE)
    monkeypatch.chdir(tmp_path)
    return tmp_path, data


def _outputs(directory):
    return [
        p
        for p in directory.rglob("*")
        if p.is_file() and p.suffix in (".json", ".csv", ".md", ".html", ".tex", ".bib", ".svg")
    ]


def _run(data, *extra):
    return main(["run", "--data", str(data), "--target", "churned", "--config", "base.toml", "--quiet", *extra])


def test_alias_titles_the_report_and_hides_path_and_file_name(workspace, capsys):
    tmp, data = workspace
    assert _run(data, "--alias", "Churn table", "--description", "Churn in the third quarter.") == 0
    out = capsys.readouterr().out
    (directory,) = (tmp / "results").iterdir()
    assert directory.name.startswith("private-Churn-table-")
    assert main(["report", str(directory)]) == 0
    report = (directory / "report" / "report.md").read_text()
    assert report.startswith("# Encoding benchmark report: Churn table")
    assert "Churn in the third quarter." in report and "borrowed description" not in report
    for path in _outputs(directory):
        text = path.read_text(errors="ignore")
        assert str(tmp) not in text and "secret_customers" not in text, path
    assert str(tmp) not in out and "secret_customers" not in out


def test_without_alias_the_title_says_private_dataset_and_only_the_file_name_shows(workspace, capsys):
    tmp, data = workspace
    assert _run(data) == 0
    (directory,) = (tmp / "results").iterdir()
    assert main(["report", str(directory)]) == 0
    report = (directory / "report" / "report.md").read_text()
    assert report.startswith("# Encoding benchmark report: private dataset")
    for path in _outputs(directory):
        assert str(data.parent) not in path.read_text(errors="ignore"), path


def test_two_data_runs_with_different_settings_never_share_a_store(workspace):
    tmp, data = workspace
    assert _run(data) == 0
    assert _run(data) == 0  # the same settings resume in the same directory
    assert len(list((tmp / "results").iterdir())) == 1
    (tmp / "other.toml").write_text(BASE.replace("folds = 2", "folds = 3"))
    assert main(["run", "--data", str(data), "--target", "churned", "--config", "other.toml", "--quiet"]) == 0
    assert _run(data, "--alias", "x") == 0
    assert len(list((tmp / "results").iterdir())) == 3


def test_alias_without_data_is_refused(capsys):
    assert main(["run", "configs/quickstart.toml", "--alias", "x", "--dry-run"]) == 2
    assert "--alias and --description name a --data dataset" in " ".join(capsys.readouterr().err.split())


@pytest.mark.parametrize(
    "section, line, expected",
    [
        (
            "[protocol]",
            'primary = "log_loss"',
            r"`protocol.primary` in base.toml with --data secret_customers.csv was renamed 'classification_metric' "
            r"\(.*\); write classification_metric = 'log_loss' instead.",
        ),
        (
            "[models.lin]",
            "max_rows = 5000",
            r"`models.lin.max_rows` in base.toml with --data secret_customers.csv was renamed 'skip_above_rows' "
            r"\(skip the cells whose training fold has more rows\); write skip_above_rows = 5000 instead.",
        ),
    ],
)
def test_a_borrowed_config_with_an_old_key_name_is_refused_with_the_new_name(
    workspace, capsys, section, line, expected
):
    tmp, data = workspace
    (tmp / "base.toml").write_text(BASE.replace(section, f"{section}\n{line}"))
    assert _run(data, "--dry-run") == 2
    assert re.search(expected, " ".join(capsys.readouterr().err.split()))


def test_the_private_path_keeps_the_borrowed_row_limit_of_a_model(workspace):
    tmp, data = workspace
    (tmp / "base.toml").write_text(BASE.replace("[models.lin]", "[models.lin]\nskip_above_rows = 50"))
    cfg = private_config(str(data), "churned", tmp / "base.toml")
    assert cfg.models[0].skip_above_rows == 50
    assert cfg.datasets[0].params == {"path": str(data), "target": "churned"}

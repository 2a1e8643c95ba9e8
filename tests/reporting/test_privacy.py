"""Privacy: a private file's raw category values never reach the report, figures or tables.

A small CSV carries planted marker strings as category values and as class labels; the
full pipeline (config -> runner -> store -> report) runs on it, and every file under
``DIR/report/`` is searched for the markers. Only column names, counts and aggregates may
appear, and the dataset is shown under its config alias.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.config import parse_config
from harness.reporting import write_report
from harness.runner import execute, plan

MARK = "ZZMARKER"


@pytest.fixture(scope="module")
def private_run(tmp_path_factory):
    rng = np.random.default_rng(11)
    tmp = tmp_path_factory.mktemp("private")
    n = 180
    # invented data: every category value and class label carries the marker
    shop = rng.integers(0, 12, n)
    branch = np.array([f"{MARK}_branch_{i}" for i in shop], dtype=object)
    branch[:3] = [f"{MARK}_once_{i}" for i in range(3)]  # singletons: unseen in some test fold
    frame = pd.DataFrame(
        {
            "branch": branch,
            "segment": [f"{MARK}_seg_{i}" for i in rng.integers(0, 3, n)],
            "spend": rng.normal(size=n),
            "churned": np.where(rng.random(n) < 0.3 + 0.04 * (shop % 5), f"{MARK}_yes", f"{MARK}_no"),
        }
    )
    path = tmp / "clients_secret.csv"
    frame.to_csv(path, index=False)
    raw = {
        "experiment": {"name": "private-check", "seed": 2},
        "protocol": {"folds": 3},
        "datasets": {"clients": {"source": "file", "path": str(path), "target": "churned", "alias": "client table"}},
        "encoders": {
            "onehot": {"kind": "onehot"},
            "te": {"kind": "target"},
            "woe": {"kind": "target", "statistic": "woe"},
            "te_none": {"kind": "target", "crossfit": "none"},
            # refuses unseen levels: fails, and its error message quotes one
            "strict": {"kind": "onehot", "unseen": "error"},
        },
        "models": {"lin": {"family": "linear"}},
    }
    out = tmp / "run"
    execute(plan(parse_config(raw)), out, progress=False)
    write_report(out)
    return out


def _report_files(out):
    return [p for p in (out / "report").rglob("*") if p.is_file()]


def test_no_marker_in_any_report_file(private_run):
    files = _report_files(private_run)
    assert any(p.suffix == ".png" for p in files) and any(p.suffix == ".csv" for p in files)
    leaks = [str(p) for p in files if MARK.encode() in p.read_bytes()]
    assert leaks == []


def test_failure_messages_are_withheld_in_the_store_and_exports(private_run):
    from harness.store import read_results

    df = read_results(private_run)
    failed = df[df["status"] == "failed"]
    assert len(failed) and not failed["error"].str.contains(MARK).any()
    assert failed["error"].str.contains("message withheld: private dataset").all()
    for export in ("results.csv", "results.parquet", "manifest.json"):
        assert MARK.encode() not in (private_run / export).read_bytes(), export
    text = (private_run / "report" / "report.md").read_text()
    assert "message withheld: private dataset" in text


def test_alias_replaces_label_and_file_name(private_run):
    text = (private_run / "report" / "report.md").read_text()
    assert "client table" in text
    assert "clients_secret" not in text  # the file name is not shown either
    assert "private file" in text
    # column names and counts are allowed and shown
    assert "branch (" in text and "segment (3)" in text


@pytest.mark.parametrize("suffix", [".csv", ".tex", ".svg", ".html", ".md", ".bib"])
def test_every_kind_of_output_was_searched(private_run, suffix):
    assert any(p.suffix == suffix for p in _report_files(private_run))

"""The methods paragraph states each dataset's grouping, grouped cross-fitting, the
scaling policy, the missing-value policy and the rows set aside; and a clustered table
(rows repeated with their outcome) is warned about with a pointer to `group`."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.config import parse_config
from harness.models import SCALING_POLICY
from harness.reporting.report import _methods_text, analyse, load_run
from harness.runner import execute, plan
from harness.schema import Manifest


def _tables(tmp):
    rng = np.random.default_rng(8)
    # invented: incidents of 5 rows sharing one outcome, recorded with a site and a reading
    incidents = np.repeat(np.arange(60), 5)
    site = rng.integers(0, 12, 60)[incidents]
    outcome = rng.integers(0, 2, 60)[incidents]
    grouped = pd.DataFrame(
        {"site": [f"s{v}" for v in site], "reading": rng.normal(size=300), "incident": incidents, "y": outcome}
    )
    grouped.to_csv(tmp / "grouped.csv", index=False)
    # the same incidents without their id, each row copied as recorded: exact duplicates
    copies = grouped.drop(columns="reading").assign(reading=np.round(rng.normal(size=60), 3)[incidents])
    copies.drop(columns="incident").to_csv(tmp / "copies.csv", index=False)


def _raw(tmp, encoders=None):
    return {
        "experiment": {"name": "methods", "seed": 1},
        "protocol": {"folds": 3},
        "datasets": {
            "incidents": {"source": "file", "path": str(tmp / "grouped.csv"), "target": "y", "group": "incident"},
            "copies": {"source": "file", "path": str(tmp / "copies.csv"), "target": "y"},
        },
        "encoders": encoders
        or {"codes": {"kind": "integer"}, "te": {"kind": "target"}, "codes_nan": {"kind": "integer", "missing": "nan"}},
        "models": {"lin": {"family": "linear"}, "gb": {"family": "lightgbm", "n_estimators": 10}},
    }


@pytest.fixture(scope="module")
def methods(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("methods")
    _tables(tmp)
    with pytest.warns(UserWarning, match=r"dataset 'copies': \d+% of test rows have an exact duplicate.*set `group"):
        the_plan = plan(parse_config(_raw(tmp)))
    out = tmp / "run"
    execute(the_plan, out, progress=False)
    raw = _raw(tmp, {"codes": {"kind": "integer"}, "te": {"kind": "target"}})
    with pytest.warns(UserWarning):
        execute(plan(parse_config(raw)), out, progress=False)
    run = load_run(out)
    return " ".join(_methods_text(analyse(run, n_boot=50)).split()), run


def test_grouping_and_grouped_crossfitting_are_stated(methods):
    text, _ = methods
    assert "Outer folds were grouped for incidents by column 'incident'" in text
    assert "leave-one-out became leave-one-group-out" in text
    assert "The other datasets (copies) were split by row" in text


def test_clustered_table_is_named_with_its_duplicate_share(methods):
    text, run = methods
    share = run.manifest.datasets["copies"].duplicate_test_share
    assert share >= 0.2 and run.manifest.datasets["copies"].clustered
    assert f"copies ({share:.0%})" in text
    assert run.manifest.datasets["incidents"].duplicate_test_share == 0.0


def test_scaling_and_missing_value_policies_are_stated(methods):
    text, _ = methods
    assert f"For the models on scaled inputs (lin), {SCALING_POLICY}" in " ".join(text.split())
    assert "A missing categorical value was a level of its own under every encoder." in text


def test_set_aside_rows_are_stated(methods):
    text, run = methods
    n = run.set_aside["encoder 'codes_nan' is no longer in the config"]
    assert n == 2 * 3 * 2  # datasets x folds x models
    assert f"{n} row(s) of cells no longer in the current config were set aside" in text
    assert set(run.results["encoder"]) == {"codes", "te"}


def test_a_manifest_without_grouping_records_states_nothing_about_grouping():
    from harness.reporting.report import _grouping_text, _policy_text

    old = Manifest.from_dict({"datasets": {"a": {"task": "binary"}, "b": {"task": "regression"}}})
    assert _grouping_text(old) == "" and _policy_text(old) == ""

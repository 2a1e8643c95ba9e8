"""Command-line misuse gets one clear paragraph and a non-zero exit, never a traceback."""

from __future__ import annotations

import pytest

from harness.cli import main

from _runtools import tiny_config


@pytest.fixture
def tiny(tmp_path):
    return str(tiny_config(tmp_path / "tiny.toml"))


@pytest.mark.parametrize(
    "args, pattern",
    [
        (["run"], "needs a CONFIG file"),
        (["run", "{cfg}", "--data", "x.csv"], "either a CONFIG or --data FILE"),
        (["run", "--data", "x.csv"], "--data needs --target COLUMN"),
        (
            ["run", "--data", "x.csv", "--target", "y", "--config", "no/such.toml"],
            r"--config no/such.toml does not exist",
        ),
        (["run", "{cfg}", "--jobs", "0"], "--jobs must be an integer >= 1; got 0"),
        (["run", "{cfg}", "--only", "nothing-like-this", "--dry-run"], "--only 'nothing-like-this' matches no cell"),
        (["run", "no/such/config.toml"], "config file no/such/config.toml does not exist"),
        (["status", "{tmp}/empty"], "no results store at"),
    ],
)
def test_misuse_is_refused_clearly(args, pattern, tiny, tmp_path, capsys):
    import re

    args = [a.format(cfg=tiny, tmp=tmp_path) for a in args]
    code = main(args)
    err = " ".join(capsys.readouterr().err.split())
    assert code in (2, 3) and "Traceback" not in err
    assert re.search(pattern, err), err


def test_private_file_shortcut_runs_with_a_base_config(tmp_path, tiny, capsys):
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(0)
    data = tmp_path / "mine.csv"
    pd.DataFrame({"plan": rng.choice(["a", "b", "c"], 80), "y": rng.integers(0, 2, 80)}).to_csv(data, index=False)
    code = main(
        ["run", "--data", str(data), "--target", "y", "--config", tiny, "--out", str(tmp_path / "o"), "--quiet"]
    )
    assert code == 0
    assert "2 cells (2 computed, 0 reused)" in capsys.readouterr().out


def test_one_dataset_with_few_folds_warns_with_the_repeats_needed(tmp_path, capsys):
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(0)  # invented table (demo data)
    data = tmp_path / "shop.csv"
    pd.DataFrame({"store": rng.choice(list("abcdef"), 200), "y": rng.integers(0, 2, 200)}).to_csv(data, index=False)
    code = main(
        [
            "run",
            "--data",
            str(data),
            "--target",
            "y",
            "--config",
            "configs/quickstart.toml",
            "--dry-run",
            "--out",
            str(tmp_path / "o"),
        ]
    )
    err = " ".join(capsys.readouterr().err.split())
    assert code == 0
    assert "5 folds x 1 repeat(s) = 5 outer folds" in err and "`protocol.repeats = 2`" in err


def test_dry_run_previews_the_columns_detected_in_a_data_file(tmp_path, capsys):
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(1)  # invented table (demo data): a bakery chain's sell-outs
    frame = pd.DataFrame(
        {
            "branch": rng.choice([f"BRANCH_{i}" for i in range(23)], 300),
            "weekday": rng.choice(["MON", "TUE", "SAT"], 300),
            "temp_c": rng.normal(15, 5, 300).round(1),
            "sold_out": rng.integers(0, 2, 300),
        }
    )
    frame.to_csv(tmp_path / "bakery.csv", index=False)
    args = ["run", "--data", str(tmp_path / "bakery.csv"), "--target", "sold_out", "--dry-run"]
    assert main([*args, "--config", "configs/quickstart.toml", "--out", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out
    n_branch, n_day = frame["branch"].nunique(), frame["weekday"].nunique()
    assert (
        "  dataset bakery: 300 rows, binary, target 'sold_out'\n"
        f"    categorical (2): branch ({n_branch} levels), weekday ({n_day} levels)\n"
        "    numeric (1): temp_c\n"
    ) in out
    assert "BRANCH_" not in out and "SAT" not in out  # names and counts only, never a value


def test_dry_run_lists_only_cells_to_compute_and_counts_the_rest(tmp_path, capsys):
    config = tiny_config(
        tmp_path / "many.toml",
        name="many",
        folds=10,
        n_rows=200,
        encoders={"a": "integer", "b": "frequency", "c": "onehot"},
        models={"lin": {"family": "linear"}, "knn": {"family": "knn"}},
    )
    assert main(["run", str(config), "--dry-run", "--out", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out.splitlines()
    todo = [line for line in out if line.startswith("  todo ")]
    assert "60 cells; 60 to compute" in out[0]
    assert len(todo) == 40 and out[-1] == "  ... and 20 more to compute (finished cells are not listed)"
    assert not any(line.startswith("  done ") for line in out)


def _help(capsys, *args) -> str:
    with pytest.raises(SystemExit) as info:
        main([*args, "--help"])
    assert info.value.code == 0
    return " ".join(capsys.readouterr().out.split())


def test_run_help_shows_readable_metavars(capsys):
    text = _help(capsys, "run")
    assert "usage: levelfold run" in text
    assert "CONFIG_OPT" not in text and "--config BASE_CONFIG" in text
    assert "--data FILE" in text and "--target COLUMN" in text and "--out DIR" in text


def test_report_help_says_which_run_is_before(capsys):
    text = _help(capsys, "report")
    assert "--compare OTHER_DIR" in text
    assert "an earlier run, the 'before': the report adds what changed from OTHER_DIR to DIR" in text
    assert "(with --compare: the run 'now')" in text


def test_console_script_is_levelfold_and_the_version_has_one_source():
    # the installed distribution (pyproject.toml): PyPI's `harness` is another project
    from importlib import metadata

    import harness
    from harness.cli import PROG

    scripts = {e.name: e.value for e in metadata.entry_points(group="console_scripts")}
    assert PROG == "levelfold" and scripts.get("levelfold") == "harness.cli:main"
    assert "harness" not in scripts, "stale metadata of the old name: rerun `make` (it removes it)"
    assert metadata.version("levelfold") == harness.__version__

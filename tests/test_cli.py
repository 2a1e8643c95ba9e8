"""Command-line misuse gets one clear paragraph and a non-zero exit, never a traceback."""

from __future__ import annotations

import pytest

from harness.cli import main

TINY = (
    '[experiment]\nname = "tiny"\n[protocol]\nfolds = 2\n'
    '[datasets.toy]\nsource = "synthetic"\nn_rows = 60\ncardinalities = [4]\ntask = "binary"\n'
    '[encoders.codes]\nkind = "integer"\n[models.lin]\nfamily = "linear"\n'
)


@pytest.fixture
def tiny(tmp_path):
    path = tmp_path / "tiny.toml"
    path.write_text(TINY)
    return str(path)


@pytest.mark.parametrize("args, pattern", [
    (["run"], "needs a CONFIG file"),
    (["run", "{cfg}", "--data", "x.csv"], "either a CONFIG or --data FILE"),
    (["run", "--data", "x.csv"], "--data needs --target COLUMN"),
    (["run", "--data", "x.csv", "--target", "y", "--config", "no/such.toml"], r"--config no/such.toml does not exist"),
    (["run", "{cfg}", "--jobs", "0"], "--jobs must be an integer >= 1; got 0"),
    (["run", "{cfg}", "--only", "nothing-like-this", "--dry-run"], "--only 'nothing-like-this' matches no cell"),
    (["run", "no/such/config.toml"], "config file no/such/config.toml does not exist"),
    (["status", "{tmp}/empty"], "no results store at"),
])
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
    code = main(["run", "--data", str(data), "--target", "y", "--config", tiny, "--out", str(tmp_path / "o"), "--quiet"])
    assert code == 0
    assert "2 cells (2 computed, 0 reused)" in capsys.readouterr().out


def test_one_dataset_with_few_folds_warns_with_the_repeats_needed(tmp_path, capsys):
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(0)  # invented table (demo data)
    data = tmp_path / "shop.csv"
    pd.DataFrame({"store": rng.choice(list("abcdef"), 200), "y": rng.integers(0, 2, 200)}
                 ).to_csv(data, index=False)
    code = main(["run", "--data", str(data), "--target", "y", "--config",
                 "configs/quickstart.toml", "--dry-run", "--out", str(tmp_path / "o")])
    err = " ".join(capsys.readouterr().err.split())
    assert code == 0
    assert "5 folds x 1 repeat(s) = 5 outer folds" in err and "`protocol.repeats = 2`" in err


def test_dry_run_lists_only_cells_to_compute_and_counts_the_rest(tmp_path, capsys):
    config = tmp_path / "many.toml"
    config.write_text(
        '[experiment]\nname = "many"\n[protocol]\nfolds = 10\n'
        '[datasets.toy]\nsource = "synthetic"\nn_rows = 200\ncardinalities = [4]\ntask = "binary"\n'
        '[encoders.a]\nkind = "integer"\n[encoders.b]\nkind = "frequency"\n'
        '[encoders.c]\nkind = "onehot"\n[models.lin]\nfamily = "linear"\n'
        '[models.knn]\nfamily = "knn"\n')
    assert main(["run", str(config), "--dry-run", "--out", str(tmp_path / "o")]) == 0
    out = capsys.readouterr().out.splitlines()
    todo = [line for line in out if line.startswith("  todo ")]
    assert "60 cells; 60 to compute" in out[0]
    assert len(todo) == 40 and out[-1] == "  ... and 20 more to compute (finished cells are not listed)"
    assert not any(line.startswith("  done ") for line in out)

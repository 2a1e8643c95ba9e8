"""The encoder speed benchmark runs end to end on a tiny column and agrees with scikit-learn."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness import bench
from harness.errors import ConfigError


def test_bench_table_on_tiny_data(seed):
    table = bench.run_encoder_bench(n_rows=2_000, cardinalities=(5, 300), repeats=1, seed=seed, wide=3)
    assert list(table.columns) == bench.RESULT_COLUMNS
    assert set(table["kind"]) == {"integer", "onehot", "hashing", "frequency", "target", *bench.NEWER_KINDS}
    assert set(table["dtype"]) == {"object", "str", "category"}
    assert len(table) == 3 * 3 * 9 and set(table["columns"]) == {1, 3}
    newer = table["kind"].isin(bench.NEWER_KINDS)
    assert (table.loc[newer, "reference"] == bench.TARGET_REFERENCE).all()
    # every output equals the reference's, on every dtype (scikit-learn, pandas)
    assert table["identical"].all(), table.to_string()
    np.testing.assert_allclose(table["over_floor"], table["ours_s"] / table["floor_s"])


@pytest.mark.parametrize("dtype", bench.DTYPES)
def test_frames_of_each_dtype_hold_the_same_values(dtype):
    frame = bench.zipf_frame(500, 20, 2, dtype, np.random.default_rng(0))
    same = bench.zipf_frame(500, 20, 2, "object", np.random.default_rng(0))
    assert frame.shape == (500, 2) and (frame.astype(object) == same).all().all()
    assert str(frame.dtypes.iloc[0]) == dtype


def test_floor_counts_levels():
    frame = pd.DataFrame({"c": ["a", "b", "a", None]})
    assert [list(c) for c in bench.floor(frame)] == [[2, 1]]


def test_target_check_reads_the_table():
    table = pd.DataFrame(
        {"kind": ["integer", "integer"], "dtype": ["str", "str"], "ratio": [6.0, 4.0], "over_floor": [1.5, 2.0]}
    )
    checked = bench.check_targets(table).set_index("measure")
    assert checked.loc["ratio", "worst"] == 4.0 and not checked.loc["ratio", "met"]
    assert checked.loc["over_floor", "worst"] == 2.0 and checked.loc["over_floor", "met"]


def test_main_writes_csv(tmp_path, capsys):
    out = tmp_path / "bench.csv"
    argv = ["--rows", "500", "--cardinalities", "4", "--repeats", "1", "--wide", "2", "--output", str(out)]
    assert bench.main(argv) == 0
    assert out.exists() and "ratio" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("argv", "match"),
    [
        (["--cardinalities", "ten"], "--cardinalities must be a comma-separated list"),
        (["--rows", "0"], "--rows and --repeats must be integers >= 1"),
        (["--dtypes", "float"], "--dtypes must be a comma-separated list of object, str, category"),
    ],
)
def test_main_rejects_bad_options(argv, match):
    with pytest.raises(ConfigError, match=match):
        bench.main(argv)


def test_newer_kinds_are_held_to_their_target_at_one_column_of_1000_levels_only():
    # within 3x of our k-fold target statistics at 1,000 levels; other shapes shown only
    table = pd.DataFrame(
        {
            "kind": ["glmm"] * 3,
            "dtype": ["str"] * 3,
            "columns": [1, 1, 10],
            "cardinality": [1_000, 100_000, 1_000],
            "ratio": [0.5, 0.1, 0.2],
            "over_floor": [np.nan] * 3,
        }
    )
    checked = bench.check_targets(table)
    assert len(checked) == 1 and checked.loc[0, "worst"] == 0.5 and checked.loc[0, "met"]

"""The encoder speed benchmark runs end to end on a tiny column and agrees with scikit-learn."""

from __future__ import annotations

import pytest

from harness import bench
from harness.errors import ConfigError


def test_bench_table_on_tiny_data(seed):
    table = bench.run_encoder_bench(n_rows=2_000, cardinalities=(5, 300), repeats=1, seed=seed)
    assert list(table.columns) == [
        "kind", "cardinality", "ours_s", "reference_s", "ratio", "identical"
    ]
    assert set(table["kind"]) == {"integer", "onehot", "hashing", "frequency", "target"}
    assert len(table) == 10
    assert table["identical"].all(), table.to_string()


def test_main_writes_csv(tmp_path, capsys):
    out = tmp_path / "bench.csv"
    argv = ["--rows", "500", "--cardinalities", "4", "--repeats", "1", "--output", str(out)]
    assert bench.main(argv) == 0
    assert out.exists() and "ratio" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("argv", "match"),
    [
        (["--cardinalities", "ten"], "--cardinalities must be a comma-separated list"),
        (["--rows", "0"], "--rows and --repeats must be integers >= 1"),
    ],
)
def test_main_rejects_bad_options(argv, match):
    with pytest.raises(ConfigError, match=match):
        bench.main(argv)

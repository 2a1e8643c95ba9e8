"""The runner benchmarks run end to end (their ratios are printed, never asserted: timed
tests on a shared machine would be flaky)."""

from __future__ import annotations

import pandas as pd

from harness import bench_runner

from _runtools import tiny_config

ENCODERS = {"codes": "integer", "te": "target"}


def _config(path, encoders=ENCODERS, models=None):
    return tiny_config(path, name="tiny-bench", n_rows=400, cardinalities=(5, 30), encoders=encoders, models=models)


def test_overhead_speedup_and_scaling_run(tmp_path, capsys):
    cfg = _config(tmp_path / "tiny.toml")
    over = bench_runner.overhead(str(cfg))
    assert over["cells"] == 4 and 0 < over["work_s"] <= over["wall_s"]
    sp = bench_runner.speedup(str(cfg))
    assert sp["jobs1_s"] > 0 and sp["jobs2_s"] > 0
    table = bench_runner.scaling(str(cfg))
    assert list(table["fraction"]) == [0.25, 0.5, 1.0]
    assert table["rows"].is_monotonic_increasing and table["row_ratio_vs_first"].iloc[-1] == 4.0
    assert bench_runner.main(["scaling", "--config", str(cfg), "--out", str(tmp_path / "b")]) == 0
    assert "time_ratio_vs_first" in capsys.readouterr().out
    assert len(pd.read_csv(tmp_path / "b" / "scaling.csv")) == 3


def test_hand_written_loop_matches_the_harness(tmp_path):
    """The hand-written Pipeline loop scores the same cells with the same numbers, so the
    time ratio compares equal work."""
    cfg = _config(
        tmp_path / "tiny.toml",
        {**ENCODERS, "oh": "onehot"},
        {"gb": {"family": "boosting", "max_iter": 10}, "lin": {"family": "linear"}},
    )
    hand = bench_runner.hand_loop(str(cfg), repeats=1)
    assert hand["cells"] == hand["matched"] == 12
    assert hand["max_metric_diff"] < 1e-9 and hand["hand_s"] > 0 and hand["harness_s"] > 0

"""Awkward data through the whole command line: every encoder kind x linear, boosting and
LightGBM on a CSV or Parquet file in tmp_path, read by the `file` source.

Each case either runs (each cell gets a status; the expected ones are listed) or is
refused with a one-paragraph message; never a traceback. The tables are invented
(a small shop-visits table): tiny synthetic test data.
"""

from __future__ import annotations

import json
import re
import warnings

import numpy as np
import pandas as pd
import pytest

from harness.cli import main
from harness.store import read_results

from _runtools import write_config

N = 120
FOLDS = 3
ENCODERS = {
    "integer": {"kind": "integer"},
    "onehot": {"kind": "onehot"},
    "hashing": {"kind": "hashing", "width": 16},
    "frequency": {"kind": "frequency"},
    "target": {"kind": "target", "crossfit": "kfold"},
    "drop": {"kind": "drop"},
    "native": {"kind": "native"},
}
MODELS = {"lin": {"family": "linear"}, "gb": {"family": "boosting", "max_iter": 10}}
LGBM = {"lgbm": {"family": "lightgbm", "n_estimators": 10}}  # only where names matter


def _base(rng, n=N) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "color": rng.choice(["red", "green", "blue", "grey"], n),
            "shop": rng.choice([f"s{i}" for i in range(15)], n),
            "age": rng.normal(40, 10, n),
            "y": rng.integers(0, 2, n),
        }
    )


def _run(tmp_path, capsys, frame: pd.DataFrame, suffix=".parquet", models=MODELS):
    """Write ``frame``, run the grid on it through the CLI.

    Returns exit code, stderr and warnings as one string, the rows, the manifest's dataset entry.
    """
    data = tmp_path / f"data{suffix}"
    frame.to_csv(data, index=False) if suffix == ".csv" else frame.to_parquet(data, index=False)
    raw = {
        "experiment": {"name": "awkward", "seed": 0},
        "protocol": {"folds": FOLDS},
        "datasets": {"visits": {"source": "file", "path": str(data), "target": "y"}},
        "encoders": ENCODERS,
        "models": models,
    }
    out = tmp_path / "out"
    with warnings.catch_warnings(record=True) as caught:  # pytest would swallow the CLI's warnings
        code = main(["run", str(write_config(tmp_path / "awkward.toml", raw)), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err + "".join(f"\nwarning: {w.message}" for w in caught)
    assert "Traceback" not in err and "internal error" not in err, err
    if code != 0:
        return code, " ".join(err.split()), None, None
    manifest = json.loads((out / "manifest.json").read_text())
    return code, err, read_results(out), manifest["datasets"]["visits"]


def _statuses(df) -> dict:
    """{(encoder, model): set of statuses over the folds}."""
    return df.groupby(["encoder", "model"])["status"].agg(lambda s: frozenset(s)).to_dict()


def _assert_usual(df, *, native_lin="not-applicable", exceptions=None, models=MODELS) -> None:
    """Every cell ok, except native x linear (no categorical input) and the listed ones."""
    exceptions = dict(exceptions or {})
    assert len(df) == len(ENCODERS) * len(models) * FOLDS
    for (enc, model), got in _statuses(df).items():
        want = exceptions.get((enc, model), native_lin if (enc, model) == ("native", "lin") else "ok")
        assert got == {want}, (enc, model, got, df.loc[(df.encoder == enc) & (df.model == model), "error"].iloc[0])
    ok = df[df["status"] == "ok"]
    assert ok["roc_auc"].between(0, 1).all() or ok["task"].eq("regression").all()


# --------------------------------------------------------------------------- cases that run
def test_missing_target_rows_are_dropped_and_counted(tmp_path, capsys, rng):
    frame = _base(rng).astype({"y": float})
    frame.loc[::7, "y"] = np.nan
    missing = int(frame["y"].isna().sum())
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0
    assert f"dropped {missing} row(s) with a missing target ('y')" in ds["notes"]
    assert ds["fingerprint"]["rows"] == N - missing
    assert (df["n_train"] + df["n_test"]).eq(N - missing).all()
    _assert_usual(df)


def test_missing_regression_target_is_dropped(tmp_path, capsys, rng):
    frame = _base(rng).assign(y=rng.normal(size=N))
    frame.loc[::6, "y"] = np.nan
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0 and ds["task"] == "regression"
    assert f"dropped {N // 6} row(s) with a missing target ('y')" in ds["notes"]
    _assert_usual(df)
    assert df.loc[df["status"] == "ok", "rmse"].gt(0).all()


@pytest.mark.parametrize("rare_rows", [1, 2])
def test_class_with_fewer_rows_than_folds(tmp_path, capsys, rng, rare_rows):
    """1 row: no stratification possible (plain K-fold; a test fold holds a class that its
    training fold lacks); 2 rows: stratified, with scikit-learn's warning shown."""
    frame = _base(rng).assign(y=rng.choice(["a", "b"], N))
    frame.loc[list(range(0, 5 * rare_rows, 5)), "y"] = "c"
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0 and ds["task"] == "multiclass"
    if rare_rows == 2:
        assert "least populated class in y has only 2 members" in err
    _assert_usual(df)
    ok = df[df["status"] == "ok"]
    assert np.isfinite(ok["log_loss"]).all() and ok["balanced_accuracy"].between(0, 1).all()


def test_constant_column(tmp_path, capsys, rng):
    code, err, df, ds = _run(tmp_path, capsys, _base(rng).assign(const="same"))
    assert code == 0 and ds["fingerprint"]["cardinality"]["const"] == 1
    _assert_usual(df)


def test_identifier_column_is_noted_and_stays_sparse(tmp_path, capsys, rng):
    frame = _base(rng).assign(visit_id=[f"v{i:05d}" for i in range(N)])
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0
    assert "column(s) visit_id have one level per row (an identifier?)" in ds["notes"]
    _assert_usual(df)
    onehot = df[(df["encoder"] == "onehot") & (df["model"] == "lin")]
    assert (onehot["n_features_out"] >= onehot["n_train"]).all()  # one column per training row


def test_levels_seen_only_in_a_test_fold(tmp_path, capsys, rng):
    frame = _base(rng)
    frame.loc[:11, "shop"] = [f"pop-up {i}" for i in range(12)]  # one row each: never in its training fold
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0
    _assert_usual(df)


def test_missing_values_and_empty_strings_in_categorical_columns(tmp_path, capsys, rng):
    frame = _base(rng)
    frame.loc[::5, "color"] = None
    frame.loc[::3, "shop"] = np.nan
    frame.loc[1::4, "color"] = ""  # an empty string is a level, not a missing value
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0
    assert ds["fingerprint"]["cardinality"]["color"] == 5  # four colours and ""
    _assert_usual(df)


def test_mixed_types_in_one_column_csv(tmp_path, capsys, rng):
    frame = _base(rng).assign(mixed=pd.Series([1, "a", 2.5, "b"] * (N // 4), dtype=object))
    code, err, df, ds = _run(tmp_path, capsys, frame, suffix=".csv")
    assert code == 0 and "mixed" in ds["categorical"]
    assert ds["fingerprint"]["cardinality"]["mixed"] == 4
    _assert_usual(df)


def test_numeric_looking_strings_stay_distinct_levels(tmp_path, capsys, rng):
    frame = _base(rng).assign(code=rng.choice(["001", "01", "1", "1.0", "1e0"], N))
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0 and "code" in ds["categorical"]
    assert ds["fingerprint"]["cardinality"]["code"] == 5  # never parsed into one number
    _assert_usual(df)


def test_boolean_columns(tmp_path, capsys, rng):
    frame = _base(rng).assign(
        member=rng.integers(0, 2, N).astype(bool),
        newsletter=pd.array(rng.choice([True, False, None], N), dtype="boolean"),
    )
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0 and {"member", "newsletter"} <= set(ds["categorical"])
    assert ds["fingerprint"]["cardinality"]["newsletter"] == 2  # missing is not a level
    _assert_usual(df)


def test_non_ascii_and_very_long_levels(tmp_path, capsys, rng):
    levels = ["Zürich", "東京", "São Paulo", "Kraków", "x" * 1500, "é" * 1200]
    code, err, df, ds = _run(tmp_path, capsys, _base(rng).assign(city=rng.choice(levels, N)))
    assert code == 0 and ds["fingerprint"]["cardinality"]["city"] == len(levels)
    _assert_usual(df)


def test_no_categorical_column_is_warned_and_still_runs(tmp_path, capsys, rng):
    frame = _base(rng).drop(columns=["color", "shop"]).assign(spend=rng.normal(size=N))
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0 and ds["categorical"] == []
    assert "dataset 'visits' has no categorical column" in err
    _assert_usual(df, native_lin="ok")  # with no categorical column, native passes numbers


def test_only_categorical_columns_drop_scores_the_constant_baseline(tmp_path, capsys, rng):
    # `drop` on a table without numeric columns leaves no feature: the cell is scored by a
    # constant prediction (the training prior), the baseline it stands for
    code, err, df, ds = _run(tmp_path, capsys, _base(rng).drop(columns=["age"]))
    assert code == 0
    _assert_usual(df)
    dropped = df.loc[df["encoder"] == "drop"]
    assert (dropped["status"] == "ok").all() and (dropped["n_features_out"] == 0).all()
    if "roc_auc" in dropped:
        assert dropped["roc_auc"].dropna().eq(0.5).all()  # a constant score ranks nothing


def test_column_names_that_collide_or_hold_special_characters(tmp_path, capsys, rng):
    """'color=red' next to color == 'red' (a one-hot style name); 'num__age' next to 'age'
    (the runner's old prefix for numeric columns beside native ones); JSON specials in a
    name, which LightGBM refuses in a DataFrame."""
    frame = _base(rng).assign(
        **{
            "color=red": rng.choice(["yes", "no"], N),
            "num__age": rng.choice(["p", "q"], N),
            "price [USD]": rng.choice(["lo", "hi"], N),
            "a,b:c": rng.normal(size=N),
        }
    )
    code, err, df, ds = _run(tmp_path, capsys, frame, models=MODELS | LGBM)
    assert code == 0
    _assert_usual(df, models=MODELS | LGBM)
    integer = df[(df["encoder"] == "integer") & (df["model"] == "lin")]
    assert (integer["n_features_out"] == 7).all()  # five categorical + two numeric, none merged


def test_infinite_numeric_values_are_treated_as_missing(tmp_path, capsys, rng):
    frame = _base(rng)
    frame.loc[::9, "age"] = np.inf
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0
    # +-inf is imputed like a missing value (median of the training fold), so every
    # family runs, linear models included
    _assert_usual(df)


def test_all_missing_numeric_column(tmp_path, capsys, rng):
    code, err, df, ds = _run(tmp_path, capsys, _base(rng).assign(blank=np.nan))
    assert code == 0 and "blank" in ds["numeric"]
    _assert_usual(df)


@pytest.mark.slow
def test_very_wide_file(tmp_path, capsys, rng):
    wide = {f"c{j}": rng.choice(["a", "b", "c"], N) for j in range(200)}
    wide |= {f"x{j}": rng.normal(size=N) for j in range(797)}
    frame = pd.concat([_base(rng), pd.DataFrame(wide)], axis=1)
    assert frame.shape[1] == 1001  # 1,000 feature columns and the target
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 0 and len(ds["categorical"]) == 202 and len(ds["numeric"]) == 798
    _assert_usual(df)
    assert (df["n_features_in"] == 1000).all()


# --------------------------------------------------------------------------- cases refused
@pytest.mark.parametrize(
    ("case", "message"),
    [
        ("single_class", r"the target 'y' has 1 distinct value\(s\); at least 2 are needed"),
        ("fewer_rows_than_folds", r"has 2 rows, fewer than protocol.folds = 3; lower protocol.folds"),
        ("no_rows", r"has a header \(\d+ column\(s\)\) but no data rows"),
        ("all_targets_missing", r"no rows are left once rows with a missing target \('y'\) are dropped"),
    ],
)
def test_unusable_data_is_refused_clearly(tmp_path, capsys, rng, case, message):
    frame = _base(rng)
    frame = {
        "single_class": frame.assign(y=1),
        "fewer_rows_than_folds": frame.iloc[:2].assign(y=[0, 1]),
        "no_rows": frame.iloc[:0],
        "all_targets_missing": frame.assign(y=np.nan),
    }[case]
    code, err, df, ds = _run(tmp_path, capsys, frame)
    assert code == 2
    assert err.startswith("error: dataset 'visits' (source 'file'): ") or err.startswith("error: dataset 'visits'"), err
    assert re.search(message, err), err

"""User mistakes at the command line and in data files: one clear paragraph, exit 2, no
traceback (bad configs live as files under tests/bad_configs/, the ``u_*`` ones from the
same round of adversarial use). Bad data files are generated here, one per case."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from harness.cli import main
from harness.grid import SCHEMA_VERSION
from harness.store import Store

from _runtools import tiny_config


def _refused(capsys, argv, pattern, code=2) -> str:
    got = main([str(a) for a in argv])
    err = " ".join(capsys.readouterr().err.split())
    assert got == code, err
    assert err.startswith("error: ") and "Traceback" not in err and "internal error" not in err, err
    assert re.search(pattern, err), err
    return err


@pytest.fixture
def tiny(tmp_path):
    return tiny_config(tmp_path / "tiny.toml")


@pytest.fixture
def finished(tmp_path, tiny):
    out = tmp_path / "done"
    assert main(["run", str(tiny), "--out", str(out), "--quiet"]) == 0
    return out


# --------------------------------------------------------------------------- command line
def test_output_path_that_is_a_file_or_under_a_file(tmp_path, tiny, capsys):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a directory")
    for out in (blocker, blocker / "sub"):
        _refused(
            capsys,
            ["run", tiny, "--out", out, "--quiet"],
            rf"cannot write to the output directory {re.escape(str(out))} .*pass --out",
        )
    assert blocker.read_text() == "not a directory"


def test_scheduler_without_the_dask_backend(tiny, capsys):
    _refused(
        capsys,
        ["run", tiny, "--scheduler", "tcp://127.0.0.1:8786", "--dry-run"],
        r"--scheduler 'tcp://127.0.0.1:8786' is given but the backend is 'local'.*Add --backend dask",
    )


def test_export_to_an_unknown_suffix_is_bad_input_not_a_store_problem(finished, tmp_path, capsys):
    _refused(
        capsys, ["export", finished, "--to", tmp_path / "x.xlsx"], r"the suffix must be .csv or .parquet; got '.xlsx'"
    )


def test_export_to_an_unwritable_path(finished, tmp_path, capsys):
    blocker = tmp_path / "a-file"
    blocker.write_text("")
    _refused(capsys, ["export", finished, "--to", blocker / "x.csv"], r"cannot write the export .*x.csv .*Pass a path")


def test_report_without_a_manifest(finished, capsys):
    (finished / "manifest.json").unlink()
    _refused(
        capsys, ["report", finished], r"has a results store but no manifest.json.*Rerun `levelfold run CONFIG --out"
    )


def test_store_missing_a_column_is_a_store_problem(tmp_path, capsys):
    with Store(tmp_path) as store:
        store.write([{"cell_id": "c", "schema_version": SCHEMA_VERSION, "status": "ok"}])
    import sqlite3

    db = sqlite3.connect(tmp_path / "results.sqlite")
    db.execute("ALTER TABLE cells DROP COLUMN encoder")
    db.commit()
    db.close()
    _refused(capsys, ["status", tmp_path], r"lacks the column\(s\) encoder", code=3)


@pytest.mark.slow
def test_unreachable_scheduler(tiny, capsys):
    _refused(
        capsys,
        ["run", tiny, "--backend", "dask", "--scheduler", "tcp://127.0.0.1:9", "--quiet", "--out", tiny.parent / "o"],
        r"cannot reach the Dask scheduler at 'tcp://127.0.0.1:9'",
    )


# --------------------------------------------------------------------------- bad data files
def _frame(rng, n=120) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "shop": rng.choice(["a", "b", "c", "d"], n),
            "spend": rng.normal(size=n).round(3),
            "churned": rng.choice(["yes", "no"], n),
        }
    )


def _write(tmp_path, name, frame=None, data: bytes | None = None) -> str:
    path = tmp_path / name
    if data is not None:
        path.write_bytes(data)
    elif name.endswith(".csv"):
        frame.to_csv(path, index=False)
    else:
        frame.to_parquet(path, index=False)
    return str(path)


def _nested(column):
    def make(tmp_path, rng):
        import pyarrow as pa
        import pyarrow.parquet as pq

        n = 40
        values = {"list": [["x", "y"]] * n, "struct": [{"a": 1, "b": "z"}] * n, "binary": [b"\x00\x01"] * n}[column]
        table = pa.table({"shop": ["a", "b"] * (n // 2), "blob": values, "churned": ["yes", "no"] * (n // 2)})
        path = tmp_path / f"{column}.parquet"
        pq.write_table(table, path)
        return str(path), "churned", {}

    return make


BAD_DATA = {
    "header_only_csv": (
        lambda t, r: (_write(t, "h.csv", data=b"shop,spend,churned\n"), "churned", {}),
        r"has a header \(3 column\(s\)\) but no data rows",
    ),
    "semicolon_csv": (
        lambda t, r: (_write(t, "s.csv", data=_frame(r).to_csv(index=False, sep=";").encode()), "churned", {}),
        r"looks separated by ';', not by commas. Set `delimiter = ';'`",
    ),
    "binary_named_csv": (
        lambda t, r: (_write(t, "b.csv", data=b"\x89PNG\r\n\x1a\n" + bytes(range(256)) * 4), "churned", {}),
        r"is not a UTF-8 text CSV \(byte b'\\x89' at offset 0 is not UTF-8 text\)",
    ),
    "parquet_list_column": (_nested("list"), r"column 'blob' .* has the Parquet type list<.*Add it to `drop"),
    "parquet_struct_column": (_nested("struct"), r"column 'blob' .* has the Parquet type struct<.*Add it to `drop"),
    "parquet_binary_column": (_nested("binary"), r"column 'blob' .* has the Parquet type binary.*Add it to `drop"),
    "target_with_trailing_space": (
        lambda t, r: (_write(t, "t.csv", _frame(r)), "churned ", {}),
        r"names column\(s\) 'churned ' that the data does not have.*Did you mean 'churned'\? "
        r"The name in the config has surrounding spaces",
    ),
    "fewer_groups_than_folds": (
        lambda t, r: (
            _write(t, "g.csv", _frame(r).assign(store=r.choice(["n", "s"], 120))),
            "churned",
            {"group": "store"},
        ),
        r"has 2 distinct group\(s\) in its group column, fewer than protocol.folds = 3",
    ),
    "group_is_the_target": (
        lambda t, r: (_write(t, "gt.csv", _frame(r)), "churned", {"group": "churned"}),
        r"`datasets.d.group` in .* names the column 'churned', which is the target",
    ),
}


def _file_config(tmp_path, path, target, extra) -> str:
    lines = [f'path = "{path}"', f'target = "{target}"'] + [f'{k} = "{v}"' for k, v in extra.items()]
    cfg = tmp_path / "file.toml"
    cfg.write_text(
        '[experiment]\nname = "mine"\n[protocol]\nfolds = 3\n[datasets.d]\nsource = "file"\n'
        + "\n".join(lines)
        + '\n[encoders.codes]\nkind = "integer"\n[models.lin]\nfamily = "linear"\n'
    )
    return str(cfg)


@pytest.mark.parametrize("case", list(BAD_DATA))
def test_bad_data_file_is_refused_clearly(tmp_path, capsys, rng, case):
    make, pattern = BAD_DATA[case]
    path, target, extra = make(tmp_path, rng)
    _refused(
        capsys, ["run", _file_config(tmp_path, path, target, extra), "--dry-run", "--out", tmp_path / "o"], pattern
    )


def test_a_csv_with_another_delimiter_is_read_when_told(tmp_path, capsys, rng):
    path = _write(tmp_path, "s.csv", data=_frame(rng).to_csv(index=False, sep=";").encode())
    cfg = _file_config(tmp_path, path, "churned", {"delimiter": ";"})
    assert main(["run", cfg, "--dry-run", "--out", str(tmp_path / "o")]) == 0, capsys.readouterr().err


def test_dirty_labels_and_numbers_as_text_are_noted_in_summary_and_manifest(tmp_path, capsys, rng):
    frame = _frame(rng, 200)
    frame["churned"] = rng.choice(["yes", "Yes", "yes ", "no", "NO"], 200)  # 5 labels, 2 classes meant
    frame["price"] = [f"{v:.2f}" for v in rng.uniform(1, 99, 200)]  # numbers written as text
    path = tmp_path / "dirty.parquet"
    frame.to_parquet(path, index=False)
    out = tmp_path / "o"
    assert main(["run", _file_config(tmp_path, path, "churned", {}), "--out", str(out), "--quiet"]) == 0
    printed = capsys.readouterr().out
    notes = json.loads((out / "manifest.json").read_text())["datasets"]["d"]["notes"]
    label_note = "target 'churned' has 5 labels that are only 2 once case and surrounding spaces are ignored"
    number_note = "column 'price' holds only numbers"
    for needle in (label_note, number_note):
        assert any(needle in n for n in notes), notes
        assert "note: dataset 'd': " in printed and needle in printed, printed
    assert "Yes" not in json.dumps(notes)  # counts only: a private file's labels stay out


def test_a_decimal_column_is_used_as_numbers_when_listed(tmp_path, capsys, rng):
    from decimal import Decimal

    frame = _frame(rng).assign(price=[Decimal(f"{v:.2f}") for v in np.linspace(1, 9, 120)])  # Parquet decimal128
    path = tmp_path / "dec.parquet"
    frame.to_parquet(path, index=False)
    cfg = Path(_file_config(tmp_path, path, "churned", {}))
    cfg.write_text(cfg.read_text().replace('target = "churned"', 'target = "churned"\nnumeric = ["spend", "price"]'))
    from harness.config import load_config
    from harness.runner import load_datasets

    ds = load_datasets(load_config(cfg))["d"]
    assert ds.numeric == ("spend", "price") and ds.X["price"].dtype == "float64"
    assert ds.X["price"].iloc[-1] == 9.0
    assert not any("holds only numbers" in n for n in ds.notes)

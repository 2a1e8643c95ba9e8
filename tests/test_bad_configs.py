"""Every file under tests/bad_configs/ is refused with its expected message, a non-zero exit
and no traceback. The first line of each file holds the expected message as a regex."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from harness.cli import main

CASES = sorted((Path(__file__).parent / "bad_configs").glob("*.toml"))


def _expected(path: Path) -> str:
    first = path.read_text(encoding="utf-8-sig").splitlines()[0]  # u_bom.toml starts with a BOM
    assert first.startswith("# expect: "), f"{path.name} lacks its '# expect:' line"
    return first[len("# expect: ") :]


def test_there_are_at_least_25_cases():
    assert len(CASES) >= 25


@pytest.mark.parametrize("path", CASES, ids=[p.stem for p in CASES])
def test_bad_config_is_refused_clearly(path, capsys, tmp_path):
    code = main(["run", str(path), "--dry-run", "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2  # bad input, never an internal error (1) or a store problem (3)
    assert "Traceback" not in err
    flat = " ".join(err.split())
    assert re.search(_expected(path), flat), flat
    assert flat.startswith("error: ")

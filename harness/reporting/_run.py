"""Run loading: a results directory as the report sees it (private datasets under alias)."""

from __future__ import annotations

import json
from dataclasses import dataclass, field, replace
from pathlib import Path

import pandas as pd

from harness import stats
from harness.errors import ConfigError, StoreError
from harness.reporting import tables
from harness.schema import RENAMED_PROTOCOL_KEYS, Manifest, protocol_value
from harness.store import read_results, read_set_aside
from harness.tuning import DEFAULT_REGIME, REGIMES

# RENAMED_PROTOCOL_KEYS (harness.schema) stays importable from here
__all__ = ["Run", "load_run", "main_regime", "protocol_setting", "split_run", "RENAMED_PROTOCOL_KEYS"]


# ------------------------------------------------------------------------------- loading
@dataclass(frozen=True)
class Run:
    """A results directory as the report sees it (private datasets under their alias).

    ``manifest`` may be given as the dict of a ``manifest.json``; it is kept as its
    :class:`~harness.schema.Manifest`.
    """

    directory: Path
    results: pd.DataFrame = field(repr=False)
    manifest: Manifest = field(repr=False)
    private: tuple = ()
    set_aside: dict = field(default_factory=dict)  # reason -> superseded rows not used
    # rows of every tuning regime; ``results`` holds the main regime's only (see split_run)
    all_results: pd.DataFrame | None = field(default=None, repr=False)
    regime: str = DEFAULT_REGIME

    def __post_init__(self):
        object.__setattr__(self, "manifest", Manifest.coerce(self.manifest))


def protocol_setting(manifest, key: str, default):
    """A ``[protocol]`` setting of a run: under its current name, else its earlier one.

    A :class:`~harness.schema.Manifest` answers with its typed protocol record; the dict
    of a ``manifest.json`` with the value it holds (``default`` when it holds none).
    """
    if isinstance(manifest, Manifest):
        return getattr(manifest.protocol, key, default)
    protocol = manifest.get("protocol") or (manifest.get("config") or {}).get("protocol") or {}
    return protocol_value(protocol, key, default)


def load_run(directory) -> Run:
    """Read a run's results and manifest, renaming private datasets to their alias.

    Raises
    ------
    StoreError
        No results store, or a manifest that cannot be read.
    """
    directory = Path(directory)
    results = read_results(directory)
    path = directory / "manifest.json"
    if not path.exists():
        raise ConfigError(
            f"{directory} has a results store but no manifest.json, which the report needs (datasets, "
            f"protocol, models). Rerun `levelfold run CONFIG --out {directory}` with the config that made it: "
            "it computes nothing already stored and writes the manifest."
        )
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise StoreError(
            f"the manifest {path} cannot be read ({exc}); rerun `levelfold run` with the same config to rewrite it."
        ) from None
    try:
        manifest = Manifest.from_dict(manifest)
    except StoreError as exc:
        raise StoreError(f"the manifest {path}: {exc}") from None
    names = manifest.aliases
    private = tuple(names[d] for d in manifest.private_datasets)
    results = results.assign(dataset=results["dataset"].map(lambda d: names.get(d, d)))
    bad = results["dataset"].isin(private)
    results.loc[bad, "error"] = tables.scrub_error(results.loc[bad, "error"], results.loc[bad, "status"], bad[bad])
    manifest = manifest.with_dataset_names(names)
    return split_run(Run(directory, stats.pool_task_score(results), manifest, private, read_set_aside(directory)))


def main_regime(results: pd.DataFrame, manifest) -> str:
    """The regime the rest of the report reads: ``defaults`` when run, else the first listed."""
    present = set(results["regime"].dropna()) if "regime" in results else set()
    listed = list(Manifest.coerce(manifest).regimes)
    for r in [DEFAULT_REGIME, *listed, *REGIMES]:
        if r in present:
            return r
    return DEFAULT_REGIME


def split_run(run):
    """``run`` with ``results`` cut to its main regime (``all_results`` keeps every row)."""
    # a row without a regime (a table written before tuning existed) ran untuned
    rows = run.results.assign(
        regime=run.results["regime"].fillna(DEFAULT_REGIME) if "regime" in run.results else DEFAULT_REGIME
    )
    regime = main_regime(rows, run.manifest)
    return replace(run, results=rows[rows["regime"] == regime], all_results=rows, regime=regime)

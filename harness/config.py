"""Load a TOML config into frozen dataclasses, checking every key once, at the edge.

Every error names the file and the key path, the allowed values and the value received,
and suggests the closest valid key for a typo. Nothing downstream re-validates.

This module is the entry point (:func:`load_config`, :func:`parse_config`,
:func:`private_config`, :class:`Config` and its parts, :func:`digest`); the value rules
and limits live in ``harness._config_rules``, the parsing of the dataset, encoder and
model tables (specs and probe fits) in ``harness._config_models``.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from harness._config_models import (
    DatasetSpec,
    EncoderSpec,
    ModelSpec,
    check_group_not_target,
    check_native,
    parse_datasets,
    parse_encoders,
    parse_models,
)
from harness._config_rules import (
    DEFAULT_MAX_CELLS,
    RENAMED,
    RULES,
    SECTIONS,
    add_task_metrics,
    check_finite,
    check_grid_size,
    check_jobs,
    check_keys,
    fill,
    under_former_names,
)
from harness.errors import ConfigError, closest
from harness.metrics import METRICS
from harness.stats import DecisionRule
from harness.tuning import DEFAULT_REGIME, Tuning, check_budget, space_size

__all__ = [
    "Config",
    "DatasetSpec",
    "EncoderSpec",
    "ModelSpec",
    "Protocol",
    "Execution",
    "DEFAULT_MAX_CELLS",
    "RENAMED",
    "check_jobs",
    "digest",
    "load_config",
    "parse_config",
    "private_config",
]


@dataclass(frozen=True)
class Protocol:
    folds: int = 5
    repeats: int = 1
    stratify: bool = True
    group: str | None = None
    metrics: tuple[str, ...] = METRICS
    classification_metric: str = "roc_auc"
    regression_metric: str = "rmse"
    medium_levels: tuple[int, int] = (10, 100)  # first and last level count of "medium", inclusive


@dataclass(frozen=True)
class Execution:
    jobs: int = 1
    backend: str = "local"
    scheduler: str | None = None
    cell_timeout_s: float = 900.0
    cell_memory_mb: int = 0
    retries: int = 1
    max_cells: int = DEFAULT_MAX_CELLS


@dataclass(frozen=True)
class Config:
    path: str
    name: str
    seed: int
    description: str
    output: str
    protocol: Protocol
    datasets: tuple[DatasetSpec, ...]
    encoders: tuple[EncoderSpec, ...]
    models: tuple[ModelSpec, ...]
    execution: Execution
    raw: dict = field(repr=False)
    decision: DecisionRule = field(default_factory=DecisionRule)
    tuning: Tuning = field(default_factory=Tuning)

    @property
    def hash(self) -> str:
        """Hash of everything that affects results (execution and decision excluded)."""
        payload = {k: v for k, v in self.raw.items() if k not in ("execution", "decision")}
        payload["experiment"] = {k: v for k, v in payload.get("experiment", {}).items() if k != "output"}
        return digest(under_former_names(payload))


def digest(obj, length: int = 16) -> str:
    """SHA-256 of the canonical JSON of ``obj`` (sorted keys), first ``length`` hex digits."""
    text = json.dumps(obj, sort_keys=True, default=str, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:length]


# --------------------------------------------------------------------------- loading
def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file.

    Raises
    ------
    ConfigError
        If the file is missing, is not valid TOML, or any key or value is invalid.
    """
    path = Path(path)
    return parse_config(_read_toml(path), str(path))


def _read_toml(path: Path) -> dict:
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"config file {path} does not exist; pass the path of a TOML file (see configs/).") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"config file {path} cannot be read: {exc}.") from None
    if text.startswith("\ufeff"):
        raise ConfigError(
            f"config file {path} starts with a UTF-8 byte-order mark (BOM), which TOML does not allow. "
            "Save it as UTF-8 without BOM (most editors call it plain 'UTF-8')."
        )
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(
            f"config file {path} is not valid TOML: {exc}. Fix the syntax at that line and column."
        ) from None


def parse_config(raw: dict, path: str = "<config>") -> Config:
    """Validate a config already parsed into a dict (see :func:`load_config`)."""
    _check_sections(raw, path)
    sections = {name: fill(raw.get(name, {}), RULES[name], path, name) for name in RULES}
    if not sections["execution"]["scheduler"]:  # workers of a remote cluster are not forked here
        check_jobs(sections["execution"]["jobs"], f"`execution.jobs` in {path}")
    check_grid_size(raw, sections, path)
    exp = sections["experiment"]
    if exp["name"] is None:
        exp["name"] = Path(path).stem
    prot = sections["protocol"]
    add_task_metrics(prot)
    encoders = parse_encoders(raw["encoders"], path)
    models = parse_models(raw["models"], path)
    datasets = parse_datasets(raw["datasets"], path)
    check_native(encoders, models, path)
    _check_reference(sections["decision"], encoders, path)
    check_group_not_target(datasets, prot["group"], path)
    tuning = _tuning_of(sections["tuning"], exp["seed"], encoders, models, path)
    normalized = {**raw, **sections}
    return Config(
        path=path,
        name=exp["name"],
        seed=exp["seed"],
        description=exp["description"],
        output=exp["output"] or f"results/{exp['name']}",
        protocol=_protocol_of(prot),
        datasets=datasets,
        encoders=encoders,
        models=models,
        execution=Execution(**sections["execution"]),
        raw=normalized,
        decision=DecisionRule.from_mapping(sections["decision"]),
        tuning=tuning,
    )


def _check_sections(raw: dict, path: str) -> None:
    """Known sections only, each grid axis a non-empty table of tables, no inf or nan."""
    check_keys(raw, SECTIONS, path, "")
    for section in ("datasets", "encoders", "models"):
        if not raw.get(section):
            raise ConfigError(
                f"{path} defines no [{section}.<label>] table; the grid would be empty. "
                f"Add at least one (see configs/quickstart.toml)."
            )
        if not isinstance(raw[section], dict):
            raise ConfigError(
                f"`{section}` in {path} must be a table of [{section}.<label>] tables; got {raw[section]!r}."
            )
    check_finite(raw, path, "")


def _protocol_of(prot: dict) -> Protocol:
    """The filled [protocol] table as a :class:`Protocol` (lists become tuples)."""
    return Protocol(**{**prot, "metrics": tuple(prot["metrics"]), "medium_levels": tuple(prot["medium_levels"])})


def _check_reference(decision: dict, encoders, path: str) -> None:
    ref = decision["reference"]
    labels = [e.label for e in encoders]
    if ref is not None and ref not in labels:
        raise ConfigError(
            f"`decision.reference` in {path} must be an encoder label of the config; got "
            f"{ref!r}; allowed: {', '.join(labels)}.{closest(ref, labels)} A list-expanded "
            "encoder is named by its variant label, e.g. 'te(m=1.0)'."
        )


def _tuning_of(sec: dict, seed: int, encoders, models, path: str) -> Tuning:
    """The [tuning] table, checked against the search tables of the models and encoders."""
    t = Tuning(
        tuple(sec["regimes"]),
        sec["budget"],
        sec["inner_folds"],
        sec["method"],
        seed if sec["seed"] is None else sec["seed"],
    )
    if not t.tuned:
        return t
    if not any(m.search for m in models):
        raise ConfigError(
            f"`tuning.regimes` in {path} lists {', '.join(repr(r) for r in t.tuned)}, but no model has a "
            f"[models.<label>.search] table, so there is nothing to tune. Add one (e.g. "
            f"[models.{models[0].label}.search] mapping a parameter to a list or to {{low, high, scale}}), "
            'or set regimes = ["defaults"].'
        )
    if "tuned-both" in t.regimes and not any(e.search for e in encoders):
        raise ConfigError(
            f"`tuning.regimes` in {path} lists 'tuned-both', but no encoder has an [encoders.<label>.search] "
            "table, so it would repeat 'tuned-model'. Add an encoder search table, or drop 'tuned-both'."
        )
    for m in models:
        if not m.search and DEFAULT_REGIME not in t.regimes:
            raise ConfigError(
                f"model '{m.label}' has no [models.{m.label}.search] table and `tuning.regimes` in {path} does "
                "not list 'defaults', so it would run no cell. Add a search table, or add 'defaults'."
            )
        if m.search:
            check_budget(t, space_size(m.search), f"[models.{m.label}.search]", path)
    return t


PRIVATE_TITLE = "private dataset"


def private_config(
    data: str, target: str, base: str | Path, alias: str | None = None, description: str | None = None
) -> Config:
    """The encoders, models and protocol of ``base`` with one private file as the dataset.

    Used by ``levelfold run --data FILE --target COLUMN [--config BASE] [--alias NAME]
    [--description TEXT]``. The experiment is named after ``alias`` (else "private
    dataset"), its description is ``description`` (never the borrowed config's), no output
    carries the file's path (only its name, and not even that with an alias), and the
    default output directory ``results/private-<name>-<config hash>`` is its own for
    every combination of file, target, alias and settings.
    """
    base = Path(base)
    if not base.is_file():
        raise ConfigError(
            f"--config {base} does not exist; pass a config whose encoders, models and protocol to use "
            "(run from the project folder for the default configs/team-default.toml)."
        )
    raw = _read_toml(base)
    label = _slug(alias) if alias else _slug(Path(data).stem)
    spec = {"source": "file", "path": str(data), "target": target, **({"alias": alias} if alias else {})}
    raw["datasets"] = {label: spec}
    experiment = dict(raw.get("experiment", {}))
    experiment["name"] = alias or PRIVATE_TITLE
    experiment["description"] = description or ""
    experiment.pop("output", None)
    raw["experiment"] = experiment
    shown = alias or Path(data).name
    cfg = parse_config(raw, f"{base} with --data {shown}")
    return dataclasses.replace(cfg, output=f"results/private-{label}-{cfg.hash[:8]}")


def _slug(text: str) -> str:
    """A name safe in a path and a config label: letters, digits, '-' and '_'."""
    return re.sub(r"[^A-Za-z0-9_-]+", "-", text).strip("-") or "dataset"

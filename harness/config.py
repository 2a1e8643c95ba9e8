"""Load a TOML config into frozen dataclasses, checking every key once, at the edge.

Every error names the file and the key path, the allowed values and the value received,
and suggests the closest valid key for a typo. Nothing downstream re-validates.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import inspect
import itertools
import json
import math
import os
import re
import tomllib
import types
import typing
from dataclasses import dataclass, field
from pathlib import Path

from harness import datasets as _datasets
from harness import encoders as _encoders
from harness import models as _models
from harness.errors import ConfigError, HarnessError, closest
from harness.metrics import CLASSIFICATION_METRICS, METRICS, REGRESSION_METRICS
from harness.stats import DecisionRule
from harness.tuning import DEFAULT_REGIME, MAX_BUDGET, MAX_INNER_FOLDS, METHODS, REGIMES, Tuning, check_budget, \
    parse_space, space_size

__all__ = [
    "Config",
    "DatasetSpec",
    "EncoderSpec",
    "ModelSpec",
    "Protocol",
    "Execution",
    "load_config",
    "parse_config",
]

BACKENDS = ("local", "dask")
# Sane limits on numeric keys: beyond them a run never answers or exhausts the machine.
MAX_FOLDS = 100
MAX_REPEATS = 100
MAX_RETRIES = 10
MAX_TIMEOUT_S = 7 * 24 * 3600  # one week per cell
MAX_MEMORY_MB = 4 * 1024 * 1024  # 4 TiB per cell
JOBS_PER_CORE = 4  # workers beyond this many per core only compete for the cores
#: iteration and tree counts (scikit-learn's and LightGBM's names and aliases): capped at
#: load, and the probe fit runs a few of them so that a huge count cannot stall loading
ITERATION_KEYS = frozenset({"n_estimators", "max_iter", "num_iterations", "num_iteration",
                            "n_iter", "num_tree", "num_trees", "num_round", "num_rounds",
                            "num_boost_round", "n_iter_no_change"})
MAX_ITERATIONS = 100_000
PROBE_ITERATIONS = 3
DEFAULT_MAX_CELLS = 50_000  # grid size above which a run must be asked for explicitly


@dataclass(frozen=True)
class DatasetSpec:
    label: str
    source: str
    params: dict


@dataclass(frozen=True)
class EncoderSpec:
    label: str
    kind: str
    params: dict
    search: tuple = ()  # [encoders.<label>.search]: tuning.Dimension per searched parameter


@dataclass(frozen=True)
class ModelSpec:
    label: str
    family: str
    params: dict
    max_rows: int | None = None
    cell_timeout_s: float | None = None
    search: tuple = ()  # [models.<label>.search]: tuning.Dimension per searched parameter


@dataclass(frozen=True)
class Protocol:
    folds: int = 5
    repeats: int = 1
    stratify: bool = True
    group: str | None = None
    metrics: tuple[str, ...] = METRICS
    primary: str = "roc_auc"
    primary_regression: str = "rmse"
    cardinality_bands: tuple[int, int] = (10, 100)


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
        return digest(payload)


def digest(obj, length: int = 16) -> str:
    """SHA-256 of the canonical JSON of ``obj`` (sorted keys), first ``length`` hex digits."""
    text = json.dumps(obj, sort_keys=True, default=str, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:length]


# --------------------------------------------------------------------------- rules
# key -> (checker, description of allowed values, default)
def _int_at_least(lo, hi=None):
    def ok(v):
        return isinstance(v, int) and not isinstance(v, bool) and v >= lo and (hi is None or v <= hi)

    return ok, f"an integer >= {lo}" + ("" if hi is None else f" and <= {hi:,}")


def _number_at_least(lo, hi=None):
    def ok(v):
        return (isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                and v >= lo and (hi is None or v <= hi))

    return ok, f"a finite number >= {lo}" + ("" if hi is None else f" and <= {hi:,}")




_STR = (lambda v: isinstance(v, str) and v != "", "a non-empty string")

NAME_MAX = 100


def _plain_name(v) -> bool:
    """A name that is safe as one directory level and readable in a report."""
    return (
        isinstance(v, str) and 0 < len(v) <= NAME_MAX and v == v.strip() and v.isprintable()
        and not any(sep in v for sep in "/\\") and not v.startswith(".")
    )


_NAME = (
    _plain_name,
    f"a plain name of 1 to {NAME_MAX} printable characters, without '/', '\\', a leading '.' or "
    "surrounding spaces (it names the directory results/<name>/)",
)
# a Dask address: tcp://host:port (or tls://, ws://, ...), or host:port
_ADDRESS_RE = re.compile(r"^([a-z]+://)?[A-Za-z0-9_.\-\[\]:]+:\d{1,5}$")
_ADDRESS = (
    lambda v: isinstance(v, str) and bool(_ADDRESS_RE.match(v)),
    "a Dask scheduler address such as tcp://10.0.0.5:8786",
)
SEED_MAX = 2**32 - 1
_BOOL = (lambda v: isinstance(v, bool), "true or false")


def _one_of(choices):
    return (lambda v: v in choices, "one of " + ", ".join(f"'{c}'" for c in choices))


def _list_of(choices):
    ok = lambda v: isinstance(v, list) and v and all(x in choices for x in v)  # noqa: E731
    return ok, "a non-empty list drawn from " + ", ".join(choices)


_BANDS = (
    lambda v: isinstance(v, list) and len(v) == 2 and all(isinstance(x, int) for x in v) and 1 < v[0] < v[1],
    "two increasing integers [low_max, medium_max], e.g. [10, 100]",
)

SECTIONS = ("experiment", "protocol", "datasets", "encoders", "models", "execution", "decision", "tuning")


_regimes = (lambda v: isinstance(v, list) and 0 < len(v) == len(set(v)) and set(v) <= set(REGIMES),
            f"a non-empty list of distinct regimes from {', '.join(REGIMES)}")


def _number_between(lo, hi):
    ok = lambda v: isinstance(v, (int, float)) and not isinstance(v, bool) and lo < v < hi  # noqa: E731
    return ok, f"a number strictly between {lo} and {hi}"


RULES = {
    "experiment": {
        "name": (_NAME, None),
        "seed": (_int_at_least(0, 2**32 - 1), 0),
        "description": ((lambda v: isinstance(v, str), "a string"), ""),
        "output": (_STR, None),
    },
    "protocol": {
        "folds": (_int_at_least(2, MAX_FOLDS), 5),
        "repeats": (_int_at_least(1, MAX_REPEATS), 1),
        "stratify": (_BOOL, True),
        "group": (_STR, None),
        "metrics": (_list_of(METRICS), list(METRICS)),
        "primary": (_one_of(CLASSIFICATION_METRICS), "roc_auc"),
        "primary_regression": (_one_of(REGRESSION_METRICS), "rmse"),
        "cardinality_bands": (_BANDS, [10, 100]),
    },
    "execution": {
        "jobs": (_int_at_least(1), 1),
        "backend": (_one_of(BACKENDS), "local"),
        "scheduler": (_ADDRESS, None),
        "cell_timeout_s": (_number_at_least(1, MAX_TIMEOUT_S), 900.0),
        "cell_memory_mb": (_int_at_least(0, MAX_MEMORY_MB), 0),
        "retries": (_int_at_least(0, MAX_RETRIES), 1),
        "max_cells": (_int_at_least(1), DEFAULT_MAX_CELLS),
    },
    # the decision rule (harness.stats.DecisionRule); read by the report, not by the runner
    "decision": {
        "reference": (_STR, None),
        "margin": (_number_between(0, 0.5), 0.01),
        "alpha": (_number_between(0, 0.5), 0.05),
        "min_saving": (_number_between(-1e-12, 1), 0.20),
        "min_saving_s": (_number_at_least(0), 0.01),
    },
    # nested tuning (harness.tuning): which regimes run, and the search of a tuned cell
    "tuning": {
        "regimes": (_regimes, [DEFAULT_REGIME]),
        "budget": (_int_at_least(1, MAX_BUDGET), 10),
        "inner_folds": (_int_at_least(2, MAX_INNER_FOLDS), 3),
        "method": (_one_of(METHODS), "random"),
        "seed": (_int_at_least(0, SEED_MAX), None),
    },
}


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
        raise ConfigError(f"config file {path} is not valid TOML: {exc}. Fix the syntax at that line and column.") from None


def parse_config(raw: dict, path: str = "<config>") -> Config:
    """Validate a config already parsed into a dict (see :func:`load_config`)."""
    _check_keys(raw, SECTIONS, path, "")
    for section in ("datasets", "encoders", "models"):
        if not raw.get(section):
            raise ConfigError(
                f"{path} defines no [{section}.<label>] table; the grid would be empty. "
                f"Add at least one (see configs/quickstart.toml)."
            )
        if not isinstance(raw[section], dict):
            raise ConfigError(f"`{section}` in {path} must be a table of [{section}.<label>] tables; got {raw[section]!r}.")
    _check_finite(raw, path, "")
    sections = {name: _fill(raw.get(name, {}), RULES[name], path, name) for name in RULES}
    if not sections["execution"]["scheduler"]:  # workers of a remote cluster are not forked here
        check_jobs(sections["execution"]["jobs"], f"`execution.jobs` in {path}")
    _check_grid_size(raw, sections, path)
    exp = sections["experiment"]
    if exp["name"] is None:
        exp["name"] = Path(path).stem
    prot = sections["protocol"]
    _check_primary(prot, path)
    encoders = _parse_encoders(raw["encoders"], path)
    models = _parse_models(raw["models"], path)
    datasets = _parse_datasets(raw["datasets"], path)
    _check_native(encoders, models, path)
    _check_reference(sections["decision"], encoders, path)
    _check_group_not_target(datasets, prot["group"], path)
    tuning = _tuning_of(sections["tuning"], exp["seed"], encoders, models, path)
    normalized = {**raw, **sections}
    return Config(
        path=path,
        name=exp["name"],
        seed=exp["seed"],
        description=exp["description"],
        output=exp["output"] or f"results/{exp['name']}",
        protocol=Protocol(
            folds=prot["folds"],
            repeats=prot["repeats"],
            stratify=prot["stratify"],
            group=prot["group"],
            metrics=tuple(prot["metrics"]),
            primary=prot["primary"],
            primary_regression=prot["primary_regression"],
            cardinality_bands=tuple(prot["cardinality_bands"]),
        ),
        datasets=datasets,
        encoders=encoders,
        models=models,
        execution=Execution(**sections["execution"]),
        raw=normalized,
        decision=DecisionRule.from_mapping(sections["decision"]),
        tuning=tuning,
    )


def _check_reference(decision: dict, encoders, path: str) -> None:
    ref = decision["reference"]
    labels = [e.label for e in encoders]
    if ref is not None and ref not in labels:
        raise ConfigError(
            f"`decision.reference` in {path} must be an encoder label of the config; got "
            f"{ref!r}; allowed: {', '.join(labels)}.{closest(ref, labels)} A list-expanded "
            "encoder is named by its variant label, e.g. 'te(m=1.0)'.")


def _check_keys(table: dict, allowed, path: str, where: str) -> None:
    for key in table:
        if key not in allowed:
            place = f"[{where}] " if where else "the top level "
            kind = "key" if where else "section"
            raise ConfigError(
                f"unknown {kind} '{key}' in {place}of {path}; allowed: {', '.join(allowed)}."
                f"{closest(key, allowed)}"
            )


def _fill(table: dict, rules: dict, path: str, section: str) -> dict:
    if not isinstance(table, dict):
        raise ConfigError(f"`{section}` in {path} must be a table ([{section}]); got {table!r}.")
    _check_keys(table, rules, path, section)
    out = {}
    for key, ((ok, allowed), default) in rules.items():
        if key not in table:
            out[key] = default
            continue
        value = table[key]
        if not ok(value):
            raise ConfigError(f"`{section}.{key}` in {path} must be {allowed}; got {_shown(value)}.")
        out[key] = value
    return out


def _check_finite(node, path: str, where: str) -> None:
    """TOML allows inf and nan; no key of a config means either."""
    if isinstance(node, dict):
        for key, value in node.items():
            _check_finite(value, path, f"{where}.{key}" if where else str(key))
    elif isinstance(node, list):
        for value in node:
            _check_finite(value, path, where)
    elif isinstance(node, float) and not math.isfinite(node):
        raise ConfigError(f"`{where}` in {path} must be a finite number; got {node!r}. Give a finite value.")


def check_jobs(jobs: int, where: str) -> None:
    """Worker processes are capped at a multiple of this machine's cores."""
    cores = os.cpu_count() or 1
    if jobs > JOBS_PER_CORE * cores:
        raise ConfigError(
            f"{where} must be at most {JOBS_PER_CORE} x the {cores} core(s) of this machine = "
            f"{JOBS_PER_CORE * cores}; got {jobs:,}. Each job is a worker process: more than that only "
            "competes for the cores. Lower it (the number of cores is a good choice)."
        )


def _n_variants(body) -> int:
    if not isinstance(body, dict):
        return 1
    return math.prod(len(v) for k, v in body.items() if isinstance(v, list) and k not in ("kind", "search"))


def _check_grid_size(raw: dict, sections: dict, path: str) -> None:
    """Refuse a grid above ``execution.max_cells`` before any list is expanded."""
    prot, limit = sections["protocol"], sections["execution"]["max_cells"]
    n_enc = sum(_n_variants(b) for b in raw["encoders"].values())
    size = len(raw["datasets"]) * n_enc * len(raw["models"]) * prot["repeats"] * prot["folds"]
    if size > limit:
        raise ConfigError(
            f"{path} describes {size:,} cells ({len(raw['datasets'])} datasets x {n_enc:,} encoder "
            f"variants x {len(raw['models'])} models x {prot['repeats']} repeats x {prot['folds']} folds), "
            f"more than `execution.max_cells` = {limit:,}. Shorten the lists of encoder values, or raise "
            "`execution.max_cells` if you mean it."
        )
def _shown(value, limit: int = 60) -> str:
    """A value as the user can see it: quoted (so spaces show), control characters escaped, cut."""
    text = repr(value)
    return text if len(text) <= limit else f"{text[:limit]}... ({len(value) if isinstance(value, str) else len(text)} characters)"


def _check_label(label, what: str, path: str) -> None:
    if not (isinstance(label, str) and label.strip() and label.isprintable() and len(label) <= NAME_MAX):
        raise ConfigError(
            f"the {what} label {_shown(label)} in {path} must be 1 to {NAME_MAX} printable characters, not blank: "
            f"it names rows, tables and figures. Rename that [{what}s.<label>] table."
        )


def _check_group_not_target(datasets, group, path: str) -> None:
    """A group column that is also the target would leave the target out of the data."""
    for spec in datasets:
        target = spec.params.get("target")
        own = spec.params.get("group")
        takes_group = "group" in _datasets.params_of(spec.source)
        used = own if own is not None else (group if takes_group else None)
        if target is not None and used == target:
            key = f"datasets.{spec.label}.group" if own is not None else "protocol.group"
            raise ConfigError(
                f"`{key}` in {path} names the column '{used}', which is the target of dataset "
                f"'{spec.label}'. The group column must be another column (the one that ties rows "
                "together, e.g. a customer id); fix `group` or `target`."
            )


def _check_primary(prot: dict, path: str) -> None:
    """The primary metrics are always recorded, listed in `metrics` or not."""
    for key in ("primary", "primary_regression"):
        if prot[key] not in prot["metrics"]:
            prot["metrics"] = list(prot["metrics"]) + [prot[key]]


def _expand(params: dict, path: str = "<config>", where: str = "") -> list[tuple[str, dict]]:
    """One variant per combination of list values; suffix names the varying values."""
    varying = [k for k, v in params.items() if isinstance(v, list)]
    for k in varying:
        if not params[k]:
            raise ConfigError(
                f"`{where}.{k}` in {path} is an empty list; a list expands into one variant per value, "
                "so an empty one would silently drop the encoder. Give at least one value."
            )
    if not varying:
        return [("", params)]
    out = []
    for combo in itertools.product(*(params[k] for k in varying)):
        variant = {**params, **dict(zip(varying, combo))}
        suffix = "(" + ",".join(f"{k}={v}" for k, v in zip(varying, combo)) + ")"
        out.append((suffix, variant))
    return out


def _parse_encoders(table: dict, path: str) -> tuple[EncoderSpec, ...]:
    specs = []
    for label, body in table.items():
        _check_label(label, "encoder", path)
        where = f"encoders.{label}"
        if not isinstance(body, dict):
            raise ConfigError(f"`{where}` in {path} must be a table with a `kind` key; got {body!r}.")
        kind = body.get("kind")
        if kind is None:
            raise ConfigError(f"`{where}.kind` is missing in {path}; allowed: {', '.join(_encoders.KINDS)}.")
        if kind not in _encoders.KINDS:
            raise ConfigError(
                f"unknown encoder kind '{kind}' at {where}.kind in {path}; allowed: "
                f"{', '.join(_encoders.KINDS)}.{closest(kind, _encoders.KINDS)}"
            )
        params = {k: v for k, v in body.items() if k not in ("kind", "search")}
        for suffix, variant in _expand(params, path, where):
            _validate_encoder(kind, variant, path, where)
            search = _encoder_space(kind, variant, body["search"], f"{where}.search", path) if "search" in body else ()
            specs.append(EncoderSpec(label + suffix, kind, variant, search))
    _check_unique([s.label for s in specs], "encoder", path)
    return tuple(specs)


def _validate_encoder(kind: str, params: dict, path: str, where: str) -> None:
    """Check the parameters against the encoder class's declared rules (nothing is fitted)."""
    try:
        _encoders.check(kind, params)
    except HarnessError as exc:
        message = str(exc).rstrip(".")
        raise ConfigError(f"{where} in {path}: {message}. Fix the value of that key.") from None


def _parse_models(table: dict, path: str) -> tuple[ModelSpec, ...]:
    specs = []
    for label, body in table.items():
        _check_label(label, "model", path)
        where = f"models.{label}"
        if not isinstance(body, dict) or "family" not in body:
            raise ConfigError(
                f"`{where}.family` is missing in {path}; allowed: {', '.join(sorted(_models.FAMILIES))}."
            )
        family = body["family"]
        if family not in _models.FAMILIES:
            raise ConfigError(
                f"unknown model family '{family}' at {where}.family in {path}; allowed: "
                f"{', '.join(sorted(_models.FAMILIES))}.{closest(family, _models.FAMILIES)}"
            )
        max_rows = body.get("max_rows", _models.FAMILIES[family].max_rows)
        if max_rows is not None and not _int_at_least(1)[0](max_rows):
            raise ConfigError(f"`{where}.max_rows` in {path} must be an integer >= 1; got {max_rows!r}.")
        timeout = body.get("cell_timeout_s")
        if timeout is not None and not _number_at_least(0.001, MAX_TIMEOUT_S)[0](timeout):
            raise ConfigError(
                f"`{where}.cell_timeout_s` in {path} must be a finite number > 0 and <= {MAX_TIMEOUT_S:,}; got {timeout!r}."
            )
        params = {k: (tuple(v) if isinstance(v, list) else v) for k, v in body.items() if k not in _models.HARNESS_KEYS}
        allowed = _models.family_params(family)
        for key in params:
            if key not in allowed:
                shown = ", ".join(allowed) if len(allowed) <= 60 else (
                    f"the estimator's parameters and the library's parameter names and aliases ({len(allowed)} names)")
                raise ConfigError(
                    f"model family '{family}' has no parameter '{key}' (at {where}.{key} in {path}); "
                    f"allowed: {shown}.{closest(key, allowed)}"
                )
        _probe_model(family, tuple(sorted(params.items(), key=lambda kv: kv[0])), path, where)
        search = _model_space(family, params, body["search"], f"{where}.search", path) if "search" in body else ()
        specs.append(ModelSpec(label, family, params, max_rows, timeout, search))
    _check_unique([s.label for s in specs], "model", path)
    return tuple(specs)


def _encoder_space(kind: str, params: dict, table, where: str, path: str) -> tuple:
    def check(name, value):
        _validate_encoder(kind, {**params, name: value}, path, f"{where}.{name}")

    return parse_space(table, where, path, _encoders.params_of(kind), check)


def _model_space(family: str, params: dict, table, where: str, path: str) -> tuple:
    def check(name, value):
        _probe_model(family, tuple(sorted({**params, name: value}.items())), path, f"{where}.{name}")

    return parse_space(table, where, path, _models.family_params(family), check)


def _tuning_of(sec: dict, seed: int, encoders, models, path: str) -> Tuning:
    """The [tuning] table, checked against the search tables of the models and encoders."""
    t = Tuning(tuple(sec["regimes"]), sec["budget"], sec["inner_folds"], sec["method"],
               seed if sec["seed"] is None else sec["seed"])
    if not t.tuned:
        return t
    if not any(m.search for m in models):
        raise ConfigError(
            f"`tuning.regimes` in {path} lists {', '.join(repr(r) for r in t.tuned)}, but no model has a "
            f"[models.<label>.search] table, so there is nothing to tune. Add one (e.g. "
            f"[models.{models[0].label}.search] mapping a parameter to a list or to {{low, high, scale}}), "
            "or set regimes = [\"defaults\"].")
    if "tuned-both" in t.regimes and not any(e.search for e in encoders):
        raise ConfigError(
            f"`tuning.regimes` in {path} lists 'tuned-both', but no encoder has an [encoders.<label>.search] "
            "table, so it would repeat 'tuned-model'. Add an encoder search table, or drop 'tuned-both'.")
    for m in models:
        if not m.search and DEFAULT_REGIME not in t.regimes:
            raise ConfigError(
                f"model '{m.label}' has no [models.{m.label}.search] table and `tuning.regimes` in {path} does "
                "not list 'defaults', so it would run no cell. Add a search table, or add 'defaults'.")
        if m.search:
            check_budget(t, space_size(m.search), f"[models.{m.label}.search]", path)
    return t


@functools.lru_cache(maxsize=256)
def _probe_fit(family: str, items: tuple) -> str:
    """Fit the family's classifier and regressor with ``items`` on a tiny table; "" or the error.

    Types and ranges are the estimator's own checks (scikit-learn's parameter
    constraints, LightGBM's config checks): a value that would fail every cell fails here.
    """
    import warnings

    import numpy as np

    rng = np.random.RandomState(0)
    X = rng.normal(size=(40, 3))
    targets = {"binary": np.r_[np.zeros(20), np.ones(20)], "regression": X[:, 0] + rng.normal(size=40)}
    for task, y in targets.items():
        try:
            with warnings.catch_warnings(), _quiet_native_output():
                warnings.simplefilter("ignore")
                _models.build_model(family, task, seed=0, params=dict(items)).fit(X, y)
        except Exception as exc:  # noqa: BLE001 - any rejection of a value is the user's to fix
            text = str(exc).strip()
            if "n_samples" in text:
                continue  # a bound set by the tiny probe table's size (max_samples=1000): the data decides
            return f"{type(exc).__name__}: {text.splitlines()[0] if text else ''}"
    return ""


def _is_count(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _probe_model(family: str, items: tuple, path: str, where: str) -> None:
    for key, value in items:
        if isinstance(value, tuple) and not value:
            raise ConfigError(f"`{where}.{key}` in {path} is an empty list; give a value.")
        if key in ITERATION_KEYS and _is_count(value) and value > MAX_ITERATIONS:
            raise ConfigError(
                f"`{where}.{key}` in {path} must be at most {MAX_ITERATIONS:,} (an iteration or "
                f"tree count); got {value!r}. Give a smaller count (with early stopping if the "
                "model needs many)."
            )
    # the probe checks types and ranges, not run time: a few iterations of the same type
    probe = tuple((k, type(v)(min(v, PROBE_ITERATIONS)) if k in ITERATION_KEYS and _is_count(v)
                   and v > PROBE_ITERATIONS else v) for k, v in items)
    problem = _probe_fit(family, probe)
    if problem:
        shown = ", ".join(f"{k} = {v!r}" for k, v in items)
        raise ConfigError(
            f"`{where}` in {path}: the {family} estimator rejects its parameters ({shown}) in a probe "
            f"fit on a tiny table: {problem.rstrip('.')}. Fix the value of that key (see the "
            "estimator's documentation for its types and ranges)."
        )


class _quiet_native_output:
    """Silence C-level stdout/stderr (LightGBM prints its fatal checks before raising)."""

    def __enter__(self):
        import sys

        sys.stdout.flush()
        sys.stderr.flush()
        self._saved = [os.dup(1), os.dup(2)]
        null = os.open(os.devnull, os.O_WRONLY)
        os.dup2(null, 1)
        os.dup2(null, 2)
        os.close(null)

    def __exit__(self, *exc):
        for fd, saved in zip((1, 2), self._saved):
            os.dup2(saved, fd)
            os.close(saved)


def _parse_datasets(table: dict, path: str) -> tuple[DatasetSpec, ...]:
    specs = []
    sources = sorted(_datasets.SOURCES)
    for label, body in table.items():
        _check_label(label, "dataset", path)
        where = f"datasets.{label}"
        if not isinstance(body, dict) or "source" not in body:
            raise ConfigError(f"`{where}.source` is missing in {path}; allowed: {', '.join(sources)}.")
        source = body["source"]
        if source not in _datasets.SOURCES:
            raise ConfigError(
                f"unknown dataset source '{source}' at {where}.source in {path}; allowed: "
                f"{', '.join(sources)}.{closest(source, sources)}"
            )
        params = {k: v for k, v in body.items() if k != "source"}
        _check_source_params(source, params, path, where)
        specs.append(DatasetSpec(label, source, params))
    return tuple(specs)


def _check_source_params(source: str, params: dict, path: str, where: str) -> None:
    signature = _datasets.params_of(source)
    for key, value in params.items():
        if key not in signature:
            raise ConfigError(
                f"dataset source '{source}' has no key '{key}' (at {where}.{key} in {path}); "
                f"allowed: {', '.join(signature)}.{closest(key, signature)}"
            )
        annotation = signature[key].annotation
        if not _matches(value, annotation):
            raise ConfigError(
                f"`{where}.{key}` in {path} must be {_describe(annotation)}; got {_shown(value)}."
            )
        if key == "seed" and not 0 <= value <= SEED_MAX:
            raise ConfigError(f"`{where}.seed` in {path} must be an integer in [0, {SEED_MAX}]; got {value!r}.")
    for key, param in signature.items():
        if param.default is inspect.Parameter.empty and key not in params:
            raise ConfigError(f"`{where}.{key}` is required for source '{source}' in {path} but missing.")


def _matches(value, annotation) -> bool:
    if annotation is inspect.Parameter.empty or annotation is typing.Any:
        return True
    if isinstance(annotation, str):  # postponed annotations
        annotation = eval(annotation, {"list": list, "dict": dict, "int": int, "str": str, "float": float, "bool": bool, "None": None})
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        return any(_matches(value, a) for a in typing.get_args(annotation))
    if annotation is None or annotation is type(None):
        return value is None
    if origin in (list, tuple):
        args = typing.get_args(annotation)
        return isinstance(value, list) and (not args or all(_matches(v, args[0]) for v in value))
    if annotation is float:
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if annotation is int:
        return isinstance(value, int) and not isinstance(value, bool)
    if isinstance(annotation, type):
        return isinstance(value, annotation)
    return True


def _describe(annotation) -> str:
    text = str(annotation).replace("typing.", "").replace("<class '", "").replace("'>", "")
    return f"of type {text}"


def _check_unique(labels, what: str, path: str) -> None:
    seen = set()
    for label in labels:
        if label in seen:
            raise ConfigError(f"duplicate {what} label '{label}' in {path}; every label must be unique.")
        seen.add(label)


def _check_native(encoders, models, path: str) -> None:
    """Warn (not fail) when `native` has no model that can take it: those cells are not-applicable."""
    import warnings

    if any(e.kind == "native" for e in encoders) and not any(
        _models.FAMILIES[m.family].native_categorical for m in models
    ):
        warnings.warn(
            f"{path}: the 'native' encoder is paired only with model families that cannot take "
            f"categorical columns; its cells will be recorded as not-applicable. Families that can: "
            + ", ".join(n for n, f in sorted(_models.FAMILIES.items()) if f.native_categorical),
            UserWarning,
            stacklevel=2,
        )


PRIVATE_TITLE = "private dataset"


def private_config(data: str, target: str, base: str | Path, alias: str | None = None,
                   description: str | None = None) -> Config:
    """The encoders, models and protocol of ``base`` with one private file as the dataset.

    Used by ``harness run --data FILE --target COLUMN [--config BASE] [--alias NAME]
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
    import re

    return re.sub(r"[^A-Za-z0-9_-]+", "-", text).strip("-") or "dataset"

"""Load a TOML config into frozen dataclasses, checking every key once, at the edge.

Every error names the file and the key path, the allowed values and the value received,
and suggests the closest valid key for a typo. Nothing downstream re-validates.
"""

from __future__ import annotations

import hashlib
import inspect
import itertools
import json
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


@dataclass(frozen=True)
class ModelSpec:
    label: str
    family: str
    params: dict
    max_rows: int | None = None
    cell_timeout_s: float | None = None


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

    @property
    def hash(self) -> str:
        """Hash of everything that affects results (execution settings excluded)."""
        payload = {k: v for k, v in self.raw.items() if k != "execution"}
        payload["experiment"] = {k: v for k, v in payload.get("experiment", {}).items() if k != "output"}
        return digest(payload)


def digest(obj, length: int = 16) -> str:
    """SHA-256 of the canonical JSON of ``obj`` (sorted keys), first ``length`` hex digits."""
    text = json.dumps(obj, sort_keys=True, default=str, separators=(",", ":"))
    return hashlib.sha256(text.encode()).hexdigest()[:length]


# --------------------------------------------------------------------------- rules
# key -> (checker, description of allowed values, default)
def _int_at_least(lo):
    return (lambda v: isinstance(v, int) and not isinstance(v, bool) and v >= lo, f"an integer >= {lo}")


def _number_at_least(lo):
    ok = lambda v: isinstance(v, (int, float)) and not isinstance(v, bool) and v >= lo  # noqa: E731
    return ok, f"a number >= {lo}"


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

SECTIONS = ("experiment", "protocol", "datasets", "encoders", "models", "execution")

RULES = {
    "experiment": {
        "name": (_NAME, None),
        "seed": (_int_at_least(0), 0),
        "description": ((lambda v: isinstance(v, str), "a string"), ""),
        "output": (_STR, None),
    },
    "protocol": {
        "folds": (_int_at_least(2), 5),
        "repeats": (_int_at_least(1), 1),
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
        "cell_timeout_s": (_number_at_least(1), 900.0),
        "cell_memory_mb": (_int_at_least(0), 0),
        "retries": (_int_at_least(0), 1),
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
    sections = {name: _fill(raw.get(name, {}), RULES[name], path, name) for name in RULES}
    exp = sections["experiment"]
    if exp["name"] is None:
        exp["name"] = Path(path).stem
    prot = sections["protocol"]
    _check_primary(prot, path)
    encoders = _parse_encoders(raw["encoders"], path)
    models = _parse_models(raw["models"], path)
    datasets = _parse_datasets(raw["datasets"], path)
    _check_native(encoders, models, path)
    _check_group_not_target(datasets, prot["group"], path)
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
    )


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


def _expand(params: dict) -> list[tuple[str, dict]]:
    """One variant per combination of list values; suffix names the varying values."""
    varying = [k for k, v in params.items() if isinstance(v, list)]
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
        params = {k: v for k, v in body.items() if k != "kind"}
        for suffix, variant in _expand(params):
            _validate_encoder(kind, variant, path, where)
            specs.append(EncoderSpec(label + suffix, kind, variant))
    _check_unique([s.label for s in specs], "encoder", path)
    return tuple(specs)


def _validate_encoder(kind: str, params: dict, path: str, where: str) -> None:
    """Build the encoder and fit it on a tiny frame: every parameter check runs at load."""
    import pandas as pd

    try:
        enc = _encoders.build(kind, **params)
        probe = pd.DataFrame({"probe": ["a", "b"] * 10})
        enc.fit(probe, [0, 1] * 10)
    except (HarnessError, ValueError, TypeError) as exc:
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
        if timeout is not None and not _number_at_least(0.001)[0](timeout):
            raise ConfigError(f"`{where}.cell_timeout_s` in {path} must be a number > 0; got {timeout!r}.")
        params = {k: (tuple(v) if isinstance(v, list) else v) for k, v in body.items() if k not in _models.HARNESS_KEYS}
        allowed = _models.family_params(family)
        for key in params:
            if allowed and key not in allowed:
                raise ConfigError(
                    f"model family '{family}' has no parameter '{key}' (at {where}.{key} in {path}); "
                    f"allowed: {', '.join(allowed)}.{closest(key, allowed)}"
                )
        specs.append(ModelSpec(label, family, params, max_rows, timeout))
    _check_unique([s.label for s in specs], "model", path)
    return tuple(specs)


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


def private_config(data: str, target: str, base: str | Path) -> Config:
    """The encoders, models and protocol of ``base`` with one private file as the dataset.

    Used by ``harness run --data FILE --target COLUMN [--config BASE]``.
    """
    base = Path(base)
    if not base.is_file():
        raise ConfigError(
            f"--config {base} does not exist; pass a config whose encoders, models and protocol to use "
            "(run from the project folder for the default configs/team-default.toml)."
        )
    raw = _read_toml(base)
    stem = Path(data).stem
    raw["datasets"] = {stem: {"source": "file", "path": str(data), "target": target}}
    experiment = dict(raw.get("experiment", {}))
    experiment["name"] = f"private-{stem}"
    experiment.pop("output", None)
    raw["experiment"] = experiment
    return parse_config(raw, f"{base} with --data {data}")

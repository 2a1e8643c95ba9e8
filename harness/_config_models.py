"""The [datasets], [encoders] and [models] tables of a config, parsed into specs.

Each table is checked against its owner's own declarations: a dataset source's keyword
parameters (``datasets.params_of``), an encoder class's parameter rules
(``encoders.check``, nothing fitted) and a model family's parameters, which a probe fit
on a tiny table checks for types and ranges (:func:`_probe_fit`).
"""

from __future__ import annotations

import functools
import inspect
import itertools
import os
import types
import typing
from dataclasses import dataclass

from harness import datasets as _datasets
from harness import encoders as _encoders
from harness import models as _models
from harness._config_rules import (
    MAX_TIMEOUT_S,
    SEED_MAX,
    check_label,
    check_renamed,
    check_unique,
    int_at_least,
    number_at_least,
    shown_value,
)
from harness.errors import ConfigError, HarnessError, closest
from harness.tuning import parse_space


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
    skip_above_rows: int | None = None  # cells whose training fold has more rows are skipped
    cell_timeout_s: float | None = None
    search: tuple = ()  # [models.<label>.search]: tuning.Dimension per searched parameter


#: iteration and tree counts (scikit-learn's and LightGBM's names and aliases): capped at
#: load, and the probe fit runs a few of them so that a huge count cannot stall loading
ITERATION_KEYS = frozenset(
    {
        "n_estimators",
        "max_iter",
        "num_iterations",
        "num_iteration",
        "n_iter",
        "num_tree",
        "num_trees",
        "num_round",
        "num_rounds",
        "num_boost_round",
        "n_iter_no_change",
    }
)
MAX_ITERATIONS = 100_000
PROBE_ITERATIONS = 3


# --------------------------------------------------------------------------- encoders
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


def parse_encoders(table: dict, path: str) -> tuple[EncoderSpec, ...]:
    specs = []
    for label, body in table.items():
        check_label(label, "encoder", path)
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
    check_unique([s.label for s in specs], "encoder", path)
    return tuple(specs)


def _validate_encoder(kind: str, params: dict, path: str, where: str) -> None:
    """Check the parameters against the encoder class's declared rules (nothing is fitted)."""
    try:
        _encoders.check(kind, params)
    except HarnessError as exc:
        message = str(exc).rstrip(".")
        raise ConfigError(f"{where} in {path}: {message}. Fix the value of that key.") from None


def _encoder_space(kind: str, params: dict, table, where: str, path: str) -> tuple:
    def check(name, value):
        _validate_encoder(kind, {**params, name: value}, path, f"{where}.{name}")

    return parse_space(table, where, path, _encoders.params_of(kind), check)


# --------------------------------------------------------------------------- models
def parse_models(table: dict, path: str) -> tuple[ModelSpec, ...]:
    specs = []
    for label, body in table.items():
        check_label(label, "model", path)
        where = f"models.{label}"
        if not isinstance(body, dict) or "family" not in body:
            raise ConfigError(f"`{where}.family` is missing in {path}; allowed: {', '.join(sorted(_models.FAMILIES))}.")
        family = body["family"]
        if family not in _models.FAMILIES:
            raise ConfigError(
                f"unknown model family '{family}' at {where}.family in {path}; allowed: "
                f"{', '.join(sorted(_models.FAMILIES))}.{closest(family, _models.FAMILIES)}"
            )
        check_renamed(body, "models", path, where)
        skip_above = body.get("skip_above_rows", _models.FAMILIES[family].skip_above_rows)
        if skip_above is not None and not int_at_least(1)[0](skip_above):
            raise ConfigError(f"`{where}.skip_above_rows` in {path} must be an integer >= 1; got {skip_above!r}.")
        timeout = body.get("cell_timeout_s")
        if timeout is not None and not number_at_least(0.001, MAX_TIMEOUT_S)[0](timeout):
            raise ConfigError(
                f"`{where}.cell_timeout_s` in {path} must be a finite number > 0 and <= {MAX_TIMEOUT_S:,}; "
                f"got {timeout!r}."
            )
        params = {k: (tuple(v) if isinstance(v, list) else v) for k, v in body.items() if k not in _models.HARNESS_KEYS}
        _check_model_params(family, params, path, where)
        _probe_model(family, tuple(sorted(params.items(), key=lambda kv: kv[0])), path, where)
        search = _model_space(family, params, body["search"], f"{where}.search", path) if "search" in body else ()
        specs.append(ModelSpec(label, family, params, skip_above, timeout, search))
    check_unique([s.label for s in specs], "model", path)
    return tuple(specs)


def _check_model_params(family: str, params: dict, path: str, where: str) -> None:
    """Every key names a parameter of the family's estimators (or a library alias)."""
    allowed = _models.family_params(family)
    for key in params:
        if key not in allowed:
            many = f"the estimator's parameters and the library's parameter names and aliases ({len(allowed)} names)"
            shown = ", ".join(allowed) if len(allowed) <= 60 else many
            raise ConfigError(
                f"model family '{family}' has no parameter '{key}' (at {where}.{key} in {path}); "
                f"allowed: {shown}.{closest(key, allowed)}"
            )


def _model_space(family: str, params: dict, table, where: str, path: str) -> tuple:
    def check(name, value):
        _probe_model(family, tuple(sorted({**params, name: value}.items())), path, f"{where}.{name}")

    return parse_space(table, where, path, _models.family_params(family), check)


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
    probe = tuple(
        (k, type(v)(min(v, PROBE_ITERATIONS)) if k in ITERATION_KEYS and _is_count(v) and v > PROBE_ITERATIONS else v)
        for k, v in items
    )
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


# --------------------------------------------------------------------------- datasets
def parse_datasets(table: dict, path: str) -> tuple[DatasetSpec, ...]:
    specs = []
    sources = sorted(_datasets.SOURCES)
    for label, body in table.items():
        check_label(label, "dataset", path)
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
        check_renamed(params, "datasets", path, where, _datasets.params_of(source))
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
            raise ConfigError(f"`{where}.{key}` in {path} must be {_describe(annotation)}; got {shown_value(value)}.")
        if key == "seed" and not 0 <= value <= SEED_MAX:
            raise ConfigError(f"`{where}.seed` in {path} must be an integer in [0, {SEED_MAX}]; got {value!r}.")
    for key, param in signature.items():
        if param.default is inspect.Parameter.empty and key not in params:
            raise ConfigError(f"`{where}.{key}` is required for source '{source}' in {path} but missing.")


def _matches(value, annotation) -> bool:
    if annotation is inspect.Parameter.empty or annotation is typing.Any:
        return True
    if isinstance(annotation, str):  # postponed annotations
        names = {"list": list, "dict": dict, "int": int, "str": str, "float": float, "bool": bool, "None": None}
        annotation = eval(annotation, names)
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


# ------------------------------------------------------------------ across the tables
def check_native(encoders, models, path: str) -> None:
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


def check_group_not_target(datasets, group, path: str) -> None:
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

"""The encoder registry: one explicit dict from config kind to class.

``build(kind, **params)`` returns an unfitted encoder; ``KINDS`` lists the kinds;
``check(kind, params)`` validates parameters against the class's declared rules without
fitting; ``declaration(kind, params)`` reads what the class declares about itself
(uses the target, leaky under these settings, references). ``register(kind, cls)`` adds
a kind at run time (tests, code outside the package); a line in ``ENCODERS`` is the normal
route (DEVELOPERS.md, "How to add an encoder").
"""

from __future__ import annotations

from typing import NamedTuple

from harness import _registry
from harness.encoders._base import CategoricalEncoder, factorised
from harness.encoders._contrast import ContrastCodes
from harness.encoders._frequency import FrequencyCodes
from harness.encoders._glmm import RandomInterceptCodes
from harness.encoders._hashing import HashedCodes
from harness.encoders._hybrid import CardinalitySplit
from harness.encoders._integer import IntegerCodes
from harness.encoders._onehot import OneHotCodes
from harness.encoders._passthrough import DropColumns, NativeCategories
from harness.encoders._rules import ParameterError
from harness.encoders._similarity import NgramSimilarity
from harness.encoders._target import TargetStatistics
from harness.errors import ConfigError, closest

ENCODERS = {
    "integer": IntegerCodes,
    "onehot": OneHotCodes,
    "hashing": HashedCodes,
    "frequency": FrequencyCodes,
    "target": TargetStatistics,
    "drop": DropColumns,
    "native": NativeCategories,
    "contrast": ContrastCodes,
    "hybrid": CardinalitySplit,
    "similarity": NgramSimilarity,
    "glmm": RandomInterceptCodes,
}

KINDS = tuple(sorted(ENCODERS))
#: the kinds this package ships (the lines above): shipped configs and the README cover
#: these; ``register`` adds kinds to ``ENCODERS``/``KINDS`` only, never to this tuple
BUILTIN_KINDS = KINDS

#: parameters renamed since earlier versions: kind -> {old name: new name}
RENAMED = {"hashing": {"n_components": "width"}}

__all__ = [
    "BUILTIN_KINDS",
    "CategoricalEncoder",
    "ENCODERS",
    "KINDS",
    "RENAMED",
    "Declaration",
    "ParameterError",
    "build",
    "check",
    "factorised",
    "declaration",
    "describe",
    "parameter_lines",
    "params_of",
    "register",
    "unregister",
    "CardinalitySplit",
    "ContrastCodes",
    "DropColumns",
    "FrequencyCodes",
    "HashedCodes",
    "IntegerCodes",
    "NativeCategories",
    "NgramSimilarity",
    "OneHotCodes",
    "RandomInterceptCodes",
    "TargetStatistics",
]


def params_of(kind: str) -> tuple[str, ...]:
    """Names of the parameters an encoder kind accepts."""
    return tuple(sorted(_cls(kind)().get_params(deep=False)))


def build(kind: str, **params):
    """Return an unfitted encoder of ``kind`` with ``params``.

    Raises
    ------
    ConfigError
        If ``kind`` is unknown or a parameter does not belong to it.
    """
    cls = _cls(kind)
    allowed = params_of(kind)
    for name in params:
        new = RENAMED.get(kind, {}).get(name)
        if new is not None:
            raise ConfigError(
                f"encoder kind '{kind}': parameter '{name}' was renamed '{new}'; "
                f"write {new} = {params[name]!r} instead."
            )
        if name not in allowed:
            raise ConfigError(
                f"encoder kind '{kind}' has no parameter '{name}'; allowed: "
                f"{', '.join(allowed) or '(none)'}.{closest(name, allowed)}"
            )
    return cls(**params)


def check(kind: str, params: dict) -> None:
    """Validate ``params`` of ``kind`` against the declared rules, without fitting.

    Raises
    ------
    ConfigError
        Unknown kind or parameter; :class:`ParameterError` (also a ``ValueError``) for a
        value outside the rules.
    """
    build(kind, **params)._check_params()  # a composite kind also checks its parts


class Declaration(NamedTuple):
    """What an encoder setting declares about itself (see ``CategoricalEncoder``)."""

    uses_target: bool
    leaky: bool
    references: tuple[str, ...]


def declaration(kind: str, params: dict) -> Declaration:
    """The declarations of ``kind`` under ``params`` (defaults filled from the class)."""
    cls = _cls(kind)
    return Declaration(bool(cls.uses_target), bool(cls.is_leaky(params)), cls.cited(params))


def parameter_lines(kind: str) -> list[str]:
    """One line per parameter of ``kind``: name, default and the values its rules allow."""
    cls = _cls(kind)
    defaults = cls().get_params(deep=False)
    lines = []
    for name in sorted(defaults):
        rules = cls.param_rules.get(name, ())
        allowed = " or ".join(rule.describe() for rule in rules) or "any value"
        lines.append(f"{name} = {defaults[name]!r}: {allowed}")
    return lines


def describe(kind: str) -> str:
    """One line of what ``kind`` declares: target use, leaky settings, references."""
    cls = _cls(kind)
    if not cls.uses_target:
        text = "target-free"
    else:
        leaks = "; ".join(f"{k} in {', '.join(map(str, v))}" for k, v in cls.leaky_when.items())
        text = "uses the target" + (f"; leaky when {leaks}" if leaks else "")
    refs = sorted({k for by in cls.references_when.values() for v in by.values() for k in v} | set(cls.references))
    return text + (f"; references: {', '.join(refs)}" if refs else "")


def register(kind: str, cls) -> None:
    """Add encoder ``kind`` to the registry at run time, as a line in ``ENCODERS`` does.

    The kind then builds, validates, lists (``levelfold list``) and runs like a shipped one.
    Forked workers (``--jobs N``) inherit it; Dask workers import the package afresh and do
    not: for those, add the line to ``ENCODERS``.

    Parameters
    ----------
    kind : str
        The config name (``kind = "..."``), a Python identifier not registered yet.
    cls : type
        A subclass of ``harness.encoders.CategoricalEncoder``.

    Raises
    ------
    ConfigError
        If ``kind`` is not an identifier or is taken, or ``cls`` is not an encoder class.
    """
    global KINDS
    if not (isinstance(cls, type) and issubclass(cls, CategoricalEncoder)):
        raise ConfigError(
            f"encoder kind '{kind}' must be a class derived from harness.encoders.CategoricalEncoder; got {cls!r}."
        )
    _registry.add(ENCODERS, kind, cls, "encoder kind")
    KINDS = tuple(sorted(ENCODERS))


def unregister(kind: str) -> None:
    """Remove a kind that :func:`register` added.

    Raises
    ------
    ConfigError
        If ``kind`` ships with the package (``BUILTIN_KINDS``) or is not registered.
    """
    global KINDS
    _registry.remove(ENCODERS, BUILTIN_KINDS, kind, "encoder kind", "register")
    KINDS = tuple(sorted(ENCODERS))


def _cls(kind: str):
    try:
        return ENCODERS[kind]
    except KeyError:
        raise ConfigError(
            f"unknown encoder kind '{kind}'; allowed: {', '.join(KINDS)}.{closest(kind, KINDS)}"
        ) from None

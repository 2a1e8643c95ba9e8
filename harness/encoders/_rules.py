"""Parameter rules as data: one table per encoder class, one checker, one message wording.

Each encoder class declares ``param_rules = {name: (rule, rule, ...)}``; a value is valid
when any of its rules accepts it. ``check_params(encoder)`` runs once at the start of
``fit`` (scikit-learn's rule: ``__init__`` only stores) and config validation calls the
same checker on the unfitted encoder, so a config is checked without fitting anything.
An invalid value raises :class:`ParameterError`, which is both the project's
``ConfigError`` and a ``ValueError`` (scikit-learn's convention for invalid parameters).

Message wording (the only one)::

    <Class>: parameter '<name>' must be <rule> or <rule>; got <value!r>.[ Closest match: 'x'.]
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Integral, Real

import numpy as np

from harness.errors import ConfigError, closest

__all__ = [
    "ParameterError",
    "Options",
    "Interval",
    "Flag",
    "Nothing",
    "Splitter",
    "Seed",
    "check_params",
    "check_value",
    "invalid_example",
]


class ParameterError(ConfigError, ValueError):
    """An encoder parameter has a value outside its declared rules."""


@dataclass(frozen=True)
class Options:
    """One of a fixed set of strings."""

    values: tuple[str, ...]

    def __init__(self, *values: str):
        object.__setattr__(self, "values", tuple(values))

    def accepts(self, value) -> bool:
        return isinstance(value, str) and value in self.values

    def describe(self) -> str:
        return "one of " + ", ".join(repr(v) for v in self.values)

    def bad_examples(self):
        return ["<not-an-option>", 3]


@dataclass(frozen=True)
class Interval:
    """A number of ``kind`` (``"int"`` or ``"real"``) between ``low`` and ``high``.

    ``closed`` names the ends that belong to the interval: ``"both"``, ``"left"``,
    ``"right"`` or ``"neither"``; ``None`` for an end means unbounded. Bools are never
    numbers here, and a real must be finite.
    """

    kind: str
    low: float | None
    high: float | None
    closed: str = "both"

    def accepts(self, value) -> bool:
        if isinstance(value, (bool, np.bool_)):
            return False
        if self.kind == "int" and not isinstance(value, Integral):
            return False
        if not isinstance(value, Real) or not math.isfinite(value):
            return False
        below = self.low is not None and (
            value < self.low or (value == self.low and self.closed in ("right", "neither"))
        )
        above = self.high is not None and (
            value > self.high or (value == self.high and self.closed in ("left", "neither"))
        )
        return not (below or above)

    def _num(self, value) -> str:
        return str(int(value)) if self.kind == "int" else f"{value:g}"

    def describe(self) -> str:
        noun = "an integer" if self.kind == "int" else "a finite number"
        low, high = self.low, self.high
        if low is not None and high is None:
            return f"{noun} {'>=' if self.closed in ('both', 'left') else '>'} {self._num(low)}"
        if high is not None and low is None:
            return f"{noun} {'<=' if self.closed in ('both', 'right') else '<'} {self._num(high)}"
        if low is None:
            return noun
        left = "[" if self.closed in ("both", "left") else "("
        right = "]" if self.closed in ("both", "right") else ")"
        return f"{noun} in {left}{self._num(low)}, {self._num(high)}{right}"

    def bad_examples(self):
        out = ["<text>", True, float("nan")]
        if self.kind == "int":
            out.append(2.5)
        if self.low is not None:
            out.append(self.low - 1)
            if self.closed in ("right", "neither"):
                out.append(self.low)
        if self.high is not None:
            out.append(self.high + 1)
        return out


@dataclass(frozen=True)
class Flag:
    """``True`` or ``False``."""

    def accepts(self, value) -> bool:
        return isinstance(value, (bool, np.bool_))

    def describe(self) -> str:
        return "true or false"

    def bad_examples(self):
        return ["yes", 1]


@dataclass(frozen=True)
class Nothing:
    """``None``."""

    def accepts(self, value) -> bool:
        return value is None

    def describe(self) -> str:
        return "None"

    def bad_examples(self):
        return []


@dataclass(frozen=True)
class Splitter:
    """A scikit-learn splitter: an object with ``split`` and ``get_n_splits``."""

    def accepts(self, value) -> bool:
        return hasattr(value, "split") and hasattr(value, "get_n_splits")

    def describe(self) -> str:
        return "a scikit-learn splitter (an object with split and get_n_splits)"

    def bad_examples(self):
        return ["<text>"]


@dataclass(frozen=True)
class Seed:
    """A ``numpy.random.RandomState`` instance (integers and None are separate rules)."""

    def accepts(self, value) -> bool:
        return isinstance(value, np.random.RandomState)

    def describe(self) -> str:
        return "a numpy RandomState"

    def bad_examples(self):
        return ["<text>"]


def check_value(owner: str, name: str, value, rules) -> None:
    """Raise :class:`ParameterError` unless one of ``rules`` accepts ``value``."""
    if any(rule.accepts(value) for rule in rules):
        return
    wanted = " or ".join(rule.describe() for rule in rules)
    options = [v for rule in rules if isinstance(rule, Options) for v in rule.values]
    hint = closest(value, options) if isinstance(value, str) and options else ""
    raise ParameterError(f"{owner}: parameter '{name}' must be {wanted}; got {value!r}.{hint}")


def check_params(encoder) -> None:
    """Check every parameter of ``encoder`` against its class's ``param_rules``."""
    owner = type(encoder).__name__
    for name, rules in type(encoder).param_rules.items():
        check_value(owner, name, getattr(encoder, name), rules)


def invalid_example(rules):
    """A value that none of ``rules`` accepts (for tests and documentation)."""
    for rule in rules:
        for value in rule.bad_examples():
            if not any(r.accepts(value) for r in rules):
                return value
    raise ValueError(f"no invalid example for rules {rules!r}")

"""Tuning regimes and search spaces: what a config's ``[tuning]`` and ``search`` tables mean.

Three regimes (fixed names, read by scripts outside the package):

- ``defaults``: every cell uses the configured hyperparameters (the run as before);
- ``tuned-model``: for each outer fold, the model's hyperparameters are searched over its
  ``[models.<label>.search]`` space by an inner cross-validation of the outer training
  fold; the encoder keeps its configured settings;
- ``tuned-both``: the model's space and the encoder's ``[encoders.<label>.search]`` space
  are searched jointly.

The three regimes follow Matteucci, Arzamasov & Böhm (2023), "A benchmark of categorical
encoders for binary classification", NeurIPS Datasets and Benchmarks track, who found that
encoder rankings shift between untuned, model-tuned and fully tuned pipelines (title and
findings from memory; the paper was not reachable from this machine). Nested
cross-validation for an honest estimate of a tuned pipeline: Varma & Simon (2006), BMC
Bioinformatics 7:91. Random search: Bergstra & Bengio (2012), JMLR 13. Successive
halving: Jamieson & Talwalkar (2016), AISTATS.

A space maps each parameter to a list of values or to a range ``{low, high, scale}``
(``scale`` "linear" or "log"; integer bounds give integer values). Candidates are drawn
once per (dataset, encoder, model) from ``tuning.seed``, so every outer fold searches the
same candidates and every backend draws the same ones.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np

from harness.errors import ConfigError

__all__ = [
    "REGIMES",
    "DEFAULT_REGIME",
    "METHODS",
    "Tuning",
    "Dimension",
    "parse_space",
    "space_size",
    "candidates",
    "check_budget",
    "HALVING_FACTOR",
]

REGIMES = ("defaults", "tuned-model", "tuned-both")
DEFAULT_REGIME = "defaults"
METHODS = ("random", "halving")
HALVING_FACTOR = 3  # keep the best third each round (Jamieson & Talwalkar 2016 use 2; 3 is scikit-learn's default)
MAX_BUDGET = 1000
MAX_INNER_FOLDS = 20
_EXHAUSTIVE_LIMIT = 10**6  # finite spaces up to this size are sampled without replacement by index


@dataclass(frozen=True)
class Tuning:
    """The ``[tuning]`` table: regimes to run, candidates per search, inner folds, method, seed."""

    regimes: tuple = (DEFAULT_REGIME,)
    budget: int = 10
    inner_folds: int = 3
    method: str = "random"
    seed: int = 0

    @property
    def tuned(self) -> tuple:
        return tuple(r for r in self.regimes if r != DEFAULT_REGIME)

    def identity(self) -> list:
        """The settings that change a tuned cell's numbers."""
        return [self.budget, self.inner_folds, self.method, self.seed]

    def fits_per_cell(self) -> int:
        """Model fits of one tuned cell, at most: every candidate on every inner fold, then the refit."""
        return self.budget * self.inner_folds + 1


@dataclass(frozen=True)
class Dimension:
    """One searched parameter: a list of ``values``, or a range ``[low, high]`` on a scale."""

    name: str
    values: tuple = ()
    low: float | None = None
    high: float | None = None
    scale: str = "linear"
    integer: bool = False

    @property
    def size(self) -> float:
        """Number of distinct values (``inf`` for a real-valued range)."""
        if self.values:
            return len(self.values)
        return self.high - self.low + 1 if self.integer else math.inf

    def draw(self, rng: np.random.Generator):
        """One value, uniform on the list, or on the range's (log) scale."""
        if self.values:
            return self.values[int(rng.integers(len(self.values)))]
        lo, hi = (math.log(self.low), math.log(self.high)) if self.scale == "log" else (self.low, self.high)
        if self.integer:  # widen by half a step so that both ends are as likely as any other value
            lo, hi = (
                (math.log(self.low - 0.5 + 1e-9), math.log(self.high + 0.5))
                if self.scale == "log"
                else (self.low - 0.5 + 1e-9, self.high + 0.5)
            )
        x = float(rng.uniform(lo, hi))
        x = math.exp(x) if self.scale == "log" else x
        return int(min(max(round(x), self.low), self.high)) if self.integer else x

    def nth(self, i: int):
        """The ``i``-th value of a finite dimension."""
        return self.values[i] if self.values else int(self.low) + i

    def describe(self) -> str:
        if self.values:
            return f"{self.name} in {list(self.values)}"
        kind = "integers" if self.integer else "reals"
        return f"{self.name}: {kind} {self.low:g} to {self.high:g} ({self.scale} scale)"


def parse_space(table, where: str, path: str, allowed, check_value) -> tuple:
    """Validate a ``search`` table and return its dimensions, sorted by name.

    Parameters
    ----------
    table : object
        The raw TOML value of ``[<where>]``.
    where : str
        Config location, e.g. "models.lightgbm.search" (for messages).
    path : str
        The config file (for messages).
    allowed : sequence of str
        Parameter names the encoder kind or model family takes.
    check_value : callable
        ``check_value(name, value)`` raises ``ConfigError`` for a value the estimator rejects.
    """
    if not isinstance(table, dict):
        raise ConfigError(
            f"`{where}` in {path} must be a table mapping parameters to a list of values or "
            f'a range {{low = ..., high = ..., scale = "log"}}; got {table!r}.'
        )
    if not table:
        raise ConfigError(
            f"`[{where}]` in {path} is empty: a search space needs at least one parameter. "
            "Add one, or remove the table."
        )
    from harness.errors import closest

    dims = []
    for name, spec in sorted(table.items()):
        if name not in allowed:
            shown = (
                ", ".join(allowed)
                if len(allowed) <= 40
                else f"the {len(allowed)} parameters of the estimator's signature"
            )
            raise ConfigError(
                f"`{where}.{name}` in {path}: unknown parameter '{name}'; allowed: {shown}.{closest(name, allowed)}"
            )
        dim = _dimension(name, spec, f"{where}.{name}", path)
        for value in dim.values or (dim.low, dim.high):
            check_value(name, value)
        dims.append(dim)
    return tuple(dims)


def _dimension(name: str, spec, where: str, path: str) -> Dimension:
    if isinstance(spec, list):
        if not spec:
            raise ConfigError(f"`{where}` in {path} is an empty list: give at least one value to search.")
        if len({repr(v) for v in spec}) < len(spec):
            raise ConfigError(f"`{where}` in {path} lists a value twice ({spec!r}); list each value once.")
        return Dimension(name, tuple(spec))
    if not isinstance(spec, dict):
        raise ConfigError(
            f"`{where}` in {path} must be a list of values or a range table "
            f'{{low = ..., high = ..., scale = "linear" | "log"}}; got {spec!r}.'
        )
    unknown = sorted(set(spec) - {"low", "high", "scale"})
    if unknown or "low" not in spec or "high" not in spec:
        raise ConfigError(
            f"`{where}` in {path} must have the keys low and high (and optionally scale); got {sorted(spec)}."
        )
    lo, hi, scale = spec["low"], spec["high"], spec.get("scale", "linear")
    numbers = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (lo, hi))
    if not numbers or not lo < hi:
        raise ConfigError(
            f"`{where}` in {path}: low and high must be numbers with low < high; got low = {lo!r}, high = {hi!r}."
        )
    if scale not in ("linear", "log"):
        raise ConfigError(f'`{where}.scale` in {path} must be "linear" or "log"; got {scale!r}.')
    if scale == "log" and lo <= 0:
        raise ConfigError(
            f'`{where}` in {path}: a log scale needs low > 0; got low = {lo!r}. Raise low or use scale = "linear".'
        )
    integer = isinstance(lo, int) and isinstance(hi, int)
    return Dimension(name, (), lo, hi, scale, integer)


def space_size(*spaces: tuple) -> float:
    """Number of distinct candidates of the joint space (``inf`` when a range is real-valued)."""
    return math.prod(d.size for space in spaces for d in space)


def check_budget(tuning: Tuning, size: float, where: str, path: str) -> None:
    """A budget above the number of distinct candidates would evaluate repeats."""
    if size < tuning.budget:
        raise ConfigError(
            f"`tuning.budget` in {path} is {tuning.budget}, but the search space of {where} has only "
            f"{int(size)} distinct candidate(s). Lower tuning.budget to at most {int(size)}, or widen "
            "the space (more values, or a range)."
        )


def candidates(dims: tuple, budget: int, seed: int) -> list[dict]:
    """``budget`` distinct points of the space, in draw order (the search's tie-break order).

    A finite space of exactly ``budget`` points is enumerated in order; a larger finite one
    is sampled without replacement; a space with a real-valued range is sampled
    independently per dimension (random search, Bergstra & Bengio 2012).
    """
    rng = np.random.default_rng(seed)
    size = space_size(dims)
    if size == budget:
        return [
            dict(zip((d.name for d in dims), combo))
            for combo in itertools.product(*([d.nth(i) for i in range(int(d.size))] for d in dims))
        ]
    if size <= _EXHAUSTIVE_LIMIT:
        picks = rng.choice(int(size), size=budget, replace=False)
        return [_decode(dims, int(i)) for i in picks]
    out, seen = [], set()
    while len(out) < budget:
        point = {d.name: d.draw(rng) for d in dims}
        key = repr(sorted(point.items()))
        if key not in seen:
            seen.add(key)
            out.append(point)
    return out


def _decode(dims: tuple, index: int) -> dict:
    """The point of a finite space at a mixed-radix index (last dimension fastest)."""
    point = {}
    for d in reversed(dims):
        index, i = divmod(index, int(d.size))
        point[d.name] = d.nth(i)
    return {d.name: point[d.name] for d in dims}

"""Synthetic data with planted per-level effects: a known truth to check encoders against.

Generation (vectorised; one loop over columns only):

1. Each categorical column ``cat<j>`` has ``cardinalities[j]`` levels drawn with Zipf-like
   frequencies ``p_k ∝ (k + 1)^(-zipf)`` (``zipf = 0`` is uniform; larger is more skewed).
2. Each level gets a planted effect drawn from ``Normal(0, effect²)`` (one per class for
   multiclass). Numeric columns ``num<i>`` are standard normal with coefficients drawn
   from ``Normal(0, 0.5²)``.
3. A latent score adds the effects, the numeric terms and unit-variance Gaussian noise, so
   ``effect`` is the spread of the planted effects relative to the noise.
4. Regression: ``y`` is the score. Binary: ``y = 1`` when the score exceeds its median
   (balanced classes). Multiclass: each class has its own score; ``y`` is the arg-max
   (a multinomial probit).
5. An optional ``noise`` column with ``noise_column`` levels (same frequency skew) has
   no effect at all: an encoder that gains from it overfits.
"""

import inspect
from dataclasses import dataclass

import numpy as np
import pandas as pd

from harness.datasets._record import TASKS, Dataset
from harness.errors import ConfigError

__all__ = ["PlantedTruth", "load_synthetic", "make_synthetic"]

NUMERIC_COEF_SD = 0.5


@dataclass(frozen=True)
class PlantedTruth:
    """What :func:`make_synthetic` planted.

    Attributes
    ----------
    effects : dict of str to ndarray
        Per-level effects of each categorical column, indexed by level number
        (shape ``(K,)``, or ``(K, n_classes)`` for multiclass). Level ``k`` of column
        ``c`` is the string ``f"{c}_{k}"``.
    coefficients : dict of str to float or ndarray
        Coefficient of each numeric column (one per class for multiclass).
    noise_columns : tuple of str
        Columns with no effect.
    """

    effects: dict
    coefficients: dict
    noise_columns: tuple


MAX_ROWS = 20_000_000  # a table this size already takes gigabytes once encoded


def _check(n_rows, cardinalities, zipf, effect, noise_column, task, n_classes, n_numeric) -> None:
    rules = [
        (
            2 <= n_rows <= MAX_ROWS,
            "n_rows",
            f"an integer in [2, {MAX_ROWS:,}] (use a `file` dataset for larger tables)",
            n_rows,
        ),
        (
            len(cardinalities) > 0 and min(cardinalities) >= 1 and max(cardinalities) <= max(n_rows, 1),
            "cardinalities",
            "a non-empty list of integers in [1, n_rows] (a column cannot have more levels than rows)",
            cardinalities,
        ),
        (zipf >= 0, "zipf", "a number >= 0", zipf),
        (effect >= 0, "effect", "a number >= 0", effect),
        (
            noise_column is None or 1 <= noise_column <= max(n_rows, 1),
            "noise_column",
            "an integer in [1, n_rows] or left out",
            noise_column,
        ),
        (task in TASKS, "task", f"one of {', '.join(TASKS)}", task),
        (task != "multiclass" or n_classes >= 3, "n_classes", "an integer >= 3 for task 'multiclass'", n_classes),
        (n_numeric >= 0, "n_numeric", "an integer >= 0", n_numeric),
    ]
    for ok, key, rule, value in rules:
        if not ok:
            raise ConfigError(f"synthetic source: `{key}` must be {rule}; got {value!r}.")


def _draw_codes(rng, n_rows: int, k: int, zipf: float) -> np.ndarray:
    weights = np.arange(1, k + 1, dtype=float) ** (-zipf)
    return rng.choice(k, size=n_rows, p=weights / weights.sum())


def _level_names(column: str, codes: np.ndarray, k: int) -> pd.Series:
    names = np.array([f"{column}_{level}" for level in range(k)], dtype=object)
    return pd.Series(names[codes], name=column)


def _label(score: np.ndarray, task: str):
    if task == "regression":
        return score
    if task == "binary":
        return (score > np.median(score)).astype(np.int64)
    return score.argmax(axis=1).astype(np.int64)


def _draw(rng, n_rows, cardinalities, zipf, effect, noise_column, n_numeric, width):
    """Feature columns, planted effects and coefficients, and the latent score."""
    score = rng.standard_normal((n_rows, width))  # unit-variance noise
    columns, effects, coefficients = {}, {}, {}
    for j, k in enumerate(cardinalities):
        name = f"cat{j}"
        codes = _draw_codes(rng, n_rows, k, zipf)
        effects[name] = effect * rng.standard_normal((k, width))
        score += effects[name][codes]
        columns[name] = _level_names(name, codes, k)
    if noise_column is not None:
        columns["noise"] = _level_names("noise", _draw_codes(rng, n_rows, noise_column, zipf), noise_column)
    for i in range(n_numeric):
        name = f"num{i}"
        x = rng.standard_normal(n_rows)
        coefficients[name] = NUMERIC_COEF_SD * rng.standard_normal(width)
        score += x[:, None] * coefficients[name]
        columns[name] = pd.Series(x, name=name)
    return columns, effects, coefficients, score


def make_synthetic(
    *,
    n_rows: int = 2000,
    cardinalities: list[int] = (10, 100),
    zipf: float = 1.0,
    effect: float = 0.5,
    noise_column: int | None = None,
    task: str = "binary",
    n_classes: int = 3,
    n_numeric: int = 2,
    seed: int = 0,
) -> tuple[Dataset, PlantedTruth]:
    """Generate a dataset with planted per-level effects (see the module notes) and its truth.

    Parameters
    ----------
    n_rows : int
        Number of rows.
    cardinalities : list of int
        Number of levels of each categorical column ``cat0, cat1, ...``.
    zipf : float
        Frequency skew: level ``k`` has probability proportional to ``(k + 1)^(-zipf)``.
    effect : float
        Standard deviation of the planted per-level effects relative to the unit noise.
    noise_column : int or None
        Levels of an extra ``noise`` column with no effect; None for none.
    task : {"binary", "multiclass", "regression"}
    n_classes : int
        Number of classes for ``task="multiclass"`` (ignored otherwise).
    n_numeric : int
        Number of standard-normal numeric columns ``num0, num1, ...``.
    seed : int
        Seed of every draw.

    Returns
    -------
    dataset : Dataset
    truth : PlantedTruth

    Raises
    ------
    ConfigError
        If a parameter is out of range.
    """
    _check(n_rows, list(cardinalities), zipf, effect, noise_column, task, n_classes, n_numeric)
    width = n_classes if task == "multiclass" else 1
    columns, effects, coefficients, score = _draw(
        np.random.default_rng(seed), n_rows, cardinalities, zipf, effect, noise_column, n_numeric, width
    )
    squeeze = (lambda a: a[..., 0]) if width == 1 else (lambda a: a)
    truth = PlantedTruth(
        effects={c: squeeze(e) for c, e in effects.items()},
        coefficients={c: squeeze(b) for c, b in coefficients.items()},
        noise_columns=("noise",) if noise_column is not None else (),
    )
    notes = _notes(effect, zipf, seed, noise_column)
    return _dataset(columns, _label(squeeze(score), task), task, notes), truth


def _notes(effect: float, zipf: float, seed: int, noise_column: int | None) -> tuple[str, ...]:
    """The dataset's notes: how it was drawn, and the noise column if any."""
    notes = (
        f"planted per-level effects with sd {effect} against unit noise; level frequencies p_k ∝ (k+1)^-{zipf}; "
        f"seed {seed}",
    )
    if noise_column is not None:
        notes += (f"column 'noise' ({noise_column} levels) carries no signal",)
    return notes


def _dataset(columns: dict, labels, task: str, notes: tuple[str, ...]) -> Dataset:
    """The record of the drawn columns and labels (``num*`` columns numeric, the rest categorical)."""
    return Dataset(
        name="synthetic",
        X=pd.DataFrame(columns),
        y=pd.Series(labels, name="y"),
        task=task,
        categorical=tuple(c for c in columns if not c.startswith("num")),
        numeric=tuple(c for c in columns if c.startswith("num")),
        source="synthetic",
        notes=notes,
    )


def load_synthetic(**params) -> Dataset:
    """The dataset of :func:`make_synthetic` without the truth (the registered loader).

    Its keys are those of :func:`make_synthetic`; ``__signature__`` lists them for the
    config module.
    """
    return make_synthetic(**params)[0]


load_synthetic.__signature__ = inspect.signature(make_synthetic).replace(return_annotation=Dataset)

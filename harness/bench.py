"""Speed benchmarks: our encoders against their scikit-learn (or pandas) counterparts.

``run_encoder_bench`` times ``fit_transform`` of each encoder kind and of its reference on
the same synthetic column, in one process, best of ``repeats`` wall times, and checks
that both return the same numbers. ``main`` prints the table and writes a CSV.

What is timed
-------------
Both sides receive the same DataFrame (one pandas ``str`` column) and are timed from
that input to the encoded output, except for feature hashing: ``FeatureHasher`` needs
one list of ``"column=value"`` strings per row, and building those strings is input
preparation done *before* its clock starts. That favours the reference (our timing
includes everything), so the hashing ratio is conservative.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import scipy.sparse as sp
from sklearn.feature_extraction import FeatureHasher
from sklearn.model_selection import KFold
from sklearn.preprocessing import OneHotEncoder, OrdinalEncoder, TargetEncoder

from harness.encoders import build
from harness.errors import ConfigError

__all__ = ["run_encoder_bench", "zipf_column", "main"]

COLUMN = "city"
HASH_COMPONENTS = 256
FOLDS = 5
ZIPF_EXPONENT = 1.1  # word and city-size frequencies follow Zipf's law with s close to 1
DEFAULT_OUTPUT = Path("results/bench/encoders.csv")
RESULT_COLUMNS = ["kind", "cardinality", "ours_s", "reference_s", "ratio", "identical"]


@dataclass(frozen=True)
class Case:
    """One timed comparison: our call, the reference call, and how outputs are compared."""

    kind: str
    ours: Callable[[], object]
    reference: Callable[[], object]
    same: Callable[[object, object], bool]


def zipf_column(n_rows: int, cardinality: int, rng: np.random.Generator) -> pd.Series:
    """A string column whose level frequencies fall off as ``1 / rank**1.1`` (Zipf-like).

    Level names are shuffled against their ranks, so frequency is unrelated to the
    sorted order (as with real city or product names).
    """
    weights = 1.0 / np.arange(1, cardinality + 1) ** ZIPF_EXPONENT
    codes = rng.choice(cardinality, size=n_rows, p=weights / weights.sum())
    names = np.asarray([f"level_{i:06d}" for i in rng.permutation(cardinality)], dtype=object)
    return pd.Series(names[codes], name=COLUMN, dtype="str")


def binary_target(column: pd.Series, rng: np.random.Generator) -> np.ndarray:
    """A 0/1 target whose rate depends on the level (so target statistics matter)."""
    codes, uniques = pd.factorize(column)
    effect = rng.normal(0.0, 1.0, size=len(uniques))
    return (rng.random(len(column)) < 1.0 / (1.0 + np.exp(-effect[codes]))).astype(np.int64)


def _cases(frame: pd.DataFrame, y: np.ndarray, seed: int) -> list[Case]:
    splitter = KFold(FOLDS, shuffle=True, random_state=seed)
    tokens = (COLUMN + "=" + frame[COLUMN]).to_numpy(dtype=object).reshape(-1, 1)
    column = frame[COLUMN]
    return [
        Case(
            "integer",
            lambda: build("integer").fit_transform(frame),
            lambda: OrdinalEncoder().fit_transform(frame),
            _arrays_equal,
        ),
        Case(
            "onehot",
            lambda: build("onehot").fit_transform(frame),
            lambda: OneHotEncoder(handle_unknown="ignore").fit_transform(frame),
            _arrays_equal,
        ),
        Case(
            "hashing",
            lambda: build("hashing", width=HASH_COMPONENTS).fit_transform(frame),
            lambda: FeatureHasher(HASH_COMPONENTS, input_type="string").transform(tokens),
            _arrays_equal,
        ),
        Case(
            "frequency",
            lambda: build("frequency").fit_transform(frame),
            lambda: column.map(column.value_counts()).to_numpy(dtype=np.float64)[:, None],
            _arrays_equal,
        ),
        Case(
            "target",
            lambda: build(
                "target", smoothing="empirical-bayes", crossfit="kfold", cv=splitter
            ).fit_transform(frame, y),
            lambda: TargetEncoder(smooth="auto", cv=splitter).fit_transform(frame, y),
            lambda a, b: bool(np.allclose(a, b, rtol=1e-9, atol=1e-12)),
        ),
    ]


def _arrays_equal(a, b) -> bool:
    if sp.issparse(a) or sp.issparse(b):
        a, b = sp.csr_matrix(a), sp.csr_matrix(b)
        return a.shape == b.shape and (a != b).nnz == 0
    return bool(np.array_equal(np.asarray(a), np.asarray(b)))


def best_time(call: Callable[[], object], repeats: int) -> tuple[float, object]:
    """Best wall time of ``repeats`` calls (the least disturbed run) and the last output."""
    best, out = np.inf, None
    for _ in range(repeats):
        start = time.perf_counter()
        out = call()
        best = min(best, time.perf_counter() - start)
    return best, out


def run_encoder_bench(
    n_rows: int = 1_000_000,
    cardinalities=(10, 1_000, 100_000),
    repeats: int = 3,
    seed: int = 0,
) -> pd.DataFrame:
    """Time each encoder kind against its reference on Zipf-distributed string columns.

    Parameters
    ----------
    n_rows : int
        Rows of the synthetic column.
    cardinalities : iterable of int
        Number of distinct levels; one column (and one target) per value.
    repeats : int
        Calls per timing; the best is kept.
    seed : int
        Seeds the data and the cross-fitting folds.

    Returns
    -------
    pandas.DataFrame
        Columns ``kind, cardinality, ours_s, reference_s, ratio, identical``;
        ``ratio = reference_s / ours_s`` (above 1: ours is faster); ``identical`` says
        whether both outputs hold the same numbers (``allclose`` for target statistics).

    References
    ----------
    Zipf, G. K. (1949). Human Behavior and the Principle of Least Effort. Addison-Wesley
    (the rank-frequency law used for the synthetic levels).
    """
    rows = []
    for cardinality in cardinalities:
        rng = np.random.default_rng(seed)
        frame = zipf_column(n_rows, int(cardinality), rng).to_frame()
        y = binary_target(frame[COLUMN], rng)
        for case in _cases(frame, y, seed):
            ours_s, ours = best_time(case.ours, repeats)
            reference_s, reference = best_time(case.reference, repeats)
            rows.append(
                {
                    "kind": case.kind,
                    "cardinality": int(cardinality),
                    "ours_s": ours_s,
                    "reference_s": reference_s,
                    "ratio": reference_s / ours_s,
                    "identical": case.same(ours, reference),
                }
            )
    return pd.DataFrame(rows, columns=RESULT_COLUMNS)


def format_table(table: pd.DataFrame) -> str:
    """The result table as aligned text: seconds to 4 decimals, ratios to 1."""
    return table.to_string(
        index=False,
        formatters={
            "ours_s": "{:.4f}".format,
            "reference_s": "{:.4f}".format,
            "ratio": "{:.1f}x".format,
        },
    )


def _positive_ints(text: str) -> tuple[int, ...]:
    try:
        values = tuple(int(v.replace("_", "")) for v in text.split(",") if v.strip())
    except ValueError:
        values = ()
    if not values or min(values) < 1:
        raise ConfigError(
            f"--cardinalities must be a comma-separated list of integers >= 1 "
            f"(e.g. 10,1000,100000); got {text!r}."
        )
    return values


def main(argv=None) -> int:
    """Command line: ``python -m harness.bench [--rows N] [--cardinalities 10,1000] ...``."""
    parser = argparse.ArgumentParser(
        prog="harness bench encoders", description=__doc__.split("\n")[0]
    )
    parser.add_argument("--rows", type=int, default=1_000_000, help="rows per column")
    parser.add_argument("--cardinalities", default="10,1000,100000", help="comma-separated")
    parser.add_argument("--repeats", type=int, default=3, help="timings per call; best kept")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--output", type=Path, default=DEFAULT_OUTPUT, help="CSV path")
    args = parser.parse_args(argv)
    if args.rows < 1 or args.repeats < 1:
        raise ConfigError(
            f"--rows and --repeats must be integers >= 1; got {args.rows} and {args.repeats}."
        )
    table = run_encoder_bench(
        args.rows, _positive_ints(args.cardinalities), repeats=args.repeats, seed=args.seed
    )
    print(
        f"encoder fit_transform, {args.rows:,} rows, best of {args.repeats}; "
        "ratio = reference / ours"
    )
    print(format_table(table))
    args.output.parent.mkdir(parents=True, exist_ok=True)
    table.to_csv(args.output, index=False)
    print(f"written: {args.output}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

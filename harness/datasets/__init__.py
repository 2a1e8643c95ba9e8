"""Dataset sources: one explicit dict from a config source name to a loader.

A loader is a function with keyword-only parameters; those parameters are the config
keys the source accepts (``params_of`` lists them for the config module). Every loader
returns a :class:`Dataset`. ``load`` checks keys, calls the loader and names the dataset
by its config label (or ``alias``). ``register_source(name, loader)`` adds a source at run
time (tests, code outside the package); an entry in ``SOURCES`` is the normal route.
"""

import dataclasses
import inspect

import pandas as pd

from harness import _registry
from harness.datasets._files import load_file
from harness.datasets._openml import load_openml
from harness.datasets._rdatasets import BUNDLED, load_rdatasets
from harness.datasets._record import CHECK, TASKS, Dataset, TableOptions, fingerprint
from harness.datasets._synthetic import PlantedTruth, load_synthetic, make_synthetic
from harness.errors import ConfigError, HarnessError, closest

SOURCES = {"rdatasets": load_rdatasets, "openml": load_openml, "file": load_file, "synthetic": load_synthetic}
#: the sources this package ships (the entries above); ``register_source`` adds to
#: ``SOURCES`` only, never to this tuple
BUILTIN_SOURCES = tuple(sorted(SOURCES))

__all__ = [
    "BUILTIN_SOURCES",
    "BUNDLED",
    "CHECK",
    "SOURCES",
    "TASKS",
    "Dataset",
    "PlantedTruth",
    "TableOptions",
    "bundled_catalog",
    "fingerprint",
    "load",
    "make_synthetic",
    "params_of",
    "register_source",
    "unregister_source",
]


def register_source(source: str, loader) -> None:
    """Add dataset ``source`` to ``SOURCES`` at run time, as an entry there does.

    The normal route is the entry in ``SOURCES`` (DEVELOPERS.md, "How to add a dataset
    source"); this hook serves tests and code outside the package. Forked workers
    (``--jobs N``) inherit it; Dask workers get the loaded datasets, not the loader.

    Parameters
    ----------
    source : str
        The config name (``source = "..."``), a Python identifier not registered yet.
    loader : callable
        Keyword-only parameters (the config keys; annotations are checked at config
        load), returning a :class:`Dataset`.

    Raises
    ------
    ConfigError
        If the name is taken or not an identifier, or ``loader`` takes a positional
        parameter or ``**kwargs`` without a ``__signature__`` naming its keys.
    """
    kinds = {p.kind for p in inspect.signature(loader).parameters.values()}
    if kinds - {inspect.Parameter.KEYWORD_ONLY}:
        raise ConfigError(
            f"dataset source '{source}': every parameter of its loader must be keyword-only (they "
            f"are the config keys); got the signature {inspect.signature(loader)}. Put `*,` first."
        )
    _registry.add(SOURCES, source, loader, "dataset source")


def unregister_source(source: str) -> None:
    """Remove a source that :func:`register_source` added.

    Raises
    ------
    ConfigError
        If ``source`` ships with the package (``BUILTIN_SOURCES``) or is not registered.
    """
    _registry.remove(SOURCES, BUILTIN_SOURCES, source, "dataset source", "register_source")


def _loader(source: str):
    try:
        return SOURCES[source]
    except KeyError:
        allowed = sorted(SOURCES)
        raise ConfigError(
            f"unknown dataset source '{source}'; allowed: {', '.join(allowed)}.{closest(source, allowed)}"
        ) from None


def params_of(source: str) -> dict[str, inspect.Parameter]:
    """The config keys of ``source``: name -> ``inspect.Parameter`` (annotation, default).

    Raises
    ------
    ConfigError
        If ``source`` is unknown.
    """
    return dict(inspect.signature(_loader(source)).parameters)


def _check_keys(source: str, name: str, params: dict) -> None:
    allowed = params_of(source)
    for key in params:
        if key not in allowed:
            raise ConfigError(
                f"dataset '{name}': source '{source}' has no key '{key}'; allowed: "
                f"{', '.join(allowed)}.{closest(key, allowed)}"
            )
    missing = [k for k, p in allowed.items() if p.default is inspect.Parameter.empty and k not in params]
    if missing:
        raise ConfigError(
            f"dataset '{name}': source '{source}' needs key(s) {', '.join(missing)}; got only "
            f"{', '.join(params) or 'none'}."
        )


def load(source: str, name: str, **params) -> Dataset:
    """Load dataset ``name`` (its config label) from ``source`` with the config keys ``params``.

    Returns
    -------
    Dataset
        Named ``alias`` when given, else ``name``.

    Raises
    ------
    ConfigError
        If the source is unknown, a key is unknown or a required key is missing, or a
        value is invalid.
    DataError
        If the data cannot be read or does not fit the keys. Messages start with the
        dataset label and source.
    """
    loader = _loader(source)
    _check_keys(source, name, params)
    try:
        dataset = loader(**params)
    except HarnessError as error:
        prefix = f"dataset '{name}' (source '{source}'): "
        message = str(error)
        raise type(error)(message if message.startswith("dataset '") else prefix + message) from error
    return dataclasses.replace(dataset, name=params.get("alias") or name)


def bundled_catalog() -> pd.DataFrame:
    """The rdatasets datasets the bundled configs use, for ``levelfold list``.

    Returns
    -------
    pandas.DataFrame
        One row per dataset: ``name``, ``dataset`` (package/item), ``target``, ``task``,
        ``rows`` (after dropping rows with a missing target), ``max_cardinality``,
        ``configs`` (which bundled configs use it). The numbers are recorded, not
        recomputed; a slow test checks them against a real load.
    """
    rows = [
        {
            "name": b.name,
            "dataset": f"{b.package}/{b.item}",
            "target": b.target,
            "task": b.task,
            "rows": b.rows,
            "max_cardinality": b.max_cardinality,
            "configs": ", ".join(b.configs),
        }
        for b in BUNDLED
    ]
    return pd.DataFrame(rows)

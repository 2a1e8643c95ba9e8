"""Column values made hashable and consistently typed, shared by the data loaders.

A neutral module: ``datasets`` prepares every loaded categorical column with
:func:`normalize_column` and needs nothing else from the encoders.
"""

from __future__ import annotations

import pandas as pd

__all__ = ["is_mixed", "normalize_column"]


def is_mixed(s: pd.Series) -> bool:
    """True for an object column whose non-missing values are of more than one type."""
    if s.dtype != object:
        return False
    present = s[s.notna()].array[:100_000]
    kinds = {type(v) for v in present}
    return len(kinds) > 1 or bool(kinds and not kinds <= {str, bool, int, float})


def normalize_column(s: pd.Series, force_str: bool = False) -> pd.Series:
    """Make one column hashable and consistently typed.

    Object columns mixing types (``1`` and ``"1"``, ints and strings) become strings so
    that one level is one value; homogeneous columns (strings, numbers, bools) are left
    as they are so that numeric levels keep numeric order. Category dtype is unwrapped
    to its values (levels are learnt from data, not from the declared categories).
    ``force_str`` stringifies any non-string column (used at transform when the column
    was stringified at fit, so a fold that happens to hold only ints still matches).
    """
    if isinstance(s.dtype, pd.CategoricalDtype):
        s = s.astype(s.dtype.categories.dtype if len(s.dtype.categories) else object)
    if (force_str or is_mixed(s)) and not pd.api.types.is_string_dtype(s.dtype):
        s = s.astype(object).where(s.isna(), s.astype(str))
    elif (force_str or is_mixed(s)) and s.dtype == object:
        s = s.where(s.isna(), s.astype(str))
    return s

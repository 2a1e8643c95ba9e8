"""Cost of each encoder: medians per model and per-dataset ratios against a reference."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.errors import ConfigError
from harness.stats._common import ok_rows

#: the timed parts of a fold that the cost table shows, in order: ``{column: row columns
#: summed per fold}``. ``total_s`` is the sum of their medians, so a part added here (a
#: tuning time, say) is shown and counted in the total at once.
COST_PARTS = {
    "encoder_s": ("encoder_fit_s", "encoder_transform_s"),
    "model_fit_s": ("model_fit_s",),
    "tune_s": ("tune_s",),  # a tuned cell's search (0 untuned): shown apart, counted in the total
}


# ---------------------------------------------------------------------------------- cost
def fold_seconds(df: pd.DataFrame) -> pd.Series:
    """Seconds each row's fold spent on the parts of :data:`COST_PARTS`, summed.

    What the decision rule weighs as an encoding's cost; a missing or empty ``tune_s``
    counts 0 (an untuned cell searched nothing).
    """
    total = pd.Series(0.0, index=df.index)
    for c in (c for cols in COST_PARTS.values() for c in cols if c in df.columns):
        part = df[c].astype(float)
        total = total + (part.fillna(0.0) if c == "tune_s" else part)
    return total


def _column(df: pd.DataFrame, name: str) -> pd.Series:
    return df[name].astype(float) if name in df.columns else pd.Series(np.nan, df.index)


def cost_table(results: pd.DataFrame, *, reference: str | None = None, model_column: str = "model") -> pd.DataFrame:
    """Median cost per encoder and model, and each cost relative to a reference encoder.

    Each part of :data:`COST_PARTS` is the median over all ok rows (folds, repeats,
    datasets) of its row columns' per-fold sum (``encoder_s = encoder_fit_s +
    encoder_transform_s``); ``total_s`` is the sum of the parts' medians, so the shown
    columns add up (a part without any value counts as zero; all absent gives NaN).
    ``n_features_out`` is the lower median, a count that some fold had; ``n_cells``
    counts the ok cells the medians are over. The relative columns divide by the
    reference encoder's value under the same model.

    Returns
    -------
    DataFrame
        Columns ``encoder, <model_column>``, the parts (``encoder_s, model_fit_s``),
        ``total_s, n_features_out, encoded_mb, n_cells`` and, with a reference, the cost
        columns suffixed ``_rel``.

    Raises
    ------
    ConfigError
        If ``reference`` is not an encoder of the table.
    """
    df = ok_rows(results)
    parts = {name: sum(_column(df, c) for c in cols) for name, cols in COST_PARTS.items()}
    work = pd.DataFrame(
        {
            "encoder": df["encoder"],
            model_column: df[model_column],
            **parts,
            "n_features_out": _column(df, "n_features_out"),
            "encoded_mb": _column(df, "encoded_mb"),
        }
    )
    g = work.groupby(["encoder", model_column])
    out = g[[*parts, "encoded_mb"]].median()
    out.insert(len(parts), "total_s", out[list(parts)].sum(axis=1, min_count=1))
    out.insert(len(parts) + 1, "n_features_out", g["n_features_out"].quantile(0.5, interpolation="lower"))
    out["n_cells"] = g.size()
    if reference is not None:
        if reference not in out.index.get_level_values("encoder"):
            raise ConfigError(
                f"reference encoder '{reference}' is not in the results; "
                f"allowed: {', '.join(sorted(map(str, df['encoder'].unique())))}."
            )
        ref = out.xs(reference, level="encoder")
        measures = [*parts, "total_s", "n_features_out", "encoded_mb"]
        rel = out[measures].div(ref[measures], level=model_column)
        out = out.join(rel.add_suffix("_rel"))
    out["n_features_out"] = out["n_features_out"].astype("Int64")  # a count (NA: not recorded)
    return out.reset_index()

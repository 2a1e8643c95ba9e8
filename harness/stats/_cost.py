"""Cost of each encoder: medians per model and per-dataset ratios against a reference."""

from __future__ import annotations

import numpy as np
import pandas as pd

from harness.errors import ConfigError
from harness.stats._common import ok_rows

# ---------------------------------------------------------------------------------- cost
def cost_table(results: pd.DataFrame, *, reference: str | None = None,
               model_column: str = "model") -> pd.DataFrame:
    """Median cost per encoder and model, and each cost relative to a reference encoder.

    ``encoder_s = encoder_fit_s + encoder_transform_s``; ``total_s = encoder_s +
    model_fit_s``. Medians are over all ok rows (folds, repeats, datasets); the relative
    columns divide by the reference encoder's median under the same model. An absent
    cost column gives NaN.

    Returns
    -------
    DataFrame
        Columns ``encoder, <model_column>, encoder_s, model_fit_s, total_s,
        n_features_out, encoded_mb, n_rows`` and, with a reference, the same cost columns
        suffixed ``_rel``.

    Raises
    ------
    ConfigError
        If ``reference`` is not an encoder of the table.
    """
    df = ok_rows(results)
    cols = {c: (df[c].astype(float) if c in df.columns else pd.Series(np.nan, df.index))
            for c in ("encoder_fit_s", "encoder_transform_s", "model_fit_s",
                      "n_features_out", "encoded_mb")}
    enc_s = cols["encoder_fit_s"] + cols["encoder_transform_s"]
    work = pd.DataFrame({"encoder": df["encoder"], model_column: df[model_column],
                         "encoder_s": enc_s, "model_fit_s": cols["model_fit_s"],
                         "total_s": enc_s + cols["model_fit_s"],
                         "n_features_out": cols["n_features_out"],
                         "encoded_mb": cols["encoded_mb"]})
    keys = ["encoder", model_column]
    out = work.groupby(keys).median()
    out["n_rows"] = work.groupby(keys).size()
    if reference is not None:
        if reference not in out.index.get_level_values("encoder"):
            raise ConfigError(f"reference encoder '{reference}' is not in the results; "
                              f"allowed: {', '.join(sorted(map(str, df['encoder'].unique())))}.")
        ref = out.xs(reference, level="encoder")
        measures = ["encoder_s", "model_fit_s", "total_s", "n_features_out", "encoded_mb"]
        rel = out[measures].div(ref[measures], level=model_column)
        out = out.join(rel.add_suffix("_rel"))
    return out.reset_index()


"""A pass's levels gathered into polar bins: what the campaign statistics and the comparisons
average over passes."""

from __future__ import annotations

import numpy as np
import pandas as pd

from flyover.acoustics.statistics import energetic_mean_db, polar_bin_deg

POLAR_BIN_DEG = 10.0


def pass_bins(levels: pd.DataFrame, value: str, keys: list[str]) -> pd.DataFrame:
    """Energetic mean of a pass's windows within each polar bin, the rms of their stated
    uncertainties where the table has them (``uncertainty_db``, else NaN) and the mean of their
    one-sided position bias (``position_bias_db``, else 0)."""
    if len(levels) == 0:
        return pd.DataFrame(columns=keys + ["polar_bin_deg", value, "uncertainty_db",
                                            "position_bias_db"])
    d = levels.assign(polar_bin_deg=polar_bin_deg(levels["polar_angle_deg"], POLAR_BIN_DEG))
    if "uncertainty_db" not in d:
        d["uncertainty_db"] = np.nan
    if "position_bias_db" not in d:
        d["position_bias_db"] = 0.0
    g = d.groupby(keys + ["polar_bin_deg"])
    return pd.concat([g[value].apply(energetic_mean_db),
                      g["uncertainty_db"].apply(lambda u: float(np.sqrt(np.mean(u ** 2)))),
                      g["position_bias_db"].mean()], axis=1).reset_index()

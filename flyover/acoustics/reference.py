"""Component levels at the reference distance and atmosphere, and their overall sums.

Source power integration (:mod:`flyover.imaging.integration`) gives the band power of a region's
sources at 1 m (source strength, free field, convective amplification removed), which is then
brought to the reference distance and atmosphere:

    L_ref = 10 lg(P / p0^2) - 20 lg(r_ref / 1 m) - alpha_ref(f_m) r_ref
"""

from __future__ import annotations

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import ThirdOctaveBands, a_weighting_db, sum_levels_db
from flyover.model.constants import P0_PA


def level_1m_db(power_pa2) -> np.ndarray:
    """10 lg(P / p0^2); NaN for non-positive powers (a region below the diagonal-removal floor)."""
    p = np.asarray(power_pa2, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(p > 0, 10.0 * np.log10(p / P0_PA ** 2), np.nan)


def reference_level_db(level_1m, bands: ThirdOctaveBands, reference_distance_m: float,
                       reference_atmosphere: Atmosphere) -> np.ndarray:
    """Level at the reference distance in the reference atmosphere (free field), per band.

    ``level_1m`` has the bands on its last axis. The absorption is ISO 9613-1 at the exact
    midband frequency (design notes).
    """
    alpha = reference_atmosphere.absorption_db_per_m(bands.center_hz)
    return (np.asarray(level_1m, dtype=float) - 20.0 * np.log10(reference_distance_m)
            - alpha * reference_distance_m)


def overall_db(levels_db, bands: ThirdOctaveBands) -> tuple[float, float]:
    """Overall and A-weighted (IEC 61672-1) energetic sums over the bands (NaN bands left out)."""
    levels = np.asarray(levels_db, float)
    if np.all(np.isnan(levels)):
        return float("nan"), float("nan")
    return (float(sum_levels_db(levels)),
            float(sum_levels_db(levels, weights_db=a_weighting_db(bands.center_hz))))

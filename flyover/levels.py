"""Component levels: source power integration over regions, and reference corrections.

Source power integration: the region's summed map divided by the summed map of a unit point
source at the region centre that went through the identical chain (same window, weights,
diagonal removal, geometry), times the unit source's band power. The result is the band power
of the region's sources at 1 m (source strength, free field, convective amplification removed),
which is then brought to the reference distance and atmosphere:

    L_ref = 10 lg(P / p0^2) - 20 lg(r_ref / 1 m) - alpha_ref(f_m) r_ref
"""

from __future__ import annotations

import numpy as np

from .atmosphere import Atmosphere
from .bands import ThirdOctaveBands, a_weighting_db, sum_levels_db

P0_PA = 20e-6
RAYLEIGH = 1.22  # first null of a uniform disk aperture, lambda / D units (Born & Wolf)


def integrated_power(map_power, psf_power, unit_power) -> np.ndarray:
    """Source power integration over one region.

    Parameters
    ----------
    map_power : ndarray, shape (n_region_points, n_bands)
        The measured map on the region's grid points.
    psf_power : ndarray, shape (n_region_points, n_bands)
        The map of the unit point source on the same points.
    unit_power : ndarray, shape (n_bands,)
        The unit source's band power (Pa^2 at 1 m) as the chain forms it.

    Returns
    -------
    ndarray, shape (n_bands,)
        Band power at 1 m (Pa^2); NaN where the unit source's summed map is not positive.
    """
    psf = np.sum(psf_power, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.sum(map_power, axis=0) / psf * np.asarray(unit_power)
    return np.where(psf > 0, out, np.nan)


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


def main_lobe_width_m(frequency_hz, distance_m, aperture_m: float, c_m_s: float):
    """Rayleigh resolution on the map, 1.22 lambda z / D (uniform disk; small angles)."""
    return RAYLEIGH * c_m_s / np.asarray(frequency_hz, float) * distance_m / aperture_m


def regions_resolved(centers_m, frequency_hz, distance_m, aperture_m, c_m_s) -> np.ndarray:
    """Per band: whether every pair of region centres is at least one main-lobe width apart."""
    c = np.asarray(centers_m, float)
    if len(c) < 2:
        return np.ones(np.shape(frequency_hz), dtype=bool)
    d = np.sqrt(((c[:, None, :2] - c[None, :, :2]) ** 2).sum(-1))
    closest = d[np.triu_indices(len(c), 1)].min()
    return closest >= main_lobe_width_m(frequency_hz, distance_m, aperture_m, c_m_s)


def overall_db(levels_db, bands: ThirdOctaveBands) -> tuple[float, float]:
    """Overall and A-weighted (IEC 61672-1) energetic sums over the bands (NaN bands left out)."""
    levels = np.asarray(levels_db, float)
    if np.all(np.isnan(levels)):
        return float("nan"), float("nan")
    return (float(sum_levels_db(levels)),
            float(sum_levels_db(levels, weights_db=a_weighting_db(bands.center_hz))))

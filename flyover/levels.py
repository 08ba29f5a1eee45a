"""Component levels: source power integration over regions, and reference corrections.

Source power integration: the region's summed map divided by the summed map of a unit point
source at the region centre that went through the identical chain (same window, weights,
diagonal removal, geometry), times the unit source's band power; with several regions, the
leakage of each region's unit source into the others' sums is solved for as well. The result is the band power
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


def region_powers(coupling, measured) -> tuple[np.ndarray, np.ndarray]:
    """Source power integration over several regions, with their mutual leakage solved for.

    Parameters
    ----------
    coupling : ndarray, shape (n_bands, n_regions, n_regions)
        ``coupling[b, i, j]``: region i's summed map of a unit point source at region j's
        centre, divided by that unit source's band power (the unit sources go through the same
        chain as the measurement).
    measured : ndarray, shape (n_bands, n_regions)
        Each region's summed measured map.

    Returns
    -------
    powers : ndarray, shape (n_bands, n_regions)
        Band power at 1 m of each region's sources, from ``M_i = sum_j C_ij P_j``. With one
        region, or no leakage, this is plain source power integration ``M_i / C_ii``. NaN where
        the system is singular (regions that cannot be told apart) or a power comes out
        non-positive.
    total : ndarray, shape (n_bands,)
        All regions together: one unknown over their union (summed maps over the unit sources'
        mean summed map over the union), well posed even where the regions are not separable.
    """
    c = np.asarray(coupling, float)
    m = np.asarray(measured, float)
    out = np.full(m.shape, np.nan)
    for b in range(len(c)):
        if np.all(np.isfinite(c[b])) and np.linalg.cond(c[b]) < 1e6:
            out[b] = np.linalg.solve(c[b], m[b])
    union = c.sum(axis=1).mean(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        total = np.where(union > 0, m.sum(axis=1) / union, np.nan)
    return np.where(out > 0, out, np.nan), np.where(total > 0, total, np.nan)


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

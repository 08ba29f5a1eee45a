"""Resolution of the array on the vehicle grid, and which bands can separate the regions."""

from __future__ import annotations

import numpy as np

RAYLEIGH = 1.22  # first null of a uniform disk aperture, lambda / D units (Born & Wolf)


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

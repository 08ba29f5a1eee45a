"""The Rayleigh resolution of an array on the vehicle grid (a reference figure; which regions a
window resolves is decided with its own point-spread: :func:`flyover.imaging.window.image_window`).
"""

from __future__ import annotations

import numpy as np

RAYLEIGH = 1.22  # first null of a uniform disk aperture, lambda / D units (Born & Wolf)


def main_lobe_width_m(frequency_hz, distance_m, aperture_m: float, c_m_s: float):
    """Rayleigh resolution on the map, 1.22 lambda z / D (uniform disk; small angles)."""
    return RAYLEIGH * c_m_s / np.asarray(frequency_hz, float) * distance_m / aperture_m

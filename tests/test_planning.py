"""Array planning: point-spread widths against the apertures' published values, separability."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.acoustics.bands import third_octave_bands
from flyover.imaging.planning import band_resolution, main_lobe_m, separable_from_hz
from flyover.sim.scenario import spiral_layout

C = 343.0


def filled_disk(diameter_m: float, spacing_m: float) -> np.ndarray:
    """Microphones on a square lattice filling a disk (a sampled uniform disk aperture)."""
    axis = np.arange(-diameter_m / 2, diameter_m / 2 + 1e-9, spacing_m)
    gx, gy = np.meshgrid(axis, axis)
    inside = np.hypot(gx, gy) <= diameter_m / 2
    return np.column_stack([gx[inside], gy[inside], np.zeros(inside.sum())])


def test_disk_aperture_main_lobe_matches_published_widths():
    # Uniform disk of diameter D, far field (z = 400 m >> D = 4 m): -3 dB full width
    # 1.0290 lambda / D and first null at 1.2197 lambda / D (reference-values 6.5, the Airy
    # pattern [2 J1(v) / v]^2; times z on the plane). Sampled every lambda / 4.
    f = 2000.0
    lam = C / f
    mics = filled_disk(4.0, lam / 4)
    width, null = main_lobe_m(mics, 400.0, f, c_m_s=C)
    assert width == pytest.approx(1.0290 * lam / 4.0 * 400.0, rel=0.02)
    assert null == pytest.approx(1.2197 * lam / 4.0 * 400.0, rel=0.02)


def test_line_aperture_main_lobe_matches_published_width():
    # Uniform line of length L along x: -3 dB full width 0.8859 lambda / L along it
    # (sinc^2 = 1/2 at u = 1.39156; reference-values 6.5). The cut across the line does not
    # narrow; the along-line cut alone is checked.
    f = 1500.0
    lam = C / f
    n = 81
    x = np.linspace(-3.0, 3.0, n)
    length = 6.0 * n / (n - 1)           # N elements spaced d: L = N d
    mics = np.column_stack([x, np.zeros(n), np.zeros(n)])
    from flyover.imaging.planning import _cut
    r, b = _cut(mics, 500.0, f, C, np.array([1.0, 0.0]), 60.0, 0.01)
    i = np.flatnonzero(b < 0.5)[0]
    half = 2 * np.interp(0.5, [b[i], b[i - 1]], [r[i], r[i - 1]])
    assert half == pytest.approx(0.8859 * lam / length * 500.0, rel=0.02)


def test_band_resolution_of_the_demo_spiral():
    # The demo's 48-microphone spiral (12 m) 35 m below a drone whose propulsion and airframe
    # centres are 2.6 m apart: the main lobe narrows as 1 / f (common practice), the highest side
    # lobe of a 48-element spiral stays below -5 dB, and the two centres separate (a -3 dB
    # width apart) from the band where the width falls to their spacing, and above it.
    mics = spiral_layout(6, 8, 0.6, 6.0, 140.0)
    bands = third_octave_bands(200, 3150)
    rows = band_resolution(mics, 35.0, bands, points_body_m=[[1.1, 0.0], [-1.5, 0.0]],
                           grid_points=61)
    widths = np.array([r.width_m for r in rows])
    np.testing.assert_allclose(widths * bands.center_hz, widths[0] * bands.center_hz[0],
                               rtol=0.05)
    assert max(r.max_side_lobe_db for r in rows) < -5.0
    start = separable_from_hz(rows)
    assert start is not None
    k = list(bands.nominal_hz).index(start)
    assert all(r.separable for r in rows[k:]) and (k == 0 or not rows[k - 1].separable)
    assert rows[k].width_m <= 1.1 * 2.6 and rows[k - 1].width_m > 0.9 * 2.6

"""The linearised uncertainty budget of a band level, term by term by hand."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.acoustics.uncertainty import InputUncertainty, band_level_uncertainty_db

NONE = InputUncertainty(calibration_db=0.0, mic_position_m=0.0, temperature_k=0.0, clock_s=0.0)
GEOMETRY = dict(distance_m=35.0, polar_deg=90.0, n_mics=16, aperture_m=12.0, c_m_s=343.0,
                temperature_c=20.0, speed_m_s=25.0, track_m=0.0, clock_s=0.0)


def budget(f_hz=1000.0, inputs=NONE, **changes):
    return float(band_level_uncertainty_db(f_hz, **dict(GEOMETRY, **changes), inputs=inputs))


def test_each_term_by_hand():
    # Calibration, independent per microphone: 0.2 dB / sqrt(16) = 0.05 dB.
    assert budget(inputs=InputUncertainty(0.2, 0.0, 0.0, 0.0)) == pytest.approx(0.05)
    # Positions: 10 lg(e) (k sigma)^2, k = 2 pi 1000 / 343 = 18.318 1/m, sigma 5 mm: 0.0364 dB.
    assert budget(inputs=InputUncertainty(0.0, 0.005, 0.0, 0.0)) == pytest.approx(
        4.3429 * (18.318 * 0.005) ** 2, rel=1e-3)
    # Track: 20 lg(e) sigma / r = 8.686 * 0.03 / 35 = 0.00744 dB.
    assert budget(track_m=0.03) == pytest.approx(8.6859 * 0.03 / 35, rel=1e-4)
    # The clock moves the source along track, V sigma_t, which overhead is across the line of
    # sight (cos 90 deg = 0) and at 60 deg counts by half.
    assert budget(clock_s=0.01) == pytest.approx(0.0, abs=1e-12)
    assert budget(clock_s=0.01, polar_deg=60.0) == pytest.approx(8.6859 * 25 * 0.01 * 0.5 / 35,
                                                                 rel=1e-4)
    # Terms add in quadrature (GUM 5.1.2), the scatter among them.
    both = budget(inputs=InputUncertainty(0.2, 0.0, 0.0, 0.0), scatter_db=0.5)
    assert both == pytest.approx(np.hypot(0.05, 0.5))


def test_position_term_grows_with_frequency_squared():
    inputs = InputUncertainty(0.0, 0.005, 0.0, 0.0)
    assert budget(4000.0, inputs) / budget(1000.0, inputs) == pytest.approx(16.0, rel=1e-3)

"""The linearised uncertainty budget of a band level, term by term by hand."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.ground import GroundSurface
from flyover.acoustics.uncertainty import (InputUncertainty, band_level_uncertainty_db,
                                           ground_correction_spread_db, position_loss_db)

NONE = InputUncertainty(calibration_db=0.0, mic_position_m=0.0, temperature_k=0.0, clock_s=0.0,
                        calibration_shared_db=0.0)
GEOMETRY = dict(distance_m=35.0, polar_deg=90.0, n_mics=16, aperture_m=12.0, c_m_s=343.0,
                temperature_c=20.0, speed_m_s=25.0, track_m=0.0, clock_s=0.0)


def budget(f_hz=1000.0, inputs=NONE, **changes):
    return float(band_level_uncertainty_db(f_hz, **dict(GEOMETRY, **changes), inputs=inputs))


def test_each_term_by_hand():
    # Calibration, independent per microphone: 0.2 dB / sqrt(16) = 0.05 dB.
    assert budget(inputs=InputUncertainty(0.2, 0.0, 0.0, 0.0, 0.0)) == pytest.approx(0.05)
    # The calibrator's and the capsule type's shared part moves every microphone alike: whole.
    assert budget(inputs=InputUncertainty(0.0, 0.0, 0.0, 0.0, 0.15)) == pytest.approx(0.15)
    # Positions lose power on average, one-sidedly: a bias apart from the symmetric budget,
    # 10 lg(e) (k sigma)^2, k = 2 pi 1000 / 343 = 18.318 1/m, sigma 5 mm: 0.0364 dB.
    positions = InputUncertainty(0.0, 0.005, 0.0, 0.0, 0.0)
    assert budget(inputs=positions) == 0.0
    assert float(position_loss_db(1000.0, aperture_m=12.0, c_m_s=343.0, temperature_c=20.0,
                                  inputs=positions)) == pytest.approx(
        4.3429 * (18.318 * 0.005) ** 2, rel=1e-3)
    # The ground correction's spread over the flow resistivity, rectangular: 0.4 / sqrt(3).
    assert budget(ground_db=0.4) == pytest.approx(0.4 / np.sqrt(3))
    # Track: 20 lg(e) sigma / r = 8.686 * 0.03 / 35 = 0.00744 dB.
    assert budget(track_m=0.03) == pytest.approx(8.6859 * 0.03 / 35, rel=1e-4)
    # The clock moves the source along track, V sigma_t, which overhead is across the line of
    # sight (cos 90 deg = 0) and at 60 deg counts by half.
    assert budget(clock_s=0.01) == pytest.approx(0.0, abs=1e-12)
    assert budget(clock_s=0.01, polar_deg=60.0) == pytest.approx(8.6859 * 25 * 0.01 * 0.5 / 35,
                                                                 rel=1e-4)
    # Leakage: the level moved 0.9 dB under the stability test's shifts; the source may sit
    # anywhere in its region, a rectangular distribution of that half-width: 0.9 / sqrt(3)
    # (GUM 4.3.7, from memory).
    assert budget(leakage_db=0.9) == pytest.approx(0.9 / np.sqrt(3))
    # Terms add in quadrature (GUM 5.1.2), the scatter among them.
    both = budget(inputs=InputUncertainty(0.2, 0.0, 0.0, 0.0, 0.0), scatter_db=0.5)
    assert both == pytest.approx(np.hypot(0.05, 0.5))


def test_position_loss_grows_with_frequency_squared():
    inputs = InputUncertainty(0.0, 0.005, 0.0, 0.0, 0.0)
    loss = position_loss_db(np.array([1000.0, 4000.0]), aperture_m=12.0, c_m_s=343.0,
                            temperature_c=20.0, inputs=inputs)
    assert loss[1] / loss[0] == pytest.approx(16.0, rel=1e-3)


def test_ground_correction_spread_over_the_flow_resistivity():
    # Hard ground has no flow resistivity to be wrong. Over grass (200 kPa s/m^2) under
    # microphones 1.2 m up, 35 m below the source, a factor 2 either way moves the two-path
    # correction by a few tenths of a dB (0.2-0.5 dB measured on passes simulated outside the
    # project), more toward low frequency where the ground's impedance matters most; and the
    # spread vanishes as the factor goes to 1.
    bands = third_octave_bands(200, 4000)
    kw = dict(distance_m=35.0, polar_deg=70.0, mic_height_m=1.2, aperture_m=12.0, c_m_s=343.0)
    hard = ground_correction_spread_db(bands, ground=GroundSurface("hard"), factor=2.0, **kw)
    assert np.all(hard == 0.0)
    grass = ground_correction_spread_db(bands, ground=GroundSurface("soft", 200e3), factor=2.0,
                                        **kw)
    assert 0.15 <= grass.max() <= 1.0 and np.all(grass >= 0.0)
    near = ground_correction_spread_db(bands, ground=GroundSurface("soft", 200e3), factor=1.01,
                                       **kw)
    assert np.all(near <= 0.02 * grass.max() + 1e-9)


def test_an_isolated_level_is_never_tighter_than_its_band():
    # A level with no neighbouring window in its region and band has no window scatter of its
    # own; dropping the term gave it the tightest interval of the pass (0.03 dB against 0.55-1.1
    # for its neighbours). Its uncertainty must be at least the median of its band's supported
    # levels, and the note must say where its scatter came from.
    import pandas as pd

    from flyover.io.results.levels import LEVELS
    from flyover.pipeline.levels import ISOLATED_NOTE, with_uncertainty
    rng = np.random.default_rng(4)
    rows = []
    for region in ("front", "rear"):
        for window in range(10):
            for band in (250.0, 1000.0):
                level = 70.0 + rng.normal(0.0, 0.8) if region == "front" or window == 5 \
                    else np.nan
                rows.append(dict(window=window, region=region, band_hz=band, level_db=level,
                                 level_1m_db=level, note="", distance_m=30.0,
                                 polar_angle_deg=60.0 + 6 * window))
    levels = pd.DataFrame(rows).reindex(columns=LEVELS.column_names)
    alignment = dict(channels_used=48, array_aperture_m=12.0, speed_of_sound_m_s=343.0,
                     atmosphere=dict(temperature_c=15.0), speed_m_s=20.0,
                     track_noise_estimate_m=0.05, clock_offset_uncertainty_s=1e-5)
    out = with_uncertainty(levels, alignment, InputUncertainty())
    for band, g in out.groupby("band_hz"):
        front = g[g["region"] == "front"]["uncertainty_db"]
        lone = g[(g["region"] == "rear") & (g["window"] == 5)].iloc[0]
        assert lone["uncertainty_db"] >= front.median()
        assert lone["uncertainty_db"] > 0.3          # a window's scatter, not the inputs' 0.03
        assert ISOLATED_NOTE in lone["note"]
        assert not front.isna().any() and (g[g["region"] == "front"]["note"] == "").all()
    assert out.loc[out["level_db"].isna(), "uncertainty_db"].isna().all()

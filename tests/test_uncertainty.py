"""The linearised uncertainty budget of a band level, term by term by hand."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.acoustics.uncertainty import InputUncertainty, band_level_uncertainty_db

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
    # Positions: 10 lg(e) (k sigma)^2, k = 2 pi 1000 / 343 = 18.318 1/m, sigma 5 mm: 0.0364 dB.
    assert budget(inputs=InputUncertainty(0.0, 0.005, 0.0, 0.0, 0.0)) == pytest.approx(
        4.3429 * (18.318 * 0.005) ** 2, rel=1e-3)
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


def test_position_term_grows_with_frequency_squared():
    inputs = InputUncertainty(0.0, 0.005, 0.0, 0.0, 0.0)
    assert budget(4000.0, inputs) / budget(1000.0, inputs) == pytest.approx(16.0, rel=1e-3)


def test_an_isolated_level_is_never_tighter_than_its_band():
    # A level with no neighbouring window in its region and band has no window scatter of its
    # own; dropping the term gave it the tightest interval of the pass (0.03 dB against 0.55-1.1
    # for its neighbours). Its uncertainty must be at least the median of its band's supported
    # levels, and the note must say where its scatter came from.
    from types import SimpleNamespace

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
    campaign = SimpleNamespace(analysis=SimpleNamespace(uncertainty=InputUncertainty()))
    out = with_uncertainty(levels, alignment, campaign, "p1")
    for band, g in out.groupby("band_hz"):
        front = g[g["region"] == "front"]["uncertainty_db"]
        lone = g[(g["region"] == "rear") & (g["window"] == 5)].iloc[0]
        assert lone["uncertainty_db"] >= front.median()
        assert lone["uncertainty_db"] > 0.3          # a window's scatter, not the inputs' 0.03
        assert ISOLATED_NOTE in lone["note"]
        assert not front.isna().any() and (g[g["region"] == "front"]["note"] == "").all()
    assert out.loc[out["level_db"].isna(), "uncertainty_db"].isna().all()

"""Single-event metrics against IEC 61672-1 and against energy integrals done another way."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.acoustics.bands import a_weighting_db, third_octave_bands
from flyover.acoustics.metrics import (band_level_history, event_metrics, lae_shortfall_db,
                                      metrics_of_mean_square)
from flyover.model.constants import P0_PA

FS = 48000.0

# IEC 61672-1:2013 Table 4 (from memory): reference response of the time-weighted level's
# maximum to a 4 kHz tone burst of duration T_b, re the steady level of the same tone; the
# standard derives them as 10 lg(1 - exp(-T_b / tau)), tau = 0.125 s (F) or 1 s (S).
BURST_F = {1.0: 0.0, 0.5: -0.1, 0.2: -1.0, 0.1: -2.6, 0.05: -4.8, 0.02: -8.3, 0.01: -11.1,
           0.005: -14.1, 0.002: -18.0, 0.001: -21.0, 0.0005: -24.0, 0.00025: -27.0}
BURST_S = {1.0: -2.0, 0.5: -4.1, 0.2: -7.4, 0.1: -10.2, 0.05: -13.1, 0.02: -17.0, 0.01: -20.0,
           0.005: -23.0, 0.002: -27.0}


def tone_burst(duration_s: float, level_db: float = 94.0, f_hz: float = 4000.0):
    """Silence, a burst of whole cycles starting at a zero crossing, silence (4 s in all). The
    silence before the burst is longer than the S time constant: the detector settles on it."""
    t = np.arange(int(4.0 * FS)) / FS
    amp = np.sqrt(2) * P0_PA * 10 ** (level_db / 20)
    on = (t >= 1.5) & (t < 1.5 + duration_s)
    return np.where(on, amp * np.sin(2 * np.pi * f_hz * (t - 1.5)), 0.0)


@pytest.mark.parametrize("table,key", [(BURST_F, "lafmax_db"), (BURST_S, "lasmax_db")])
def test_tone_burst_responses_of_the_time_weightings(table, key):
    steady = 94.0 + float(a_weighting_db(4000.0))      # the steady tone's A level
    for duration, expected in table.items():
        m, _ = event_metrics(tone_burst(duration), FS)
        # Class 1 acceptance limits are +-0.5 dB down to 10 ms and wider below (from memory);
        # the exact exponential is held to a tighter 0.1 dB, 0.3 dB for the sub-cycle bursts.
        tol = 0.1 if duration >= 0.002 else 0.3
        assert getattr(m, key) - steady == pytest.approx(expected, abs=tol), duration


def test_steady_signal_exposure_is_equivalent_level_plus_ten_lg_duration():
    # LAE = LAeq,T + 10 lg(T / 1 s) (IEC 61672-1 definitions). The detector starts settled, so a
    # steady signal is within 10 dB of its maximum from the first sample to the last: the
    # 10 dB-down interval is the whole signal, cut short by the recording at both ends.
    rng = np.random.default_rng(3)
    duration = 10.0
    x = rng.standard_normal(int(duration * FS)) * 0.2
    m, _ = event_metrics(x, FS)
    assert m.lae_db == pytest.approx(m.laeq_db + 10 * np.log10(duration), abs=0.01)
    assert m.ten_db_down_s[0] == 0.0
    assert not m.ten_db_down_complete        # still loud at both ends: cut short by the recording
    # A 1 kHz tone's A level is its level (A(1 kHz) = 0 dB).
    t = np.arange(int(duration * FS)) / FS
    tone = np.sqrt(2) * P0_PA * 10 ** (80 / 20) * np.sin(2 * np.pi * 1000 * t)
    assert event_metrics(tone, FS)[0].laeq_db == pytest.approx(80.0, abs=0.01)


@pytest.mark.parametrize("kind", ["noise", "tone"])
def test_steady_signal_time_weighted_levels_are_flat_from_the_first_sample(kind):
    # A steady signal's time-weighted level is its steady level at every instant (IEC 61672-1's
    # time weightings of a stationary signal); a detector started from rest would read 20 dB low
    # after 10 ms of S weighting and bias LASmax and the 10 dB-down edges of a recording that
    # starts mid-sound.
    rng = np.random.default_rng(11)
    t = np.arange(int(4.0 * FS)) / FS
    x = (rng.standard_normal(len(t)) if kind == "noise"
         else np.sqrt(2) * np.sin(2 * np.pi * 1000.0 * t))
    m, history = event_metrics(x, FS)
    steady = m.laeq_db
    np.testing.assert_allclose(history["LAS"], steady, atol=0.1)
    if kind == "tone":
        np.testing.assert_allclose(history["LAF"], steady, atol=0.1)
    else:   # F weighting scatters with the noise itself (tenths of a dB): its start is unbiased
        first = int(0.5 * FS)
        assert np.mean(history["LAF"][:first]) == pytest.approx(steady, abs=0.1)


def test_simulated_flyover_exposure_against_band_energies():
    # A simulated pass at one microphone; its LAE over the 10 dB-down interval against the energy
    # of that interval computed another way: one-third-octave band energies from one spectrum,
    # A-weighted at each band's centre (common practice for A levels from band levels).
    from flyover.acoustics.atmosphere import Atmosphere
    from flyover.forward.moving_source import (Broadband, PointSource, Propagator, SourceSignal,
                                               Tone, received_pressure_pa)
    from flyover.geometry.track import straight_track
    fs = 25600.0
    track, *_ = straight_track(25.0, 40.0, 90.0, 9.0, -4.0, 22.0)
    source = PointSource("s", (0.0, 0.0, 0.0), tones=(Tone(240.0, 100.0), Tone(480.0, 94.0)),
                         broadband=Broadband(88.0, -3.0, 50.0, 8000.0), seed=9)
    signal = SourceSignal(source, fs, -2.0, 18.5)
    mic = np.array([[0.0, 0.0, 0.0]])
    p = received_pressure_pa(track, [signal], [np.zeros(3)],
                             Propagator(mic, Atmosphere(15.0, 70.0), 2.0), fs, 0.0,
                             int(18.0 * fs))[0]
    m, _ = event_metrics(p, fs)
    assert m.ten_db_down_complete and 4.0 < m.ten_db_down_duration_s < 16.0
    i1, i2 = (int(round(v * fs)) for v in m.ten_db_down_s)
    seg = p[i1:i2 + 1]
    bands = third_octave_bands(25, 10000)
    spec = np.abs(np.fft.rfft(seg)) ** 2 * 2 / (len(seg) * fs)     # one-sided PSD, Pa^2/Hz
    f = np.fft.rfftfreq(len(seg), 1 / fs)
    df = f[1]
    energy = sum(spec[(f >= lo) & (f < hi)].sum() * df * 10 ** (a_weighting_db(fc) / 10)
                 for lo, hi, fc in zip(bands.lower_hz, bands.upper_hz, bands.center_hz))
    lae_bands = 10 * np.log10(energy * len(seg) / fs / P0_PA ** 2)   # mean square x duration
    assert m.lae_db == pytest.approx(lae_bands, abs=0.3)


def test_band_history_blocks_add_up_to_the_signal():
    # Parseval over tiling blocks: the band energies of all blocks sum to the band energy of the
    # whole signal (a white noise whose band levels are known: 10 lg(sigma^2 B / (fs / 2))).
    rng = np.random.default_rng(5)
    x = rng.standard_normal(int(16 * FS))
    bands = third_octave_bands(200, 10000)
    centre, levels = band_level_history(x, FS, bands, 0.5)
    assert len(centre) == 32 and centre[0] == pytest.approx(0.25)
    mean = 10 * np.log10(np.mean(10 ** (levels / 10), axis=0))
    expected = 10 * np.log10((bands.upper_hz - bands.lower_hz) / (FS / 2) / P0_PA ** 2)
    # 32 blocks of at least 23 lines each: the mean's spread is under 0.2 dB.
    np.testing.assert_allclose(mean, expected, atol=0.4)


@pytest.mark.parametrize("distance_m, speed_m_s", [(35.0, 22.0), (60.0, 40.0), (20.0, 10.0)])
@pytest.mark.parametrize("span_s", [(-8.0, 1.0), (-8.0, 0.5), (-8.0, 0.1), (-1.0, 8.0),
                                    (-1.5, 1.5), (-0.3, 0.3)])
def test_lae_shortfall_of_a_cut_flyover_covers_what_the_cut_loses(distance_m, speed_m_s,
                                                                   span_s):
    # A straight flight of a steady source: the mean square falls as 1 / (d^2 + v^2 t^2)
    # (spherical spreading, common practice). Cut the two-minute history to a few seconds
    # around the closest approach: LAE over the cut misses what the full 10 dB-down interval
    # holds; the estimate is never short by more than 0.05 dB and over by at most 1 dB.
    fs = 100.0
    t = np.arange(-60.0, 60.0, 1 / fs)
    p2 = 4e-4 * distance_m ** 2 / (distance_m ** 2 + (speed_m_s * t) ** 2)
    full, _ = metrics_of_mean_square(p2, fs)
    cut = (t >= span_s[0]) & (t < span_s[1])
    metrics, history = metrics_of_mean_square(p2[cut], fs)
    assert not metrics.ten_db_down_complete
    lost_db = full.lae_db - metrics.lae_db
    estimate = lae_shortfall_db(metrics, history, closest_s=-span_s[0],
                                closest_distance_m=distance_m, speed_m_s=speed_m_s)
    assert lost_db > 1.0
    assert lost_db - 0.05 <= estimate <= lost_db + 1.0


def test_lae_shortfall_is_zero_when_complete_and_unbounded_before_the_peak():
    fs = 100.0
    t = np.arange(-60.0, 60.0, 1 / fs)
    p2 = 4e-4 * 35.0 ** 2 / (35.0 ** 2 + (22.0 * t) ** 2)
    full, history = metrics_of_mean_square(p2, fs)
    assert lae_shortfall_db(full, history, closest_s=60.0, closest_distance_m=35.0,
                            speed_m_s=22.0) == 0.0
    # The recording starts after the closest approach while still within 10 dB of its own
    # maximum: what came before may hold a higher peak; no estimate is offered.
    late = t >= 0.5
    metrics, history = metrics_of_mean_square(p2[late], fs)
    assert lae_shortfall_db(metrics, history, closest_s=-0.5, closest_distance_m=35.0,
                            speed_m_s=22.0) == np.inf

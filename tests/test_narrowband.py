"""Narrowband densities of the focused array: one microphone against scipy.signal.welch (a
general-purpose reference), and band integrals against the chain's band powers on a simulated
pass (the project's forward model)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import welch

from flyover.acoustics.narrowband import band_integral_pa2, narrowband_psd


def test_one_microphone_is_welchs_estimate():
    rng = np.random.default_rng(3)
    x = rng.normal(0, 0.2, 9000) + 0.5 * np.sin(2 * np.pi * 440.0 * np.arange(9000) / 8000.0)
    f, full, removed = narrowband_psd(x[None], 8000.0, segment_samples=1024)
    f_ref, p_ref = welch(x, 8000.0, window="hann", nperseg=1024, noverlap=512, detrend=False,
                         scaling="density")
    np.testing.assert_allclose(f, f_ref)
    np.testing.assert_allclose(full, p_ref, rtol=1e-10)
    assert np.all(np.isnan(removed))       # one microphone has no cross terms


def test_diagonal_removal_takes_out_incoherent_noise():
    # A common signal under noise independent per microphone: the full density holds the
    # noise over the number of microphones, the diagonal-removed one the signal alone.
    rng = np.random.default_rng(5)
    fs, n, m = 8000.0, 16384, 24
    common = rng.normal(0, 0.1, n)
    x = common[None] + rng.normal(0, 0.3, (m, n))
    f, full, removed = narrowband_psd(x, fs, segment_samples=512)
    _, truth = welch(common, fs, window="hann", nperseg=512, noverlap=256, detrend=False)
    band = (f > 200) & (f < 3000)
    assert np.mean(removed[band]) == pytest.approx(np.mean(truth[band]), rel=0.05)
    assert np.mean(full[band]) == pytest.approx(np.mean(truth[band]) + 0.09 / fs * 2 / m,
                                                rel=0.05)


@pytest.mark.parametrize("segment_s", [0.5, 0.125])
def test_band_integrals_match_the_band_levels_on_a_simulated_pass(segment_s):
    # Tones mid-band and broadband noise from a point source, flown past the test array in
    # wind with absorption: its de-Dopplerized signals at its own position, compensated line
    # by line for the path's absorption. Over the whole window (one segment, the chain's own
    # spectrum) every band's integral matches the chain's band power within 0.05 dB; in
    # Welch segments of an eighth of a second, the tones' bands match the source's own band
    # power within 0.2 dB.
    from test_dedoppler import CLOCK, FS, MICS, one_source_pass, rows, windows_near_overhead

    from flyover.acoustics.bands import third_octave_bands
    from flyover.forward.moving_source import Broadband, PointSource, Tone
    from flyover.imaging.chain import ChainSettings, signal_band_power
    from flyover.imaging.dedoppler import dedopplerized_signals, window_band_powers
    from flyover.imaging.reception import (absorption_line_gains, reception_geometry,
                                           required_frames)
    src = PointSource("s", (0.6, -0.3, 0.0), tones=(Tone(630.0, 92.0), Tone(1000.0, 90.0),
                                                    Tone(1600.0, 88.0)),
                      broadband=Broadband(70.0, 0.0, 80.0, 2500.0), seed=4)
    bands = third_octave_bands(500, 2000)
    track, atm, (sig,), p = one_source_pass(src, wind=(4.0, -2.0))
    settings = ChainSettings(bands, np.ones(len(MICS)), 2.0)
    for w in windows_near_overhead(track, 30, window_s=0.5, hop_s=0.5):
        geo = reception_geometry(track, w, [src.body_m], MICS, atm, 2.0)
        first, n = required_frames(geo, CLOCK, "cubic")
        a = dedopplerized_signals(rows(p, first, n), first, geo, CLOCK, w, settings)[0]
        segment = int(round(segment_s * FS))
        f = np.fft.rfftfreq(segment, 1.0 / FS)
        f, full, removed = narrowband_psd(a, FS, segment_samples=segment,
                                          line_gain=absorption_line_gains(atm, f, geo))
        power = band_integral_pa2(f, removed, bands)
        if segment == w.n_samples:
            chain = window_band_powers(rows(p, first, n), first, geo, CLOCK, w, settings, atm)
            assert np.max(np.abs(10 * np.log10(power / chain.diagonal_removed[0]))) < 0.05
        else:
            truth = signal_band_power(sig(w.emission_times_s), bands, FS)
            tonal = np.isin(bands.nominal_hz, [630.0, 1000.0, 1600.0])
            assert np.max(np.abs(10 * np.log10(power / truth))[tonal]) < 0.2

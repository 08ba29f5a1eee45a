"""The small spectral estimators the per-pass steps use, each against scipy.signal's own for the
same arguments (a general-purpose reference library), and the steps' freedom from importing
scipy.signal, which is what they exist for."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest
from scipy import signal

from flyover.acoustics.spectral import (exponential_average, hann_periodic,
                                        spectrogram_density, tukey_periodic, welch_coherence)


@pytest.mark.parametrize("n", [1, 2, 7, 64, 1000])
def test_windows_are_scipys_periodic_windows(n):
    np.testing.assert_allclose(hann_periodic(n), signal.get_window("hann", n), atol=1e-15)
    for alpha in (0.25, 0.5, 1.0):
        np.testing.assert_allclose(tukey_periodic(n, alpha),
                                   signal.get_window(("tukey", alpha), n), atol=1e-15)
    for alpha in (0.0, 1.5):              # a rectangle, or no window: refused
        with pytest.raises(ValueError, match="alpha"):
            tukey_periodic(n, alpha)


def test_coherence_is_scipys_welch_coherence():
    rng = np.random.default_rng(11)
    fs, n = 8000.0, 5000                      # not a whole number of segments
    x = rng.normal(size=n) + 3.0              # an offset: each segment's mean is removed
    y = np.stack([x + rng.normal(0, s, n) for s in (0.1, 1.0, 10.0)])
    f, c = welch_coherence(x, y, fs, segment_samples=512)
    f_ref, c_ref = signal.coherence(x[None], y, fs=fs, nperseg=512)
    np.testing.assert_allclose(f, f_ref)
    np.testing.assert_allclose(c, c_ref, rtol=1e-10, atol=1e-13)
    # Odd segment length: the overlap is its floor half, as scipy's default.
    f, c = welch_coherence(x, y, fs, segment_samples=301)
    np.testing.assert_allclose(c, signal.coherence(x[None], y, fs=fs, nperseg=301)[1],
                               rtol=1e-10, atol=1e-13)


@pytest.mark.parametrize("nper, overlap", [(256, 192), (255, 100), (64, 0)])
def test_spectrogram_is_scipys_density_spectrogram(nper, overlap):
    rng = np.random.default_rng(4)
    fs = 12800.0
    t = np.arange(7000) / fs
    x = np.sin(2 * np.pi * 1000 * t * (1 + t)) + 0.1 * rng.normal(size=t.size) + 0.4
    f, times, s = spectrogram_density(x, fs, segment_samples=nper, overlap=overlap)
    f_ref, t_ref, s_ref = signal.spectrogram(x, fs, nperseg=nper, noverlap=overlap)
    np.testing.assert_allclose(f, f_ref)
    np.testing.assert_allclose(times, t_ref)
    np.testing.assert_allclose(s, s_ref, rtol=1e-9, atol=1e-12 * s_ref.max())
    hann = hann_periodic(nper)
    np.testing.assert_allclose(
        spectrogram_density(x, fs, segment_samples=nper, overlap=overlap, window=hann)[2],
        signal.spectrogram(x, fs, window="hann", nperseg=nper, noverlap=overlap)[2],
        rtol=1e-9, atol=1e-12 * s_ref.max())


@pytest.mark.parametrize("decay", [0.5, 0.99, 1 - 1 / 25600, 1 - 1 / 3200])
def test_exponential_average_is_a_first_order_section(decay):
    rng = np.random.default_rng(8)
    x = rng.normal(size=60_000) ** 2
    y = exponential_average(x, decay, initial=0.7)
    ref = signal.lfilter([1 - decay], [1, -decay], x, zi=[decay * 0.7])[0]
    np.testing.assert_allclose(y, ref, rtol=1e-11)
    assert exponential_average(x[:0], decay).shape == (0,)
    with pytest.raises(ValueError, match="decay"):
        exponential_average(x, 1.0)


def test_pass_steps_do_not_import_scipy_signal():
    # The reason for this module: scipy.signal's import (0.7 s) is paid by every process that
    # imports it. The steps that used it import these instead (the 'sinc' interpolation and
    # IRIG-B demodulation still import it where they run).
    code = ("import sys\n"
            "from flyover.pipeline import stages\n"
            "assert stages('pass') and stages('campaign')\n"
            "print('scipy.signal' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip() == "False"

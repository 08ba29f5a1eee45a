"""Channel sensitivity from a sound-calibrator recording (e.g. 94 dB re 20 uPa at 1 kHz)."""

from __future__ import annotations

import numpy as np

from flyover.model.constants import P0_PA
from flyover.model.errors import FlyoverInputError


def tone_rms(samples, sample_rate_hz: float, frequency_hz: float) -> tuple[np.ndarray, np.ndarray]:
    """RMS of each channel inside the one-third-octave band around a tone, and overall.

    Parameters
    ----------
    samples : ndarray, shape (n_channels, n)

    Returns
    -------
    band_rms, total_rms : ndarray, shape (n_channels,)
        In the units of ``samples``. The band RMS is taken from a Hann-windowed spectrum, which
        keeps a stationary tone's power (window power normalised).
    """
    x = np.asarray(samples, dtype=float)
    x = x - x.mean(axis=1, keepdims=True)
    n = x.shape[1]
    w = np.hanning(n)
    spec = np.fft.rfft(x * w, axis=1)
    f = np.fft.rfftfreq(n, 1.0 / sample_rate_hz)
    power = np.abs(spec) ** 2 * 2.0 / (n * np.sum(w ** 2))
    inside = (f >= frequency_hz * 10 ** -0.05) & (f <= frequency_hz * 10 ** 0.05)
    return np.sqrt(power[:, inside].sum(axis=1)), np.sqrt(np.mean(x ** 2, axis=1))


def pa_per_unit_from_calibrator(samples, sample_rate_hz: float, level_db: float = 94.0,
                                frequency_hz: float = 1000.0, channels=None) -> np.ndarray:
    """Pascals per sample unit of each channel from a calibrator tone (IEC 60942 calibrator).

    Parameters
    ----------
    samples : ndarray, shape (n_channels, n)
        The calibrator recording in sample units (floating point, full scale +-1).
    level_db : float
        Calibrator level, dB re 20 uPa (94 dB is 1 Pa rms).
    frequency_hz : float
    channels : sequence of int, optional
        1-based channel numbers for messages.

    Raises
    ------
    FlyoverInputError
        When a channel holds no clear tone (less than 90 % of its power in the tone's band).
    """
    band, total = tone_rms(samples, sample_rate_hz, frequency_hz)
    labels = channels if channels is not None else range(1, len(band) + 1)
    for ch, b, t in zip(labels, band, total):
        if t <= 0 or b ** 2 < 0.9 * t ** 2:
            share = 0.0 if t <= 0 else 100 * b ** 2 / t ** 2
            raise FlyoverInputError(
                f"no calibrator tone at {frequency_hz:g} Hz on channel {ch}",
                "calibrator recording",
                "at least 90 % of the channel's power in the tone's one-third-octave band",
                f"{share:.0f} %", "record the calibrator on this channel, or pass --channel")
    return P0_PA * 10.0 ** (level_db / 20.0) / band

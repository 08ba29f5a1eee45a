"""Narrowband power spectral density of an array focused on one point, in source time.

The de-Dopplerized signals of one body point (every microphone's, in source time: the point's
source strength at 1 m) are cut into Hann-windowed segments of ``segment_samples`` with half
overlap (Welch 1967), each microphone's spectrum compensated per line for its path's
absorption, and the weighted beam's power averaged over segments:

    full:               S(f) = mean_k |sum_m w_m X_mk(f)|^2 / (sum w)^2
    diagonal removed:   S(f) = mean_k (|sum_m w_m X_mk(f)|^2 - sum_m w_m^2 |X_mk(f)|^2)
                               / ((sum w)^2 - sum w^2)

scaled as a one-sided density (Pa^2/Hz; scipy.signal.welch's 'density' scaling, so that one
microphone alone gives exactly its Welch estimate). The resolution is fs / segment_samples;
the diagonal-removed density takes out the microphones' own noise, and may dip below zero
where only noise is left.
"""

from __future__ import annotations

import numpy as np
import scipy.fft

from flyover.acoustics.spectral import hann_periodic, one_sided


def narrowband_psd(signals, sample_rate_hz: float, *, segment_samples: int, weights=None,
                   line_gain=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Welch densities of the focused array, full and with the diagonal removed.

    Parameters
    ----------
    signals : array, shape (n_mics, n_samples)
        De-Dopplerized signals of one point (Pa at 1 m), source time.
    sample_rate_hz : float
    segment_samples : int
        Samples per segment (the resolution is ``sample_rate_hz / segment_samples``).
    weights : array, shape (n_mics,), optional
        Microphone weights (0 leaves one out); default all 1.
    line_gain : array, shape (n_mics, n_lines), optional
        A real amplitude factor per microphone and line applied to the spectra (the path's
        absorption compensation); default 1.

    Returns
    -------
    frequency_hz : ndarray, shape (n_lines,)
    full, removed : ndarray, shape (n_lines,)
        Pa^2/Hz.
    """
    x = np.asarray(signals, float)
    n_mics, n = x.shape
    if not 2 <= segment_samples <= n:
        raise ValueError(f"segment of {segment_samples} samples for {n} samples of signal")
    w = np.ones(n_mics) if weights is None else np.asarray(weights, float)
    win = hann_periodic(segment_samples)
    step = segment_samples // 2
    starts = np.arange(0, n - segment_samples + 1, step)
    segments = np.stack([x[:, s:s + segment_samples] for s in starts], axis=1)  # (m, k, n_s)
    spectra = scipy.fft.rfft(segments * win, axis=-1)                          # (m, k, f)
    if line_gain is not None:
        spectra = spectra * np.asarray(line_gain, float)[:, None, :]
    beam = np.einsum("m,mkf->kf", w, spectra)
    beam_power = np.mean(np.abs(beam) ** 2, axis=0)
    autos = np.mean(np.einsum("m,mkf->kf", w ** 2, np.abs(spectra) ** 2), axis=0)
    density = one_sided(segment_samples, spectra.shape[-1]) / (sample_rate_hz
                                                               * np.sum(win ** 2))
    s1, s2 = w.sum(), (w ** 2).sum()
    full = beam_power * density / s1 ** 2
    removed = ((beam_power - autos) * density / (s1 ** 2 - s2) if s1 ** 2 > s2
               else np.full_like(full, np.nan))
    return np.fft.rfftfreq(segment_samples, 1.0 / sample_rate_hz), full, removed


def band_integral_pa2(frequency_hz, density, bands) -> np.ndarray:
    """The density summed over each band's lines (lower edge included, upper excluded) times
    the line spacing: band power (Pa^2), shape (n_bands,)."""
    f = np.asarray(frequency_hz, float)
    d = np.asarray(density, float)
    df = f[1] - f[0]
    return np.array([d[(f >= lo) & (f < hi)].sum() * df
                     for lo, hi in zip(bands.lower_hz, bands.upper_hz)])

"""Small spectral estimators the per-pass steps use: periodic windows, Welch's coherence, a
one-sided spectrogram and exponential averaging.

They give what scipy.signal's ``get_window``, ``coherence``, ``spectrogram`` and ``lfilter`` (a
first-order section) give for the same arguments (tests/test_spectral.py holds those as the
reference), written here because importing scipy.signal costs a process 0.7 s (its functions'
docstrings are rewritten at import): a third of a light step's wall time, paid by four of
every pass's steps (benchmarks/README.md).
"""

from __future__ import annotations

import numpy as np
import scipy.fft


def hann_periodic(n: int) -> np.ndarray:
    """The periodic ("DFT-even") Hann window of ``n`` samples: 0.5 - 0.5 cos(2 pi k / n), the
    window of spectral estimation (Harris 1978; common practice); one sample is [1]."""
    if n == 1:
        return np.ones(1)
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


def tukey_periodic(n: int, alpha: float) -> np.ndarray:
    """The periodic Tukey (tapered cosine) window of ``n`` samples: flat but for raised-cosine
    tapers over ``alpha / 2`` of its length at either end (Harris 1978). Taken as the first n
    samples of the symmetric window of n + 1, as spectral estimation does. ``alpha`` in
    (0, 1]: 1 is the Hann window."""
    if not 0.0 < alpha <= 1.0:
        raise ValueError(f"the Tukey window's alpha must lie in (0, 1], got {alpha}")
    if n == 1:
        return np.ones(1)
    m = n + 1
    k = np.arange(m, dtype=float)
    width = int(np.floor(alpha * (m - 1) / 2.0))
    w = np.ones(m)
    rise = k[:width + 1]
    w[:width + 1] = 0.5 * (1.0 + np.cos(np.pi * (-1.0 + 2.0 * rise / (alpha * (m - 1)))))
    fall = k[m - width - 1:]
    w[m - width - 1:] = 0.5 * (1.0 + np.cos(np.pi * (-2.0 / alpha + 1.0 + 2.0 * fall
                                                    / (alpha * (m - 1)))))
    return w[:n]


def _segment_spectra(x, window, step: int) -> np.ndarray:
    """Spectra of the mean-removed, windowed segments of the last axis: (..., n_seg, n_lines);
    segments start every ``step`` samples while a whole one fits."""
    n_seg = len(window)
    frames = np.lib.stride_tricks.sliding_window_view(x, n_seg, axis=-1)[..., ::step, :]
    frames = frames - frames.mean(axis=-1, keepdims=True)
    return scipy.fft.rfft(frames * window, axis=-1)


def one_sided(n_seg: int, n_lines: int) -> np.ndarray:
    """Twice every line but DC (and Nyquist for an even segment): the factors that make a
    density of ``n_lines`` of a real segment's ``n_seg``-point spectrum one-sided."""
    factor = np.full(n_lines, 2.0)
    factor[0] = 1.0
    if n_seg % 2 == 0:
        factor[-1] = 1.0
    return factor


def welch_coherence(x, y, sample_rate_hz: float, *, segment_samples: int):
    """Magnitude-squared coherence of ``x`` with each row of ``y`` (Welch 1967: periodic Hann
    segments, half overlap, each segment's mean removed).

    Parameters
    ----------
    x : array, shape (n,)
    y : array, shape (k, n)

    Returns
    -------
    frequency_hz : ndarray, shape (n_lines,)
    coherence : ndarray, shape (k, n_lines)
        |Sxy|^2 / (Sxx Syy); nan where a signal has no power.
    """
    window = hann_periodic(segment_samples)
    step = segment_samples - segment_samples // 2
    sx = _segment_spectra(np.asarray(x, float), window, step)                # (s, f)
    sy = _segment_spectra(np.asarray(y, float), window, step)                # (k, s, f)
    sxx = np.mean(np.abs(sx) ** 2, axis=0)
    syy = np.mean(np.abs(sy) ** 2, axis=1)
    sxy = np.mean(np.conj(sx) * sy, axis=1)
    coherence = np.abs(sxy) ** 2 / sxx / syy
    return np.fft.rfftfreq(segment_samples, 1.0 / sample_rate_hz), coherence


def spectrogram_density(x, sample_rate_hz: float, *, segment_samples: int, overlap: int,
                        window=None):
    """One-sided power spectral density (unit^2/Hz) of successive segments of a signal.

    Parameters
    ----------
    x : array, shape (n,)
    segment_samples, overlap : int
        Segment length and the samples neighbouring segments share.
    window : array, shape (segment_samples,), optional
        Default: the periodic Tukey window with alpha 0.25.

    Returns
    -------
    frequency_hz : ndarray, shape (n_lines,)
    time_s : ndarray, shape (n_segments,)
        The segments' centres from the first sample.
    density : ndarray, shape (n_lines, n_segments)
    """
    window = tukey_periodic(segment_samples, 0.25) if window is None else np.asarray(window)
    step = segment_samples - overlap
    spectra = _segment_spectra(np.asarray(x, float), window, step)          # (s, f)
    scale = one_sided(segment_samples, spectra.shape[-1]) / (
        sample_rate_hz * np.sum(window ** 2))
    density = (np.abs(spectra) ** 2 * scale).T
    time_s = (segment_samples / 2 + step * np.arange(spectra.shape[0])) / sample_rate_hz
    return np.fft.rfftfreq(segment_samples, 1.0 / sample_rate_hz), time_s, density


def exponential_average(x, decay: float, *, initial: float = 0.0) -> np.ndarray:
    """``y[k] = decay y[k-1] + (1 - decay) x[k]`` from ``y[-1] = initial``, shape of ``x`` (1-D).

    Solved in closed form over blocks of one time constant (``1 / -ln decay`` samples), in
    which ``decay^-j`` stays under e: each block is a cumulative sum, so the cost is numpy's
    and the rounding a cumulative sum's.
    """
    x = np.asarray(x, float)
    if not 0.0 < decay < 1.0:
        raise ValueError(f"decay must lie in (0, 1), got {decay}")
    block = max(1, int(-1.0 / np.log(decay)))
    j = np.arange(min(block, len(x)))
    grow, shrink = decay ** -j, decay ** j
    y = np.empty_like(x)
    last = float(initial)
    for start in range(0, len(x), block):
        part = x[start:start + block]
        k = len(part)
        y[start:start + k] = shrink[:k] * (decay * last + (1.0 - decay)
                                           * np.cumsum(part * grow[:k]))
        last = y[start + k - 1]
    return y

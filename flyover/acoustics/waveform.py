"""The array focused on one point as a waveform: what a region sounds like, in source time.

Each block of de-Dopplerized signals (every microphone's, source strength at 1 m) is tapered
with a periodic Hann window, each microphone's spectrum compensated line by line for its path's
absorption (a real, zero-phase gain), and the weighted mean of the microphones formed:

    y_b(t) = irfft( sum_m w_m G_m(f) FFT[h x_m](f) ) / sum_m w_m

Blocks a half block apart add back to the signal (the periodic Hann window's halves sum to 1,
common practice: overlap-add, Allen & Rabiner 1977), so the waveform follows the slowly changing
path geometry block by block. A waveform keeps every microphone's own noise: removing the
diagonal of the cross-spectral matrix has no counterpart for a signal, only for its power, so
the waveform's band levels are those of the full map (diagonal kept).
"""

from __future__ import annotations

import numpy as np
import scipy.fft


def hann_taper(n_samples: int) -> np.ndarray:
    """The periodic Hann window of a block: copies ``n_samples // 2`` apart sum to 1."""
    if n_samples < 2 or n_samples % 2:
        raise ValueError(f"a block needs an even number of samples >= 2, not {n_samples}")
    return 0.5 - 0.5 * np.cos(2 * np.pi * np.arange(n_samples) / n_samples)


def focused_block(signals, *, weights=None, line_gain=None, taper=None) -> np.ndarray:
    """One block of the focused waveform.

    Parameters
    ----------
    signals : array, shape (n_mics, n_samples)
        De-Dopplerized signals of one point (Pa at 1 m), source time.
    weights : array, shape (n_mics,), optional
        Microphone weights (0 leaves one out); default all 1.
    line_gain : array, shape (n_mics, n_samples // 2 + 1), optional
        A real amplitude factor per microphone and rfft line (absorption compensation).
    taper : array, shape (n_samples,), optional
        Applied before the transform (:func:`hann_taper` for overlap-add).

    Returns
    -------
    ndarray, shape (n_samples,)
        Pa at 1 m.
    """
    x = np.asarray(signals, float)
    w = np.ones(len(x)) if weights is None else np.asarray(weights, float)
    if taper is not None:
        x = x * np.asarray(taper, float)
    if line_gain is None:
        return w @ x / w.sum()
    spectra = scipy.fft.rfft(x, axis=-1) * np.asarray(line_gain, float)
    return scipy.fft.irfft(w @ spectra / w.sum(), n=x.shape[-1])


def overlap_add(blocks, hop_samples: int, n_samples: int) -> np.ndarray:
    """Add tapered blocks that start ``hop_samples`` apart into one signal of ``n_samples``.

    Parameters
    ----------
    blocks : iterable of array (block_samples,) or None
        Block k starts at sample k * hop_samples; None is silence (a block the data do not
        hold).
    """
    out = np.zeros(n_samples)
    for k, block in enumerate(blocks):
        if block is None:
            continue
        start = k * hop_samples
        stop = min(n_samples, start + len(block))
        if stop > start:
            out[start:stop] += block[:stop - start]
    return out

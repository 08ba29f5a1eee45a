"""What the ground reflection of raised microphones does to the maps, per frequency line: the
expected power of a source's full and diagonal-removed map relative to free field, by which the
chain divides (:func:`flyover.imaging.dedoppler.window_band_powers`)."""

from __future__ import annotations

import numpy as np

from flyover.acoustics.ground import GroundSurface, reflection_transfer
from flyover.imaging import _kernels
from flyover.imaging.reception import ImagePaths


# Floor of the expected map power relative to free field in the ground correction: at most
# +15 dB on a line in a notch of the two-path comb, where the reflection cancels the direct
# sound at every microphone (overhead, at low frequency).
GROUND_POWER_FLOOR = 0.03


def ground_q(image: ImagePaths, frequency_hz, c_m_s: float,
             ground: GroundSurface | None) -> np.ndarray:
    """Q of each microphone's image path (FFT convention) at source frequencies,
    (n_mics, n_freqs): taken at the grid's mean incidence and path length (Q changes little
    across a vehicle grid) and at the received frequency f / (dt/dtau)."""
    surface = ground if ground is not None else GroundSurface("hard")
    f = np.asarray(frequency_hz, float)
    if surface.surface == "hard":
        return np.ones((image.delay_s.shape[1], len(f)), complex)
    received = f[None, :] / image.doppler.mean(axis=0)[:, None]
    return reflection_transfer(received, image.cos_incidence.mean(axis=0)[:, None],
                               image.path_m.mean(axis=0)[:, None], c_m_s, surface)


def ground_gains(image: ImagePaths, q, frequency_hz, duration_s: float,
                 weights) -> tuple[np.ndarray, np.ndarray]:
    """What the reflection of raised microphones does to the maps of a source at the grid
    point: expected power of the full and the diagonal-removed map per frequency line (evenly
    spaced, a band's lines), relative to free field, each (n_points, n_freqs).

    Microphone m receives the reflection as a copy of the de-Dopplerized signal delayed by
    ``delay + rate u`` (u from the window centre) and scaled by ``z_m = ratio Q
    e^(-i 2 pi f delay)``. Over a window (Hann squared weights for power) the expected
    cross-power of microphones m and n is ``1 + z_m W_m + conj(z_n W_n) + z_m conj(z_n)``,
    W the window's mean of the delay's sweep (1 where the delay holds still, near 0 where it
    sweeps many cycles: high frequencies away from overhead); the last term treats m and n as
    sweeping alike (neighbours on the array). Summed with the weights this gives the beam's and
    the diagonal's expected power in O(n_mics) per line. Dividing the maps by them leaves the
    free-field source power for tonal and broadband content alike; the image source's leakage
    into other grid points cancels in source power integration (the unit sources carry it too).
    """
    f = np.asarray(frequency_hz, float)
    if len(f) > 2 and np.ptp(np.diff(f)) > 1e-9 * (f[-1] - f[0]):
        raise ValueError("the ground gains step from line to line: the frequencies must be "
                         "evenly spaced (a band's lines)")
    q = np.broadcast_to(np.asarray(q, complex), (image.ratio.shape[1], len(f)))
    full = np.empty((image.ratio.shape[0], len(f)))
    removed = np.empty_like(full)
    _kernels.ground_power_gains(
        *(np.ascontiguousarray(a, float) for a in (image.ratio, image.delay_s,
                                                   image.delay_rate, q.real, q.imag, f)),
        float(duration_s), np.ascontiguousarray(weights, float), GROUND_POWER_FLOOR, full,
        removed)
    return full, removed


def sweep_mean(x) -> np.ndarray:
    """Mean of ``e^(-i 2 pi x u / T)`` over a window of length T (u from its centre) weighted
    by the squared periodic Hann window: what a delay sweeping x cycles of a line across the
    window leaves of the line's coherent part. cos^4 is 3/8 + cos(2 pi u / T) / 2 +
    cos(4 pi u / T) / 8, so the mean is sinc(x) + 2/3 (sinc(x - 1) + sinc(x + 1)) +
    1/6 (sinc(x - 2) + sinc(x + 2)) (real: the window is even); the compiled ground gains use
    the same."""
    x = np.asarray(x, float)
    return (np.sinc(x) + 2.0 / 3.0 * (np.sinc(x - 1) + np.sinc(x + 1))
            + 1.0 / 6.0 * (np.sinc(x - 2) + np.sinc(x + 2)))


def image_line_gains(image: ImagePaths, frequency_hz, duration_s: float, c_m_s: float,
                     ground: GroundSurface | None) -> tuple[np.ndarray, np.ndarray]:
    """What the ground path adds to a source's lines at each microphone, as the chain's
    de-Dopplerized signal of the source holds it: ``z = ratio Q e^(-i 2 pi f delay)`` (Q at
    the image path's own incidence, length and received frequency) and the window mean of
    its delay's sweep, ``W = sweep_mean(f rate T)`` (:func:`ground_gains` states the model).

    Parameters
    ----------
    image : ImagePaths
        The source's image paths, (n_rows, n_mics): e.g. one source position per band.
    frequency_hz : array_like, shape (n_rows, n_lines)
    duration_s : float
        The window's length T.

    Returns
    -------
    z : complex ndarray, shape (n_rows, n_mics, n_lines)
    sweep : ndarray, shape (n_rows, n_mics, n_lines)
    """
    f = np.asarray(frequency_hz, float)[:, None, :]
    q = reflection_transfer(f / image.doppler[..., None], image.cos_incidence[..., None],
                            image.path_m[..., None], c_m_s,
                            ground if ground is not None else GroundSurface("hard"))
    z = image.ratio[..., None] * q * np.exp(-2j * np.pi * f * image.delay_s[..., None])
    return z, sweep_mean(f * image.delay_rate[..., None] * duration_s)

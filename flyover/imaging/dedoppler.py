"""The moving-source engine: de-Dopplerized delay-and-sum on the vehicle grid, per window.

For grid point g (a body point moved and turned with the track) and microphone m, sound emitted
at tau reaches m at ``t = tau + T`` (closed-form travel time in the pass's uniform wind). The
de-Dopplerized signal of m for g is ``a_gm(tau) = r (1 - M_r)^2 p_m(tau + T) / G`` (r = c T, the
path in the moving air), read from the calibrated channel with 4-point Lagrange interpolation (or
4x band-limited oversampling first).
Band powers are formed in source time from the windowed spectra of these signals:

    full map:      P = sum_band |sum_m w_m A_gm|^2 / (sum w)^2
    diagonal removed:  P = (sum_band |sum_m w_m A_gm|^2 - sum_m w_m^2 sum_band |A_gm|^2)
                           / ((sum w)^2 - sum w^2)

with A the spectrum of a, compensated for the ISO 9613-1 absorption of the measured path at the
frequency the sound has in the air, f / (1 - M_r) (M_r relative to the moving medium; the fixed
microphone then receives f / (dt/dtau)). A point source at g in free field, without
noise, gives back its source signal (pressure at 1 m): the maps are in source strength at 1 m.

Error budget of the interpolation (received frequency f, sample rate fs, nu = f / fs): 4-point
Lagrange is worst at a half-sample delay, where it attenuates by (9 cos(pi nu) - cos(3 pi nu)) / 8:
0.030 dB at 0.1 fs, 0.074 dB at 0.125 fs, 0.15 dB at 0.15 fs, 1.07 dB at 0.25 fs (linear
interpolation: 0.44 dB at 0.1 fs). Averaged over random delays the loss is about half that. The
'sinc' option first oversamples each channel 4x (:func:`oversampled`: a 257-tap Kaiser-windowed
low-pass, flat within 0.001 dB to 0.45 fs and 90 dB down on the images from 0.55 fs), so the
cubic step sees nu / 4: 0.0001 dB at 0.1 fs and 0.030 dB at 0.4 fs (0.04 dB at 0.45 fs).
Bands whose highest received frequency passes ``ACCURATE_FRACTION`` of fs (worst-case loss
0.1 dB) are flagged invalid. Delays between the coarse nodes (every ``node_step``
samples) are linear: with a reception-time curvature V^2 / (c r) of 0.1 1/s the error is below
1e-6 s, a phase error under 0.02 rad at 3 kHz.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft
from scipy.signal import firwin, resample_poly

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import ThirdOctaveBands
from flyover.geometry.propagation import paths_between
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging import _kernels
from flyover.sync.timebase import ArrayClock

OVERSAMPLING = 4
# Anti-imaging filter of the 4x oversampling: cut-off at the original Nyquist frequency (0.25 of
# the new one); 257 taps with Kaiser beta 9 put the transition between 0.45 and 0.55 fs.
_OVERSAMPLING_TAPS = firwin(257, 1.0 / OVERSAMPLING, window=("kaiser", 9.0))
_SUBBAND_POINTS = 8
ACCURATE_FRACTION = {"cubic": 0.135, "sinc": 0.4}  # of fs: worst-case interpolation loss 0.1 dB
MIN_LINES_PER_BAND = 3  # spectral lines a band needs in the window's spectrum


@dataclass(frozen=True)
class ChainSettings:
    """How a window is processed (the same for the measurement and its unit point source).

    Attributes
    ----------
    bands : ThirdOctaveBands
    weights : ndarray, shape (n_mics,)
        Microphone weights (0 excludes a microphone).
    pressure_gain : float
        G: 2 for ground-plate microphones, 1 in free field.
    interpolation : {'cubic', 'sinc'}
    absorption : bool
        Compensate the measured path's ISO 9613-1 absorption.
    node_step : int
        Emission samples between the nodes where delays are computed exactly.
    chunk_points : int
        Grid points processed together (memory: chunk x n_mics x n_samples float32).
    """

    bands: ThirdOctaveBands
    weights: np.ndarray
    pressure_gain: float
    interpolation: str = "cubic"
    absorption: bool = True
    node_step: int = 128
    chunk_points: int = 32


@dataclass(frozen=True)
class ReceptionGeometry:
    """Reception times and amplitude factors of a window, per grid point and microphone.

    Attributes
    ----------
    node_times_s : ndarray, shape (n_nodes,)
        Emission times of the nodes (seconds after the epoch).
    reception_s : ndarray, shape (n_grid, n_mics, n_nodes)
    amplitude : ndarray, shape (n_grid, n_mics, n_nodes)
        r (1 - M_r)^2 / G.
    doppler_center : ndarray, shape (n_grid, n_mics)
        dt/dtau at the window centre (received frequency = emitted frequency / dt/dtau).
    mach_r_center : ndarray, shape (n_grid, n_mics)
        M_r at the window centre (frequency in the air = emitted frequency / (1 - M_r)).
    distance_center_m : ndarray, shape (n_grid, n_mics)
        Emission distance r at the window centre.
    """

    node_times_s: np.ndarray
    reception_s: np.ndarray
    amplitude: np.ndarray
    doppler_center: np.ndarray
    distance_center_m: np.ndarray
    mach_r_center: np.ndarray


def reception_geometry(track: TrackModel, window: Window, points_body_m, mic_enu_m,
                       atmosphere: Atmosphere, pressure_gain: float, *, node_step: int = 128,
                       chunk_points: int = 128) -> ReceptionGeometry:
    """Forward travel times from every grid point to every microphone at the window's nodes.

    Grid points are processed in chunks so that temporaries stay small.
    """
    n_nodes = int(np.ceil((window.n_samples - 1) / node_step)) + 1
    nodes = window.start_s + np.arange(n_nodes) * node_step / window.sample_rate_hz
    times = np.append(nodes, window.center_s)
    pts = np.asarray(points_body_m, float)
    mics = np.asarray(mic_enu_m, float)
    n_g, n_m = len(pts), len(mics)
    reception = np.empty((n_g, n_m, n_nodes))
    amp = np.empty((n_g, n_m, n_nodes))
    doppler = np.empty((n_g, n_m))
    distance = np.empty((n_g, n_m))
    mach = np.empty((n_g, n_m))
    for c0 in range(0, n_g, chunk_points):
        sl = slice(c0, min(c0 + chunk_points, n_g))
        pos = track.body_points_enu(pts[sl], times)          # (n_t, n_c, 3)
        vel = track.body_points_velocity(pts[sl], times)
        geo = paths_between(pos[:, :, None, :], vel[:, :, None, :], mics[None, None],
                            atmosphere.wind_enu_m_s, atmosphere.c_m_s)
        reception[sl] = (times[:-1, None, None] + geo.travel_time_s[:-1]).transpose(1, 2, 0)
        amp[sl] = (geo.distance_m[:-1] * (1.0 - geo.mach_r[:-1]) ** 2
                   / pressure_gain).transpose(1, 2, 0)
        doppler[sl] = geo.doppler_factor[-1]
        distance[sl] = geo.distance_m[-1]
        mach[sl] = geo.mach_r[-1]
    return ReceptionGeometry(nodes, reception, amp, doppler, distance, mach)


def subset(geometry: ReceptionGeometry, points) -> ReceptionGeometry:
    """The geometry of some grid points only (rows), e.g. a region's."""
    return ReceptionGeometry(geometry.node_times_s, geometry.reception_s[points],
                             geometry.amplitude[points], geometry.doppler_center[points],
                             geometry.distance_center_m[points], geometry.mach_r_center[points])


def required_frames(geometry: ReceptionGeometry, clock: ArrayClock,
                    interpolation: str) -> tuple[np.ndarray, int]:
    """The frames a window reads: per microphone the first frame of its recorder (int array
    (n_mics,), the same for all microphones of one recorder), and one frame count for all."""
    pad = 4 if interpolation == "cubic" else 64
    idx = clock.sample_index(geometry.reception_s)
    first = clock.first_frames(idx) - pad
    last = np.ceil(idx.max(axis=(0, 2))) + pad
    return first, int(np.max(last - first)) + 1


def valid_bands(geometry: ReceptionGeometry, window: Window,
                settings: ChainSettings) -> tuple[np.ndarray, list[str]]:
    """Which bands a window can measure, and why not where it cannot.

    A band is invalid when its upper edge, Doppler-shifted as received, passes the
    interpolation's accurate range (``ACCURATE_FRACTION``), or when the window's spectrum has
    fewer than ``MIN_LINES_PER_BAND`` lines in it.
    """
    b = settings.bands
    f_max = b.upper_hz / float(np.min(geometry.doppler_center))
    limit = ACCURATE_FRACTION[settings.interpolation] * window.sample_rate_hz
    lines = np.array([s.stop - s.start for s in band_bins(b, window.n_samples,
                                                          window.sample_rate_hz)])
    reasons = []
    for k in range(len(b)):
        if f_max[k] > limit:
            reasons.append(f"received up to {f_max[k]:.0f} Hz, beyond the {settings.interpolation} "
                           f"interpolation's accurate range ({limit:.0f} Hz)")
        elif lines[k] < MIN_LINES_PER_BAND:
            reasons.append(f"{lines[k]} spectral lines in the window: use a longer window_s")
        else:
            reasons.append("")
    return np.array([r == "" for r in reasons]), reasons


def _absorption_gain(settings: ChainSettings, atmosphere: Atmosphere,
                     geometry: ReceptionGeometry) -> np.ndarray:
    """Amplitude factors (n_grid, n_mics, n_bands) that undo the measured path's absorption.

    Per band, the power gain is averaged over frequencies across the band, each evaluated at the
    frequency the sound has in the air, f / (1 - M_r), over the centre emission distance.
    """
    b = settings.bands
    if not settings.absorption:
        return np.ones(geometry.doppler_center.shape + (len(b),), dtype=np.float32)
    sub = np.geomspace(b.lower_hz, b.upper_hz, _SUBBAND_POINTS, axis=-1)   # (n_b, k)
    f_air = sub[None, None] / (1.0 - geometry.mach_r_center[..., None, None])
    alpha = atmosphere.absorption_db_per_m(f_air)
    power_gain = np.mean(10.0 ** (alpha * geometry.distance_center_m[..., None, None] / 10.0),
                         axis=-1)
    return np.sqrt(power_gain).astype(np.float32)


def oversampled(signals) -> np.ndarray:
    """Signals (..., n) at ``OVERSAMPLING`` times their rate (float32, (..., n * OVERSAMPLING)):
    sample k of the input lands on sample ``OVERSAMPLING * k``; content to 0.45 of the input rate
    keeps its amplitude within 0.001 dB."""
    return resample_poly(np.asarray(signals, np.float32), OVERSAMPLING, 1, axis=-1,
                         window=_OVERSAMPLING_TAPS).astype(np.float32)


def dedopplerized_signals(signals_pa, first_frame, geometry: ReceptionGeometry,
                          clock: ArrayClock, window: Window, settings: ChainSettings,
                          points=slice(None)) -> np.ndarray:
    """The de-Dopplerized signal of every microphone for some grid points.

    Parameters
    ----------
    signals_pa : float32 array (n_mics, n_span)
        Calibrated pressure, row m read from frame ``first_frame[m]`` on.
    first_frame : int array, shape (n_mics,)
    points : slice or index array
        Grid points (rows of the geometry) to compute.

    Returns
    -------
    float32 array (n_points, n_mics, window.n_samples)
    """
    rx = clock.sample_index(geometry.reception_s[points]) - np.asarray(first_frame)[:, None]
    amp = geometry.amplitude[points].astype(np.float32)
    sig = np.asarray(signals_pa, dtype=np.float32)
    if settings.interpolation == "sinc":
        sig = oversampled(sig)
        rx = rx * OVERSAMPLING
    if rx.min() < 1 or rx.max() > sig.shape[1] - 3:
        raise ValueError("reception positions outside the span read for the window")
    out = np.empty((rx.shape[0], rx.shape[1], window.n_samples), dtype=np.float32)
    _kernels.dedoppler_cubic(sig, np.ascontiguousarray(rx), np.ascontiguousarray(amp),
                             settings.node_step, out)
    return out


def window_memory_bytes(n_grid: int, n_mics: int, n_samples: int, n_bands: int,
                        settings: ChainSettings) -> int:
    """Peak memory (bytes) the chain needs for one window: geometry of every grid point and
    microphone at the nodes, one chunk of de-Dopplerized signals and spectra, and the maps."""
    n_nodes = int(np.ceil((n_samples - 1) / settings.node_step)) + 1
    geometry = n_grid * n_mics * (n_nodes * 2 + 2) * 8
    chunk = min(settings.chunk_points, n_grid) * n_mics * n_samples * (4 + 8)
    maps = n_grid * n_bands * 8 * 2
    return int(geometry + chunk + maps)


@dataclass(frozen=True)
class BandPowers:
    """Band powers of a window on grid points (source strength at 1 m, Pa^2).

    Attributes
    ----------
    full : ndarray, shape (n_points, n_bands)
        Delay-and-sum with the whole cross-power (autopowers included).
    diagonal_removed : ndarray, shape (n_points, n_bands)
        With the autopowers removed and the normalisation (sum w)^2 - sum w^2; may be negative.
    """

    full: np.ndarray
    diagonal_removed: np.ndarray


def spectral_weights(n: int) -> tuple[np.ndarray, float]:
    """Hann window (float32) and the factor turning |X_k|^2 into one-sided power per bin."""
    win = np.hanning(n + 1)[:n].astype(np.float32)  # periodic Hann
    return win, 2.0 / (n * float(np.sum(win.astype(float) ** 2)))


def band_bins(bands: ThirdOctaveBands, n: int, sample_rate_hz: float) -> list[slice]:
    """FFT bins [k1, k2) whose frequencies fall in each band (lower edge inclusive)."""
    f = np.fft.rfftfreq(n, 1.0 / sample_rate_hz)
    return [slice(int(np.searchsorted(f, lo)), int(np.searchsorted(f, hi)))
            for lo, hi in zip(bands.lower_hz, bands.upper_hz)]


def signal_band_power(signal, bands: ThirdOctaveBands, sample_rate_hz: float) -> np.ndarray:
    """Band powers (mean square per band) of signals (..., n), as the chain forms them."""
    x = np.asarray(signal)
    win, norm = spectral_weights(x.shape[-1])
    spec = np.abs(np.fft.rfft(x * win, axis=-1)) ** 2 * norm
    return np.stack([spec[..., s].sum(-1) for s in band_bins(bands, x.shape[-1], sample_rate_hz)],
                    axis=-1)


def window_band_powers(signals_pa, first_frame, geometry: ReceptionGeometry,
                       clock: ArrayClock, window: Window, settings: ChainSettings,
                       atmosphere: Atmosphere, *, workers: int = 1) -> BandPowers:
    """Band powers on every grid point of the geometry, with and without diagonal removal.

    ``signals_pa`` (n_mics, n_span) and ``first_frame`` (n_mics,) as in
    :func:`dedopplerized_signals`.
    """
    n_grid = geometry.reception_s.shape[0]
    w = np.asarray(settings.weights, dtype=np.float64)
    used = np.flatnonzero(w > 0)
    w_used = w[used].astype(np.float32)
    s1, s2 = float(w_used.sum()), float((w_used.astype(float) ** 2).sum())
    gain = _absorption_gain(settings, atmosphere, geometry)[:, used]   # (n_g, n_used, n_b)
    sub = subset(geometry, (slice(None), used))
    sig = np.asarray(signals_pa)[used]
    first_used, clock_used = np.asarray(first_frame)[used], clock.take(used)
    win, norm = spectral_weights(window.n_samples)
    bins = band_bins(settings.bands, window.n_samples, window.sample_rate_hz)
    n_b = len(bins)
    full = np.empty((n_grid, n_b))
    diag = np.empty((n_grid, n_b))
    for c0 in range(0, n_grid, settings.chunk_points):
        pts = slice(c0, min(c0 + settings.chunk_points, n_grid))
        a = dedopplerized_signals(sig, first_used, sub, clock_used, window, settings, pts)
        a *= win
        spec = scipy.fft.rfft(a, axis=-1, workers=workers)          # (n_c, n_used, n_f)
        for b, s in enumerate(bins):
            band = spec[:, :, s] * gain[pts, :, b, None]
            beam = np.einsum("m,gmf->gf", w_used, band)
            beam_power = np.sum(beam.real ** 2 + beam.imag ** 2, axis=-1, dtype=np.float64)
            auto = np.einsum("m,gm->g", w_used ** 2,
                             np.sum(band.real ** 2 + band.imag ** 2, axis=-1, dtype=np.float64))
            full[pts, b] = beam_power * norm / s1 ** 2
            diag[pts, b] = (beam_power - auto) * norm / (s1 ** 2 - s2)
    return BandPowers(full, diag)

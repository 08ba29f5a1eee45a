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
The kernels round the fractional read position to 1/4096 sample (tabulated weights): an
added error below 2 pi nu / 8192 of the signal's peak, 1e-4 at 0.135 fs.
Bands whose highest received frequency passes ``ACCURATE_FRACTION`` of fs (worst-case loss
0.1 dB) are flagged invalid. Delays between the coarse nodes (every ``node_step``
samples) are linear: with a reception-time curvature V^2 / (c r) of 0.1 1/s the error is below
1e-6 s, a phase error under 0.02 rad at 3 kHz.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
import scipy.fft
from scipy.signal import firwin, resample_poly

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.ground import GroundSurface, reflection_transfer
from flyover.acoustics.bands import ThirdOctaveBands
from flyover.geometry.propagation import paths_between
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging import _kernels
from flyover.model.constants import CLEAN_LOOP_GAIN, CLEAN_MAX_SOURCES, FUNCTIONAL_EXPONENT
from flyover.model.timebase import ArrayClock

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
    image_mic_enu_m : ndarray, shape (n_mics, 3), or None
        Raised microphones: the microphones mirrored in the ground, whose reflection the chain
        removes per frequency line (:func:`ground_inverse`); None otherwise.
    ground : GroundSurface or None
        The ground under raised microphones (None: hard).
    csm_block_samples : int or None
        Samples per Welch block of the frequency-domain methods (None: a quarter window).
    functional_exponent : float
        nu of functional beamforming.
    clean_loop_gain : float
        Share of each found source CLEAN-SC removes per iteration (small, so that sources a
        main-lobe width apart are told apart: at 0.6 one of two took 1.4 dB of the other's
        power, at 0.3 0.7 dB, at 0.1 0.4 dB for three times the iterations).
    clean_max_sources : int
        Iterations of CLEAN-SC per frequency line at most.
    """

    bands: ThirdOctaveBands
    weights: np.ndarray
    pressure_gain: float
    interpolation: str = "cubic"
    absorption: bool = True
    node_step: int = 128
    chunk_points: int = 32
    image_mic_enu_m: np.ndarray | None = None
    ground: GroundSurface | None = None
    csm_block_samples: int | None = None
    functional_exponent: float = FUNCTIONAL_EXPONENT
    clean_loop_gain: float = CLEAN_LOOP_GAIN
    clean_max_sources: int = CLEAN_MAX_SOURCES


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
    reception_center_s, amplitude_center : ndarray, shape (n_grid, n_mics)
        Reception time and amplitude factor of sound emitted at the window centre.
    image : ImagePaths or None
        The ground reflection's paths at the window centre (raised microphones).
    """

    node_times_s: np.ndarray
    reception_s: np.ndarray
    amplitude: np.ndarray
    doppler_center: np.ndarray
    distance_center_m: np.ndarray
    mach_r_center: np.ndarray
    reception_center_s: np.ndarray
    amplitude_center: np.ndarray
    image: ImagePaths | None = None


@dataclass(frozen=True)
class ImagePaths:
    """The reflected path of raised microphones relative to the direct one, at the window
    centre, as it appears in a de-Dopplerized signal: a copy delayed by ``delay_s`` in emission
    time, scaled by ``ratio`` and filtered by the ground's Q. Arrays (n_grid, n_mics).

    Attributes
    ----------
    delay_s : ndarray
        (T_image - T_direct) / (dt/dtau of the image path).
    ratio : ndarray
        r (1 - M_r)^2 of the direct path over that of the image path.
    doppler : ndarray
        dt/dtau of the image path (Q is taken at the received frequency f / doppler).
    cos_incidence : ndarray
        Cosine of the image path's angle from the ground normal.
    path_m : ndarray
        Straight length of the image path.
    delay_rate : ndarray
        d(delay)/dtau over the window: the delay changes as the elevation does.
    """

    delay_s: np.ndarray
    ratio: np.ndarray
    doppler: np.ndarray
    cos_incidence: np.ndarray
    path_m: np.ndarray
    delay_rate: np.ndarray

    def take(self, points) -> "ImagePaths":
        return ImagePaths(*(getattr(self, f.name)[points] for f in fields(self)))


def reception_geometry(track: TrackModel, window: Window, points_body_m, mic_enu_m,
                       atmosphere: Atmosphere, pressure_gain: float, *, node_step: int = 128,
                       image_mic_enu_m=None, ends_only: bool = False) -> ReceptionGeometry:
    """Forward travel times from every grid point to every microphone at the window's nodes
    and centre (and, for raised microphones, the reflected paths to their images at the
    centre).

    ``ends_only`` keeps the first and the last node alone (where the full geometry has them):
    the frames a window reads and the values at its centre, which is all the
    frequency-domain methods need.
    """
    n_nodes = int(np.ceil((window.n_samples - 1) / node_step)) + 1
    nodes = window.start_s + np.arange(n_nodes) * node_step / window.sample_rate_hz
    if ends_only:
        nodes, n_nodes = nodes[[0, -1]], 2
    times = np.append(nodes, window.center_s)
    pts = np.asarray(points_body_m, float)
    mics = np.asarray(mic_enu_m, float)
    n_g, n_m = len(pts), len(mics)
    # The nodes, then the centre, along the last axis; the geometry holds views of them.
    reception, amp = (np.empty((n_g, n_m, len(times))) for _ in range(2))
    distance, mach, doppler = (np.empty((n_g, n_m)) for _ in range(3))
    pos = track.body_points_enu(pts, times)          # (n_t, n_g, 3)
    vel = track.body_points_velocity(pts, times)
    _kernels.paths_on_grid(pos, vel, mics, np.asarray(atmosphere.wind_enu_m_s, float),
                           float(atmosphere.c_m_s), times, float(pressure_gain), reception, amp,
                           distance, mach, doppler)
    image = None
    if image_mic_enu_m is not None:
        # At the first node, the last node and the centre (times[0], [-2], [-1]).
        at = [0, -2, -1]
        images = np.asarray(image_mic_enu_m, float)
        img = paths_between(pos[at][:, :, None, :], vel[at][:, :, None, :], images[None, None],
                            atmosphere.wind_enu_m_s, atmosphere.c_m_s)
        direct = (reception[..., at] - times[at]).transpose(2, 0, 1)
        delay = (img.travel_time_s - direct) / img.doppler_factor
        line = images[None] - pos[-1][:, None, :]
        length = np.linalg.norm(line, axis=-1)
        image = ImagePaths(delay[2], distance * (1 - mach) ** 2
                           / (img.distance_m[2] * (1 - img.mach_r[2]) ** 2),
                           img.doppler_factor[2], -line[..., 2] / length, length,
                           (delay[1] - delay[0]) / (nodes[-1] - nodes[0]))
    return ReceptionGeometry(nodes, reception[..., :-1], amp[..., :-1], doppler, distance, mach,
                             reception[..., -1], amp[..., -1], image)


def subset(geometry: ReceptionGeometry, points) -> ReceptionGeometry:
    """The geometry of some grid points only (rows), e.g. a region's, or of some microphones
    (``(slice(None), mics)``)."""
    return ReceptionGeometry(geometry.node_times_s, *(
        getattr(geometry, f.name)[points] for f in fields(ReceptionGeometry)[1:-1]),
        None if geometry.image is None else geometry.image.take(points))


def values_at(geometry: ReceptionGeometry, time_s: float):
    """Reception time and amplitude factor (n_points, n_mics) of sound emitted at an instant
    of the window, from the nodes (linear, as the kernel reads them)."""
    nodes = geometry.node_times_s
    k = int(np.clip(np.searchsorted(nodes, time_s) - 1, 0, len(nodes) - 2))
    u = (time_s - nodes[k]) / (nodes[k + 1] - nodes[k])
    rx = geometry.reception_s[..., k] * (1 - u) + geometry.reception_s[..., k + 1] * u
    amp = geometry.amplitude[..., k] * (1 - u) + geometry.amplitude[..., k + 1] * u
    return rx, amp


def required_frames(geometry: ReceptionGeometry, clock: ArrayClock,
                    interpolation: str) -> tuple[np.ndarray, int]:
    """The frames a window reads: per microphone the first frame of its recorder (int array
    (n_mics,), the same for all microphones of one recorder), and one frame count for all."""
    pad = 4 if interpolation == "cubic" else 64
    # Reception time grows with emission time (subsonic: dt/dtau > 0), so the first and last
    # nodes bound every read.
    idx = clock.sample_index(geometry.reception_s[..., [0, -1]])
    first = clock.first_frames(idx) - pad
    last = np.ceil(idx.max(axis=(0, 2))) + pad
    return first, int(np.max(last - first)) + 1


def valid_bands(geometry: ReceptionGeometry, window: Window, settings: ChainSettings, *,
                spectrum_samples: int | None = None) -> tuple[np.ndarray, list[str]]:
    """Which bands a window can measure, and why not where it cannot.

    A band is invalid when its upper edge, Doppler-shifted as received, passes the
    interpolation's accurate range (``ACCURATE_FRACTION``), or when the method's spectra
    (``spectrum_samples`` long: the window, or a frequency-domain method's Welch block) have
    fewer than ``MIN_LINES_PER_BAND`` lines in it.
    """
    b = settings.bands
    f_max = b.upper_hz / float(np.min(geometry.doppler_center))
    limit = ACCURATE_FRACTION[settings.interpolation] * window.sample_rate_hz
    lines = np.array([s.stop - s.start for s in band_bins(
        b, spectrum_samples or window.n_samples, window.sample_rate_hz)])
    reasons = []
    for k in range(len(b)):
        if f_max[k] > limit:
            reasons.append(f"received up to {f_max[k]:.0f} Hz, beyond the {settings.interpolation} "
                           f"interpolation's accurate range ({limit:.0f} Hz)")
        elif lines[k] < MIN_LINES_PER_BAND:
            reasons.append(f"{lines[k]} spectral lines in the window's spectra: use a longer "
                           "window_s")
        else:
            reasons.append("")
    return np.array([r == "" for r in reasons]), reasons


def absorption_gains(settings: ChainSettings, atmosphere: Atmosphere,
                     geometry: ReceptionGeometry) -> np.ndarray:
    """Amplitude factors (n_grid, n_mics, n_bands) that undo the measured path's absorption.

    Per band, the power gain is averaged over frequencies across the band, each evaluated at the
    frequency the sound has in the air, f / (1 - M_r), over the centre emission distance. The
    log of that mean is smooth in M_r and in the distance, so it is tabulated on
    ``_GAIN_TABLE_NODES`` of each over the geometry's range and read bilinearly (within 1e-5
    dB of the direct evaluation, at a small share of its cost).
    """
    b = settings.bands
    if not settings.absorption:
        return np.ones(geometry.doppler_center.shape + (len(b),), dtype=np.float32)
    mach, distance = geometry.mach_r_center, geometry.distance_center_m
    m_nodes = np.linspace(mach.min(), mach.max(), _GAIN_TABLE_NODES)
    d_nodes = np.linspace(distance.min(), distance.max(), _GAIN_TABLE_NODES)
    log_gain = np.log(_band_power_gains(atmosphere, b, m_nodes[:, None], d_nodes[None, :]))
    i, u = _table_position(mach, m_nodes)
    j, v = _table_position(distance, d_nodes)
    u, v = u[..., None], v[..., None]
    table = ((1 - u) * ((1 - v) * log_gain[i, j] + v * log_gain[i, j + 1])
             + u * ((1 - v) * log_gain[i + 1, j] + v * log_gain[i + 1, j + 1]))
    return np.exp(0.5 * table).astype(np.float32)


_GAIN_TABLE_NODES = 33


def _band_power_gains(atmosphere: Atmosphere, bands: ThirdOctaveBands, mach_r, distance_m):
    """The band-mean power gain undoing absorption (..., n_bands) at M_r and distances that
    broadcast together: the definition :func:`absorption_gains` tabulates."""
    sub = np.geomspace(bands.lower_hz, bands.upper_hz, _SUBBAND_POINTS, axis=-1)   # (n_b, k)
    m = np.asarray(mach_r, float)[..., None, None]
    alpha = atmosphere.absorption_db_per_m(sub / (1.0 - m))
    return np.mean(10.0 ** (alpha * np.asarray(distance_m, float)[..., None, None] / 10.0),
                   axis=-1)


def _table_position(x, nodes) -> tuple[np.ndarray, np.ndarray]:
    """Cell index and fraction of values in evenly spaced nodes (a single node: fraction 0)."""
    step = nodes[-1] - nodes[0]
    if step <= 0:
        return np.zeros(np.shape(x), int), np.zeros(np.shape(x))
    t = (x - nodes[0]) / step * (len(nodes) - 1)
    i = np.clip(np.floor(t).astype(int), 0, len(nodes) - 2)
    return i, t - i


# Fractional read positions and weights of the mean over them: Gauss-Legendre on [0, 1].
_DELAY_NODES = tuple(0.5 * a for a in np.polynomial.legendre.leggauss(8) + np.array([[1], [0]]))


def interpolation_response(frequency_hz, sample_rate_hz: float, interpolation: str):
    """The chain's interpolation as a gain on a received line, averaged over the fractional
    read position (which sweeps through [0, 1) many times in a window as the delay changes).

    4-point Lagrange read at ``i + d`` turns ``exp(i 2 pi nu k)`` into ``H(nu, d) exp(i 2 pi nu
    (i + d))`` with ``H = sum_k L_k(d) exp(i 2 pi nu (k - d))``; this is the mean of H over d
    (8-point Gauss-Legendre: H is smooth in d), nu the received frequency over the rate it is
    read at (a quarter of it after the 'sinc' option's oversampling, whose filter is flat
    there). The steering model of
    the point-spread applies it to the beam (coherent part) and its square to the autopowers.

    Parameters
    ----------
    frequency_hz : array_like
        Received frequencies.
    interpolation : {'cubic', 'sinc'}

    Returns
    -------
    complex ndarray, shape of ``frequency_hz``
    """
    nu = np.asarray(frequency_hz, float) / sample_rate_hz
    if interpolation == "sinc":
        nu = nu / OVERSAMPLING
    d, weight = _DELAY_NODES
    lagrange = _kernels.lagrange_weights(d).T                                     # (4, n_d)
    # exp(i 2 pi nu (k - d)) = exp(i 2 pi nu)^k exp(-i 2 pi nu d): 9 exponentials, not 32.
    per_tap = np.exp(-2j * np.pi * nu[..., None] * d) @ (lagrange * weight).T    # (..., 4)
    step = np.exp(2j * np.pi * nu)
    return (per_tap[..., 0] / step + per_tap[..., 1]
            + step * (per_tap[..., 2] + step * per_tap[..., 3]))


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
    return _read_points(_reading(signals_pa, first_frame, clock, settings), geometry, window,
                        settings, points)


def _read_points(reading, geometry: ReceptionGeometry, window: Window, settings: ChainSettings,
                 points) -> np.ndarray:
    """:func:`dedopplerized_signals` from the signals as read (:func:`_reading`), which a
    caller going through a window's points chunk by chunk forms once."""
    sig, origin, scale = reading
    rx = (geometry.reception_s[points] - origin[:, None]) * scale[:, None]
    _check_reads(rx, sig)
    amp = geometry.amplitude[points].astype(np.float32)
    out = np.empty((rx.shape[0], rx.shape[1], window.n_samples), dtype=np.float32)
    _kernels.dedoppler_cubic(sig, np.ascontiguousarray(rx), amp, settings.node_step, out)
    return out


def _reading(signals_pa, first_frame, clock: ArrayClock, settings: ChainSettings):
    """The signals as the kernels read them (float32, oversampled for 'sinc'), and per
    microphone the time of their sample 0 and their samples per second: reception time t is
    read at ``(t - origin) * scale``."""
    sig = np.asarray(signals_pa, dtype=np.float32)
    rate = np.asarray(clock.rate_hz, float)
    origin = clock.sample_time_s(np.asarray(first_frame, float)[:, None])[:, 0]
    if settings.interpolation == "sinc":
        return oversampled(sig), origin, rate * OVERSAMPLING
    return sig, origin, rate


def _check_reads(rx_ends, sig) -> None:
    """Reading positions (any shape, first and last nodes suffice) inside the signals."""
    if rx_ends.min() < 1 or rx_ends.max() > sig.shape[1] - 3:
        raise ValueError("reception positions outside the span read for the window")


def window_memory_bytes(n_grid: int, n_mics: int, n_samples: int, n_bands: int,
                        settings: ChainSettings) -> int:
    """Peak memory (bytes) the chain needs for one window: geometry of every grid point and
    microphone at the nodes, one chunk of de-Dopplerized signals and spectra, and the maps.

    This prices the per-microphone chain (:func:`_per_microphone_band_powers`, used over
    raised microphones): an upper bound for the summed chain, whose chunks hold a few sums per
    point instead of every microphone's signal (0.5 GB at most on the benchmark geometry).
    The workflow's memory requests are calibrated against it (:mod:`flyover.workflow.plan`)."""
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
    residual : ndarray, shape (n_points, n_bands), or None
        A deconvolving method's diagonal-removed residual map (what it left unexplained), in
        the units of conventional beamforming; for a unit source, its conventional map. Source
        power integration adds the residual's integral to the region levels.
    variant : BandPowers or None
        The same maps by a variant of the method that is as defensible (CLEAN-SC's maps before
        its power re-fit): a region level that differs between the two by more than the
        tolerance of :mod:`flyover.imaging.integration` is not given.
    """

    full: np.ndarray
    diagonal_removed: np.ndarray
    residual: np.ndarray | None = None
    variant: "BandPowers | None" = None


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


def _hann_squared_mean(x) -> np.ndarray:
    """Mean of e^(-i 2 pi x u / T) over a window of length T weighted by the square of the
    periodic Hann window (the weight of a windowed band power): real, 1 at x = 0.
    cos^4 = 3/8 + cos(2 pi u / T) / 2 + cos(4 pi u / T) / 8, each term a sinc."""
    return (np.sinc(x) + (2 / 3) * (np.sinc(x - 1) + np.sinc(x + 1))
            + (1 / 6) * (np.sinc(x - 2) + np.sinc(x + 2)))


def ground_gains(image: ImagePaths, q, frequency_hz, duration_s: float,
                 weights) -> tuple[np.ndarray, np.ndarray]:
    """What the reflection of raised microphones does to the maps of a source at the grid
    point: expected power of the full and the diagonal-removed map per frequency line, relative
    to free field, each (n_points, n_freqs).

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
    w = np.asarray(weights, float)[None, :, None]
    z = image.ratio[..., None] * q[None] * np.exp(
        -2j * np.pi * f[None, None, :] * image.delay_s[..., None])
    sweep = _hann_squared_mean(f[None, None, :] * image.delay_rate[..., None] * duration_s)
    s1, s2 = float(w.sum()), float((w ** 2).sum())
    zw = np.sum(w * z * sweep, axis=1)
    beam = s1 ** 2 + 2.0 * s1 * zw.real + np.abs(np.sum(w * z, axis=1)) ** 2
    auto = np.sum(w ** 2 * (1.0 + np.abs(z) ** 2 + 2.0 * (z * sweep).real), axis=1)
    full = beam / s1 ** 2
    removed = (beam - auto) / (s1 ** 2 - s2)
    return (np.maximum(full, GROUND_POWER_FLOOR), np.maximum(removed, GROUND_POWER_FLOOR))


def window_band_powers(signals_pa, first_frame, geometry: ReceptionGeometry,
                       clock: ArrayClock, window: Window, settings: ChainSettings,
                       atmosphere: Atmosphere, *, workers: int = 1) -> BandPowers:
    """Band powers on every grid point of the geometry, with and without diagonal removal.

    ``signals_pa`` (n_mics, n_span) and ``first_frame`` (n_mics,) as in
    :func:`dedopplerized_signals`. In free field and over ground plates the microphones are
    summed before any spectrum is taken (:func:`_summed_band_powers`); under raised
    microphones, whose reflection is undone per line and microphone, every microphone's
    spectrum is formed (:func:`_per_microphone_band_powers`).
    """
    w = np.asarray(settings.weights, dtype=np.float64)
    used = np.flatnonzero(w > 0)
    chain = _UsedChain(
        np.asarray(signals_pa)[used], np.asarray(first_frame)[used],
        subset(geometry, (slice(None), used)) if len(used) < len(w) else geometry,
        clock.take(used), w[used],
        absorption_gains(settings, atmosphere, geometry)[:, used])
    form = _per_microphone_band_powers if chain.geometry.image is not None else \
        _summed_band_powers
    return form(chain, window, settings, atmosphere, workers=workers)


@dataclass(frozen=True)
class _UsedChain:
    """The used microphones' part of a window: signals, first frames, geometry, clock,
    weights (n_used,) and absorption gains (n_grid, n_used, n_bands)."""

    signals: np.ndarray
    first_frame: np.ndarray
    geometry: ReceptionGeometry
    clock: ArrayClock
    weights: np.ndarray
    gain: np.ndarray


# Largest error, relative to the largest gain, of the low-rank form of the weighted absorption
# gains that the summed chain applies (3e-4: 0.003 dB on a single gain; a focused beam's error
# is far smaller). Over 35 m to 5 kHz two terms meet it (1.5e-4), three give 4e-6.
GAIN_TOLERANCE = 3e-4


def gain_terms(weighted) -> tuple[np.ndarray, np.ndarray]:
    """The weighted gains (n_grid, n_mics, n_bands) as ``sum_k coef[g, k, m] basis[k, b]``
    with the fewest band profiles ``basis`` (orthonormal rows, shared by every point and
    microphone: the principal directions of all their band profiles) that keep every gain
    within ``GAIN_TOLERANCE`` of the largest.

    Returns
    -------
    coef : float32 array (n_grid, n_terms, n_mics)
    basis : ndarray, shape (n_terms, n_bands)
    """
    flat = weighted.reshape(-1, weighted.shape[-1])
    # The principal directions from the n_bands x n_bands Gram matrix: far cheaper than an SVD
    # of the tall matrix, and exact enough for the leading terms kept.
    _, vectors = np.linalg.eigh(flat.T @ flat)
    directions = vectors[:, ::-1].T
    top = np.abs(flat).max()
    for k in range(1, len(directions) + 1):
        projected = flat @ directions[:k].T
        if np.abs(projected @ directions[:k] - flat).max() <= GAIN_TOLERANCE * top:
            break
    coef = projected.reshape(weighted.shape[:2] + (k,)).transpose(0, 2, 1)
    return np.ascontiguousarray(coef, np.float32), directions[:k]


def _summed_band_powers(chain: _UsedChain, window: Window, settings: ChainSettings,
                        atmosphere: Atmosphere, *, workers: int = 1) -> BandPowers:
    """The maps with the microphones summed in the time domain, in source time at a reduced
    rate where the bands allow it.

    The beam of band b at point g, ``sum_m w_m G_gm(b) A_gm(f)``, needs the weighted gains
    ``w_m G_gm(b)`` (n_mics x n_bands) per point; in a low-rank form ``sum_k U_gk(m) V_k(b)``
    (:func:`gain_terms`), the beam is ``sum_k V_k(b) F_gk(f)`` with F_gk the spectrum of
    ``sum_m U_gk(m) a_gm`` (:func:`_kernels.dedoppler_summed`): a few spectra per point
    instead of one per microphone.

    The de-Dopplerized sums are formed at 1/q of the recording rate (:func:`decimation`):
    the channels are first low-passed, flat to the highest band's top as received, so that
    nothing folds into the bands; the interpolation still reads them at the full rate.

    The autopowers ``sum_m w_m^2 G_gm(b)^2 P_gm(b)`` need each channel's band power P_gm(b)
    for every point. Point g's de-Dopplerized signal of microphone m is a reference point r's
    one, rescaled and time-warped: ``a_gm(tau) = rho a_rm(s tau + c)`` with ``rho = A_gm /
    A_rm`` and ``s = (dt/dtau)_gm / (dt/dtau)_rm`` at the window centre, so its band [f1, f2)
    holds the power of r's band [f1 / s, f2 / s), times rho^2. The reference (the middle row
    of the geometry) is de-Dopplerized once, its spectra's cumulative power read at the
    warped band edges.
    """
    geo = chain.geometry
    n_grid, n_mics = geo.doppler_center.shape
    w = chain.weights
    s1, s2 = float(w.sum()), float((w ** 2).sum())
    q, pass_hz, stop_hz = decimation(settings, geo, window.sample_rate_hz)
    signals = chain.signals if q == 1 else lowpassed(chain.signals, pass_hz, stop_hz,
                                                     window.sample_rate_hz)
    chain = _UsedChain(signals, chain.first_frame, geo, chain.clock, w, chain.gain)
    n_out, rate_hz = -(-window.n_samples // q), window.sample_rate_hz / q
    win, norm = spectral_weights(n_out)
    bins = band_bins(settings.bands, n_out, rate_hz)
    n_b = len(bins)
    weighted = w[None, :, None] * chain.gain.astype(float)              # (n_g, n_m, n_b)
    coef, basis = gain_terms(weighted)                           # (n_g, k, n_m), (k, n_b)
    k = len(basis)
    # The reference's per-microphone band powers, cumulative over the lines.
    ref = n_grid // 2
    each = np.eye(n_mics, dtype=np.float32)[None]
    reading = _reading(signals, chain.first_frame, chain.clock, settings)
    a_ref = _dedopplerized_sums(reading, geo, settings, [ref], each, q, n_out)[0] * win
    power = np.abs(scipy.fft.rfft(a_ref, axis=-1, workers=workers)) ** 2 * norm
    cumulative = np.concatenate([np.zeros((n_mics, 1)), np.cumsum(power, axis=-1)], axis=-1)
    amp = geo.amplitude_center
    rho2 = (amp / amp[ref]) ** 2
    warp = geo.doppler_center / geo.doppler_center[ref]                  # s, (n_g, n_m)
    # Lines below a warped edge x: ceil(x / spacing), as band_bins counts them; each distinct
    # band edge once (adjacent bands share theirs), read from the flattened cumulative sums.
    edges, at = np.unique(np.concatenate([settings.bands.lower_hz, settings.bands.upper_hz]),
                          return_inverse=True)
    count = np.multiply.outer(1.0 / (warp * (rate_hz / n_out)), edges)    # (n_g, n_m, n_e)
    np.ceil(count, out=count)
    np.clip(count, 0, power.shape[-1], out=count)
    below = cumulative.ravel()[count.astype(np.intp)
                               + (np.arange(n_mics) * cumulative.shape[1])[None, :, None]]
    band_power = below[..., at[n_b:]] - below[..., at[:n_b]]
    autos = np.einsum("gmb,gmb->gb", weighted ** 2 * rho2[..., None], band_power)
    full = np.empty((n_grid, n_b))
    diag = np.empty((n_grid, n_b))
    chunk = max(1, settings.chunk_points * n_mics * q // (2 * k))
    for c0 in range(0, n_grid, chunk):
        pts = slice(c0, min(c0 + chunk, n_grid))
        sums = _dedopplerized_sums(reading, geo, settings, pts, coef[pts], q, n_out)
        spec = scipy.fft.rfft(sums * win, axis=-1, workers=workers)      # (n_c, k, n_f)
        beam_power = np.empty((spec.shape[0], n_b))
        for b, sl in enumerate(bins):
            beam = np.einsum("k,gkf->gf", basis[:, b].astype(np.complex64), spec[:, :, sl])
            beam_power[:, b] = (beam.real ** 2 + beam.imag ** 2).sum(-1, dtype=float) * norm
        full[pts] = beam_power / s1 ** 2
        diag[pts] = (beam_power - autos[pts]) / (s1 ** 2 - s2)
    return BandPowers(full, diag)


def _dedopplerized_sums(reading, geo: ReceptionGeometry, settings: ChainSettings, points, coef,
                        q: int, n_out: int) -> np.ndarray:
    """Weighted sums over microphones (n_points, n_sums, n_out) of the de-Dopplerized
    signals of some grid points, every q-th emission sample, from the signals as read
    (:func:`_reading`)."""
    sig, origin, scale = reading
    # Reception grows with emission time: the first and last nodes bound every read.
    _check_reads((geo.reception_s[points][..., [0, -1]] - origin[:, None]) * scale[:, None], sig)
    out = np.empty((len(coef), coef.shape[1], n_out), dtype=np.float32)
    _kernels.dedoppler_summed(sig, geo.reception_s[points], origin, scale,
                              geo.amplitude[points], coef, settings.node_step // q, out)
    return out


# Rate reductions of the summed chain, largest first (each must divide the node step).
DECIMATIONS = (4, 2)
# Margins: dt/dtau over the window beyond its centre values, and the low-pass's transition.
_DOPPLER_MARGIN = 0.03
_MIN_TRANSITION = 1.1


def decimation(settings: ChainSettings, geometry: ReceptionGeometry,
               sample_rate_hz: float) -> tuple[int, float, float]:
    """The rate reduction q of the summed chain for a window, and its low-pass edges (Hz).

    Source-time content to the highest band's top f_t must stay, and what lies above must
    fold, at the reduced rate fs / q, above f_t: so the channels, as received (frequency over
    dt/dtau), keep everything to ``f_t / min(dt/dtau)`` and stop from ``(fs / q - f_t) /
    max(dt/dtau)``. The largest q of ``DECIMATIONS`` with room for the transition is taken;
    1 (no low-pass) for the 'sinc' option, whose reach the low-pass would cut.

    Returns
    -------
    q : int
    pass_hz, stop_hz : float
        The low-pass edges (nan for q = 1).
    """
    if settings.interpolation != "cubic":
        return 1, np.nan, np.nan
    top = float(settings.bands.upper_hz[-1])
    d = geometry.doppler_center
    pass_hz = top / (float(d.min()) * (1 - _DOPPLER_MARGIN))
    for q in DECIMATIONS:
        stop_hz = (sample_rate_hz / q - top) / (float(d.max()) * (1 + _DOPPLER_MARGIN))
        if settings.node_step % q == 0 and _MIN_TRANSITION * pass_hz <= stop_hz:
            return q, pass_hz, min(stop_hz, 0.5 * sample_rate_hz)
    return 1, np.nan, np.nan


def lowpassed(signals, pass_hz: float, stop_hz: float, sample_rate_hz: float) -> np.ndarray:
    """Channels (n_mics, n) low-passed without phase: gain 1 to ``pass_hz``, a raised-cosine
    roll-off to 0 at ``stop_hz`` (float32, same shape). Applied by FFT over the channel
    extended by its mirror image at both ends, which keeps the ends free of wrap-around;
    the first and last few periods of the transition width stay approximate (the chain reads
    them only at the window's tapered ends)."""
    x = np.asarray(signals, np.float32)
    n = x.shape[-1]
    ext = min(n - 1, max(1, int(8 * sample_rate_hz / (stop_hz - pass_hz))))
    padded = np.concatenate([x[:, ext:0:-1], x, x[:, -2:-ext - 2:-1]], axis=-1)
    size = scipy.fft.next_fast_len(padded.shape[-1], real=True)
    f = np.fft.rfftfreq(size, 1.0 / sample_rate_hz)
    t = np.clip((f - pass_hz) / (stop_hz - pass_hz), 0.0, 1.0)
    gain = 0.5 * (1.0 + np.cos(np.pi * t))
    y = scipy.fft.irfft(scipy.fft.rfft(padded, size, axis=-1) * gain, size, axis=-1)
    return y[:, ext:ext + n].astype(np.float32)


def _per_microphone_band_powers(chain: _UsedChain, window: Window, settings: ChainSettings,
                                atmosphere: Atmosphere, *, workers: int = 1) -> BandPowers:
    """The maps from every microphone's spectrum per point: the beam and the autopowers per
    line, with the ground reflection of raised microphones undone per line (the reference
    the summed chain is tested against in free field)."""
    sub = chain.geometry
    n_grid = sub.reception_s.shape[0]
    w_used = chain.weights.astype(np.float32)
    s1, s2 = float(w_used.sum()), float((w_used.astype(float) ** 2).sum())
    gain = chain.gain
    win, norm = spectral_weights(window.n_samples)
    bins = band_bins(settings.bands, window.n_samples, window.sample_rate_hz)
    freqs = np.fft.rfftfreq(window.n_samples, 1.0 / window.sample_rate_hz)
    q = (None if sub.image is None else
         ground_q(sub.image, freqs, atmosphere.c_m_s, settings.ground))
    n_b = len(bins)
    full = np.empty((n_grid, n_b))
    diag = np.empty((n_grid, n_b))
    reading = _reading(chain.signals, chain.first_frame, chain.clock, settings)
    for c0 in range(0, n_grid, settings.chunk_points):
        pts = slice(c0, min(c0 + settings.chunk_points, n_grid))
        a = _read_points(reading, sub, window, settings, pts)
        a *= win
        spec = scipy.fft.rfft(a, axis=-1, workers=workers)          # (n_c, n_used, n_f)
        for b, s in enumerate(bins):
            band = spec[:, :, s] * gain[pts, :, b, None]
            beam = np.einsum("m,gmf->gf", w_used, band)
            beam_power = (beam.real ** 2 + beam.imag ** 2).astype(np.float64)     # (n_c, n_f)
            auto = np.einsum("m,gmf->gf", w_used ** 2,
                             (band.real ** 2 + band.imag ** 2).astype(np.float64))
            if q is None:
                full[pts, b] = beam_power.sum(-1) * norm / s1 ** 2
                diag[pts, b] = (beam_power - auto).sum(-1) * norm / (s1 ** 2 - s2)
                continue
            g_full, g_removed = ground_gains(sub.image.take(pts), q[:, s], freqs[s],
                                             window.n_samples / window.sample_rate_hz, w_used)
            full[pts, b] = (beam_power / g_full).sum(-1) * norm / s1 ** 2
            diag[pts, b] = ((beam_power - auto) / g_removed).sum(-1) * norm / (s1 ** 2 - s2)
    return BandPowers(full, diag)

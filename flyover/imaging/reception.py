"""Where and when sound from the vehicle grid reaches the array, per window: reception times,
amplitude factors and Doppler of every grid point and microphone (and of the ground's image
paths under raised microphones), the frames a window reads, which bands it can measure, and the
absorption its chain compensates."""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import ThirdOctaveBands
from flyover.geometry.propagation import paths_between
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging import _kernels
from flyover.model.timebase import ArrayClock
from flyover.imaging.chain import ChainSettings, band_bins


_SUBBAND_POINTS = 8


ACCURATE_FRACTION = {"cubic": 0.135, "sinc": 0.4}  # of fs: worst-case interpolation loss 0.1 dB


MIN_LINES_PER_BAND = 3  # spectral lines a band needs in the window's spectrum


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


def absorption_line_gains(atmosphere: Atmosphere, frequency_hz,
                          geometry: ReceptionGeometry, point: int = 0) -> np.ndarray:
    """Amplitude factors (n_mics, n_lines) that undo the measured path's absorption at single
    frequencies (source time) for one grid point: each line at the frequency the sound has in
    the air, f / (1 - M_r), over the centre emission distance (the narrowband counterpart of
    :func:`absorption_gains`)."""
    f = np.asarray(frequency_hz, float)
    mach = geometry.mach_r_center[point][:, None]
    distance = geometry.distance_center_m[point][:, None]
    alpha = atmosphere.absorption_db_per_m(f[None, :] / (1.0 - mach))
    return 10.0 ** (alpha * distance / 20.0)


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

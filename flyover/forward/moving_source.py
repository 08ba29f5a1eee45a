"""Synthetic flyovers: exact received pressures of moving point sources on a ground array.

The source model is the design notes' moving monopole: ``p_m(t) = G s(tau) / (r (1 - M_r)^2)``
with ``t = tau + T``, T the travel time in a uniformly moving medium and r = c T the length of
the path in the moving air (a source may carry another exponent than 2), plus ISO 9613-1
absorption along each path applied as a slowly varying filter at the frequency the sound has in
the air (the received frequency without wind).
Reception samples are mapped to emission times by Newton iterations on the closed-form forward
travel time (on a coarse grid, then interpolated), and broadband source signals are evaluated at
those times with a 32-tap Kaiser-windowed sinc, whose error is below -60 dB for content below
0.4 fs (checked in the tests).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import CubicSpline

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import ThirdOctaveBands
from flyover.acoustics.ground import GroundSurface, reflection_transfer
from flyover.forward import _rotor, _sinc, _spline
from flyover.geometry.frames import enu_from_body_matrix
from flyover.geometry.propagation import emission_times_s
from flyover.geometry.track import TrackModel
from flyover.model.constants import P0_PA
from flyover.model.errors import require

BROADBAND_MAX_FRACTION_FS = 0.4


@dataclass(frozen=True)
class Tone:
    """A tone of the source signal: frequency (Hz) and level (dB re 20 uPa, rms, at 1 m)."""

    frequency_hz: float
    level_db: float
    phase_rad: float = 0.0


@dataclass(frozen=True)
class Broadband:
    """Gaussian broadband noise with a straight one-third-octave spectrum.

    The band level at 1 m is ``level_1khz_db + slope_db_per_octave * log2(f / 1 kHz)``, between
    ``min_hz`` and ``max_hz`` (no content outside).
    """

    level_1khz_db: float
    slope_db_per_octave: float = 0.0
    min_hz: float = 40.0
    max_hz: float = 8000.0

    def psd_pa2_per_hz(self, frequency_hz) -> np.ndarray:
        """One-sided power spectral density (Pa^2/Hz) at 1 m."""
        f = np.asarray(frequency_hz, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            band_db = self.level_1khz_db + self.slope_db_per_octave * np.log2(f / 1000.0)
            psd = P0_PA ** 2 * 10.0 ** (band_db / 10.0) / ((10 ** 0.05 - 10 ** -0.05) * f)
        return np.where((f >= self.min_hz) & (f <= self.max_hz), psd, 0.0)


@dataclass(frozen=True)
class DipoleLike:
    """A known directivity: mean-square gain ``(1 - w) + w (e . a)^2`` in direction ``e``.

    ``e`` is the unit vector from the source at emission to the receiver, in body axes; ``a``
    the pattern's axis (normalised here); ``w`` the dipole fraction. The gain is 1 (0 dB) along
    the axis and ``1 - w`` across it, the same at every frequency. It shapes levels only: the
    pressure keeps its sign on both sides of the axis (a level pattern, not a true dipole's
    phase).
    """

    axis_body: tuple[float, float, float]
    dipole_fraction: float

    def __post_init__(self):
        require(0.0 <= self.dipole_fraction < 1.0, "dipole fraction out of range",
                "directivity.dipole_fraction", "0 <= w < 1", f"{self.dipole_fraction}")
        require(np.linalg.norm(self.axis_body) > 0, "directivity axis is zero",
                "directivity.axis_body", "a non-zero vector in body axes", f"{self.axis_body}")

    def gain(self, direction_body) -> np.ndarray:
        """Mean-square gain for directions (..., 3) in body axes (normalised here)."""
        e = np.asarray(direction_body, float)
        a = np.asarray(self.axis_body, float) / np.linalg.norm(self.axis_body)
        cos = e @ a / np.linalg.norm(e, axis=-1)
        return (1.0 - self.dipole_fraction) + self.dipole_fraction * cos ** 2

    def gain_db(self, direction_body) -> np.ndarray:
        return 10.0 * np.log10(self.gain(direction_body))


@dataclass(frozen=True)
class ShaftSpeed:
    """A shaft's speed against time: rpm at knots (seconds after the pass epoch), linear between
    and held beyond the ends."""

    time_s: tuple[float, ...]
    rpm: tuple[float, ...]

    @classmethod
    def constant(cls, rpm: float) -> "ShaftSpeed":
        return cls((0.0,), (float(rpm),))

    def rpm_at(self, time_s) -> np.ndarray:
        return np.interp(np.asarray(time_s, float), self.time_s, self.rpm)

    def revolutions(self, time_s) -> np.ndarray:
        """Shaft angle in revolutions since t = 0: the exact integral of the piecewise-linear
        speed (so the phase of every order is exact)."""
        t = np.asarray(time_s, float)
        knots = np.asarray(self.time_s, float)
        rps = np.asarray(self.rpm, float) / 60.0
        if len(knots) == 1:
            return rps[0] * t
        # The speed held beyond the knots, on a grid that reaches past every time.
        grid = np.concatenate([[min(knots[0], 0.0, t.min()) - 1.0], knots,
                               [max(knots[-1], 0.0, t.max()) + 1.0]])
        speed = np.interp(grid, knots, rps)
        cum = np.concatenate([[0.0], np.cumsum(np.diff(grid) * 0.5 * (speed[1:] + speed[:-1]))])
        zero = _rotor.shaft_revolutions(np.zeros(1), grid, speed, cum, 0.0)[0]
        return _rotor.shaft_revolutions(t.ravel(), grid, speed, cum, zero).reshape(t.shape)


@dataclass(frozen=True)
class RotorTones:
    """A rotor's blade-passing harmonics, locked to its shaft.

    Harmonic k sits at shaft order k x ``blades``: ``A_k cos(2 pi k B rev(tau) + phi_k + j(tau))``
    with ``rev`` the shaft's revolutions, rms level ``levels_db[k - 1]`` at 1 m, a random start
    phase and a slow random phase jitter j of rms ``jitter_deg`` (blade-to-blade loading
    changes), both from ``seed``.
    """

    blades: int
    speed: ShaftSpeed
    levels_db: tuple[float, ...]
    jitter_deg: float = 0.0
    motor: int = 1
    seed: int = 0

    def frequency_hz(self, k: int, time_s=0.0) -> np.ndarray:
        """Frequency of harmonic k at emission times."""
        return k * self.blades * self.speed.rpm_at(time_s) / 60.0


@dataclass(frozen=True)
class PointSource:
    """A point source fixed to the vehicle.

    Attributes
    ----------
    name : str
    body_m : tuple of 3 floats
        Position in body axes (x forward, y starboard, z down), m.
    tones : tuple of Tone
    broadband : Broadband or None
    seed : int
        Seed of the broadband noise (and nothing else), so sources are independent.
    directivity : DipoleLike or None
        Its level pattern; None radiates the same in every direction. Tone and band levels
        hold along the pattern's axis.
    rotor : RotorTones or None
        Blade-passing harmonics locked to a shaft whose speed may change.
    convective_exponent : float
        n in ``p = G s / (r (1 - M_r)^n)``: 2 for the design notes' monopole (and, with s the
        force's rate of change, a moving point force), 1 for the free-space Green's function of
        a mass source, 3 for a compact quadrupole (after Lowson 1965, from memory).
    """

    name: str
    body_m: tuple[float, float, float]
    tones: tuple[Tone, ...] = ()
    broadband: Broadband | None = None
    seed: int = 0
    directivity: DipoleLike | None = None
    rotor: RotorTones | None = None
    convective_exponent: float = 2.0

    def band_power_pa2(self, bands: ThirdOctaveBands, gain_db: float = 0.0) -> np.ndarray:
        """Expected mean-square pressure at 1 m in each band (Pa^2), tones and broadband."""
        power = np.zeros(len(bands))
        for tone in self.tones:
            inside = (bands.lower_hz <= tone.frequency_hz) & (tone.frequency_hz < bands.upper_hz)
            power[inside] += P0_PA ** 2 * 10.0 ** (tone.level_db / 10.0)
        if self.rotor is not None:   # at the speed of t = 0
            for k, level in enumerate(self.rotor.levels_db, start=1):
                f = float(self.rotor.frequency_hz(k))
                inside = (bands.lower_hz <= f) & (f < bands.upper_hz)
                power[inside] += P0_PA ** 2 * 10.0 ** (level / 10.0)
        if self.broadband is not None:
            for k, (lo, hi) in enumerate(zip(bands.lower_hz, bands.upper_hz)):
                f = np.geomspace(lo, hi, 513)
                power[k] += np.trapezoid(self.broadband.psd_pa2_per_hz(f), f)
        return power * 10.0 ** (gain_db / 10.0)


class SourceSignal:
    """The signal s(tau) of one source (pressure at 1 m, at rest), evaluable at any time.

    Broadband noise is generated on a uniform grid covering [start_s, end_s] and evaluated with
    band-limited interpolation; tones are evaluated exactly.

    Parameters
    ----------
    source : PointSource
    sample_rate_hz : float
    start_s, end_s : float
        Emission-time span the signal must cover, seconds after the pass epoch.
    gain_db : float
        Level offset applied to every component (e.g. a power setting).
    """

    def __init__(self, source: PointSource, sample_rate_hz: float, start_s: float, end_s: float,
                 gain_db: float = 0.0):
        self.source = source
        self.fs = float(sample_rate_hz)
        self.gain = 10.0 ** (gain_db / 20.0)
        margin = 2 * _sinc.SINC_HALF_WIDTH / self.fs
        self.start_s = start_s - margin
        n = int(np.ceil((end_s + margin - self.start_s) * self.fs)) + 1
        self.samples = np.zeros(n)
        if source.broadband is not None:
            bb = source.broadband
            require(bb.max_hz <= BROADBAND_MAX_FRACTION_FS * self.fs, "broadband too wide",
                    f"source {source.name}", f"max_hz <= {BROADBAND_MAX_FRACTION_FS} fs "
                    f"= {BROADBAND_MAX_FRACTION_FS * self.fs:.0f} Hz", f"{bb.max_hz}")
            rng = np.random.default_rng(source.seed)
            spec = np.fft.rfft(rng.standard_normal(n))
            f = np.fft.rfftfreq(n, 1.0 / self.fs)
            spec *= np.sqrt(bb.psd_pa2_per_hz(f) * self.fs / 2.0)
            self.samples = np.fft.irfft(spec, n) * self.gain
        self._table = _sinc.sinc_table()

    def __call__(self, tau_s) -> np.ndarray:
        tau = np.asarray(tau_s, dtype=float)
        flat = tau.ravel()
        out = np.zeros_like(flat)
        if self.source.broadband is not None:
            pos = (flat - self.start_s) * self.fs
            require(pos.min() >= _sinc.SINC_HALF_WIDTH and
                    pos.max() <= len(self.samples) - _sinc.SINC_HALF_WIDTH - 1,
                    "emission time outside the generated signal", f"source {self.source.name}")
            out += _sinc.interp_sinc(self.samples, pos, self._table,
                                        _sinc.SINC_HALF_WIDTH, _sinc.SINC_TABLE_STEPS)
        for tone in self.source.tones:
            amp = np.sqrt(2.0) * P0_PA * 10.0 ** (tone.level_db / 20.0) * self.gain
            out += amp * np.cos(2 * np.pi * tone.frequency_hz * flat + tone.phase_rad)
        rotor = self.source.rotor
        if rotor is not None:
            rev = rotor.speed.revolutions(flat)
            rng = np.random.default_rng(rotor.seed)
            n_h = len(rotor.levels_db)
            starts, rates, phases = np.empty(n_h), np.empty((n_h, 4)), np.empty((n_h, 4))
            for h in range(n_h):     # the draws in the order they were always made
                starts[h] = rng.uniform(0.0, 2 * np.pi)
                rates[h], phases[h] = rng.uniform(0.3, 3.0, 4), rng.uniform(0, 2 * np.pi, 4)
            amps = np.sqrt(2.0) * P0_PA * 10.0 ** (np.asarray(rotor.levels_db) / 20.0) * self.gain
            # Jitter: four slow sinusoids (0.3-3 Hz) of random phase, rms jitter_deg.
            _rotor.add_rotor_harmonics(out, flat, rev, rotor.blades * np.arange(1.0, n_h + 1),
                                       amps, starts, rates, phases,
                                       np.deg2rad(rotor.jitter_deg) / np.sqrt(2.0) / 2.0)
        return out.reshape(tau.shape)


@dataclass(frozen=True)
class Propagator:
    """Everything about the medium and the receivers that a simulation needs.

    Raised microphones over the ground also receive the reflection: ``image_mic_enu_m`` (the
    microphones mirrored in the ground, (n_mics, 3)) with the ground's reflection coefficient
    (:mod:`flyover.acoustics.ground`); None for ground-plate or free-field microphones.
    """

    mic_enu_m: np.ndarray
    atmosphere: Atmosphere
    pressure_gain: float
    absorption: bool = True
    image_mic_enu_m: np.ndarray | None = None
    ground: GroundSurface | None = None


def emission_directions_body(track: TrackModel, body_m, mic_enu_m, tau_s) -> np.ndarray:
    """Unit vectors from a body point at emission times to each microphone, in body axes.

    ``tau_s`` has shape (n_mics, n); returns (n_mics, n, 3).
    """
    tau = np.asarray(tau_s, float)
    pos = track.body_points_enu(np.asarray(body_m, float)[None, :], tau.ravel())
    line = np.asarray(mic_enu_m, float)[:, None, :] - pos.reshape(tau.shape + (3,))
    enu_from_body = enu_from_body_matrix(track.rotation(tau.ravel()))
    body = np.einsum("nji,nj->ni", enu_from_body, line.reshape(-1, 3))
    return (body / np.linalg.norm(body, axis=1, keepdims=True)).reshape(tau.shape + (3,))


FILTER_BLOCK = 2048   # samples of the blocks a slowly time-varying filter is applied over


def _block_count(n: int, block: int = FILTER_BLOCK) -> int:
    """How many half-overlapping blocks :func:`_filter_blocks` cuts a signal of ``n`` into
    (padded by a block before and a block and a half after)."""
    return (n + block + block // 2) // (block // 2) + 1


def _block_centres(n: int, block: int = FILTER_BLOCK) -> np.ndarray:
    """Sample indices (into a signal of ``n``, clipped to it) of the blocks' centres in
    :func:`_filter_blocks`."""
    hop = block // 2
    return np.clip(np.arange(_block_count(n, block)) * hop + hop - block, 0, n - 1)


def _filter_blocks(signal, gains, block: int = FILTER_BLOCK):
    """Apply a slowly time-varying linear filter block by block.

    ``gains`` (n_blocks, n_freqs), real or complex (numpy FFT convention, frequencies
    ``rfftfreq(block)``), one row per block centred on :func:`_block_centres`. sqrt-Hann
    analysis and synthesis windows at 50 % overlap reconstruct exactly at unit gain.
    """
    n = len(signal)
    hop = block // 2
    pad = np.concatenate([np.zeros(block), signal, np.zeros(block + hop)])
    n_blocks = _block_count(n, block)
    if np.shape(gains)[0] != n_blocks:
        raise ValueError(f"{np.shape(gains)[0]} rows of gains for {n_blocks} blocks")
    idx = np.arange(n_blocks)[:, None] * hop + np.arange(block)[None, :]
    win = np.sqrt(np.hanning(block + 1)[:block])
    spec = np.fft.rfft(pad[idx] * win, axis=1)
    spec = spec * gains
    frames = np.fft.irfft(spec, block, axis=1) * win
    out = np.zeros(len(pad))
    np.add.at(out, idx.ravel(), frames.ravel())
    return out[block:block + n]


def _at_samples(kc, values, n: int) -> np.ndarray:
    """The cubic spline (scipy's, not-a-knot) through ``values`` (n_rows, len(kc)) at the
    evenly spaced sample indices ``kc``, at samples 0 to n - 1: (n_rows, n)."""
    c = CubicSpline(kc, values, axis=1).c
    return _spline.cubic_at_samples(np.ascontiguousarray(c), int(kc[0]), int(kc[1] - kc[0]), n)


def _path_pressure(track: TrackModel, signal: SourceSignal, body, mic_enu_m, prop: Propagator,
                   fs, tc, kc, k, *, reflected: bool) -> np.ndarray:
    """Pressure (n_mics, n) of one source along the paths to ``mic_enu_m`` (the microphones,
    or their images in the ground for the reflection), emission times solved at the coarse
    reception times ``tc`` (sample indices ``kc``) and interpolated to samples ``k``."""
    atm = prop.atmosphere
    tau_c, geo = emission_times_s(track, body, mic_enu_m, tc, atm.wind_enu_m_s, atm.c_m_s)
    amp_c = prop.pressure_gain / (geo.distance_m * (1.0 - geo.mach_r)
                                  ** signal.source.convective_exponent)
    if signal.source.directivity is not None:
        amp_c = amp_c * np.sqrt(signal.source.directivity.gain(
            emission_directions_body(track, body, mic_enu_m, tau_c)))
    contrib = signal(_at_samples(kc, tau_c, len(k))) * _at_samples(kc, amp_c, len(k))
    # The filters follow the geometry block by block: it is needed at the blocks' centres only.
    centre = _block_centres(len(k))
    if prop.absorption:
        r = CubicSpline(kc, geo.distance_m, axis=1)(centre)
        # Frequency in the air over the received one: (dt/dtau) / (1 - M_r) = 1 / (1 + n.U/c).
        q = CubicSpline(kc, geo.doppler_factor / (1.0 - geo.mach_r), axis=1)(centre)
        for m in range(len(mic_enu_m)):
            contrib[m] = _filter_blocks(contrib[m], 10.0 ** (
                -atm.absorption_db_per_m(np.fft.rfftfreq(FILTER_BLOCK, 1.0 / fs[m])[None, :]
                                         * q[m][:, None])
                * r[m][:, None] / 20.0))
    if reflected and prop.ground is not None and prop.ground.surface != "hard":
        # The ground is at rest with the microphone: Q at the received frequency, for the
        # image path's incidence angle and length at each block.
        src = track.body_points_enu(np.asarray(body, float)[None, :], tau_c.ravel()).reshape(
            tau_c.shape + (3,))
        line = np.asarray(mic_enu_m, float)[:, None, :] - src
        length = np.linalg.norm(line, axis=-1)
        cos = CubicSpline(kc, -line[..., 2] / length, axis=1)(centre)
        r2 = CubicSpline(kc, length, axis=1)(centre)
        for m in range(len(mic_enu_m)):
            contrib[m] = _filter_blocks(contrib[m], reflection_transfer(
                np.fft.rfftfreq(FILTER_BLOCK, 1.0 / fs[m])[None, :], cos[m][:, None],
                r2[m][:, None], atm.c_m_s, prop.ground))
    return contrib


def received_pressure_pa(track: TrackModel, signals: list[SourceSignal], bodies_m,
                         prop: Propagator, sample_rate_hz: float, start_s: float, n_samples: int,
                         *, node_s: float = 0.005) -> np.ndarray:
    """Pressure at each microphone from moving point sources, sampled uniformly in time.

    Parameters
    ----------
    track : TrackModel
        The true path and attitude of the vehicle.
    signals : list of SourceSignal
    bodies_m : sequence of (3,) arrays
        Body positions of the sources (same order as ``signals``).
    prop : Propagator
    sample_rate_hz : float or ndarray, shape (n_mics,)
        True sample rate of the receiver (of each microphone's recorder).
    start_s : float or ndarray, shape (n_mics,)
        True time of the first sample (of each microphone), seconds after the pass epoch.
    n_samples : int
    node_s : float
        Emission times are solved every ``node_s`` seconds (rounded to whole samples) and
        interpolated (cubic) between: at 5 ms the waveform of a 1 kHz tone flying over at
        30 m/s and 40 m is its closed form to 2e-9 of its amplitude (float32 rounds at 6e-8).

    Returns
    -------
    ndarray, shape (n_mics, n_samples), float64
    """
    n_mics = len(prop.mic_enu_m)
    fs = np.broadcast_to(np.asarray(sample_rate_hz, float), (n_mics,))
    start = np.broadcast_to(np.asarray(start_s, float), (n_mics,))
    # Splines run over the sample index, which all microphones share whatever their clocks.
    k = np.arange(n_samples)
    coarse_step = max(1, int(round(node_s * float(np.min(fs)))))
    kc = (np.arange(n_samples // coarse_step + 3) - 1) * coarse_step
    tc = start[:, None] + kc[None, :] / fs[:, None]
    out = np.zeros((n_mics, n_samples))
    for signal, body in zip(signals, bodies_m):
        out += _path_pressure(track, signal, body, prop.mic_enu_m, prop, fs, tc, kc, k,
                              reflected=False)
        if prop.image_mic_enu_m is not None:
            out += _path_pressure(track, signal, body, prop.image_mic_enu_m, prop, fs, tc, kc,
                                  k, reflected=True)
    return out

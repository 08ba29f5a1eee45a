"""Simulated campaigns: straight passes over a spiral array, with noise and GNSS errors.

The physics lives in :mod:`flyover.forward.moving_source`; this module only sets up scenarios.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.ground import GroundSurface
from flyover.forward.moving_source import (PointSource, Propagator, SourceSignal,
                                           received_pressure_pa)
from flyover.geometry.track import TrackModel, straight_track
from flyover.model.constants import P0_PA


def incoherent_noise_pa(n_mics: int, n_samples: int, spl_db: float, seed: int) -> np.ndarray:
    """White Gaussian noise, independent per microphone, at an overall SPL (dB re 20 uPa)."""
    rng = np.random.default_rng(seed)
    return rng.standard_normal((n_mics, n_samples)) * P0_PA * 10.0 ** (spl_db / 20.0)


@dataclass(frozen=True)
class RecorderScenario:
    """One simulated recorder of a pass: which microphones, its files and its clock.

    Attributes
    ----------
    name : str
    microphones : tuple of int
        Layout channels (1-based) it records, in its channel order.
    format : {'wav', 'bwf', 'tdms'}
        Plain WAV (no time in the file), Broadcast WAV (bext time reference) or TDMS.
    file_s : float or None
        Length of its files (a take split every ``file_s`` seconds); None for one file.
    start_after_s : float
        True time of its sample 0 after the pass epoch.
    clock_error_s : float
        Its own time of sample 0 minus the true time (what its files and stamps are off by).
    drift_ppm : float
        Its true sample rate over the nominal, minus 1.
    timing : tuple of str
        Timing channels it records after the microphones: 'pps', 'irig-b-dcls', 'irig-b-am'.
    """

    name: str
    microphones: tuple[int, ...]
    format: str = "wav"
    file_s: float | None = None
    start_after_s: float = 0.0
    clock_error_s: float = 0.0
    drift_ppm: float = 0.0
    timing: tuple[str, ...] = ()

    @property
    def rate_factor(self) -> float:
        return 1.0 + self.drift_ppm * 1e-6


@dataclass(frozen=True)
class PassScenario:
    """One simulated pass: a straight, constant-speed line over the array.

    Times are relative to the true epoch of the recording (its first sample). The vehicle is
    overhead ``overhead_s`` after it, ``cross_offset_m`` to the right of the array centre.
    """

    name: str
    label: str
    speed_m_s: float
    height_m: float
    heading_deg: float
    duration_s: float
    overhead_s: float
    recording_start_utc_ns: int
    clock_offset_s: float
    atmosphere: Atmosphere
    cross_offset_m: float = 0.0
    gain_db: dict = field(default_factory=dict)
    pitch_deg: float = 0.0
    seed: int = 0
    recorders: tuple[RecorderScenario, ...] = ()
    track_format: str = "csv"
    rotor_rpm: dict = field(default_factory=dict)    # source name -> ShaftSpeed for this pass
    mic_height_m: float | None = None     # raised microphones this high over the array's ground
    ground: GroundSurface | None = None   # the ground under them
    track_attitude: bool = True           # whether the logged track holds the attitude

    @property
    def epoch_utc_ns(self) -> int:
        """True UTC of the pass epoch (the simulation's time zero)."""
        return self.recording_start_utc_ns + int(round(self.clock_offset_s * 1e9))


@dataclass(frozen=True)
class Scenario:
    """A whole simulated campaign."""

    name: str
    mic_enu_m: np.ndarray
    pressure_gain: float
    sources: tuple[PointSource, ...]
    passes: tuple[PassScenario, ...]
    sample_rate_hz: float
    noise_spl_db: float
    pa_per_unit: float
    calibration_spread_db: float
    gnss_rate_hz: float
    gnss_noise_m: float
    track_margin_s: float = 3.0
    weather: dict | None = None


@dataclass
class SimulatedPass:
    """The arrays of one simulated pass (written to files by the simulate stage)."""

    units: np.ndarray                # (n_mics, n_samples), recorded values, full scale +-1
    pa_per_unit: np.ndarray          # (n_mics,), the calibration the recorder really had
    truth: TrackModel
    gnss_time_s: np.ndarray          # (n,) seconds after the epoch
    gnss_enu_m: np.ndarray           # (n, 3)
    gnss_attitude_deg: np.ndarray    # (n, 3) yaw, pitch, roll


def pass_truth_track(scenario: Scenario, ps: PassScenario) -> TrackModel:
    """The true path of a pass (straight line through the overhead point), the nose into the
    wind by the crab angle that keeps the ground track straight."""
    h = np.deg2rad(ps.heading_deg)
    right = np.array([np.cos(h), -np.sin(h)])  # starboard of the heading, horizontal
    over = scenario.mic_enu_m[:, :2].mean(0) + ps.cross_offset_m * right
    margin = scenario.track_margin_s
    air = ps.speed_m_s * np.array([np.sin(h), np.cos(h)]) - ps.atmosphere.wind_enu_m_s[:2]
    model, *_ = straight_track(ps.speed_m_s, ps.height_m, ps.heading_deg, ps.overhead_s,
                               -margin - 1.0, ps.duration_s + margin, over_enu_m=over,
                               pitch_deg=ps.pitch_deg,
                               yaw_deg=float(np.rad2deg(np.arctan2(air[0], air[1]))))
    return model


def pass_microphones(scenario: Scenario, ps: PassScenario) -> tuple[np.ndarray, np.ndarray | None]:
    """The microphones of a pass (raised above the array's ground when the pass says so) and
    their images in that ground (None on ground plates)."""
    if ps.mic_height_m is None:
        return scenario.mic_enu_m, None
    lift = np.array([0.0, 0.0, ps.mic_height_m])
    return scenario.mic_enu_m + lift, scenario.mic_enu_m - lift


def pass_source(source: PointSource, ps: PassScenario) -> PointSource:
    """A source as flown in a pass: its rotor at the pass's own speed when the pass gives one."""
    if source.rotor is None or source.name not in ps.rotor_rpm:
        return source
    return replace(source, rotor=replace(source.rotor, speed=ps.rotor_rpm[source.name]))


def simulate_pass(scenario: Scenario, ps: PassScenario) -> SimulatedPass:
    """Simulate one pass: received pressures, recorder units, noisy GNSS samples."""
    fs = scenario.sample_rate_hz
    truth = pass_truth_track(scenario, ps)
    n = int(round(ps.duration_s * fs))
    margin = scenario.track_margin_s
    n_mics = len(scenario.mic_enu_m)
    # Each microphone sampled on its recorder's true clock (one clock when there are none).
    start, rate = np.zeros(n_mics), np.full(n_mics, fs)
    for r in ps.recorders:
        rows = np.asarray(r.microphones) - 1
        start[rows], rate[rows] = r.start_after_s, fs * r.rate_factor
    end = ps.duration_s + (max(0.0, *(r.start_after_s for r in ps.recorders)) + 0.1
                           if ps.recorders else 0.0)
    signals = [SourceSignal(pass_source(src, ps), fs, -margin, end,
                            ps.gain_db.get(src.name, 0.0)) for src in scenario.sources]
    mics, images = pass_microphones(scenario, ps)
    # A level pass: every path crosses the layers up to its height in the same shares.
    air = ps.atmosphere.along(0.0, ps.height_m)
    prop = Propagator(mics, air, scenario.pressure_gain if images is None else 1.0,
                      image_mic_enu_m=images, ground=ps.ground)
    p = received_pressure_pa(truth, signals, [np.asarray(s.body_m) for s in scenario.sources],
                             prop, rate, start, n)
    p += incoherent_noise_pa(n_mics, n, scenario.noise_spl_db, ps.seed + 1)
    rng = np.random.default_rng(ps.seed + 2)
    spread_db = rng.normal(0.0, scenario.calibration_spread_db, n_mics)
    k = scenario.pa_per_unit * 10.0 ** (spread_db / 20)
    units = (p / k[:, None]).astype(np.float32)
    tg = np.arange(-margin, ps.duration_s + margin, 1.0 / scenario.gnss_rate_hz)
    gnss = truth.position(tg) + rng.normal(0.0, scenario.gnss_noise_m, (len(tg), 3))
    return SimulatedPass(units, k, truth, tg, gnss, truth.attitude_deg(tg))


def spiral_layout(n_arms: int, per_arm: int, r_min_m: float, r_max_m: float,
                  twist_deg: float = 120.0) -> np.ndarray:
    """A multi-arm logarithmic spiral of microphones on the ground, centred on (0, 0).

    Returns
    -------
    ndarray, shape (n_arms * per_arm, 3)
        East, north, up (0) in metres.
    """
    r = np.geomspace(r_min_m, r_max_m, per_arm)
    frac = np.log(r / r_min_m) / np.log(r_max_m / r_min_m)
    pts = []
    for arm in range(n_arms):
        phi = 2 * np.pi * arm / n_arms + np.deg2rad(twist_deg) * frac
        pts.append(np.stack([r * np.sin(phi), r * np.cos(phi), np.zeros_like(r)], axis=1))
    return np.concatenate(pts)

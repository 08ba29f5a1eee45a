"""The vehicle's path: a smooth, differentiable model fitted to GNSS samples.

Times are float seconds after the pass epoch (see :mod:`flyover.timebase`); positions are in the
site frame (ENU, metres). Position is a smoothing spline per coordinate whose smoothing level is
tied to the stated position noise (the spline's residual sum of squares is n * sigma^2).
Attitude comes from the track's columns (interpolated as rotations) or, when absent, from the
velocity through the air: yaw along the horizontal ground velocity minus the wind (a vehicle
crabs into a crosswind: 11.6 deg at 27.6 m/s in a 6 m/s crosswind), zero pitch and roll.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from scipy.interpolate import PPoly, splrep
from scipy.spatial.transform import Rotation

from flyover.geometry.attitude import AttitudeKeys
from flyover.geometry.frames import attitude_rotation, body_to_site, enu_from_body_matrix
from flyover.model.errors import FlyoverInputError, require

_SPLINE_DEGREE = 5  # quintic: continuous acceleration and jerk


@dataclass(frozen=True)
class TrackChecks:
    """Limits a track must respect before it is modelled.

    Attributes
    ----------
    max_gap_s : float
        Longest allowed interval between consecutive samples.
    max_speed_m_s : float
        Sample-to-sample speed above which the step is reported as a jump.
    """

    max_gap_s: float = 1.0
    max_speed_m_s: float = 120.0


@dataclass
class TrackModel:
    """Smooth path and attitude of the vehicle reference point (body origin).

    Build it with :func:`fit_track`. ``wind_enu_m_s`` (site frame, m/s) turns the yaw of a
    track without attitude from the ground velocity to the air-relative velocity.
    """

    time_s: np.ndarray
    samples_enu_m: np.ndarray
    position_noise_m: float
    _splines: list = field(repr=False)
    _attitude: AttitudeKeys | None = field(repr=False, default=None)
    wind_enu_m_s: np.ndarray = field(default_factory=lambda: np.zeros(3))

    @property
    def heading_source(self) -> str:
        """Where the yaw comes from, in words for the alignment and the report."""
        if self._attitude is not None:
            return "attitude in the track"
        if np.any(self.wind_enu_m_s[:2] != 0):
            return ("air-relative velocity (ground velocity minus the wind; no attitude in "
                    "the track)")
        return "ground velocity (no attitude in the track, no wind)"

    def with_wind(self, wind_enu_m_s) -> "TrackModel":
        """The same track with the yaw of a track without attitude taken through this wind."""
        return replace(self, wind_enu_m_s=np.asarray(wind_enu_m_s, float).copy())

    @property
    def start_s(self) -> float:
        return float(self.time_s[0])

    @property
    def end_s(self) -> float:
        return float(self.time_s[-1])

    def _check_inside(self, t):
        t = np.asarray(t, dtype=float)
        if t.size and (t.min() < self.start_s - 1e-9 or t.max() > self.end_s + 1e-9):
            raise FlyoverInputError(
                "time outside the track", "track",
                f"times from {self.start_s:.3f} to {self.end_s:.3f} s after the pass epoch",
                f"{t.min():.3f} to {t.max():.3f} s",
                "the track must cover every analysed emission time")
        return t

    def position(self, time_s) -> np.ndarray:
        """Position of the body origin, shape (..., 3), site frame, m."""
        t = self._check_inside(time_s)
        return np.stack([s(t) for s in self._splines], axis=-1)

    def velocity(self, time_s) -> np.ndarray:
        """Velocity over the ground, shape (..., 3), m/s."""
        t = self._check_inside(time_s)
        return np.stack([s.derivative(1)(t) for s in self._splines], axis=-1)

    def acceleration(self, time_s) -> np.ndarray:
        """Acceleration, shape (..., 3), m/s^2."""
        t = self._check_inside(time_s)
        return np.stack([s.derivative(2)(t) for s in self._splines], axis=-1)

    def rotation(self, time_s) -> Rotation:
        """Attitude as a rotation from body axes to north-east-down."""
        t = self._check_inside(time_s)
        if self._attitude is not None:
            return self._attitude(t)
        v = self.velocity(t) - self.wind_enu_m_s
        yaw = np.rad2deg(np.arctan2(v[..., 0], v[..., 1]))
        return attitude_rotation(yaw, 0.0, 0.0)

    def attitude_deg(self, time_s) -> np.ndarray:
        """Yaw, pitch, roll in degrees, shape (..., 3); yaw from 0 to 360."""
        ypr = self.rotation(time_s).as_euler("ZYX", degrees=True)
        ypr[..., 0] = np.mod(ypr[..., 0], 360.0)
        return ypr

    def body_points_enu(self, points_body_m, time_s) -> np.ndarray:
        """Site-frame positions of body-frame points at given times.

        Parameters
        ----------
        points_body_m : ndarray, shape (n_points, 3)
            Points in body axes (x forward, y starboard, z down), m.
        time_s : ndarray, shape (n_times,)

        Returns
        -------
        ndarray, shape (n_times, n_points, 3)
        """
        t = np.atleast_1d(np.asarray(time_s, dtype=float))
        return body_to_site(self.position(t), self.rotation(t)).apply(points_body_m)

    def body_points_velocity(self, points_body_m, time_s, step_s: float = 1e-3) -> np.ndarray:
        """Ground velocity of body-frame points (translation and rotation).

        Returns an array of shape (n_times, n_points, 3), m/s.
        """
        t = np.atleast_1d(np.asarray(time_s, dtype=float))
        lo = np.maximum(t - step_s, self.start_s)
        hi = np.minimum(t + step_s, self.end_s)
        return ((self.body_points_enu(points_body_m, hi) - self.body_points_enu(points_body_m, lo))
                / (hi - lo)[:, None, None])

    def residual_rms_m(self) -> float:
        """RMS distance of the samples from the fitted path: an estimate of the position noise."""
        fitted = self.position(self.time_s)
        return float(np.sqrt(np.mean(np.sum((fitted - self.samples_enu_m) ** 2, axis=-1) / 3.0)))


def check_track_samples(time_s, enu_m, position_noise_m: float = 0.0,
                        checks: TrackChecks = TrackChecks(), where: str = "track") -> None:
    """Refuse unsorted or duplicate times, gaps and jumps, naming the first bad row (1-based).

    A step counts as a jump when it is faster than ``checks.max_speed_m_s`` by more than six
    standard deviations of the position noise allow.
    """
    t = np.asarray(time_s, dtype=float)
    p = np.asarray(enu_m, dtype=float)
    require(len(t) >= 8, "too few track samples", where, "at least 8 samples", f"{len(t)}")
    require(np.all(np.isfinite(p)), "track position is not a number", where,
            "finite positions", "NaN or Inf")
    dt = np.diff(t)
    bad = np.flatnonzero(dt <= 0)
    if bad.size:
        i = bad[0]
        kind = "duplicate" if dt[i] == 0 else "earlier than the row before"
        raise FlyoverInputError(f"time at data row {i + 2} is {kind}", where,
                                "strictly increasing times", f"{t[i]:.3f} then {t[i + 1]:.3f} s",
                                "sort the track by time and drop repeated fixes")
    gap = np.flatnonzero(dt > checks.max_gap_s)
    if gap.size:
        i = gap[0]
        raise FlyoverInputError(f"gap of {dt[i]:.2f} s after data row {i + 1}", where,
                                f"samples at most {checks.max_gap_s} s apart", f"{dt[i]:.2f} s",
                                "the track has a dropout; fill it from another source or raise "
                                "the gap limit if the path is straight there")
    speed = np.linalg.norm(np.diff(p, axis=0), axis=1) / dt
    allowed = checks.max_speed_m_s + 6.0 * np.sqrt(6.0) * position_noise_m / dt
    jump = np.flatnonzero(speed > allowed)
    if jump.size:
        i = jump[0]
        raise FlyoverInputError(f"position jumps between data rows {i + 1} and {i + 2}", where,
                                f"sample-to-sample speed below {allowed[i]:.1f} m/s",
                                f"{speed[i]:.1f} m/s", "look for a GNSS outlier at that row")


def fit_track(time_s, enu_m, position_noise_m: float, attitude_deg=None,
              checks: TrackChecks = TrackChecks(), where: str = "track", *,
              wind_enu_m_s=(0.0, 0.0, 0.0)) -> TrackModel:
    """Fit the smooth track model to GNSS samples.

    Parameters
    ----------
    time_s : ndarray, shape (n,)
        Sample times, seconds after the pass epoch, strictly increasing.
    enu_m : ndarray, shape (n, 3)
        Positions in the site frame.
    position_noise_m : float
        Stated 1-sigma noise of each coordinate (e.g. 0.02 for RTK, 2 for standalone GNSS).
    attitude_deg : ndarray, shape (n, 3), optional
        Yaw, pitch, roll per sample in degrees.
    wind_enu_m_s : sequence of 3 floats
        The wind, for the yaw of a track without attitude (along the air-relative velocity).
    """
    require(position_noise_m > 0, "position noise must be positive", "track.position_noise_m",
            "a 1-sigma noise in metres such as 0.02 (RTK) or 2 (standalone)",
            f"{position_noise_m}")
    t = np.asarray(time_s, dtype=float)
    p = np.asarray(enu_m, dtype=float)
    check_track_samples(t, p, position_noise_m, checks, where)
    n = len(t)
    # Fitted as B-splines, evaluated as polynomial pieces: the same curve (to 1e-13 m), nine
    # times faster to evaluate at the emission-time solver's hundreds of thousands of times.
    splines = [PPoly.from_spline(splrep(t, p[:, k], w=np.full(n, 1.0 / position_noise_m),
                                        k=_SPLINE_DEGREE, s=float(n))) for k in range(3)]
    keys = None
    if attitude_deg is not None:
        att = np.asarray(attitude_deg, dtype=float)
        require(np.all(np.isfinite(att)), "attitude is not a number", where,
                "finite yaw, pitch and roll", "NaN or Inf")
        keys = AttitudeKeys.from_rotations(t, attitude_rotation(att[:, 0], att[:, 1], att[:, 2]))
    return TrackModel(t, p, position_noise_m, splines, keys, np.asarray(wind_enu_m_s, float))


def straight_track(speed_m_s: float, height_m: float, heading_deg: float, overhead_s: float,
                   start_s: float, end_s: float, *, over_enu_m=(0.0, 0.0), climb_m_s: float = 0.0,
                   pitch_deg: float = 0.0, roll_deg: float = 0.0, rate_hz: float = 50.0,
                   yaw_deg: float | None = None):
    """A true straight, constant-speed path as a :class:`TrackModel`, and its exact samples.

    The vehicle passes over ``over_enu_m`` (east, north) at ``overhead_s`` at ``height_m``,
    its nose along ``heading_deg`` or, crabbing, along ``yaw_deg``.

    Returns
    -------
    model : TrackModel
    time_s : ndarray, shape (n,)
    enu_m : ndarray, shape (n, 3)
    attitude_deg : ndarray, shape (n, 3)
        yaw, pitch, roll.
    """
    t = np.arange(start_s, end_s + 1.0 / rate_hz, 1.0 / rate_hz)
    h = np.deg2rad(heading_deg)
    d = t - overhead_s
    enu = np.stack([over_enu_m[0] + speed_m_s * np.sin(h) * d,
                    over_enu_m[1] + speed_m_s * np.cos(h) * d,
                    height_m + climb_m_s * d], axis=1)
    yaw = heading_deg if yaw_deg is None else yaw_deg
    att = np.tile([yaw % 360.0, pitch_deg, roll_deg], (len(t), 1))
    return fit_track(t, enu, 1e-6, attitude_deg=att), t, enu, att


def antenna_to_origin(enu_m, attitude_deg, offset_body_m) -> np.ndarray:
    """Move positions from the GNSS antenna to the body origin.

    ``x_origin = x_antenna - R(yaw, pitch, roll) r`` with ``r`` the antenna's position in body
    axes (x forward, y starboard, z down) and R the body-to-site rotation at each sample.

    Parameters
    ----------
    enu_m : ndarray, shape (n, 3)
    attitude_deg : ndarray, shape (n, 3)
        Yaw, pitch, roll.
    offset_body_m : sequence of 3 floats
    """
    att = np.asarray(attitude_deg, float)
    rot = enu_from_body_matrix(attitude_rotation(att[:, 0], att[:, 1], att[:, 2]))
    return np.asarray(enu_m, float) - rot @ np.asarray(offset_body_m, float)


def heading_through_air(utc_ns, enu_m, wind_enu_m_s=(0.0, 0.0, 0.0)) -> np.ndarray:
    """Yaw, pitch, roll (deg) with the yaw along the air-relative velocity (ground velocity minus
    the wind, site frame m/s) and no pitch or roll: the attitude assumed for a lever arm when the
    track has none."""
    t = (np.asarray(utc_ns, np.int64) - int(utc_ns[0])) / 1e9
    v = np.gradient(np.asarray(enu_m, float), t, axis=0) - np.asarray(wind_enu_m_s, float)
    yaw = np.mod(np.rad2deg(np.arctan2(v[:, 0], v[:, 1])), 360.0)
    return np.stack([yaw, np.zeros_like(yaw), np.zeros_like(yaw)], axis=1)

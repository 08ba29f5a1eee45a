"""Emission-time windows along the track.

A window is a span of emission time on the track; its centre fixes the geometry quoted with its
results: vehicle position, speed, attitude, distance to the array centre and the polar emission
angle (angle between the flight direction and the line from the vehicle to the array centre;
90 deg = overhead).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.geometry.frames import attitude_rotation, enu_from_body_matrix
from flyover.geometry.propagation import air_angles
from flyover.geometry.track import TrackModel


@dataclass(frozen=True)
class Window:
    """One emission-time window.

    Attributes
    ----------
    index : int
    start_s : float
        First emission sample time, seconds after the pass epoch.
    n_samples : int
        Emission samples at ``sample_rate_hz``.
    sample_rate_hz : float
    position_enu_m, velocity_enu_m_s : ndarray, shape (3,)
        Body origin at the centre time.
    attitude_deg : ndarray, shape (3,)
        Yaw, pitch, roll at the centre time.
    polar_angle_deg : float
    distance_m : float
        Body origin to array centre at the centre time.
    """

    index: int
    start_s: float
    n_samples: int
    sample_rate_hz: float
    position_enu_m: np.ndarray
    velocity_enu_m_s: np.ndarray
    attitude_deg: np.ndarray
    polar_angle_deg: float
    distance_m: float

    @property
    def center_s(self) -> float:
        return self.start_s + 0.5 * (self.n_samples - 1) / self.sample_rate_hz

    @property
    def emission_times_s(self) -> np.ndarray:
        return self.start_s + np.arange(self.n_samples) / self.sample_rate_hz

    @property
    def speed_m_s(self) -> float:
        return float(np.linalg.norm(self.velocity_enu_m_s))


def polar_angle_deg(velocity_enu_m_s, position_enu_m, target_enu_m) -> np.ndarray:
    """Angle between the flight direction and the line from the vehicle to a target (deg)."""
    v = np.asarray(velocity_enu_m_s, float)
    d = np.asarray(target_enu_m, float) - np.asarray(position_enu_m, float)
    cos = np.sum(v * d, axis=-1) / (np.linalg.norm(v, axis=-1) * np.linalg.norm(d, axis=-1))
    return np.rad2deg(np.arccos(np.clip(cos, -1.0, 1.0)))


def emission_angles_deg(position_enu_m, attitude_deg, source_body_m, target_enu_m):
    """Emission angles of the line from a body point to a target, in body axes.

    The polar angle is measured from the nose (body +x: 0 deg ahead, 90 deg abeam, 180 deg
    behind); the azimuth turns about the body x axis from straight down (body +z, 0 deg),
    positive towards starboard (body +y), so that a target below and to the right of the
    vehicle has a positive azimuth and one below-left a negative one. The attitude turns the
    line into body axes: a right wing down roll of 10 deg moves a target straight below to
    +10 deg (the dipped starboard wing points towards it).

    Parameters
    ----------
    position_enu_m : ndarray, shape (n, 3)
        Body origin in the site frame.
    attitude_deg : ndarray, shape (n, 3)
        Yaw, pitch, roll (:mod:`flyover.geometry.frames`).
    source_body_m : ndarray, shape (3,)
        The point the line starts from, body axes.
    target_enu_m : ndarray, shape (3,)
        E.g. the array centre, site frame.

    Returns
    -------
    polar_deg, azimuth_deg : ndarray, shape (n,)
        Polar angle in [0, 180], azimuth in (-180, 180].
    """
    pos = np.atleast_2d(np.asarray(position_enu_m, float))
    att = np.atleast_2d(np.asarray(attitude_deg, float))
    enu_from_body = enu_from_body_matrix(attitude_rotation(att[:, 0], att[:, 1], att[:, 2]))
    start = pos + enu_from_body @ np.asarray(source_body_m, float)
    line_enu = np.asarray(target_enu_m, float) - start
    line = np.einsum("nji,nj->ni", enu_from_body, line_enu)    # transpose: ENU -> body
    polar = np.rad2deg(np.arccos(np.clip(line[:, 0] / np.linalg.norm(line, axis=1), -1, 1)))
    return polar, np.rad2deg(np.arctan2(line[:, 1], line[:, 2]))


def region_angles(position_enu_m, attitude_deg, velocity_enu_m_s, source_body_m, target_enu_m,
                  *, wind_enu_m_s, c_m_s: float) -> dict[str, np.ndarray]:
    """The angles a body point's sound leaves at towards a target: in body axes
    (:func:`emission_angles_deg`) and in the moving air, with its M_r
    (:func:`flyover.geometry.propagation.air_angles`).

    Parameters
    ----------
    position_enu_m, attitude_deg, velocity_enu_m_s : ndarray, shape (n, 3)
        The body origin's position (m), yaw-pitch-roll (deg) and velocity over the ground
        (m/s) per window, site frame.
    source_body_m : ndarray, shape (3,)
        The point (e.g. a region's centre), body axes.
    target_enu_m : ndarray, shape (3,)
    wind_enu_m_s : ndarray, shape (3,)
    c_m_s : float

    Returns
    -------
    dict of ndarray, shape (n,)
        ``emission_polar_deg``, ``emission_azimuth_deg``, ``air_polar_deg``, ``mach_r``.
    """
    pos = np.atleast_2d(np.asarray(position_enu_m, float))
    att = np.atleast_2d(np.asarray(attitude_deg, float))
    polar, azimuth = emission_angles_deg(pos, att, source_body_m, target_enu_m)
    # The point moves with the origin (a rigid body turning slowly).
    source = pos + np.einsum("nij,j->ni", enu_from_body_matrix(attitude_rotation(
        att[:, 0], att[:, 1], att[:, 2])), np.asarray(source_body_m, float))
    air_polar, mach_r = air_angles(source, velocity_enu_m_s, target_enu_m, wind_enu_m_s, c_m_s)
    return {"emission_polar_deg": polar, "emission_azimuth_deg": azimuth,
            "air_polar_deg": air_polar, "mach_r": mach_r}


def overhead_time_s(track: TrackModel, array_center_enu_m, span_s: tuple[float, float],
                    step_s: float = 0.01) -> float | None:
    """Emission time in a span at which the polar angle is 90 deg (the array abeam of the
    flight direction), or None when the span holds no such time (:func:`polar_time_s`)."""
    return polar_time_s(track, array_center_enu_m, span_s, 90.0, step_s=step_s)


def polar_time_s(track: TrackModel, array_center_enu_m, span_s: tuple[float, float],
                 polar_deg: float, *, step_s: float = 0.01) -> float | None:
    """First emission time in a span at which the polar angle to the array centre grows
    through ``polar_deg``, or None when it does not within the span.

    The sign change of v . (x_array - x) / |x_array - x| - |v| cos(polar) is found on a grid of
    ``step_s`` and refined by bisection to a microsecond.
    """
    c = np.asarray(array_center_enu_m, float)
    cos_target = np.cos(np.deg2rad(polar_deg))

    def ahead(t):
        d = c - track.position(t)
        v = track.velocity(t)
        return (np.sum(v * d, axis=-1) / np.linalg.norm(d, axis=-1)
                - np.linalg.norm(v, axis=-1) * cos_target)

    t = np.arange(span_s[0], span_s[1] + step_s / 2, step_s)
    if len(t) < 2:
        return None
    g = ahead(t)
    k = np.flatnonzero((g[:-1] > 0) & (g[1:] <= 0))    # the angle still under, then through
    if len(k) == 0:
        return None
    a, b = float(t[k[0]]), float(t[k[0] + 1])
    while b - a > 1e-6:
        m = 0.5 * (a + b)
        a, b = (m, b) if ahead(np.array([m]))[0] > 0 else (a, m)
    return 0.5 * (a + b)


def plan_windows(track: TrackModel, array_center_enu_m, span_s: tuple[float, float],
                 window_s: float, hop_s: float | None, sample_rate_hz: float, *,
                 max_polar_offset_deg: float = 90.0,
                 polar_step_deg: float | None = None) -> list[Window]:
    """Windows of ``window_s`` within an emission-time span, every ``hop_s`` or every
    ``polar_step_deg`` of polar angle.

    Windows are anchored on overhead: one is centred on the emission time at which the polar
    angle is 90 deg (:func:`overhead_time_s`), so that every pass has a 90 deg window. The
    others lie at whole hops from it (the windows of passes flown alike line up in polar angle)
    or, with ``polar_step_deg``, are centred where the polar angle is 90 deg plus a whole
    number of steps: the windows of every pass line up in angle whatever its height and speed,
    and wide angles, where the angle changes slowly, take few windows. A span that never comes
    abeam of the array anchors time hops on its start and has no polar-step windows. Windows
    are kept when their polar angle lies within ``max_polar_offset_deg`` of 90 deg. Whether
    each window's sound reaches the microphones inside the recording is checked by the
    caller, who knows the grid and the microphones.
    """
    if (hop_s is None) == (polar_step_deg is None):
        raise ValueError("give exactly one of hop_s and polar_step_deg")
    n = int(round(window_s * sample_rate_hz))
    half = 0.5 * (n - 1) / sample_rate_hz
    lo = max(span_s[0], track.start_s)
    hi = min(span_s[1], track.end_s) - n / sample_rate_hz
    if hi < lo:
        return []
    if polar_step_deg is None:
        overhead = overhead_time_s(track, array_center_enu_m, (lo + half, hi + half))
        anchor = lo if overhead is None else overhead - half      # a window's start on the grid
        k = np.arange(np.ceil((lo - anchor) / hop_s - 1e-9),
                      np.floor((hi - anchor) / hop_s + 1e-9) + 1)
        starts = anchor + hop_s * k
    else:
        steps = int(np.floor(min(max_polar_offset_deg, 89.999) / polar_step_deg + 1e-9))
        centres = [polar_time_s(track, array_center_enu_m, (lo + half, hi + half),
                                90.0 + k * polar_step_deg) for k in range(-steps, steps + 1)]
        starts = np.array([t - half for t in centres if t is not None])
    centers = starts + half
    pos = track.position(centers)
    vel = track.velocity(centers)
    att = track.attitude_deg(centers)
    c = np.asarray(array_center_enu_m, float)
    polar = polar_angle_deg(vel, pos, c)
    dist = np.linalg.norm(c - pos, axis=1)
    keep = np.abs(polar - 90.0) <= max_polar_offset_deg + 1e-3   # the bisection's tolerance
    return [Window(k, float(starts[i]), n, float(sample_rate_hz), pos[i], vel[i], att[i],
                   float(polar[i]), float(dist[i]))
            for k, i in enumerate(np.flatnonzero(keep))]

"""Sound paths from a moving source to fixed microphones in a uniformly moving medium.

Everything here works forward from emission time: for a source point at emission time tau the
travel time T solves ``|x_m - x_s(tau) - U T| = c T`` in closed form, so reception times on a
uniform emission-time grid need no root finding. The inverse, the emission times heard at given
reception times (:func:`emission_times_s`), takes a few Newton steps on that forward time.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.geometry.track import TrackModel


@dataclass(frozen=True)
class Paths:
    """Geometry of the paths from source points to microphones.

    All arrays have shape (..., n_mics): the leading shape of the source points, then microphones.

    Attributes
    ----------
    travel_time_s : ndarray
        T, from emission to reception.
    distance_m : ndarray
        r = c T, the length of the path in the moving air (the source model's spreading term).
        Without wind it is the straight distance |x_m - x_s(tau)|; with wind the two differ
        (by 2.9 % for a 10 m/s wind along the path). With ``mach_r`` it gives the closed form
        of the moving-medium Green's function of a source at rest over the ground,
        ``r (1 - M_r) = R* = sqrt((M.d)^2 + (1 - M^2) d.d)`` with M = U / c (Morse & Ingard
        1968, section 11.2).
    mach_r : ndarray
        M_r: the source's velocity relative to the medium, divided by c, along the unit vector of
        propagation in the medium frame, n = (x_m - U T - x_s) / (c T). Positive when approaching.
    doppler_factor : ndarray
        dt/dtau, reception time per emission time. Without wind it equals 1 - M_r; with wind
        ``(1 - M_r) / (1 + n.U / c)`` (the fixed microphone moves through the medium).
    """

    travel_time_s: np.ndarray
    distance_m: np.ndarray
    mach_r: np.ndarray
    doppler_factor: np.ndarray


def travel_time_s(source_enu_m, mic_enu_m, wind_enu_m_s, c_m_s):
    """Time for sound emitted at source points to reach each microphone in a uniform wind.

    Parameters
    ----------
    source_enu_m : ndarray, shape (..., 3)
        Source positions at emission time, site frame.
    mic_enu_m : ndarray, shape (n_mics, 3)
    wind_enu_m_s : ndarray, shape (3,)
        Uniform velocity of the medium.
    c_m_s : float
        Speed of sound in the medium at rest.

    Returns
    -------
    ndarray, shape (..., n_mics)
        T = [-(d.U) + sqrt((d.U)^2 + (c^2 - U^2) d.d)] / (c^2 - U^2), d = x_m - x_s.
    """
    src = np.asarray(source_enu_m, float)[..., None, :]
    return paths_between(src, np.zeros_like(src), mic_enu_m, wind_enu_m_s, c_m_s).travel_time_s


def paths_between(source_enu_m, source_velocity_enu_m_s, mic_enu_m, wind_enu_m_s, c_m_s) -> Paths:
    """Travel time, emission distance, M_r and Doppler factor from source points to microphones.

    Parameters
    ----------
    source_enu_m, source_velocity_enu_m_s, mic_enu_m : ndarray, shape (..., 3)
        Positions (m) and the sources' velocities over the ground (m/s), broadcast against each
        other: a source (3,) against microphones (n_mics, 3) gives arrays of shape (n_mics,).
    wind_enu_m_s : ndarray, shape (3,)
    c_m_s : float
        Speed of sound in the medium at rest.

    Returns
    -------
    Paths
        Arrays of the broadcast leading shape.
    """
    src = np.asarray(source_enu_m, float)
    vel = np.asarray(source_velocity_enu_m_s, float)
    u = np.asarray(wind_enu_m_s, float)
    d = np.asarray(mic_enu_m, float) - src
    du = d @ u
    dd = np.einsum("...i,...i->...", d, d)
    a = c_m_s ** 2 - u @ u
    t = (-du + np.sqrt(du ** 2 + a * dd)) / a
    r = c_m_s * t
    # Unit propagation direction in the medium frame.
    n = (d - t[..., None] * u) / (c_m_s * t[..., None])
    mach_r = np.einsum("...i,...i->...", n, vel - u) / c_m_s
    doppler = (1.0 - mach_r) / (1.0 + (n @ u) / c_m_s)
    return Paths(t, r, mach_r, doppler)


def air_angles(source_enu_m, source_velocity_enu_m_s, target_enu_m, wind_enu_m_s,
               c_m_s: float) -> tuple[np.ndarray, np.ndarray]:
    """The emission angle in the moving air and the Mach number that sets the convective
    amplification, from source points to a target (e.g. the array centre).

    Parameters
    ----------
    source_enu_m, source_velocity_enu_m_s : ndarray, shape (n, 3)
        Positions (m) and velocities over the ground (m/s), site frame.
    target_enu_m : ndarray, shape (3,)
    wind_enu_m_s : ndarray, shape (3,)
    c_m_s : float

    Returns
    -------
    polar_deg : ndarray, shape (n,)
        Angle between the source's velocity through the air (ground velocity minus wind) and the
        direction the sound travels in the moving air towards the target: 0 ahead, 90 abeam.
    mach_r : ndarray, shape (n,)
        M_r of :class:`Paths`: the air-relative velocity along that direction over c.
    """
    src = np.atleast_2d(np.asarray(source_enu_m, float))
    vel = np.atleast_2d(np.asarray(source_velocity_enu_m_s, float))
    p = paths_between(src, vel, np.asarray(target_enu_m, float)[None, :], wind_enu_m_s, c_m_s)
    air = vel - np.asarray(wind_enu_m_s, float)
    speed = np.linalg.norm(air, axis=1)
    cos = np.clip(p.mach_r * c_m_s / np.where(speed > 0, speed, np.inf), -1.0, 1.0)
    return np.rad2deg(np.arccos(cos)), p.mach_r


def emission_times_s(track: TrackModel, body_m, mic_enu_m, reception_s, wind_enu_m_s,
                     c_m_s: float, *, iterations: int = 4):
    """Emission times whose sound reaches each microphone at the given reception times.

    Newton iterations on ``tau + T(tau) = t`` with the exact forward travel time; quadratic
    convergence from the start value ``t - |x_m - x(t)| / c``.

    Parameters
    ----------
    track : TrackModel
    body_m : ndarray, shape (3,)
    mic_enu_m : ndarray, shape (n_mics, 3)
    reception_s : ndarray, shape (n,) or (n_mics, n)
        Reception times, the same for every microphone or per microphone.

    Returns
    -------
    tau : ndarray, shape (n_mics, n)
    paths : Paths
        Geometry at those emission times, arrays of shape (n_mics, n).
    """
    mics = np.asarray(mic_enu_m, float)[:, None, :]
    reception_s = np.asarray(reception_s, float)
    t = np.broadcast_to(reception_s, (len(mics), reception_s.shape[-1]))
    point = np.asarray(body_m, float)[None, :]
    pos0 = track.body_points_enu(point, np.clip(t.ravel(), track.start_s, track.end_s))
    tau = t - np.linalg.norm(mics - pos0.reshape(t.shape + (3,)), axis=-1) / c_m_s
    for _ in range(iterations):
        flat = tau.ravel()
        pos = track.body_points_enu(point, flat).reshape(t.shape + (3,))
        vel = track.body_points_velocity(point, flat).reshape(t.shape + (3,))
        p = paths_between(pos, vel, mics, wind_enu_m_s, c_m_s)
        tau = tau - (tau + p.travel_time_s - t) / p.doppler_factor
    flat = tau.ravel()
    pos = track.body_points_enu(point, flat).reshape(t.shape + (3,))
    vel = track.body_points_velocity(point, flat).reshape(t.shape + (3,))
    return tau, paths_between(pos, vel, mics, wind_enu_m_s, c_m_s)

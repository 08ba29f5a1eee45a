"""Received band levels of a flight reconstructed from a component's measured directivity.

A component's band levels at 1 m (its source strength, as the imaging measures it) against the
emission polar angle are carried along a flight path to an observer: for each reception time t
the emission time tau solves tau + T(tau) = t (the forward model's Newton solution, wind
included), and the received mean square of band k is

    P_k(t) = G^2 p0^2 10^(L_k(theta) / 10) / (r^2 (1 - M_r)^(2n)) * 10^(-alpha(f_air) r / 10)

with r the emission distance, M_r the source's Mach number towards the observer in the moving
air (the convective amplification (1 - M_r)^-2n of the mean square, n = 2 for a moving
monopole, Dowling & Ffowcs Williams 1983, from memory; n is the component's declared
``convective_exponent``, the same the levels removed, so the reconstruction puts back exactly
what the levels took off), theta the emission polar angle, alpha the ISO 9613-1
absorption at the frequency the band has in the air, f / (1 - M_r), and G the observer's
pressure gain (2 on a ground plate). The band is received at f / (dt/dtau): its A-weighting is
taken there (the Doppler shift of the bands). An observer 1.2 m above hard ground receives the
direct and the ground-reflected (image-source) paths, their energies added: the band average of
the interference of a hard surface, valid where the bands are wider than its comb (above a few
hundred hertz at 1.2 m); below, the comb's notches are not resolved by the bands.

Directivity is interpolated in polar angle (linearly in dB) and never extrapolated: outside the
measured angles the history is marked uncovered.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import a_weighting_db
from flyover.geometry.propagation import emission_times_s
from flyover.geometry.track import TrackModel, straight_track
from flyover.geometry.windows import polar_angle_deg
from flyover.model.constants import P0_PA

RAISED_MICROPHONE_M = 1.2   # the microphone height of certification procedures (14 CFR 36 A36.3)


@dataclass(frozen=True)
class Directivity:
    """Band levels of one component at 1 m against emission polar angle.

    Attributes
    ----------
    polar_deg : ndarray, shape (n_angles,)
        Increasing.
    band_center_hz : ndarray, shape (n_bands,)
        Exact midbands.
    level_1m_db : ndarray, shape (n_angles, n_bands)
        dB re 20 uPa; NaN where not measured.
    convective_exponent : float
        n of the component (the pressure's (1 - M_r)^-n), as its levels were formed with.
    """

    polar_deg: np.ndarray
    band_center_hz: np.ndarray
    level_1m_db: np.ndarray
    convective_exponent: float = 2.0

    def at(self, polar_deg) -> np.ndarray:
        """Levels at polar angles (n,) -> (n, n_bands), NaN outside a band's measured angles."""
        theta = np.asarray(polar_deg, float)
        out = np.full((len(theta), len(self.band_center_hz)), np.nan)
        for k in range(len(self.band_center_hz)):
            ok = np.isfinite(self.level_1m_db[:, k])
            if ok.sum() < 2:
                continue
            a, lv = self.polar_deg[ok], self.level_1m_db[ok, k]
            inside = (theta >= a[0]) & (theta <= a[-1])
            out[inside, k] = np.interp(theta[inside], a, lv)
        return out


@dataclass(frozen=True)
class ReceivedHistory:
    """Reconstructed band mean squares at an observer.

    Attributes
    ----------
    reception_s : ndarray, shape (n,)
    power_pa2 : ndarray, shape (n, n_bands)
        Band mean squares (NaN where the directivity does not cover the emission angle).
    received_hz : ndarray, shape (n, n_bands)
        Band centres as received.
    polar_deg : ndarray, shape (n,)
        Emission polar angle.
    """

    reception_s: np.ndarray
    power_pa2: np.ndarray
    received_hz: np.ndarray
    polar_deg: np.ndarray

    def a_weighted_mean_square(self) -> np.ndarray:
        """Sum over bands of the A-weighted mean squares (Pa^2), shape (n,); NaN where a band
        with a level anywhere is uncovered here."""
        weighted = self.power_pa2 * 10.0 ** (a_weighting_db(self.received_hz) / 10.0)
        used = np.any(np.isfinite(self.power_pa2), axis=0)
        return np.sum(weighted[:, used], axis=1)


def received_history(directivity: Directivity, *, track: TrackModel, observer_enu_m,
                     reception_s, atmosphere: Atmosphere, pressure_gain: float,
                     body_m=(0.0, 0.0, 0.0), ground_image: bool = False) -> ReceivedHistory:
    """Band mean squares received from a component along a track (see the module notes).

    Parameters
    ----------
    directivity : Directivity
    track : TrackModel
    observer_enu_m : array (3,)
    reception_s : ndarray, shape (n,)
        Reception times (s after the track's epoch).
    atmosphere : Atmosphere
        Speed of sound, wind and absorption of the path.
    pressure_gain : float
        G of the observer: 2 on a ground plate, 1 for a raised microphone.
    body_m : array (3,)
        Where on the body the component sits.
    ground_image : bool
        Add the hard-ground reflection, energies added: the observer stands
        ``RAISED_MICROPHONE_M`` above the ground and its image as far below it.
    """
    obs = np.asarray(observer_enu_m, float)
    t = np.asarray(reception_s, float)
    paths = [obs]
    if ground_image:
        image = obs.copy()
        image[2] = obs[2] - 2.0 * RAISED_MICROPHONE_M
        paths.append(image)
    total = None
    polar = received = None
    for k, point in enumerate(paths):
        tau, geo = emission_times_s(track, np.asarray(body_m, float), point[None], t,
                                    atmosphere.wind_enu_m_s, atmosphere.c_m_s)
        tau, r, m_r, dop = tau[0], geo.distance_m[0], geo.mach_r[0], geo.doppler_factor[0]
        theta = polar_angle_deg(track.velocity(tau), track.position(tau), point)
        level = directivity.at(theta)
        f = directivity.band_center_hz[None, :]
        alpha = atmosphere.absorption_db_per_m(f / (1.0 - m_r[:, None]))
        power = (pressure_gain ** 2 * P0_PA ** 2 * 10.0 ** (level / 10.0)
                 / (r[:, None] ** 2
                    * (1.0 - m_r[:, None]) ** (2.0 * directivity.convective_exponent))
                 * 10.0 ** (-alpha * r[:, None] / 10.0))
        total = power if total is None else total + power
        if k == 0:
            polar, received = theta, f / dop[:, None]
    return ReceivedHistory(t, total, received, polar)


def energy_sum(mean_squares) -> np.ndarray:
    """The energy sum of several components' mean-square histories, shape (n,): at every time
    the sum of the components covered there, NaN only where none is. It is never below any one
    component, so no metric of the sum falls under the same metric of a part (the detectors and
    integrals are linear and positive); where a part is uncovered, the sum is a lower bound.

    Parameters
    ----------
    mean_squares : sequence of ndarray, each shape (n,)
        Pa^2, NaN where a component's directivity does not cover the emission angle.
    """
    stack = np.asarray(mean_squares, dtype=float)
    covered = np.isfinite(stack)
    return np.where(covered.any(axis=0), np.where(covered, stack, 0.0).sum(axis=0), np.nan)


def reference_flight(height_m: float, speed_m_s: float, *, duration_s: float,
                     rate_hz: float = 50.0) -> TrackModel:
    """A straight, level reference flight heading north, overhead the site origin at t = 0,
    from -duration/2 to +duration/2."""
    model, *_ = straight_track(speed_m_s, height_m, 0.0, 0.0, -duration_s / 2, duration_s / 2,
                               rate_hz=rate_hz)
    return model

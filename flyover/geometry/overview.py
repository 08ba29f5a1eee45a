"""Summary figures of a pass's geometry: overhead time, closest approach, coverage."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar

from flyover.geometry.track import TrackModel


@dataclass(frozen=True)
class PassGeometry:
    """Where and when the vehicle passed the array, times in seconds after the epoch.

    Attributes
    ----------
    covered_s : (float, float)
        Span covered by both the recording and the track.
    closest_s : float
        Time of closest approach of the body origin to the array centre.
    closest_m : float
    height_m : float
        Height above the array centre at closest approach.
    speed_m_s : float
        Ground-relative speed at closest approach.
    reaches_overhead : bool
        The vehicle comes nearer and then goes away within the covered span: the closest
        approach is a true one, not the span's end (a track that stops short of overhead).
    """

    covered_s: tuple[float, float]
    closest_s: float
    closest_m: float
    height_m: float
    speed_m_s: float
    reaches_overhead: bool


def pass_geometry(track: TrackModel, array_center_enu_m, recording_span_s) -> PassGeometry:
    """Closest approach and coverage of a pass."""
    lo = max(track.start_s, recording_span_s[0])
    hi = min(track.end_s, recording_span_s[1])
    c = np.asarray(array_center_enu_m, dtype=float)
    t = np.linspace(lo, hi, 2001)
    d = np.linalg.norm(track.position(t) - c, axis=1)
    k = int(np.argmin(d))
    a, b = t[max(k - 1, 0)], t[min(k + 1, len(t) - 1)]
    res = minimize_scalar(lambda s: np.linalg.norm(track.position(s) - c), bounds=(a, b),
                          method="bounded", options={"xatol": 1e-6})
    tc = float(res.x)
    pos = track.position(tc)
    # The range rate v . (x - c): negative while approaching, positive after.
    ends = np.array([lo, hi])
    range_rate = np.einsum("ij,ij->i", track.velocity(ends), track.position(ends) - c)
    return PassGeometry((lo, hi), tc, float(np.linalg.norm(pos - c)), float(pos[2] - c[2]),
                        float(np.linalg.norm(track.velocity(tc))),
                        bool(range_rate[0] < 0.0 < range_rate[1]))

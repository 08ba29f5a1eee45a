"""Flyovers of the array found in a whole flight's track: each closest approach in plan near the
array, the stretch over which the vehicle sees the array within the analysed polar angles, and
whether that stretch is straight, level and steady enough to be analysed as one pass.

Works on positions and times alone (site frame, seconds); :mod:`flyover.pipeline.find_passes`
reads the files and writes the pass entries.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# The track is resampled on this step, smoothed over SMOOTHING_S (a least-squares quadratic,
# which keeps a steady turn's curvature) and split where the log has a gap over GAP_S.
STEP_S = 0.1
SMOOTHING_S = 1.5
GAP_S = 2.0
# A closest approach must stand this far below the distances around it (between two
# approaches the vehicle flies away and back): it keeps the jitter of a hover from counting.
MIN_PROMINENCE_M = 10.0
MIN_SPEED_M_S = 2.0   # slower: hovering, not a flyover


@dataclass(frozen=True)
class PassTolerances:
    """What a flyover must hold over its analysed stretch to be a pass.

    Attributes
    ----------
    max_offset_m : float
        Closest approach in plan to the array centre (the lateral offset) at most.
    course_deg : float
        The ground track's direction within this of its mean.
    height_m : float
        Height within this of its mean.
    speed_pct : float
        Speed over the ground within this percentage of its mean.
    max_polar_offset_deg : float
        The analysed polar angles: 90 deg plus or minus this (the campaign's
        ``analysis.max_polar_offset_deg``).
    """

    max_offset_m: float = 15.0
    course_deg: float = 10.0
    height_m: float = 3.0
    speed_pct: float = 10.0
    max_polar_offset_deg: float = 60.0


@dataclass(frozen=True)
class FoundPass:
    """One flyover of the array (times in seconds on the track's own time axis).

    Attributes
    ----------
    overhead_s : float
        The closest approach in plan.
    start_s, end_s : float
        Emission times at which the array leaves the analysed polar angles (the stretch the
        windows analyse), or where the straight stretch ends.
    course_deg : float
        Mean direction over the ground, clockwise from north.
    height_m, speed_m_s : float
        Means over the stretch, height above the array centre.
    offset_m : float
        Lateral offset at the closest approach: positive with the array to the right.
    problems : tuple of str
        Why the flyover is not a pass (empty for a pass).
    """

    overhead_s: float
    start_s: float
    end_s: float
    course_deg: float
    height_m: float
    speed_m_s: float
    offset_m: float
    problems: tuple[str, ...] = ()

    @property
    def is_pass(self) -> bool:
        return not self.problems


def smoothed_track(time_s, enu_m) -> list[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """The track on a uniform time step, smoothed, with its velocity, split at the log's gaps.

    Parameters
    ----------
    time_s : ndarray, shape (n,)
        Increasing sample times (s).
    enu_m : ndarray, shape (n, 3)
        Positions in the site frame (m).

    Returns
    -------
    list of (t, position, velocity)
        Per stretch without a gap: times, shape (m,); positions (m, 3) in m; velocities
        (m, 3) in m/s.
    """
    from scipy.signal import savgol_filter
    t = np.asarray(time_s, float)
    p = np.asarray(enu_m, float)
    cuts = np.flatnonzero(np.diff(t) > GAP_S) + 1
    out = []
    for lo, hi in zip(np.r_[0, cuts], np.r_[cuts, len(t)]):
        if t[hi - 1] - t[lo] < 2 * SMOOTHING_S:
            continue
        grid = np.arange(t[lo], t[hi - 1], STEP_S)
        at = np.stack([np.interp(grid, t[lo:hi], p[lo:hi, k]) for k in range(3)], axis=1)
        n = min(len(grid) - (1 - len(grid) % 2), int(SMOOTHING_S / STEP_S) | 1)
        pos = savgol_filter(at, n, 2, axis=0)
        vel = savgol_filter(at, n, 2, deriv=1, delta=STEP_S, axis=0)
        out.append((grid, pos, vel))
    return out


def find_flyovers(time_s, enu_m, array_center_enu_m, tolerances: PassTolerances) -> list[FoundPass]:
    """Every flyover of the array in a flight's track, passes and not.

    A flyover is a closest approach in plan within ``tolerances.max_offset_m`` of the array
    centre. Its stretch runs from the closest approach outwards while the polar angle from the
    flight direction to the array centre stays within the analysed angles; over it, the course,
    height and speed must stay within their tolerances, or the flyover is listed with the
    reasons it is not a pass (a turn, a climb, a hover, a log that stops).

    Parameters
    ----------
    time_s : ndarray, shape (n,)
    enu_m : ndarray, shape (n, 3)
        The track's samples (s, m, site frame).
    array_center_enu_m : ndarray, shape (3,)
    tolerances : PassTolerances

    Returns
    -------
    list of FoundPass
        In time order.
    """
    from scipy.signal import find_peaks

    from flyover.geometry.windows import polar_angle_deg  # the command line reads our defaults
    centre = np.asarray(array_center_enu_m, float)
    found = []
    for t, pos, vel in smoothed_track(time_s, enu_m):
        plan = np.linalg.norm(pos[:, :2] - centre[:2], axis=1)
        minima, _ = find_peaks(-plan, height=-tolerances.max_offset_m,
                               prominence=MIN_PROMINENCE_M)
        polar = polar_angle_deg(vel, pos, centre)
        inside = np.abs(polar - 90.0) <= tolerances.max_polar_offset_deg
        for k in minima:
            found.append(_flyover(t, pos, vel, inside, int(k), centre, tolerances))
    return sorted(found, key=lambda f: f.overhead_s)


def _flyover(t, pos, vel, inside, k: int, centre, tol: PassTolerances) -> FoundPass:
    """The flyover whose closest approach is sample ``k`` of a smoothed stretch."""
    lo, hi = k, k
    while lo > 0 and inside[lo - 1]:
        lo -= 1
    while hi < len(t) - 1 and inside[hi + 1]:
        hi += 1
    s = slice(lo, hi + 1)
    v_plan = vel[s, :2]
    speed = np.linalg.norm(vel[s], axis=1)
    course = np.rad2deg(np.arctan2(v_plan[:, 0], v_plan[:, 1]))
    mean_course = float(np.rad2deg(np.arctan2(np.mean(np.sin(np.deg2rad(course))),
                                              np.mean(np.cos(np.deg2rad(course))))) % 360.0)
    course_dev = np.abs((course - mean_course + 180.0) % 360.0 - 180.0)
    height = pos[s, 2] - centre[2]
    mean_speed = float(np.mean(speed))
    heading = np.deg2rad(mean_course)
    right = np.array([np.cos(heading), -np.sin(heading)])   # starboard of the course
    offset = float((centre[:2] - pos[k, :2]) @ right)
    problems = []
    if np.linalg.norm(vel[k]) < MIN_SPEED_M_S:
        problems.append(f"hovering: {np.linalg.norm(vel[k]):.1f} m/s over the array "
                        f"(a pass flies at {MIN_SPEED_M_S:g} m/s or more)")
    else:
        if lo == 0 or hi == len(t) - 1:
            problems.append("the log stops before the array leaves the analysed angles "
                            f"(90 +- {tol.max_polar_offset_deg:g} deg)")
        if course_dev.max() > tol.course_deg:
            problems.append(f"turning: the course moves {course_dev.max():.0f} deg from its "
                            f"mean over the analysed angles (tolerance {tol.course_deg:g} deg)")
        if np.ptp(height) / 2 > tol.height_m:
            problems.append(f"climbing or descending: the height spans {height.min():.1f} to "
                            f"{height.max():.1f} m (tolerance +-{tol.height_m:g} m)")
        speed_dev = 100.0 * np.max(np.abs(speed - mean_speed)) / mean_speed
        if speed_dev > tol.speed_pct:
            problems.append(f"speed varies by {speed_dev:.0f} % of its mean "
                            f"{mean_speed:.1f} m/s (tolerance {tol.speed_pct:g} %)")
    return FoundPass(overhead_s=float(t[k]), start_s=float(t[lo]), end_s=float(t[hi]),
                     course_deg=mean_course, height_m=float(np.mean(height)),
                     speed_m_s=mean_speed, offset_m=offset, problems=tuple(problems))


def proposed_labels(passes: list[FoundPass], *, height_m: float, speed_pct: float,
                    rpm=None, rpm_pct: float = 5.0) -> list[str]:
    """A configuration label per pass, from clusters of height, speed and (when logged) rotor
    speed: passes within the tolerances of their neighbours share a cluster. The label names
    the cluster's median height and speed (``30m-15ms``), and its rotor speed when the rotor
    speeds split passes of one height and speed (``30m-15ms-5200rpm``). The user edits them.

    Parameters
    ----------
    passes : list of FoundPass
    height_m, speed_pct : float
        A new cluster starts where the sorted heights step by more than twice ``height_m``, or
        the speeds by more than twice ``speed_pct`` of the speed.
    rpm : sequence of float, optional
        Each pass's mean rotor speed (NaN where not logged).
    """
    n = len(passes)
    if n == 0:
        return []
    heights = np.array([p.height_m for p in passes])
    speeds = np.array([p.speed_m_s for p in passes])
    rpm = np.full(n, np.nan) if rpm is None else np.asarray(rpm, float)
    group = _clusters(heights, lambda a, b: b - a > 2 * height_m)
    labels = [""] * n
    for g in np.unique(group):
        members = np.flatnonzero(group == g)
        by_speed = _clusters(speeds[members], lambda a, b: b - a > 2e-2 * speed_pct * a)
        for s in np.unique(by_speed):
            mine = members[by_speed == s]
            base = f"{np.median(heights[mine]):.0f}m-{np.median(speeds[mine]):.0f}ms"
            r = rpm[mine]
            by_rpm = (_clusters(r, lambda a, b: b - a > 2e-2 * rpm_pct * a)
                      if np.all(np.isfinite(r)) else np.zeros(len(mine), int))
            for q in np.unique(by_rpm):
                chosen = mine[by_rpm == q]
                name = (base if len(np.unique(by_rpm)) == 1
                        else f"{base}-{np.median(r[by_rpm == q]):.0f}rpm")
                for i in chosen:
                    labels[i] = name
    return labels


def _clusters(values: np.ndarray, splits) -> np.ndarray:
    """Cluster numbers of 1-D values: sorted, a new cluster where ``splits(a, b)`` holds
    between neighbours a <= b."""
    order = np.argsort(values, kind="stable")
    ids = np.zeros(len(values), int)
    current = 0
    for i in range(1, len(order)):
        if splits(values[order[i - 1]], values[order[i]]):
            current += 1
        ids[order[i]] = current
    return ids

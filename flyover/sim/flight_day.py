"""A simulated flight day's track: passes back and forth over the array joined by turns (and
whatever else a flight holds near the array: a circle overhead, a hover), sampled as a GNSS
log. For testing the pass finder against the passes as flown."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class FlownLeg:
    """One straight leg as flown: over the array centre's line at ``offset_m`` (positive with
    the array to the right), eastbound or westbound."""

    height_m: float
    speed_m_s: float
    eastbound: bool
    offset_m: float
    overhead_s: float

    @property
    def course_deg(self) -> float:
        return 90.0 if self.eastbound else 270.0


def racetrack_day(legs, *, half_length_m: float = 250.0, turn_radius_m: float = 8.0,
                  circle_overhead: tuple[float, float, float] | None = None,
                  hover_overhead_s: float = 0.0, rate_hz: float = 10.0, noise_m: float = 0.0,
                  seed: int = 0):
    """A flight of straight legs along the east-west line through the array centre, each
    turned into the next by a left half circle: eastbound legs lie ``turn_radius_m`` south of
    the line and westbound ones as far north, both with the array on their left.

    Parameters
    ----------
    legs : sequence of (height_m, speed_m_s)
        The legs in the order flown, alternately eastbound (first) and westbound; the height
        changes during the turn before a leg.
    half_length_m : float
        Each leg runs from this far west of the centre to this far east (or back).
    circle_overhead : (height_m, radius_m, speed_m_s), optional
        After the legs, one full circle at that height whose path crosses over the array
        centre (a turn near the array: never a pass).
    hover_overhead_s : float
        Then a hover this long over the array centre at the last height.
    rate_hz, noise_m, seed : GNSS rate, noise per coordinate, its seed.

    Returns
    -------
    time_s : ndarray, shape (n,)
    enu_m : ndarray, shape (n, 3)
        Relative to the array centre (add the centre).
    flown : list of FlownLeg
    """
    pieces = []        # (duration_s, function of local time -> (k, 3) positions)
    flown = []
    t = 0.0
    r = turn_radius_m
    for i, (height, speed) in enumerate(legs):
        east = i % 2 == 0
        y = -r if east else r
        x0, x1 = (-half_length_m, half_length_m) if east else (half_length_m, -half_length_m)
        duration = 2 * half_length_m / speed
        pieces.append((duration, lambda s, x0=x0, x1=x1, y=y, h=height, d=duration:
                       np.stack([x0 + (x1 - x0) * s / d, np.full_like(s, y),
                                 np.full_like(s, h)], 1)))
        flown.append(FlownLeg(height, speed, east, offset_m=-r,
                              overhead_s=t + half_length_m / speed))
        t += duration
        if i + 1 < len(legs):
            next_height, next_speed = legs[i + 1]
            arc_speed = 0.5 * (speed + next_speed)
            turn = np.pi * r / arc_speed
            cx = x1
            pieces.append((turn, lambda s, cx=cx, east=east, h0=height, h1=next_height,
                           d=turn: _half_circle(s / d, cx, r, east, h0, h1)))
            t += turn
    if circle_overhead is not None:
        # A full circle through the point over the array centre: a turn right over the array.
        h, radius, speed = circle_overhead
        last = pieces[-1][1](np.array([pieces[-1][0]]))[0]
        entry = np.array([2 * radius, 0.0, h])
        approach = np.linalg.norm(entry[:2] - last[:2]) / speed
        pieces.append((approach, lambda s, a=last, b=entry, d=approach:
                       a + np.outer(s / d, b - a)))
        loop = 2 * np.pi * radius / speed
        pieces.append((loop, lambda s, h=h, d=loop: np.stack([
            radius + radius * np.cos(2 * np.pi * s / d), radius * np.sin(2 * np.pi * s / d),
            np.full_like(s, h)], 1)))
    if hover_overhead_s > 0:
        last = pieces[-1][1](np.array([pieces[-1][0]]))[0]
        glide = max(1.0, np.hypot(last[0], last[1]) / 3.0)
        pieces.append((glide, lambda s, a=last, d=glide: np.stack([
            a[0] * (1 - s / d), a[1] * (1 - s / d), np.full_like(s, a[2])], 1)))
        pieces.append((hover_overhead_s, lambda s, h=last[2]: np.stack([
            np.zeros_like(s), np.zeros_like(s), np.full_like(s, h)], 1)))
    total = sum(d for d, _ in pieces)
    time_s = np.arange(0.0, total, 1.0 / rate_hz)
    enu = np.empty((len(time_s), 3))
    start = 0.0
    for duration, at in pieces:
        k = (time_s >= start) & (time_s < start + duration)
        enu[k] = at(time_s[k] - start)
        start += duration
    enu += np.random.default_rng(seed).normal(0.0, noise_m, enu.shape)
    return time_s, enu, flown


def _half_circle(frac, cx: float, r: float, eastbound: bool, h0: float, h1: float):
    """The turn from the end of a leg onto the next: a half circle about (cx, 0), climbing
    from h0 to h1. Eastbound legs end at (cx, -r) and turn left onto the line y = +r."""
    frac = np.asarray(frac, float)
    if eastbound:   # from angle -90 deg anticlockwise to +90 deg, east of cx
        angle = -0.5 * np.pi + np.pi * frac
    else:           # from +90 deg anticlockwise to 270 deg, west of cx
        angle = 0.5 * np.pi + np.pi * frac
    return np.stack([cx + r * np.cos(angle), r * np.sin(angle), h0 + (h1 - h0) * frac], 1)


def write_flight_recording(path, scenario, time_s, enu_m, atmosphere, *, start_s: float,
                           duration_s: float, block_s: float = 10.0, seed: int = 0) -> np.ndarray:
    """A continuous recording of the whole flight by the scenario's array (its sources on the
    noiseless track, its noise and calibration spread), written block by block so that memory
    does not grow with the flight.

    Parameters
    ----------
    path : path-like
        The WAV file (32-bit float, full scale +-1 in recorded units).
    scenario : flyover.sim.scenario.Scenario
    time_s, enu_m : ndarray
        The true track (seconds after the flight's epoch; site frame, m); the yaw follows the
        flight direction.
    atmosphere : Atmosphere
    start_s, duration_s : float
        The recording's first sample and length, seconds after the flight's epoch.

    Returns
    -------
    ndarray, shape (n_mics,)
        Pa per recorded unit of each microphone (its calibration).
    """
    import soundfile as sf

    from flyover.forward.moving_source import Propagator, SourceSignal, received_pressure_pa
    from flyover.geometry.track import fit_track
    from flyover.sim.scenario import incoherent_noise_pa
    fs = scenario.sample_rate_hz
    truth = fit_track(time_s, enu_m, 0.001)
    signals = [SourceSignal(src, fs, time_s[0], time_s[-1]) for src in scenario.sources]
    bodies = [np.asarray(s.body_m) for s in scenario.sources]
    mics = scenario.mic_enu_m
    prop = Propagator(mics, atmosphere, scenario.pressure_gain)
    spread = np.random.default_rng(seed).normal(0.0, scenario.calibration_spread_db, len(mics))
    k = scenario.pa_per_unit * 10.0 ** (spread / 20)
    n_total = int(round(duration_s * fs))
    block = int(round(block_s * fs))
    with sf.SoundFile(path, "w", int(fs), len(mics), subtype="FLOAT") as out:
        for first in range(0, n_total, block):
            n = min(block, n_total - first)
            p = received_pressure_pa(truth, signals, bodies, prop, fs, start_s + first / fs, n)
            p += incoherent_noise_pa(len(mics), n, scenario.noise_spl_db, seed + 1 + first)
            out.write((p / k[:, None]).T.astype(np.float32))
    return k

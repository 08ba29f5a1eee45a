"""A weather station's samples averaged over a pass.

Temperature, humidity and pressure are averaged arithmetically; the wind as a vector (the mean
of the velocity it blows with), so that 350 deg and 10 deg average to 0 deg, not 180 deg, and a
wind that turns round averages to little. The spread of each quantity over the span (highest
minus lowest sample) is reported beside its mean and checked against the campaign's limits.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.model.errors import FlyoverInputError
from flyover.model.timebase import iso_utc


@dataclass(frozen=True)
class WeatherSamples:
    """A weather station's log.

    Attributes
    ----------
    utc_ns : ndarray, shape (n,)
    temperature_c, relative_humidity_pct : ndarray, shape (n,)
    pressure_kpa : ndarray, shape (n,), or None when the station has no barometer
    wind_speed_m_s : ndarray, shape (n,)
    wind_from_deg : ndarray, shape (n,)
        Direction the wind blows from, clockwise from true north.
    sensor_height_m : float or None
        Height of the wind sensor above the ground.
    """

    utc_ns: np.ndarray
    temperature_c: np.ndarray
    relative_humidity_pct: np.ndarray
    pressure_kpa: np.ndarray | None
    wind_speed_m_s: np.ndarray
    wind_from_deg: np.ndarray
    sensor_height_m: float | None = None


def mean_wind(speed_m_s, from_deg) -> tuple[float, float]:
    """Vector mean of winds given as speed and direction blown from: (speed, from_deg)."""
    s = np.asarray(speed_m_s, float)
    d = np.deg2rad(np.asarray(from_deg, float))
    east, north = np.mean(s * np.sin(d)), np.mean(s * np.cos(d))   # towards the source
    speed = float(np.hypot(east, north))
    return speed, float(np.mod(np.rad2deg(np.arctan2(east, north)), 360.0)) if speed > 0 else 0.0


def weather_over(samples: WeatherSamples, start_ns: int, end_ns: int, *, where: str,
                 pressure_kpa: float | None = None) -> tuple[Atmosphere, dict]:
    """The mean atmosphere over [start, end] and a summary of the samples behind it.

    A span the file does not cover (no sample before its start or none after its end) is
    refused; so is a span with fewer than two samples. ``pressure_kpa`` stands in when the
    station logs none.

    Returns
    -------
    atmosphere : Atmosphere
    summary : dict
        ``samples``, ``start_utc_ns``, ``end_utc_ns``, the means, the scalar mean wind speed,
        and the spreads (max - min) ``wind_speed_spread_m_s``, ``temperature_spread_k``,
        ``wind_direction_spread_deg`` (of the directions about their vector mean).
    """
    t = samples.utc_ns
    if len(t) == 0 or t[0] > start_ns or t[-1] < end_ns:
        found = f"{iso_utc(int(t[0]))} to {iso_utc(int(t[-1]))}" if len(t) else "no samples"
        raise FlyoverInputError("the weather file does not cover the pass", where,
                                f"samples from {iso_utc(start_ns)} to {iso_utc(end_ns)}", found)
    k = (t >= start_ns) & (t <= end_ns)
    if np.sum(k) < 2:
        raise FlyoverInputError("fewer than two weather samples over the pass", where,
                                "a station logging at least every few seconds",
                                f"{int(np.sum(k))} sample(s)")
    speed, direction = mean_wind(samples.wind_speed_m_s[k], samples.wind_from_deg[k])
    if samples.pressure_kpa is not None:
        pressure = float(np.mean(samples.pressure_kpa[k]))
    elif pressure_kpa is not None:
        pressure = float(pressure_kpa)
    else:
        raise FlyoverInputError("the weather file has no pressure", where,
                                "a pressure_kpa column, or the campaign-level "
                                "atmosphere.pressure_kpa")
    atm = Atmosphere(float(np.mean(samples.temperature_c[k])),
                     float(np.mean(samples.relative_humidity_pct[k])), pressure, speed, direction)
    turn = np.mod(samples.wind_from_deg[k] - direction + 180.0, 360.0) - 180.0
    summary = {
        "samples": int(np.sum(k)), "start_utc_ns": int(start_ns), "end_utc_ns": int(end_ns),
        "temperature_c": atm.temperature_c, "relative_humidity_pct": atm.relative_humidity_pct,
        "pressure_kpa": pressure, "wind_speed_m_s": speed, "wind_from_deg": direction,
        "wind_speed_scalar_mean_m_s": float(np.mean(samples.wind_speed_m_s[k])),
        "wind_speed_spread_m_s": float(np.ptp(samples.wind_speed_m_s[k])),
        "temperature_spread_k": float(np.ptp(samples.temperature_c[k])),
        "wind_direction_spread_deg": float(np.ptp(turn)),
        "sensor_height_m": samples.sensor_height_m,
    }
    return atm, summary


def weather_findings(summary: dict, limits, track_heading_deg: float) -> list[tuple]:
    """Each weather limit a pass is held to, with its measured value:
    ``(name, value, limit, unit)``, broken where value > limit.

    ``limits`` is a :class:`flyover.campaign.WeatherLimits`; the crosswind is the mean
    wind's component across the pass's ground track. A typed atmosphere has no spreads: only
    the mean wind and crosswind are held to their limits.
    """
    cross = abs(summary["wind_speed_m_s"]
                * np.sin(np.deg2rad(summary["wind_from_deg"] - track_heading_deg)))
    checks = [
        ("mean wind", summary["wind_speed_m_s"], limits.wind_mean_max_m_s, "m/s"),
        ("mean crosswind", cross, limits.crosswind_mean_max_m_s, "m/s"),
        ("wind speed spread", summary.get("wind_speed_spread_m_s"), limits.wind_spread_max_m_s,
         "m/s"),
        ("temperature spread", summary.get("temperature_spread_k"),
         limits.temperature_spread_max_k, "K"),
    ]
    return [(name, float(value), float(limit), unit) for name, value, limit, unit in checks
            if value is not None]


def weather_flags(summary: dict, limits, track_heading_deg: float) -> list[str]:
    """The limits a pass's weather breaks, in words (empty when none); see
    :func:`weather_findings`."""
    return [f"{name} {value:.1f} {unit} above the limit {limit:g} {unit}"
            for name, value, limit, unit in weather_findings(summary, limits, track_heading_deg)
            if value > limit]

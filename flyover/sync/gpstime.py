"""GPS time to UTC, with the leap seconds in force.

GPS time started at 1980-01-06T00:00:00 UTC and has no leap seconds, so GPS - UTC grows by one
second at every leap second added to UTC. The steps below are those announced in IERS Bulletin C
(from memory; the last one, to 18 s, took effect at 2017-01-01T00:00:00 UTC and none has been
added since). A log dated after a future leap second would need the table extended.
"""

from __future__ import annotations

import numpy as np

GPS_EPOCH_UTC_NS = 315_964_800 * 1_000_000_000     # 1980-01-06T00:00:00Z
WEEK_NS = 7 * 86_400 * 1_000_000_000

# (UTC date from which GPS - UTC is the value, value in s)
LEAP_STEPS = (
    ("1981-07-01", 1), ("1982-07-01", 2), ("1983-07-01", 3), ("1985-07-01", 4),
    ("1988-01-01", 5), ("1990-01-01", 6), ("1991-01-01", 7), ("1992-07-01", 8),
    ("1993-07-01", 9), ("1994-07-01", 10), ("1996-01-01", 11), ("1997-07-01", 12),
    ("1999-01-01", 13), ("2006-01-01", 14), ("2009-01-01", 15), ("2012-07-01", 16),
    ("2015-07-01", 17), ("2017-01-01", 18),
)
_STEP_UTC_NS = np.array([np.datetime64(d, "ns").astype(np.int64) for d, _ in LEAP_STEPS])
_STEP_VALUE_S = np.array([v for _, v in LEAP_STEPS])


def gps_minus_utc_s(utc_ns) -> np.ndarray:
    """GPS - UTC in whole seconds at UTC times (int ns since 1970)."""
    k = np.searchsorted(_STEP_UTC_NS, np.asarray(utc_ns, np.int64), side="right")
    return np.concatenate([[0], _STEP_VALUE_S])[k]


def gps_to_utc_ns(gps_ns) -> np.ndarray:
    """GPS times (int ns since 1970 counted on the GPS scale) to UTC (int ns since 1970)."""
    gps = np.asarray(gps_ns, np.int64)
    # A step to k seconds happens at GPS time (its UTC date + k s).
    k = np.searchsorted(_STEP_UTC_NS + _STEP_VALUE_S * 1_000_000_000, gps, side="right")
    return gps - np.concatenate([[0], _STEP_VALUE_S])[k] * 1_000_000_000


def gps_week_to_utc_ns(week, ms_of_week) -> np.ndarray:
    """GPS week number and milliseconds of the week (as receivers and autopilots log them) to
    UTC (int ns since 1970)."""
    gps = (GPS_EPOCH_UTC_NS + np.asarray(week, np.int64) * WEEK_NS
           + np.round(np.asarray(ms_of_week, float) * 1e6).astype(np.int64))
    return gps_to_utc_ns(gps)

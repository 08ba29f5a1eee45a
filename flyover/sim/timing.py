"""Timing channels as a recorder would record them: GNSS PPS and IRIG-B (level shift and AM).

Edges are smoothed with a Gaussian step of ``rise_s`` (as a recorder's anti-aliasing filter
would), so that their position between samples survives sampling. Times are true UTC, passed as
a whole second ``base_utc_s`` and float seconds after it (exact over a recording).
"""

from __future__ import annotations

import datetime as dt

import numpy as np
from scipy.special import erf

from flyover.sync.timecode import _IRIG_FIELDS, IRIG_BIT_S, IRIG_MARKERS

PPS_WIDTH_S = 0.1
IRIG_WIDTH_S = (0.002, 0.005, 0.008)   # binary 0, binary 1, position identifier
IRIG_CARRIER_HZ = 1000.0


def _step(t, rise_s: float) -> np.ndarray:
    return 0.5 * (1.0 + erf(t / (rise_s * np.sqrt(2.0))))


def pps_signal(t_s, *, rise_s: float, amplitude: float = 0.5) -> np.ndarray:
    """A PPS pulse train sampled at times ``t_s`` (s after a whole UTC second)."""
    t = np.asarray(t_s, float)
    u = t - np.floor(t)          # time since the last second edge; the next one's rise at 1
    return amplitude * (_step(u, rise_s) - _step(u - PPS_WIDTH_S, rise_s)
                        + _step(u - 1.0, rise_s))


def irig_frame_symbols(utc_s: int, *, with_year: bool = True) -> np.ndarray:
    """The 100 symbols (0, 1, 2 = position identifier) of the IRIG-B frame for a UTC second."""
    when = dt.datetime.fromtimestamp(int(utc_s), dt.timezone.utc)
    values = {"seconds": when.second, "minutes": when.minute, "hours": when.hour,
              "day": when.timetuple().tm_yday, "year": when.year % 100 if with_year else 0}
    sym = np.zeros(100, int)
    sym[list(IRIG_MARKERS)] = 2
    for name, spec in _IRIG_FIELDS.items():
        v = values[name]
        digits = {1: v % 10, 10: (v // 10) % 10, 100: v // 100}
        for bit, weight in spec:
            scale = 100 if weight >= 100 else 10 if weight >= 10 else 1
            if (digits[scale] >> int(np.log2(weight // scale))) & 1:
                sym[bit] = 1
    return sym


def irig_b_signal(t_s, base_utc_s: int, *, form: str, rise_s: float, with_year: bool = True,
                  amplitude: float = 0.5) -> np.ndarray:
    """IRIG-B at times ``t_s`` (s after UTC second ``base_utc_s``): 'dcls' or 'am'."""
    t = np.asarray(t_s, float)
    sec = np.floor(t).astype(np.int64)
    out = np.empty(len(t))
    for s in np.unique(sec):
        here = sec == s
        sym = irig_frame_symbols(base_utc_s + int(s), with_year=with_year)
        u = t[here] - s
        bit = np.minimum((u / IRIG_BIT_S).astype(int), 99)
        v = u - bit * IRIG_BIT_S              # time since the bit's leading edge
        width = np.asarray(IRIG_WIDTH_S)[sym[bit]]
        # The next bit's rising edge starts inside this one's last samples.
        level = _step(v, rise_s) - _step(v - width, rise_s) + _step(v - IRIG_BIT_S, rise_s)
        if form == "am":
            # Mark to space 10:3; each bit starts on a positive-going carrier zero crossing.
            out[here] = amplitude * (0.3 + 0.7 * level) * np.sin(2 * np.pi * IRIG_CARRIER_HZ * u)
        else:
            out[here] = amplitude * level
    return out

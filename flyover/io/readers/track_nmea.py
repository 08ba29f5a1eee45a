"""NMEA 0183 track files (GNSS loggers): GGA, RMC and optionally HDT sentences, via pynmea2.

GGA gives the time of day, the position, the height above mean sea level and the geoid
separation (so ellipsoidal height = altitude + separation, without the site's undulation when
the receiver gives it) and the fix quality; RMC the date and the ground speed (compared with the
positions' in a note); HDT the true heading, taken as the yaw with pitch and roll 0 when every
fix has one. Sentences with a bad checksum or that do not
parse are skipped and counted; more than 1 in 20 bad is refused (our limit: a logger that bad
is not to be trusted). Fixes of quality 0 (no fix) are dropped and reported.
"""

from __future__ import annotations

import datetime

import numpy as np
import pynmea2

from flyover.geometry.frames import SiteFrame
from flyover.io.readers import Reader, register
from flyover.io.readers._logtrack import (ellipsoidal_height, no_fix_note, no_fix_spans,
                                          site_positions)
from flyover.model.errors import FlyoverInputError
from flyover.model.flightdata import TrackSamples

MAX_BAD_FRACTION = 0.05
KNOT_M_S = 1852.0 / 3600.0


def _sniff(path) -> bool:
    with open(path, "rb") as fh:
        head = fh.read(256).lstrip()
    return head.startswith(b"$G") and b"*" in head.split(b"\n")[0]


def read_nmea(path, site: SiteFrame, geoid_undulation_m: float | None = None,
              **_) -> TrackSamples:
    """Read the fixes of an NMEA 0183 log (see the module docstring)."""
    where = str(path)
    text = open(path, encoding="ascii", errors="replace").read().splitlines()
    bad, total = [], 0
    gga, dates, headings, speeds = [], {}, {}, {}
    for row, line in enumerate(text, start=1):
        line = line.strip()
        if not line.startswith("$"):
            continue
        total += 1
        try:
            msg = pynmea2.parse(line, check=True)
        except (pynmea2.ChecksumError, pynmea2.ParseError, ValueError):
            bad.append(row)
            continue
        kind = msg.sentence_type
        if kind == "GGA" and msg.timestamp is not None:
            gga.append((row, msg))
        elif kind == "RMC" and msg.datestamp is not None and msg.timestamp is not None:
            dates[msg.timestamp] = msg.datestamp
            if msg.spd_over_grnd not in (None, ""):
                speeds[msg.timestamp] = float(msg.spd_over_grnd) * KNOT_M_S
        elif kind == "HDT" and msg.heading not in (None, ""):
            headings[len(gga)] = float(msg.heading)
    if total and len(bad) > MAX_BAD_FRACTION * total:
        raise FlyoverInputError(f"{len(bad)} of {total} NMEA sentences have a bad checksum or "
                                "do not parse", f"{where}, rows {bad[:5]}",
                                f"at most {MAX_BAD_FRACTION:.0%} bad sentences",
                                hint="is the file cut or the logger's line noisy?")
    if not gga:
        raise FlyoverInputError("no GGA sentence (position fix) in the file", where,
                                "NMEA 0183 GGA and RMC sentences")
    if not dates:
        raise FlyoverInputError("no RMC sentence with a date in the file", where,
                                "RMC sentences (GGA gives only the time of day)")
    rmc_times = sorted(dates)
    utc, lat, lon, height, heading, seen = [], [], [], [], [], []
    for k, (row, msg) in enumerate(gga):
        day = dates.get(msg.timestamp)
        if day is None:  # the RMC of the nearest earlier time, else the first
            earlier = [t for t in rmc_times if t <= msg.timestamp]
            day = dates[earlier[-1] if earlier else rmc_times[0]]
        when = datetime.datetime.combine(day, msg.timestamp.replace(tzinfo=None))
        t_ns = int(np.datetime64(when, "ns").astype(np.int64))
        seen.append((t_ns, int(msg.gps_qual or 0) > 0))
        if not seen[-1][1]:
            continue
        if msg.altitude is None:
            raise FlyoverInputError("a GGA fix without altitude", f"{where}, row {row}",
                                    "altitude above mean sea level in field 9", "empty")
        separation = float(msg.geo_sep) if msg.geo_sep not in (None, "") else None
        msl = float(msg.altitude)
        height.append(msl + separation if separation is not None else
                      float(ellipsoidal_height(msl, f"{where}, row {row} (GGA without geoid "
                                               "separation)", geoid_undulation_m)))
        utc.append(t_ns)
        lat.append(msg.latitude)
        lon.append(msg.longitude)
        heading.append(headings.get(k + 1, headings.get(k, np.nan)))
    notes = []
    if bad:
        notes.append(f"{len(bad)} of {total} sentences skipped (bad checksum or unparsable), "
                     f"first at row {bad[0]}")
    seen.sort()
    n_no_fix = sum(1 for _, ok in seen if not ok)
    if n_no_fix:
        spans = no_fix_spans([t for t, _ in seen], [ok for _, ok in seen])
        notes.append(no_fix_note(spans, n_no_fix))
    order = np.argsort(utc, kind="stable")
    utc_ns = np.asarray(utc, np.int64)[order]
    enu = site_positions(site, np.asarray(lat)[order], np.asarray(lon)[order],
                         np.asarray(height)[order], where)
    logged = np.array([speeds.get(m.timestamp, np.nan) for _, m in gga
                       if int(m.gps_qual or 0) > 0], float)[order]
    if np.sum(np.isfinite(logged)) > 2 and len(utc_ns) > 2:
        t_s = (utc_ns - utc_ns[0]) / 1e9
        ground = np.linalg.norm(np.gradient(enu[:, :2], t_s, axis=0), axis=1)
        diff = (logged - ground)[np.isfinite(logged)]
        notes.append(f"RMC ground speed {np.nanmean(logged):.1f} m/s; differs from the "
                     f"positions' by {np.sqrt(np.mean(diff ** 2)):.2f} m/s rms")
    att = None
    hdg = np.asarray(heading, float)[order]
    if np.all(np.isfinite(hdg)):
        att = np.stack([np.mod(hdg, 360.0), np.zeros_like(hdg), np.zeros_like(hdg)], axis=1)
        notes.append("attitude: heading from HDT, pitch and roll taken as 0")
    return TrackSamples(utc_ns, enu, att, "NMEA 0183 (GGA, RMC)", (), tuple(notes))


register(Reader("track", "NMEA 0183", (".nmea", ".nma"), read_nmea, _sniff))

"""ArduPilot DataFlash logs (.bin), via pymavlink's DataFlash reader.

- UTC: GPS messages carry the fix's GPS week (``GWk``) and milliseconds of the week (``GMS``)
  beside the log's boot time (``TimeUS``): UTC = GPS time - the leap seconds in force
  (:mod:`flyover.sync.gpstime`), and the boot time maps to UTC by the median of their difference
  over the samples with a 3D fix (``Status`` >= 3); its spread is reported. ``TimeUS`` is when the
  message was logged, later than the fix by the receiver's latency: what is left looks like a
  clock offset, which the acoustic clock estimate takes out.
- Position: the EKF estimate ``POS`` (``Lat``, ``Lng``, ``Alt`` above mean sea level, plus the
  site's geoid undulation) when the log has it, else the ``GPS`` fixes; samples while the GNSS
  had no 3D fix are dropped and reported.
- Attitude: ``ATT`` ``Roll``, ``Pitch``, ``Yaw`` (deg), interpolated onto the position times.
- Motor speeds: ``ESC`` ``RPM`` per ``Instance`` (motor = instance + 1).
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from flyover.geometry.frames import SiteFrame
from flyover.io.readers import Reader, register
from flyover.io.readers._logtrack import (attitude_at, boot_to_utc_offset_ns, drop_in_spans,
                                          ellipsoidal_height, no_fix_note, no_fix_spans,
                                          quaternion_from_ypr, site_positions)
from flyover.model.errors import FlyoverInputError
from flyover.model.flightdata import MotorSpeeds, TrackSamples
from flyover.sync.gpstime import gps_week_to_utc_ns

MIN_STATUS = 3  # GPS_OK_FIX_3D


def _sniff(path) -> bool:
    with open(path, "rb") as fh:
        head = fh.read(3)
    return head == b"\xa3\x95\x80"   # a DataFlash log starts with its FMT definitions


def read_dataflash(path, site: SiteFrame, geoid_undulation_m: float | None = None,
                   **_) -> TrackSamples:
    """Read an ArduPilot DataFlash log's track (see the module docstring)."""
    from pymavlink import DFReader
    where = str(path)
    try:
        log = DFReader.DFReader_binary(str(path), zero_time_base=False)
    except Exception as exc:  # the reader raises bare exceptions on damaged files
        raise FlyoverInputError("not a readable DataFlash log", where, "an ArduPilot .bin log",
                                str(exc).split("\n")[0]) from None
    rows = defaultdict(list)
    while True:
        m = log.recv_match(type=["GPS", "POS", "ATT", "ESC"])
        if m is None:
            break
        kind = m.get_type()
        if kind == "GPS":
            rows[kind].append((m.TimeUS, m.Status, m.GWk, m.GMS, m.Lat, m.Lng, m.Alt))
        elif kind == "POS":
            rows[kind].append((m.TimeUS, m.Lat, m.Lng, m.Alt))
        elif kind == "ATT":
            rows[kind].append((m.TimeUS, m.Yaw, m.Pitch, m.Roll))
        else:
            rows[kind].append((m.TimeUS, m.Instance, m.RPM))
    if not rows["GPS"]:
        raise FlyoverInputError("the log has no GNSS data", where, "GPS messages",
                                ", ".join(sorted(rows)) or "none")
    gps = np.array(rows["GPS"], float)
    fixed = gps[:, 1] >= MIN_STATUS
    timed = fixed & (gps[:, 2] > 0)
    gps_utc = gps_week_to_utc_ns(gps[timed, 2].astype(np.int64), gps[timed, 3])
    offset_ns, clock_note = boot_to_utc_offset_ns(
        gps_utc, gps[timed, 0].astype(np.int64) * 1000, where, "GPS GWk/GMS")

    def utc(time_us):
        return np.asarray(time_us, np.int64) * 1000 + offset_ns

    gnss_utc = utc(gps[:, 0])
    spans = no_fix_spans(gnss_utc, fixed)
    if rows["POS"]:
        pos = np.array(rows["POS"], float)
        source = "ArduPilot DataFlash (POS)"
    else:
        pos = gps[:, [0, 4, 5, 6]]
        source = "ArduPilot DataFlash (GPS)"
    t = utc(pos[:, 0])
    keep = drop_in_spans(t, spans) & (t >= gnss_utc[fixed][0] if fixed.any() else False)
    notes = [clock_note]
    if not np.all(keep):
        notes.append(no_fix_note(spans, int(np.sum(~keep))))
    height = ellipsoidal_height(pos[keep, 3], f"{where} ({source.split('(')[1][:-1]} Alt)",
                                geoid_undulation_m)
    enu = site_positions(site, pos[keep, 1], pos[keep, 2], height, where)
    att = None
    if rows["ATT"]:
        a = np.array(rows["ATT"], float)
        att = attitude_at(t[keep], utc(a[:, 0]), quaternion_from_ypr(a[:, 1], a[:, 2], a[:, 3]))
    motors = []
    if rows["ESC"]:
        e = np.array(rows["ESC"], float)
        for instance in np.unique(e[:, 1]).astype(int):
            sel = e[:, 1] == instance
            motors.append(MotorSpeeds(int(instance) + 1, utc(e[sel, 0]), e[sel, 2]))
    return TrackSamples(t[keep], enu, att, source, tuple(motors), tuple(notes))


register(Reader("track", "ArduPilot DataFlash", (".bin",), read_dataflash, _sniff))

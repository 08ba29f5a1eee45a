"""PX4 ULog flight logs, via pyulog: position estimate, attitude, GNSS time and motor speeds.

- Position: the global position estimate ``vehicle_global_position`` (``lat``, ``lon``, and
  ``alt_ellipsoid`` when the log has it, else ``alt`` above mean sea level plus the site's geoid
  undulation); without it the GNSS receiver's own fixes.
- Attitude: ``vehicle_attitude`` ``q`` (body FRD to NED, scalar first), resampled onto the
  position times by spherical linear interpolation.
- UTC: the log counts microseconds since boot. The GNSS topic (``sensor_gps``, older logs
  ``vehicle_gps_position``) carries the receiver's UTC (``time_utc_usec``) with the boot time
  of the fix (``timestamp_sample`` when the log has it, else ``timestamp``, the moment the driver
  published it, later than the fix by the receiver's output latency, typically some tens of
  milliseconds: from memory). UTC = boot time + the median of their difference over the samples
  with a 3D fix; the spread of that difference is reported. What is left of the latency looks
  like a clock offset (V x latency along the track) and is what the acoustic clock estimate
  (``clock_offset_s: auto``) takes out.
- Motor speeds: ``esc_status`` ``esc[i].esc_rpm`` for the ``esc_count`` ESCs, motor i + 1.
- Samples of the position estimate while the GNSS had no 3D fix (``fix_type`` < 3) are dropped
  and reported: the estimate coasts on inertial data then, and its error is not stated.
"""

from __future__ import annotations

import numpy as np

from flyover.geometry.frames import SiteFrame
from flyover.io.readers import Reader, register
from flyover.io.readers._logtrack import (attitude_at, boot_to_utc_offset_ns, drop_in_spans,
                                          ellipsoidal_height, no_fix_note, no_fix_spans,
                                          site_positions)
from flyover.model.errors import FlyoverInputError
from flyover.model.flightdata import MotorSpeeds, TrackSamples

GNSS_TOPICS = ("sensor_gps", "vehicle_gps_position")
MIN_FIX_TYPE = 3


def _sniff(path) -> bool:
    with open(path, "rb") as fh:
        return fh.read(7) == b"ULog\x01\x12\x35"


def _topic(ulog, name):
    found = [d for d in ulog.data_list if d.name == name]
    return min(found, key=lambda d: d.multi_id).data if found else None


def _first(data: dict, *names):
    for n in names:
        if n in data:
            return np.asarray(data[n])
    return None


def read_ulog(path, site: SiteFrame, geoid_undulation_m: float | None = None,
              **_) -> TrackSamples:
    """Read a PX4 ULog's track (see the module docstring)."""
    from pyulog import ULog
    where = str(path)
    try:
        ulog = ULog(str(path))
    except Exception as exc:  # pyulog raises bare exceptions on damaged files
        raise FlyoverInputError("not a readable ULog file", where, "a PX4 ULog (.ulg)",
                                str(exc).split("\n")[0]) from None
    gnss = next((t for t in map(lambda n: _topic(ulog, n), GNSS_TOPICS) if t is not None), None)
    if gnss is None:
        raise FlyoverInputError("the log has no GNSS data", where,
                                f"one of the topics {', '.join(GNSS_TOPICS)}",
                                ", ".join(sorted({d.name for d in ulog.data_list})) or "none")
    boot = _first(gnss, "timestamp_sample")
    if boot is None or not np.any(boot):
        boot = gnss["timestamp"]
    fixed = np.asarray(gnss["fix_type"]) >= MIN_FIX_TYPE
    utc_us = np.asarray(gnss["time_utc_usec"], np.int64)
    timed = fixed & (utc_us > 0)
    offset_ns, clock_note = boot_to_utc_offset_ns(
        utc_us[timed] * 1000, np.asarray(boot, np.int64)[timed] * 1000, where,
        f"{'sensor_gps' if 'timestamp_sample' in gnss else 'GNSS'} time_utc_usec")

    def utc(boot_us):
        return np.asarray(boot_us, np.int64) * 1000 + offset_ns

    gnss_utc = utc(gnss["timestamp"])
    spans = no_fix_spans(gnss_utc, fixed)
    pos = _topic(ulog, "vehicle_global_position")
    if pos is not None:
        source = "PX4 ULog (vehicle_global_position)"
        t = utc(pos["timestamp"])
        lat, lon = np.asarray(pos["lat"], float), np.asarray(pos["lon"], float)
        h = _first(pos, "alt_ellipsoid")
        height = (np.asarray(h, float) if h is not None and np.any(h) else
                  ellipsoidal_height(pos["alt"], f"{where} (vehicle_global_position.alt)",
                                     geoid_undulation_m))
    else:
        source = "PX4 ULog (GNSS fixes)"
        t = gnss_utc
        lat = _first(gnss, "latitude_deg")
        lat = lat if lat is not None else np.asarray(gnss["lat"]) * 1e-7
        lon = _first(gnss, "longitude_deg")
        lon = lon if lon is not None else np.asarray(gnss["lon"]) * 1e-7
        h = _first(gnss, "altitude_ellipsoid_m")
        if h is None and "alt_ellipsoid" in gnss:
            h = np.asarray(gnss["alt_ellipsoid"]) * 1e-3
        msl = _first(gnss, "altitude_msl_m")
        msl = msl if msl is not None else np.asarray(gnss["alt"]) * 1e-3
        height = (np.asarray(h, float) if h is not None and np.any(h) else
                  ellipsoidal_height(msl, f"{where} (GNSS altitude)", geoid_undulation_m))
    keep = drop_in_spans(t, spans) & (t >= gnss_utc[fixed][0] if fixed.any() else False)
    notes = [clock_note]
    if not np.all(keep):
        notes.append(no_fix_note(spans, int(np.sum(~keep))))
    enu = site_positions(site, lat[keep], lon[keep], height[keep], where)
    att_topic = _topic(ulog, "vehicle_attitude")
    att = None
    if att_topic is not None:
        quat = np.stack([att_topic[f"q[{k}]"] for k in range(4)], axis=1)
        att = attitude_at(t[keep], utc(att_topic["timestamp"]), quat)
    motors = ()
    esc = _topic(ulog, "esc_status")
    if esc is not None:
        count = int(np.max(esc["esc_count"])) if "esc_count" in esc else 0
        motors = tuple(MotorSpeeds(i + 1, utc(esc["timestamp"]),
                                   np.asarray(esc[f"esc[{i}].esc_rpm"], float))
                       for i in range(count) if f"esc[{i}].esc_rpm" in esc)
    return TrackSamples(t[keep], enu, att, source, motors, tuple(notes))


register(Reader("track", "PX4 ULog", (".ulg",), read_ulog, _sniff))

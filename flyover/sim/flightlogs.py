"""Autopilot and GNSS-logger files written as the field's equipment writes them.

Used by the simulator (the demo's autopilot log) and by the tests, whose logs are then read back
through the libraries flyover uses (pyulog, pymavlink, pynmea2, gpxpy): the writers follow the
formats' published descriptions, the readers are someone else's.

- PX4 ULog: the "ULog File Format" page of the PX4 user guide: a 16-byte header (magic
  ``ULog`` 0x01 0x12 0x35, version, start time in us), then messages of ``uint16 size,
  uint8 type`` and payload: flag bits 'B', formats 'F' (``name:type field;...``), information 'I',
  subscriptions 'A' (multi id, message id, name) and data 'D' (message id, fields packed
  little-endian in the order of the format, the first an ``uint64_t timestamp`` in us since boot).
- ArduPilot DataFlash (.bin): the "Log file format" of the ArduPilot developer docs: messages of
  0xA3 0x95, a type byte and a packed payload; an FMT message (type 128) defines each type's
  name, length, format characters and column labels, FMT itself first.
- NMEA 0183 sentences with their checksum (XOR of the characters between '$' and '*', two hex
  digits).
- GPX 1.1 (the Topografix schema), written with gpxpy.
"""

from __future__ import annotations

import datetime
import struct
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from flyover.io.atomic import atomic_path

# ---------------------------------------------------------------------------------------------
# PX4 ULog

ULOG_MAGIC = b"ULog\x01\x12\x35"
_ULOG_TYPES = {"uint64_t": "Q", "int64_t": "q", "uint32_t": "I", "int32_t": "i",
               "uint16_t": "H", "int16_t": "h", "uint8_t": "B", "int8_t": "b", "float": "f",
               "double": "d", "bool": "?", "char": "c"}


@dataclass(frozen=True)
class UlogTopic:
    """One logged topic: its fields (``(type, name)``, the first ``uint64_t timestamp``) and rows
    of flat values in that order (an array field ``float[4] q`` takes 4 values, a nested
    ``esc_report[2] esc`` the values of two ``esc_report`` in turn)."""

    name: str
    fields: tuple[tuple[str, str], ...]
    rows: list


def _struct_codes(fields, nested: dict) -> str:
    out = ""
    for type_name, _ in fields:
        base, _, count = type_name.partition("[")
        n = int(count.rstrip("]")) if count else 1
        out += (_struct_codes(nested[base], nested) * n if base in nested
                else (str(n) if count else "") + _ULOG_TYPES[base])
    return out


def _ulog_message(kind: bytes, payload: bytes) -> bytes:
    return struct.pack("<HB", len(payload), kind[0]) + payload


def write_ulog(path, topics: list[UlogTopic], *, nested: dict | None = None, start_us: int = 0,
               info: dict | None = None) -> Path:
    """Write a ULog file (version 1) holding the topics' rows in time order; ``nested`` defines
    the compound types the topics use (name -> fields)."""
    nested = dict(nested or {})
    out = bytearray(ULOG_MAGIC + bytes([1]) + struct.pack("<Q", start_us))
    out += _ulog_message(b"B", bytes(16) + struct.pack("<3Q", 0, 0, 0))
    for name, fields in nested.items():
        spec = "".join(f"{ty} {n};" for ty, n in fields)
        out += _ulog_message(b"F", f"{name}:{spec}".encode())
    for t in topics:
        spec = "".join(f"{ty} {name};" for ty, name in t.fields)
        out += _ulog_message(b"F", f"{t.name}:{spec}".encode())
    for key, value in (info or {"sys_name": "PX4"}).items():
        data = value.encode()
        key_text = f"char[{len(data)}] {key}".encode()
        out += _ulog_message(b"I", bytes([len(key_text)]) + key_text + data)
    for msg_id, t in enumerate(topics):
        out += _ulog_message(b"A", struct.pack("<BH", 0, msg_id) + t.name.encode())
    rows = sorted(((row[0], msg_id, row) for msg_id, t in enumerate(topics) for row in t.rows),
                  key=lambda r: (r[0], r[1]))
    formats = ["<" + _struct_codes(t.fields, nested) for t in topics]
    for _, msg_id, row in rows:
        out += _ulog_message(b"D", struct.pack("<H", msg_id)
                             + struct.pack(formats[msg_id], *row))
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_bytes(bytes(out))
    return path


# ---------------------------------------------------------------------------------------------
# ArduPilot DataFlash

DF_HEAD = b"\xa3\x95"
DF_FMT_TYPE = 128
_DF_STRUCT = {"B": "B", "b": "b", "H": "H", "h": "h", "I": "I", "i": "i", "Q": "Q", "q": "q",
              "f": "f", "d": "d", "n": "4s", "N": "16s", "Z": "64s", "c": "h", "C": "H",
              "e": "i", "E": "I", "L": "i", "M": "B"}


@dataclass(frozen=True)
class DataflashType:
    """One message type: id, name (up to 4 characters), format characters and column labels.
    Values are written as stored: ``L`` latitude/longitude in 1e-7 deg, ``e``/``c`` in
    hundredths."""

    type_id: int
    name: str
    format: str
    columns: str

    @property
    def struct_format(self) -> str:
        return "<" + "".join(_DF_STRUCT[c] for c in self.format)

    @property
    def length(self) -> int:
        return 3 + struct.calcsize(self.struct_format)


_FMT = DataflashType(DF_FMT_TYPE, "FMT", "BBnNZ", "Type,Length,Name,Format,Columns")


def write_dataflash(path, types: list[DataflashType], messages: list[tuple[int, tuple]]) -> Path:
    """Write a DataFlash log: the FMT messages, then ``(type_id, values)`` in the given order."""
    out = bytearray()
    by_id = {t.type_id: t for t in types}
    for t in [_FMT, *types]:
        out += DF_HEAD + bytes([DF_FMT_TYPE]) + struct.pack(
            _FMT.struct_format, t.type_id, t.length, t.name.encode(), t.format.encode(),
            t.columns.encode())
    for type_id, values in messages:
        out += DF_HEAD + bytes([type_id]) + struct.pack(by_id[type_id].struct_format, *values)
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_bytes(bytes(out))
    return path


# ---------------------------------------------------------------------------------------------
# NMEA 0183 and GPX

def nmea_sentence(body: str) -> str:
    """``$body*HH`` with the checksum of the body."""
    checksum = 0
    for ch in body.encode("ascii"):
        checksum ^= ch
    return f"${body}*{checksum:02X}"


def _nmea_angle(value_deg: float, positive: str, negative: str, width: int) -> tuple[str, str]:
    a = abs(value_deg)
    degrees = int(a)
    minutes = (a - degrees) * 60.0
    return f"{degrees:0{width}d}{minutes:09.6f}", positive if value_deg >= 0 else negative


def nmea_fix_sentences(utc_ns: int, lat_deg: float, lon_deg: float, msl_m: float,
                       geoid_m: float, speed_m_s: float, course_deg: float, *,
                       quality: int = 4, heading_deg: float | None = None) -> list[str]:
    """GGA (position, height above mean sea level, geoid separation), RMC (date, speed over
    ground in knots, course) and optionally HDT (true heading) of one fix."""
    t = np.datetime64(int(utc_ns), "ns").astype("datetime64[ms]").item()
    hms = f"{t:%H%M%S}.{t.microsecond // 10000:02d}"
    lat, ns = _nmea_angle(lat_deg, "N", "S", 2)
    lon, ew = _nmea_angle(lon_deg, "E", "W", 3)
    gga = (f"GPGGA,{hms},{lat},{ns},{lon},{ew},{quality},12,0.6,{msl_m:.3f},M,"
           f"{geoid_m:.3f},M,,")
    status = "A" if quality > 0 else "V"
    rmc = (f"GPRMC,{hms},{status},{lat},{ns},{lon},{ew},{speed_m_s * 3600.0 / 1852.0:.3f},"
           f"{course_deg:.2f},{t:%d%m%y},,,D")
    out = [nmea_sentence(gga), nmea_sentence(rmc)]
    if heading_deg is not None:
        out.append(nmea_sentence(f"GPHDT,{heading_deg:.2f},T"))
    return out


def write_gpx(path, utc_ns, lat_deg, lon_deg, elevation_m, *, name: str = "track") -> Path:
    """A GPX 1.1 file with one track of one segment."""
    import gpxpy.gpx
    gpx = gpxpy.gpx.GPX()
    track = gpxpy.gpx.GPXTrack(name=name)
    segment = gpxpy.gpx.GPXTrackSegment()
    for t, la, lo, h in zip(utc_ns, lat_deg, lon_deg, elevation_m):
        when = np.datetime64(int(t), "ns").astype("datetime64[us]").item()
        segment.points.append(gpxpy.gpx.GPXTrackPoint(
            float(la), float(lo), elevation=float(h),
            time=when.replace(tzinfo=datetime.timezone.utc)))
    track.segments.append(segment)
    gpx.tracks.append(track)
    path = Path(path)
    with atomic_path(path) as tmp:
        tmp.write_text(gpx.to_xml(version="1.1"), encoding="utf-8")
    return path


# ---------------------------------------------------------------------------------------------
# A vehicle's flight as an autopilot logs it

ESC_REPORT = {"esc_report": (("int32_t", "esc_rpm"),)}


def px4_topics(utc_ns, lat_deg, lon_deg, height_m, ypr_deg, *, geoid_m: float,
               rpm=None, boot_offset_us: int = 12_345_678, fix=None,
               utc_valid: bool = True) -> list[UlogTopic]:
    """The PX4 topics of a flight sampled at the given times: ``sensor_gps`` (fix type, UTC,
    position, heights above mean sea level and the ellipsoid), ``vehicle_global_position``,
    ``vehicle_attitude`` (quaternion) and, with ``rpm`` of shape (n_motors, n), ``esc_status``
    (write with ``nested=ESC_REPORT``). Boot time = UTC - first UTC + ``boot_offset_us``;
    ``fix`` is a boolean mask of samples with a 3D fix (default all)."""
    from flyover.io.readers._logtrack import quaternion_from_ypr
    utc = np.asarray(utc_ns, np.int64)
    boot = (utc - utc[0]) // 1000 + boot_offset_us
    fix = np.ones(len(utc), bool) if fix is None else np.asarray(fix, bool)
    quat = quaternion_from_ypr(ypr_deg[:, 0], ypr_deg[:, 1], ypr_deg[:, 2])
    n = len(utc)
    topics = [
        UlogTopic("sensor_gps", (("uint64_t", "timestamp"), ("uint64_t", "timestamp_sample"),
                                 ("uint64_t", "time_utc_usec"), ("uint8_t", "fix_type"),
                                 ("double", "latitude_deg"), ("double", "longitude_deg"),
                                 ("double", "altitude_msl_m"),
                                 ("double", "altitude_ellipsoid_m")),
                  [(int(boot[k]), int(boot[k]), int(utc[k] // 1000) if utc_valid else 0,
                    3 if fix[k] else 0, float(lat_deg[k]), float(lon_deg[k]),
                    float(height_m[k] - geoid_m), float(height_m[k])) for k in range(n)]),
        UlogTopic("vehicle_global_position", (("uint64_t", "timestamp"), ("double", "lat"),
                                              ("double", "lon"), ("float", "alt"),
                                              ("float", "alt_ellipsoid")),
                  [(int(boot[k]), float(lat_deg[k]), float(lon_deg[k]),
                    float(height_m[k] - geoid_m), float(height_m[k])) for k in range(n)]),
        UlogTopic("vehicle_attitude", (("uint64_t", "timestamp"), ("float[4]", "q")),
                  [(int(boot[k]), *map(float, quat[k])) for k in range(n)]),
    ]
    if rpm is not None:
        rpm = np.atleast_2d(np.asarray(rpm, float))
        topics.append(UlogTopic(
            "esc_status", (("uint64_t", "timestamp"), ("uint8_t", "esc_count"),
                           (f"esc_report[{len(rpm)}]", "esc")),
            [(int(boot[k]), len(rpm), *[int(round(v)) for v in rpm[:, k]]) for k in range(n)]))
    return topics

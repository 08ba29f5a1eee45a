"""Shared steps of the flight-log and GNSS-logger track readers."""

from __future__ import annotations

import numpy as np
from scipy.spatial.transform import Rotation

from flyover.geometry.attitude import AttitudeKeys
from flyover.geometry.frames import SiteFrame, attitude_rotation
from flyover.model.errors import FlyoverInputError


def site_positions(site: SiteFrame, lat_deg, lon_deg, height_m, where: str) -> np.ndarray:
    """WGS84 positions (ellipsoidal heights) to site ENU, refusing a track far from the site."""
    enu = site.to_enu(lat_deg, lon_deg, height_m)
    far = np.linalg.norm(enu[:, :2], axis=1)
    if len(far) and np.min(far) > 20_000.0:
        raise FlyoverInputError(f"the vehicle never comes within {np.min(far) / 1000:.0f} km "
                                "of the site", where, "a track within 20 km of the site origin",
                                hint="is it another day's or another site's log?")
    return enu


def ellipsoidal_height(msl_m, where: str, geoid_undulation_m: float | None) -> np.ndarray:
    """Heights above mean sea level to ellipsoidal with the site's geoid undulation."""
    if geoid_undulation_m is None:
        raise FlyoverInputError("the track gives heights above mean sea level only", where,
                                "site.geoid_undulation_m in the campaign file (the geoid "
                                "height N at the site, ellipsoidal = MSL + N)")
    return np.asarray(msl_m, float) + geoid_undulation_m


def attitude_at(utc_ns, att_utc_ns, quat_wxyz) -> np.ndarray:
    """Yaw, pitch, roll (deg) at the position times from attitude quaternions (body FRD to
    NED, scalar first) at their own times: spherical linear interpolation, held at the ends."""
    rot = Rotation.from_quat(np.asarray(quat_wxyz, float)[:, [1, 2, 3, 0]])
    t0 = int(att_utc_ns[0])
    ta = (np.asarray(att_utc_ns, np.int64) - t0) / 1e9
    t = np.clip((np.asarray(utc_ns, np.int64) - t0) / 1e9, ta[0], ta[-1])
    ypr = AttitudeKeys.from_rotations(ta, rot)(t).as_euler("ZYX", degrees=True)
    ypr[:, 0] = np.mod(ypr[:, 0], 360.0)
    return ypr


def quaternion_from_ypr(yaw_deg, pitch_deg, roll_deg) -> np.ndarray:
    """Scalar-first quaternions of yaw, pitch, roll (the inverse of :func:`attitude_at`)."""
    return attitude_rotation(yaw_deg, pitch_deg, roll_deg).as_quat()[..., [3, 0, 1, 2]]


def no_fix_spans(gnss_utc_ns, has_fix) -> list[tuple[int, int]]:
    """Spans (UTC ns) in which the GNSS had no fix: from each run of fix-less samples' first to
    last time, widened to the neighbouring samples with a fix."""
    t = np.asarray(gnss_utc_ns, np.int64)
    ok = np.asarray(has_fix, bool)
    spans = []
    k = 0
    while k < len(t):
        if ok[k]:
            k += 1
            continue
        j = k
        while j + 1 < len(t) and not ok[j + 1]:
            j += 1
        lo = t[k - 1] if k > 0 else t[k]
        hi = t[j + 1] if j + 1 < len(t) else t[j]
        spans.append((int(lo) + 1, int(hi) - 1))
        k = j + 1
    return spans


def drop_in_spans(utc_ns, spans) -> np.ndarray:
    """Mask of the samples outside every span."""
    t = np.asarray(utc_ns, np.int64)
    keep = np.ones(len(t), bool)
    for lo, hi in spans:
        keep &= ~((t >= lo) & (t <= hi))
    return keep


def no_fix_note(spans, n_dropped: int) -> str:
    from flyover.model.timebase import iso_utc
    listed = ", ".join(f"{iso_utc(lo)} to {iso_utc(hi)}" for lo, hi in spans[:3])
    more = f" and {len(spans) - 3} more" if len(spans) > 3 else ""
    return (f"GNSS without a fix {listed}{more}: {n_dropped} position samples dropped (not "
            "interpolated across)")


def boot_to_utc_offset_ns(utc_ns, boot_ns, where: str, what: str) -> tuple[int, str]:
    """The log's boot time to UTC: the median of (UTC - boot time) over the GNSS samples that
    carry both, with a note stating its spread (median absolute deviation)."""
    utc = np.asarray(utc_ns, np.int64)
    boot = np.asarray(boot_ns, np.int64)
    if len(utc) == 0:
        raise FlyoverInputError("the log's GNSS never gives UTC", where,
                                f"{what} with a UTC time (a GNSS fix)", "none set",
                                "was the receiver's time ever valid in this flight?")
    d = np.sort(utc - boot)
    offset = int(d[(len(d) - 1) // 2] + (d[len(d) // 2] - d[(len(d) - 1) // 2]) // 2)  # exact
    spread_ms = float(np.median(np.abs(d - offset))) / 1e6
    return offset, (f"UTC = boot time + {offset / 1e9:.6f} s: the median of (UTC - boot time) "
                    f"over {len(d)} GNSS samples ({what}); spread (median absolute deviation) "
                    f"{spread_ms:.3f} ms")

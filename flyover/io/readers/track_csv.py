"""Flight-track CSV: ISO 8601 UTC times, WGS84 or site-frame positions, optional attitude."""

from __future__ import annotations

import numpy as np

from flyover.geometry.frames import SiteFrame
from flyover.io.csvtable import numeric_column, pick_columns, read_csv_table
from flyover.io.readers import Reader, register
from flyover.io.timestamps import parse_utc_ns_array
from flyover.model.errors import FlyoverInputError
from flyover.model.flightdata import TrackSamples
from flyover.sync.gpstime import gps_to_utc_ns

TRACK_SITE = ["time_utc", "east_m", "north_m", "up_m"]


TRACK_WGS84 = ["time_utc", "lat_deg", "lon_deg", "height_m"]


ATTITUDE = ["roll_deg", "pitch_deg", "yaw_deg"]


def read_track(path, site: SiteFrame, time_scale: str = "utc", height_datum: str = "ellipsoidal",
               geoid_undulation_m: float | None = None) -> TrackSamples:
    """Read a flight-track CSV.

    Parameters
    ----------
    path : path
        Columns ``time_utc`` and either ``lat_deg,lon_deg,height_m`` or ``east_m,north_m,up_m``,
        optionally ``roll_deg,pitch_deg,yaw_deg``.
    time_scale : {'utc', 'gps'}
        'gps' when the receiver logged GPS time: UTC = GPS - the leap seconds in force
        (:mod:`flyover.sync.gpstime`; 18 s since 2017).
    height_datum : {'ellipsoidal', 'msl'}
    """
    df = read_csv_table(path, "track")
    cols = pick_columns(df, [TRACK_WGS84, TRACK_SITE], path, "track")
    utc = parse_utc_ns_array(df["time_utc"], str(path), first_row=2)
    if time_scale == "gps":
        utc = gps_to_utc_ns(utc)
    a, b, c = (numeric_column(df, k, path) for k in cols[1:])
    if cols == TRACK_WGS84:
        if np.any(np.abs(a) > 90):
            i = int(np.flatnonzero(np.abs(a) > 90)[0])
            raise FlyoverInputError("latitude out of range", f"{path}, row {i + 2}",
                                    "degrees from -90 to 90", f"{a[i]}",
                                    "are the latitude and longitude columns swapped?")
        if height_datum == "msl":
            c = c + geoid_undulation_m
        enu = site.to_enu(a, b, c)
    else:
        enu = np.stack([a, b, c], axis=1)
    far = np.linalg.norm(enu[:, :2], axis=1)
    if np.min(far) > 20_000.0:
        raise FlyoverInputError(f"the vehicle never comes within {np.min(far) / 1000:.0f} km "
                                "of the site", str(path), "a track within 20 km of the site origin",
                                hint="are latitude and longitude swapped, or is it another day's "
                                     "file?")
    present = [k for k in ATTITUDE if k in df.columns]
    att = None
    if present:
        if len(present) != 3:
            raise FlyoverInputError("incomplete attitude columns", str(path),
                                    "all of roll_deg, pitch_deg, yaw_deg or none",
                                    ",".join(present))
        roll, pitch, yaw = (numeric_column(df, k, path) for k in ATTITUDE)
        att = np.stack([yaw, pitch, roll], axis=1)
    return TrackSamples(utc, enu, att, "CSV")


register(Reader("track", "CSV", (".csv", ".txt"), read_track))

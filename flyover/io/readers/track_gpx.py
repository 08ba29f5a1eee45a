"""GPX 1.1 track files (GNSS loggers, flight apps), via gpxpy.

Every track point of every track and segment, in time order. GPX gives latitude, longitude,
elevation and UTC time; the schema does not say which height the elevation is, and most loggers
write the height above mean sea level: state it with ``track_height_datum: msl`` (ellipsoidal
is the default for every track format).
"""

from __future__ import annotations

import datetime

import numpy as np

from flyover.geometry.frames import SiteFrame
from flyover.io.readers import Reader, register
from flyover.io.readers._logtrack import ellipsoidal_height, site_positions
from flyover.model.errors import FlyoverInputError
from flyover.model.flightdata import TrackSamples


def _sniff(path) -> bool:
    with open(path, "rb") as fh:
        head = fh.read(512)
    return b"<gpx" in head


def read_gpx(path, site: SiteFrame, height_datum: str = "ellipsoidal",
             geoid_undulation_m: float | None = None, **_) -> TrackSamples:
    """Read the track points of a GPX file (see the module docstring)."""
    import gpxpy
    import gpxpy.gpx
    where = str(path)
    try:
        with open(path, encoding="utf-8") as fh:
            gpx = gpxpy.parse(fh)
    except gpxpy.gpx.GPXException as exc:
        raise FlyoverInputError("not a readable GPX file", where, "GPX 1.1 XML",
                                str(exc).split("\n")[0]) from None
    points = [p for trk in gpx.tracks for seg in trk.segments for p in seg.points]
    if not points:
        raise FlyoverInputError("no track point in the GPX file", where, "<trkpt> elements")
    for k, p in enumerate(points, start=1):
        if p.time is None or p.elevation is None:
            missing = "time" if p.time is None else "elevation"
            raise FlyoverInputError(f"track point {k} has no {missing}", where,
                                    "every <trkpt> with <ele> and <time>")
    utc = np.array([np.datetime64(p.time.astimezone(datetime.timezone.utc).replace(tzinfo=None),
                                  "ns").astype(np.int64) for p in points])
    height = np.array([p.elevation for p in points], float)
    if height_datum == "msl":
        height = ellipsoidal_height(height, where, geoid_undulation_m)
    order = np.argsort(utc, kind="stable")
    enu = site_positions(site, np.array([p.latitude for p in points])[order],
                         np.array([p.longitude for p in points])[order], height[order], where)
    datum = "mean sea level" if height_datum == "msl" else "ellipsoidal"
    return TrackSamples(utc[order], enu, None, "GPX 1.1", (),
                        (f"elevation taken as {datum} height (track_height_datum)",))


register(Reader("track", "GPX 1.1", (".gpx",), read_gpx, _sniff))

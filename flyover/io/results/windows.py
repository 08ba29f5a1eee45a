"""``windows.csv``: every planned emission-time window of a pass, analysed or skipped."""

from __future__ import annotations

import pandas as pd

from flyover.io.results import TableFile

WINDOWS = TableFile("windows.csv", (
    ("window", "index along the track"),
    ("status", "'analysed' or 'skipped'"),
    ("reason", "why a window was skipped"),
    ("start_utc", "ISO 8601 UTC, emission time of the first sample"),
    ("time_utc", "ISO 8601 UTC, emission time of the window centre"),
    ("center_s", "s after the pass epoch"),
    ("duration_s", "s"),
    ("east_m", "m, site frame, vehicle at the centre"),
    ("north_m", "m"),
    ("up_m", "m"),
    ("height_m", "m above the array centre"),
    ("speed_m_s", "m/s over ground"),
    ("velocity_east_m_s", "m/s over ground, site frame"),
    ("velocity_north_m_s", "m/s"),
    ("velocity_up_m_s", "m/s"),
    ("yaw_deg", "deg clockwise from true north"),
    ("pitch_deg", "deg, nose up +"),
    ("roll_deg", "deg, right wing down +"),
    ("polar_angle_deg", "deg between flight direction and the line to the array centre"),
    ("distance_m", "m from the vehicle to the array centre"),
))

# What a pass with an empty windows.csv means (said in the image log and in `flyover run`).
NO_WINDOW = ("no window could be planned: no stretch of window_s of the track within "
             "max_polar_offset_deg of overhead lies inside the recording")


def read_analysed(folder) -> pd.DataFrame:
    """The analysed windows of a pass, indexed by window."""
    frame = WINDOWS.read(folder)
    return frame[frame["status"] == "analysed"]

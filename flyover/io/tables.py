"""CSV inputs: array layout, calibration and flight track.

Every reader checks the columns, the types and the values, and names the file and the row of the
first problem (rows count as in a spreadsheet: the header is row 1).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import FlyoverInputError
from ..frames import SiteFrame
from ..timebase import GPS_MINUS_UTC_S
from .timestamps import parse_utc_ns_array

LAYOUT_SITE = ["channel", "east_m", "north_m", "up_m"]
LAYOUT_WGS84 = ["channel", "lat_deg", "lon_deg", "height_m"]
CALIBRATION = ["channel", "pa_per_unit"]
TRACK_SITE = ["time_utc", "east_m", "north_m", "up_m"]
TRACK_WGS84 = ["time_utc", "lat_deg", "lon_deg", "height_m"]
ATTITUDE = ["roll_deg", "pitch_deg", "yaw_deg"]


def read_csv_table(path, what: str, columns=()) -> pd.DataFrame:
    """Read a CSV file as text columns; missing or empty files, or missing ``columns``, give a
    clear error."""
    path = Path(path)
    if not path.is_file():
        raise FlyoverInputError(f"{what} file not found", str(path), f"an existing {what} CSV",
                                hint="relative paths in a campaign file start at its folder")
    try:
        df = pd.read_csv(path, dtype=str, skipinitialspace=True, comment="#")
    except pd.errors.EmptyDataError:
        raise FlyoverInputError(f"{what} file is empty", str(path), "a header row and data rows")\
            from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise FlyoverInputError(f"{what} file is not a readable CSV", str(path),
                                "comma-separated text", str(exc).split("\n")[0]) from None
    df.columns = [c.strip() for c in df.columns]
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise FlyoverInputError(f"{what} file lacks columns {missing}", str(path),
                                ",".join(columns), ",".join(df.columns),
                                "it was written by another flyover version: re-run the workflow")
    if len(df) == 0:
        raise FlyoverInputError(f"{what} file has no data rows", str(path),
                                "at least one row under the header")
    return df


def _pick_columns(df: pd.DataFrame, options: list[list[str]], path, what: str) -> list[str]:
    cols = list(df.columns)
    for opt in options:
        if all(c in cols for c in opt):
            return opt
    expected = " or ".join(",".join(o) for o in options)
    hint = ""
    if len(cols) == 1 and (";" in cols[0] or "\t" in cols[0]):
        hint = ("the file uses ';' or tabs between values: save it as comma-separated, with a "
                "point as the decimal mark")
    raise FlyoverInputError(f"{what} file has the wrong columns", str(path), expected,
                            ",".join(cols), hint)


def numeric_column(df: pd.DataFrame, col: str, path, integer: bool = False) -> np.ndarray:
    """A column as numbers; the first non-numeric or missing cell is reported with its row."""
    values = pd.to_numeric(df[col], errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        i = bad[0]
        raise FlyoverInputError(f"value in column '{col}' is not a number", f"{path}, row {i + 2}",
                                "a finite number", repr(df[col].iloc[i]))
    if integer:
        frac = np.flatnonzero(values != np.round(values))
        if frac.size:
            i = frac[0]
            raise FlyoverInputError(f"value in column '{col}' is not a whole number",
                                    f"{path}, row {i + 2}", "an integer", repr(df[col].iloc[i]))
    return values


def _channels(df, path) -> np.ndarray:
    ch = numeric_column(df, "channel", path, integer=True).astype(int)
    if np.any(ch < 1):
        i = int(np.flatnonzero(ch < 1)[0])
        raise FlyoverInputError("channel numbers start at 1", f"{path}, row {i + 2}",
                                "a 1-based channel of the recording", f"{ch[i]}")
    uniq, counts = np.unique(ch, return_counts=True)
    if np.any(counts > 1):
        dup = int(uniq[counts > 1][0])
        rows = [int(r) + 2 for r in np.flatnonzero(ch == dup)]
        raise FlyoverInputError(f"channel {dup} appears more than once", f"{path}, rows {rows}",
                                "each channel once")
    return ch


@dataclass(frozen=True)
class ArrayLayout:
    """Microphone positions in the site frame.

    Attributes
    ----------
    channel : ndarray of int, shape (n_mics,)
        1-based recording channel of each microphone, sorted.
    enu_m : ndarray, shape (n_mics, 3)
    """

    channel: np.ndarray
    enu_m: np.ndarray

    @property
    def center_enu_m(self) -> np.ndarray:
        return self.enu_m.mean(axis=0)

    @property
    def aperture_m(self) -> float:
        """Largest distance between two microphones."""
        d = self.enu_m[:, None, :] - self.enu_m[None, :, :]
        return float(np.sqrt((d ** 2).sum(-1)).max())


def read_layout(path, site: SiteFrame, height_datum: str = "ellipsoidal",
                geoid_undulation_m: float | None = None) -> ArrayLayout:
    """Read an array layout CSV (site ENU or WGS84) and check its geometry.

    Heights above mean sea level (``height_datum='msl'``) are converted with the site's geoid
    undulation N: h = H + N.
    """
    df = read_csv_table(path, "layout")
    cols = _pick_columns(df, [LAYOUT_SITE, LAYOUT_WGS84], path, "layout")
    ch = _channels(df, path)
    a, b, c = (numeric_column(df, k, path) for k in cols[1:])
    if cols == LAYOUT_WGS84:
        if height_datum == "msl":
            c = c + geoid_undulation_m
        enu = site.to_enu(a, b, c)
    else:
        enu = np.stack([a, b, c], axis=1)
        if height_datum == "msl":
            raise FlyoverInputError("a site-frame layout has no height datum", str(path),
                                    "array.height_datum: ellipsoidal with east/north/up columns")
    order = np.argsort(ch)
    layout = ArrayLayout(ch[order], enu[order])
    check_layout_geometry(layout, str(path))
    return layout


def check_layout_geometry(layout: ArrayLayout, where: str) -> None:
    """Refuse far-away, coincident or collinear microphones."""
    p = layout.enu_m
    if len(p) < 2:
        raise FlyoverInputError("an array needs at least two microphones", where,
                                ">= 2 rows", f"{len(p)}")
    far = np.flatnonzero(np.linalg.norm(p[:, :2], axis=1) > 5000.0)
    if far.size:
        km = np.linalg.norm(p[far[0], :2]) / 1000
        raise FlyoverInputError(f"microphone on channel {layout.channel[far[0]]} is "
                                f"{km:.0f} km from the site origin",
                                where, "microphones within 5 km of the site origin",
                                hint="are latitude and longitude swapped, or the origin wrong?")
    d = np.sqrt(((p[:, None] - p[None]) ** 2).sum(-1))
    d[np.diag_indices(len(p))] = np.inf
    i, j = np.unravel_index(np.argmin(d), d.shape)
    if d[i, j] < 1e-3:
        raise FlyoverInputError(f"channels {layout.channel[i]} and {layout.channel[j]} are at the "
                                "same position", where, "distinct microphone positions",
                                f"{d[i, j] * 1000:.2f} mm apart")
    sv = np.linalg.svd(p - p.mean(0), compute_uv=False)
    if sv[1] < 1e-3 * sv[0]:
        raise FlyoverInputError("all microphones lie on one line", where,
                                "a two-dimensional array (sources are located in 2-D)",
                                hint="check for a column copied into another")


def read_calibration(path, channels) -> dict[int, float]:
    """Read ``channel,pa_per_unit`` and check a positive factor exists for every channel used."""
    df = read_csv_table(path, "calibration")
    _pick_columns(df, [CALIBRATION], path, "calibration")
    ch = _channels(df, path)
    k = numeric_column(df, "pa_per_unit", path)
    bad = np.flatnonzero(k <= 0)
    if bad.size:
        i = bad[0]
        raise FlyoverInputError(f"calibration factor of channel {ch[i]} is not positive",
                                f"{path}, row {i + 2}", "pascals per unit > 0", f"{k[i]}")
    table = dict(zip(ch.tolist(), k.tolist()))
    missing = [int(c) for c in channels if int(c) not in table]
    if missing:
        raise FlyoverInputError("calibration is missing channels", str(path),
                                "a pa_per_unit for every layout channel",
                                f"none for channel(s) {missing}")
    return table


@dataclass(frozen=True)
class TrackSamples:
    """Raw track samples as read: absolute times and site-frame positions."""

    utc_ns: np.ndarray
    enu_m: np.ndarray
    attitude_deg: np.ndarray | None  # (n, 3) yaw, pitch, roll


def read_track(path, site: SiteFrame, time_scale: str = "utc", height_datum: str = "ellipsoidal",
               geoid_undulation_m: float | None = None) -> TrackSamples:
    """Read a flight-track CSV.

    Parameters
    ----------
    path : path
        Columns ``time_utc`` and either ``lat_deg,lon_deg,height_m`` or ``east_m,north_m,up_m``,
        optionally ``roll_deg,pitch_deg,yaw_deg``.
    time_scale : {'utc', 'gps'}
        'gps' when the receiver logged GPS time: UTC = GPS - 18 s (leap seconds since 2017).
    height_datum : {'ellipsoidal', 'msl'}
    """
    df = read_csv_table(path, "track")
    cols = _pick_columns(df, [TRACK_WGS84, TRACK_SITE], path, "track")
    utc = parse_utc_ns_array(df["time_utc"], str(path), first_row=2)
    if time_scale == "gps":
        utc = utc - GPS_MINUS_UTC_S * 1_000_000_000
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
    return TrackSamples(utc, enu, att)


def write_csv(path, frame: pd.DataFrame, float_format: str = "%.6f") -> None:
    """Write a table atomically, with a fixed float format (identical inputs, identical bytes)."""
    from .atomic import atomic_path
    with atomic_path(path) as tmp:
        frame.to_csv(tmp, index=False, float_format=float_format, lineterminator="\n")

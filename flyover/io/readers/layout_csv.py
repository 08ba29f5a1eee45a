"""Array layout CSV: one row per microphone, site ENU or WGS84 columns, and for raised
microphones their height above the ground under them (``mic_height_m``)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.geometry.frames import SiteFrame
from flyover.io.csvtable import channel_column, numeric_column, pick_columns, read_csv_table
from flyover.io.readers import Reader, register
from flyover.model.errors import FlyoverInputError

# Ground arrays for flyover tests span metres to a few tens of metres (common practice).
MAX_APERTURE_M = 200.0
LAYOUT_SITE = ["channel", "east_m", "north_m", "up_m"]


LAYOUT_WGS84 = ["channel", "lat_deg", "lon_deg", "height_m"]


@dataclass(frozen=True)
class ArrayLayout:
    """Microphone positions in the site frame.

    Attributes
    ----------
    channel : ndarray of int, shape (n_mics,)
        1-based recording channel of each microphone, sorted.
    enu_m : ndarray, shape (n_mics, 3)
    mic_height_m : ndarray, shape (n_mics,), or None
        Height of each microphone above the ground under it (the optional ``mic_height_m``
        column; raised microphones need it).
    """

    channel: np.ndarray
    enu_m: np.ndarray
    mic_height_m: np.ndarray | None = None

    @property
    def image_enu_m(self) -> np.ndarray:
        """The microphones mirrored in the ground under them (flat, horizontal ground), site
        frame, shape (n_mics, 3)."""
        if self.mic_height_m is None:
            raise ValueError("the layout gives no mic_height_m")
        return self.enu_m - np.outer(2.0 * self.mic_height_m, [0.0, 0.0, 1.0])

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
    cols = pick_columns(df, [LAYOUT_SITE, LAYOUT_WGS84], path, "layout")
    ch = channel_column(df, path)
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
    height = None
    if "mic_height_m" in df.columns:
        height = numeric_column(df, "mic_height_m", path)
        bad = np.flatnonzero((height < 0.0) | (height > 20.0))
        if bad.size:
            raise FlyoverInputError("microphone height above the ground out of range",
                                    f"{path}, row {bad[0] + 2}, column mic_height_m",
                                    "metres from 0 to 20 (1.2 for certification-style stands)",
                                    f"{height[bad[0]]}")
        height = height[order]
    layout = ArrayLayout(ch[order], enu[order], height)
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
    centre = np.median(p, axis=0)
    spread = np.linalg.norm(p - centre, axis=1)
    if 2 * spread.max() > MAX_APERTURE_M:
        k = int(np.argmax(spread))
        others = np.delete(spread, k)
        raise FlyoverInputError(
            f"the array spans {2 * spread.max():.0f} m, beyond a ground array", where,
            f"microphones within {MAX_APERTURE_M / 2:g} m of the array's centre",
            f"channel {layout.channel[k]} {spread[k]:.1f} m from the median centre, the others "
            f"within {others.max() if others.size else 0:.1f} m",
            "a stray or mistyped position, or positions written in millimetres?")
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


register(Reader("layout", "CSV", (".csv", ".txt"), read_layout))

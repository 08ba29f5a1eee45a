"""Array planning: what an array can resolve on a vehicle grid at a flyover height, per band,
before anything is flown.

The vehicle is frozen overhead: a point source in the plane ``height_m`` above the array centre,
free field, no motion (the de-Dopplerized chain turns a moving source into this). Its
point-spread function on the plane is the normalised beam pattern of conventional beamforming,

    B(g) = |v_g^H v_s|^2 / ((v_g^H v_g) (v_s^H v_s)),  v_gm = exp(-i k r_gm) / r_gm,

1 at the source. From it, per band (at the exact midband frequency): the -3 dB main-lobe width
(full width through the peak, the mean of the along- and across-track cuts), the highest side
lobe outside the main lobe (beyond its first minimum), and whether two body points separate:
the point midway between them lies outside each one's half-power main lobe (B < 1/2), i.e. they
are at least a -3 dB width apart along their line, so that two equal sources leave a dip between
their peaks.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

HALF_POWER = 0.5


def beam_pattern(mic_enu_m, source_xy_m, points_xy_m, height_m: float, frequency_hz: float,
                 c_m_s: float = 343.0) -> np.ndarray:
    """Normalised beam pattern B (n_points,) of a source at ``source_xy_m`` (east, north
    relative to the array centre), on points of the plane ``height_m`` above the array."""
    mics = np.asarray(mic_enu_m, float)
    mics = mics - mics.mean(axis=0)
    k = 2 * np.pi * frequency_hz / c_m_s

    def steering(xy):
        xy = np.atleast_2d(np.asarray(xy, float))
        p = np.column_stack([xy, np.full(len(xy), height_m)])
        r = np.linalg.norm(p[:, None, :] - mics[None], axis=-1)
        return np.exp(-1j * k * r) / r

    v = steering(points_xy_m)
    s = steering(source_xy_m)[0]
    return (np.abs(v.conj() @ s) ** 2
            / ((np.abs(v) ** 2).sum(axis=1) * (np.abs(s) ** 2).sum()))


@dataclass(frozen=True)
class BandResolution:
    """What the array resolves in one band. Widths in metres on the vehicle's plane."""

    band_hz: float
    frequency_hz: float
    width_m: float
    first_null_m: float          # inf where the pattern has no minimum on the cuts
    max_side_lobe_db: float
    separable: bool | None


def _cut(mic_enu_m, height_m, frequency_hz, c_m_s, direction, extent_m, step_m):
    r = np.arange(0.0, extent_m + step_m / 2, step_m)
    xy = np.outer(r, direction)
    return r, beam_pattern(mic_enu_m, [0.0, 0.0], xy, height_m, frequency_hz, c_m_s)


def main_lobe_m(mic_enu_m, height_m: float, frequency_hz: float, *, c_m_s: float = 343.0,
                step_m: float | None = None) -> tuple[float, float]:
    """The -3 dB full width and the first-null radius (m) of the main lobe on the plane, the
    means of the along-x and along-y cuts through the peak (linear interpolation between
    samples of ``step_m``, default a 200th of the Rayleigh width 1.22 lambda z / D)."""
    mics = np.asarray(mic_enu_m, float)
    aperture = float(np.max(np.linalg.norm(mics[:, None, :2] - mics[None, :, :2], axis=-1)))
    rayleigh = 1.22 * c_m_s / frequency_hz * height_m / aperture
    step = step_m or rayleigh / 200.0
    widths, nulls = [], []
    for direction in ((1.0, 0.0), (0.0, 1.0)):
        r, b = _cut(mics, height_m, frequency_hz, c_m_s, np.array(direction), 4 * rayleigh, step)
        below = np.flatnonzero(b < HALF_POWER)
        if not below.size:
            widths.append(np.inf)
            nulls.append(np.inf)
            continue
        i = below[0]
        widths.append(2 * np.interp(HALF_POWER, [b[i], b[i - 1]], [r[i], r[i - 1]]))
        rising = np.flatnonzero(np.diff(b[i:]) > 0)
        nulls.append(r[i + rising[0]] if rising.size else np.inf)
    return float(np.mean(widths)), float(np.mean(nulls))


def body_to_plane(points_body_m, heading_deg: float) -> np.ndarray:
    """Body (x forward, y starboard) points on the plane (east, north) of a vehicle flying
    along ``heading_deg`` (clockwise from north) over the array centre."""
    h = np.deg2rad(heading_deg)
    p = np.atleast_2d(np.asarray(points_body_m, float))[:, :2]
    forward, starboard = np.array([np.sin(h), np.cos(h)]), np.array([np.cos(h), -np.sin(h)])
    return np.outer(p[:, 0], forward) + np.outer(p[:, 1], starboard)


def band_resolution(mic_enu_m, height_m: float, bands, *, c_m_s: float = 343.0,
                    points_body_m=None, heading_deg: float = 90.0,
                    extent_m: float | None = None, grid_points: int = 81,
                    side_lobes: bool = True) -> list[BandResolution]:
    """Per band: main-lobe width, first null, highest side lobe (dB re the peak, on a square
    grid of ``grid_points``^2 points out to ``extent_m``, default three first nulls) and whether
    the two ``points_body_m`` (two body points, e.g. region centres, of a vehicle flying along
    ``heading_deg``) separate. ``side_lobes=False`` skips the grid (NaN side lobes)."""
    out = []
    pair = None if points_body_m is None else body_to_plane(points_body_m, heading_deg)
    for nominal, f in zip(bands.nominal_hz, bands.center_hz):
        width, null = main_lobe_m(mic_enu_m, height_m, f, c_m_s=c_m_s)
        side = float("nan")
        if side_lobes:
            lobe = null if np.isfinite(null) else width      # no minimum: the -3 dB width
            half = extent_m or 3 * lobe
            axis = np.linspace(-half, half, grid_points)
            gx, gy = np.meshgrid(axis, axis, indexing="ij")
            pts = np.column_stack([gx.ravel(), gy.ravel()])
            b = beam_pattern(mic_enu_m, [0.0, 0.0], pts, height_m, f, c_m_s)
            outside = np.hypot(*pts.T) > lobe
            side = float(10 * np.log10(b[outside].max())) if outside.any() else side
        separable = None
        if pair is not None:
            a, c = pair
            mid = [0.5 * (a + c)]
            separable = bool(beam_pattern(mic_enu_m, a, mid, height_m, f, c_m_s)[0] < HALF_POWER
                             and beam_pattern(mic_enu_m, c, mid, height_m, f,
                                              c_m_s)[0] < HALF_POWER)
        out.append(BandResolution(float(nominal), float(f), width, null, side, separable))
    return out


def separable_from_hz(rows: list[BandResolution]) -> float | None:
    """The lowest band from which the points separate in every band above (None: nowhere)."""
    ok = [r.separable for r in rows]
    for k in range(len(rows)):
        if all(ok[k:]):
            return rows[k].band_hz
    return None

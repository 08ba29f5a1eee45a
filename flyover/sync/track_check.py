"""An acoustic check of the track: where the recording says the vehicle was.

The de-Dopplerized signals of a source are most coherent across the array when they are formed
along the source's true path. Shifting the whole track by an offset along one axis (height,
along-track, lateral) and measuring the array coherence at a source of known body position (the
anchor: a region's centre, a propeller hub) over windows spread around overhead gives a focus
curve; its peak is the offset the recording supports. A shift of the track is the same as moving
every microphone the other way, which is how it is applied here.

What it can see: a track displaced from the sound (heights in feet, a wrong datum or antenna
offset, a lateral survey error), to within the focus curve's width. What it cannot: a source
whose body position is not the anchor's (a displaced anchor looks like a displaced track, so
along-track and lateral offsets inside the anchor's region are not meaningful), an along-track
offset where the clock was itself estimated from the anchor (the two are the same thing), and
errors that change along the pass faster than the windows sample them.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging.chain import ChainSettings
from flyover.imaging.dedoppler import window_band_powers
from flyover.imaging.reception import reception_geometry
from flyover.model.timebase import ArrayClock


@dataclass(frozen=True)
class TrackOffset:
    """The offset of best focus along one axis.

    Attributes
    ----------
    axis : str
        ``"height"``, ``"along-track"`` or ``"lateral"``.
    offset_m : float
        The shift of the track (m, along the axis: up, forward, to the right of the course)
        that brings the anchor into best focus.
    uncertainty_m : float
        The peak's resolution: the half-width of the offsets whose focus lies within
        ``FOCUS_DROP`` (1 %) of the best (inf when the scan cannot decide).
    at_edge : bool
        The best focus lies at an end of the scan: the true offset may be larger.
    peak_focus : float
        The best coherence: under ``MIN_FOCUS`` there is no source at the anchor to focus
        on, and the scan cannot decide.
    scan_offsets_m, scan_focus : ndarray
        The scan (coherence, 1 for one source alone at the anchor).
    """

    axis: str
    offset_m: float
    uncertainty_m: float
    at_edge: bool
    peak_focus: float
    scan_offsets_m: np.ndarray
    scan_focus: np.ndarray

    @property
    def decided(self) -> bool:
        return bool(np.isfinite(self.uncertainty_m))


# A source at the anchor: the clock estimate's threshold (a true anchor gave 0.94 on simulated
# passes, one 15 m to the side 0.014).
MIN_FOCUS = 0.2
FOCUS_DROP = 0.01


def track_axes(track: TrackModel, time_s: float) -> dict[str, np.ndarray]:
    """Unit vectors (site ENU) of the check's axes at a time: up, the horizontal course, and
    the horizontal right of it."""
    v = track.velocity(np.array([time_s]))[0].copy()
    v[2] = 0.0
    along = v / np.linalg.norm(v)
    up = np.array([0.0, 0.0, 1.0])
    return {"height": up, "along-track": along, "lateral": np.cross(along, up)}


def anchor_coherence(signals, first, geometry, clock: ArrayClock, window: Window,
                     settings: ChainSettings, atmosphere: Atmosphere,
                     band_groups=(slice(None),)) -> float | np.ndarray:
    """Array coherence of the de-Dopplerized signals at one point (summed over bands): the
    cross-power of the delay-and-sum output (autopowers removed) over the autopowers, scaled so
    that one source alone at the point gives 1. Unlike the beam power it does not grow with
    the amplitude factor r (1 - M_r)^2 of a displaced path.

    ``band_groups``: slices of the settings' bands, each summed apart; with the default (all
    bands) a float, else an array of one coherence per group (at the cost of one)."""
    w = np.asarray(settings.weights, float)
    s1, s2 = w.sum(), (w ** 2).sum()
    bp = window_band_powers(signals, first, geometry, clock, window, settings, atmosphere)
    out = []
    for group in band_groups:
        beam = np.sum(bp.full[0][group]) * s1 ** 2
        cross = np.sum(bp.diagonal_removed[0][group]) * (s1 ** 2 - s2)
        auto = beam - cross
        out.append(float(cross * s2 / (auto * (s1 ** 2 - s2))) if auto > 0 else 0.0)
    return out[0] if len(band_groups) == 1 else np.array(out)


def focus_over_offsets(read_frames, track: TrackModel, windows: list[Window], anchor_body_m,
                       mic_enu_m, atmosphere: Atmosphere, clock: ArrayClock,
                       settings: ChainSettings, *, direction_enu, offsets_m) -> np.ndarray:
    """Mean coherence at the anchor over the windows, for each shift of the track.

    ``read_frames(first, n)`` returns calibrated pressure (n_mics, n), row m from frame
    ``first[m]`` (silence outside the recording).

    Returns
    -------
    ndarray, shape (n_offsets,)
    """
    mics = np.asarray(mic_enu_m, float)
    d = np.asarray(direction_enu, float)
    anchor = np.asarray(anchor_body_m, float)[None]
    out = np.zeros(len(offsets_m))
    for k, offset in enumerate(offsets_m):
        shifted = mics - offset * d
        for w in windows:
            geo = reception_geometry(track, w, anchor, shifted, atmosphere,
                                     settings.pressure_gain, node_step=settings.node_step)
            idx = clock.sample_index(geo.reception_s)
            first = clock.first_frames(idx) - 8
            n = int(np.max(np.ceil(idx.max(axis=(0, 2))) + 8 - first))
            out[k] += anchor_coherence(read_frames(first, n), first, geo, clock, w, settings,
                                       atmosphere) / len(windows)
    return out


def parabola_peak(offsets, focus) -> tuple[float, float]:
    """The peak of a scan by a parabola through its best three points, and the parabola's
    curvature there (negative at a maximum; 0 where there is none)."""
    x, y = np.asarray(offsets, float), np.asarray(focus, float)
    k = int(np.clip(np.argmax(y), 1, len(y) - 2))
    a, b, c = y[k - 1:k + 2]
    step = x[1] - x[0]
    denom = a - 2 * b + c
    if denom >= 0:
        return float(x[k]), 0.0
    return float(x[k] + np.clip(0.5 * (a - c) / denom, -1, 1) * step), float(denom / step ** 2)


def scan_track_offset(read_frames, track: TrackModel, windows: list[Window], anchor_body_m,
                      mic_enu_m, atmosphere: Atmosphere, clock: ArrayClock,
                      settings: ChainSettings, *, axis: str, reach_m: float,
                      steps: int = 8) -> TrackOffset:
    """The track's offset of best focus along one axis within +-``reach_m``: a coarse scan of
    ``2 steps + 1`` offsets, then a fine one of the same count over two coarse steps either side
    of its best."""
    direction = track_axes(track, windows[len(windows) // 2].center_s)[axis]
    args = (read_frames, track, windows, anchor_body_m, mic_enu_m, atmosphere, clock, settings)
    coarse = np.linspace(-reach_m, reach_m, 2 * steps + 1)
    focus = focus_over_offsets(*args, direction_enu=direction, offsets_m=coarse)
    best = int(np.argmax(focus))
    at_edge = best in (0, len(coarse) - 1)
    step = coarse[1] - coarse[0]
    fine = coarse[best] + np.linspace(-2 * step, 2 * step, 2 * steps + 1)
    fine_focus = focus_over_offsets(*args, direction_enu=direction, offsets_m=fine)
    offset, curvature = parabola_peak(fine, fine_focus)
    peak = float(np.max(fine_focus))
    decided = bool(peak >= MIN_FOCUS and curvature < 0)
    # The peak's resolution: the offsets whose focus lies within FOCUS_DROP of the best.
    uncertainty = float(np.sqrt(2 * FOCUS_DROP * peak / -curvature)) if decided else np.inf
    return TrackOffset(axis, offset, uncertainty, at_edge, peak, coarse, focus)

"""Acoustic estimate of a recording's clock offset from a source at a known body position.

On a straight, constant-speed pass a clock offset dt looks exactly like an along-track shift of
the sources by V dt, so the offset can only be estimated against an anchor: a source whose body
position is known (a propeller hub, a loudspeaker fixed to the airframe). The estimate maximises
the coherence of the de-Dopplerized microphone signals at the anchor: the cross-power of the
delay-and-sum output (autopowers removed) over the autopowers, summed over bands and over
windows near overhead. Unlike the beam power itself, this ratio does not grow with the
amplitude factor r (1 - M_r)^2 of a shifted source position, which would bias the estimate.
The offset is found by a coarse scan, then a parabola through the best points of a fine scan.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging.dedoppler import ChainSettings, reception_geometry
from flyover.sync.timebase import ArrayClock
from flyover.sync.track_check import anchor_coherence


@dataclass(frozen=True)
class ClockEstimate:
    """Result of :func:`estimate_clock_offset`.

    Attributes
    ----------
    offset_s : float
        Estimated clock offset (to add to the recorder's times).
    scan_offsets_s, scan_power : ndarray
        The coarse scan (coherence, normalised to 1 at its maximum).
    contrast : float
        Peak coherence over the median of the scan: near 1 means no clear anchor in the data.
    coherence : float
        Array coherence at the anchor at the peak: 1 for one source alone at the anchor, about 0
        for sound that is incoherent across the array there.
    prominence : float
        How far the peak stands out of the scan: (peak - median) / (1.4826 MAD), the robust
        number of standard deviations of the scan's spread.
    uncertainty_s : float
        Half-width of the peak where it has dropped by the scan's spread (1.4826 MAD), from the
        fine scan's curvature: the offsets the data cannot tell apart.
    """

    offset_s: float
    scan_offsets_s: np.ndarray
    scan_power: np.ndarray
    contrast: float
    coherence: float = float("nan")
    prominence: float = float("nan")
    uncertainty_s: float = float("nan")


def anchor_power(read_frames, track: TrackModel, windows: list[Window], anchor_body_m,
                 mic_enu_m, atmosphere: Atmosphere, clock: ArrayClock,
                 settings: ChainSettings, *, offsets_s, max_offset_s: float) -> np.ndarray:
    """Coherence at the anchor for each candidate offset (band sums, then the windows' mean).

    ``read_frames(first, n)`` returns calibrated pressure (n_mics, n) of the recording, row m
    from frame ``first[m]``; ``clock`` must carry no common offset: candidates are applied to the
    reception times (a common offset of all recorders).
    """
    total = np.zeros(len(offsets_s))
    for w in windows:
        geo = reception_geometry(track, w, np.asarray(anchor_body_m, float)[None], mic_enu_m,
                                 atmosphere, settings.pressure_gain, node_step=settings.node_step)
        idx = clock.sample_index(geo.reception_s)
        pad = int(np.ceil(max_offset_s * clock.rate_hz.max())) + 8
        first = clock.first_frames(idx) - pad
        n = int(np.max(np.ceil(idx.max(axis=(0, 2))) + pad - first))
        signals = read_frames(first, n)
        for k, dt in enumerate(offsets_s):
            shifted = replace(geo, reception_s=geo.reception_s - dt)
            total[k] += anchor_coherence(signals, first, shifted, clock, w, settings,
                                         atmosphere) / len(windows)
    return total


def estimate_clock_offset(read_frames, track: TrackModel, windows: list[Window], anchor_body_m,
                          mic_enu_m, atmosphere: Atmosphere, clock: ArrayClock,
                          settings: ChainSettings, *, max_offset_s: float = 1.0,
                          coarse_step_s: float = 0.01, fine_step_s: float = 0.001
                          ) -> ClockEstimate:
    """Estimate the clock offset within +-``max_offset_s`` (see the module notes)."""
    coarse = np.arange(-max_offset_s, max_offset_s + coarse_step_s / 2, coarse_step_s)
    args = (track, windows, anchor_body_m, mic_enu_m, atmosphere, clock, settings)
    p = anchor_power(read_frames, *args, offsets_s=coarse, max_offset_s=max_offset_s)
    best = coarse[int(np.argmax(p))]
    fine = best + np.arange(-coarse_step_s, coarse_step_s + fine_step_s / 2, fine_step_s)
    q = anchor_power(read_frames, *args, offsets_s=fine,
                     max_offset_s=max_offset_s + coarse_step_s)
    k = int(np.clip(np.argmax(q), 1, len(q) - 2))
    a, b, c = q[k - 1:k + 2]
    denom = a - 2 * b + c
    step = 0.5 * (a - c) / denom if denom < 0 else 0.0
    offset = float(fine[k] + np.clip(step, -1, 1) * fine_step_s)
    peak = float(np.max(p))
    median = float(np.median(p))
    contrast = peak / median if median > 0 else float("inf")
    spread = 1.4826 * float(np.median(np.abs(p - median)))
    prominence = (peak - median) / spread if spread > 0 else float("inf")
    curvature = denom / fine_step_s ** 2  # d2C/dtau2 at the peak, negative at a maximum
    uncertainty = (float(np.sqrt(2 * spread / -curvature)) if curvature < 0 and spread > 0
                   else float("inf"))
    return ClockEstimate(offset, coarse, p / peak if peak > 0 else p, contrast,
                         coherence=float(np.max(q)), prominence=prominence,
                         uncertainty_s=uncertainty)

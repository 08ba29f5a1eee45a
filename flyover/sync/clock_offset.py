"""Acoustic estimate of a recording's clock offset from a source at a known body position.

On a straight, constant-speed pass a clock offset dt looks exactly like an along-track shift of
the sources by V dt, so the offset can only be estimated against an anchor: a source whose body
position is known (a propeller hub, a loudspeaker fixed to the airframe). The estimate maximises
the coherence of the de-Dopplerized microphone signals at the anchor: the cross-power of the
delay-and-sum output (autopowers removed) over the autopowers, summed over bands and over
windows near overhead. Unlike the beam power itself, this ratio does not grow with the
amplitude factor r (1 - M_r)^2 of a shifted source position, which would bias the estimate.
The offset is found by a coarse scan, then a parabola through the best points of a fine scan.

A source elsewhere on the body that outweighs the anchor in some bands pulls the estimate by its
along-track distance over the speed (30 ms for 0.3 m at 10 m/s). The coarse scan is therefore
also made with the lower and the upper half of the bands apart (at no extra cost: the band
powers are computed once): where the two halves put the peak further apart than twice their
peaks' half-widths (in quadrature; a blend of two sources widens the all-band peak, not the
halves'), the anchor is not the dominant source of every band used and the caller refuses the
estimate; otherwise half their difference joins the uncertainty.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere
from flyover.geometry.track import TrackModel
from flyover.geometry.windows import Window
from flyover.imaging.chain import ChainSettings
from flyover.imaging.reception import reception_geometry
from flyover.model.timebase import ArrayClock
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
        fine scan's curvature (the offsets the data cannot tell apart), with half the
        difference of the two band halves' peaks in quadrature.
    half_offsets_s : tuple of float
        The peak of the coarse scan with the lower and with the upper half of the bands
        (parabola through its best points).
    halves_tolerance_s : float
        How far apart the halves may put the peak: twice their peaks' half-widths in
        quadrature, at least the coarse step.
    """

    offset_s: float
    scan_offsets_s: np.ndarray
    scan_power: np.ndarray
    contrast: float
    coherence: float = float("nan")
    prominence: float = float("nan")
    uncertainty_s: float = float("nan")
    half_offsets_s: tuple[float, float] = (float("nan"), float("nan"))
    halves_tolerance_s: float = float("inf")

    @property
    def halves_disagree(self) -> bool:
        """The two band halves put the offset further apart than their tolerance."""
        low, high = self.half_offsets_s
        return bool(abs(low - high) > self.halves_tolerance_s)


def anchor_power(read_frames, track: TrackModel, windows: list[Window], anchor_body_m,
                 mic_enu_m, atmosphere: Atmosphere, clock: ArrayClock,
                 settings: ChainSettings, *, offsets_s, max_offset_s: float,
                 band_groups=(slice(None),)) -> np.ndarray:
    """Coherence at the anchor for each candidate offset (band sums, then the windows' mean),
    shape (n_groups, n_offsets): one row per slice of the bands in ``band_groups``.

    ``read_frames(first, n)`` returns calibrated pressure (n_mics, n) of the recording, row m
    from frame ``first[m]``; ``clock`` must carry no common offset: candidates are applied to the
    reception times (a common offset of all recorders).
    """
    total = np.zeros((len(band_groups), len(offsets_s)))
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
            total[:, k] += np.atleast_1d(anchor_coherence(
                signals, first, shifted, clock, w, settings, atmosphere,
                band_groups)) / len(windows)
    return total


def _parabola_peak(offsets_s, power) -> tuple[float, float]:
    """The offset of a scan's maximum, refined by a parabola through it and its neighbours, and
    the peak's half-width where it has dropped by the scan's spread (1.4826 MAD): inf for a
    flat or spread-free scan."""
    step = float(offsets_s[1] - offsets_s[0])
    k = int(np.clip(np.argmax(power), 1, len(power) - 2))
    a, b, c = power[k - 1:k + 2]
    denom = a - 2 * b + c
    shift = 0.5 * (a - c) / denom if denom < 0 else 0.0
    spread = 1.4826 * float(np.median(np.abs(power - np.median(power))))
    width = (float(np.sqrt(2 * spread / (-denom / step ** 2))) if denom < 0 and spread > 0
             else float("inf"))
    return float(offsets_s[k] + np.clip(shift, -1, 1) * step), width


def estimate_clock_offset(read_frames, track: TrackModel, windows: list[Window], anchor_body_m,
                          mic_enu_m, atmosphere: Atmosphere, clock: ArrayClock,
                          settings: ChainSettings, *, max_offset_s: float = 1.0,
                          coarse_step_s: float = 0.01, fine_step_s: float = 0.001
                          ) -> ClockEstimate:
    """Estimate the clock offset within +-``max_offset_s`` (see the module notes)."""
    coarse = np.arange(-max_offset_s, max_offset_s + coarse_step_s / 2, coarse_step_s)
    args = (track, windows, anchor_body_m, mic_enu_m, atmosphere, clock, settings)
    half = max(1, len(settings.bands) // 2)
    p, low, high = anchor_power(
        read_frames, *args, offsets_s=coarse, max_offset_s=max_offset_s,
        band_groups=(slice(None), slice(0, half), slice(half, None)))
    best = coarse[int(np.argmax(p))]
    fine = best + np.arange(-coarse_step_s, coarse_step_s + fine_step_s / 2, fine_step_s)
    q = anchor_power(read_frames, *args, offsets_s=fine,
                     max_offset_s=max_offset_s + coarse_step_s)[0]
    offset = _parabola_peak(fine, q)[0]
    k = int(np.clip(np.argmax(q), 1, len(q) - 2))
    denom = q[k - 1] - 2 * q[k] + q[k + 1]
    peak = float(np.max(p))
    median = float(np.median(p))
    contrast = peak / median if median > 0 else float("inf")
    spread = 1.4826 * float(np.median(np.abs(p - median)))
    prominence = (peak - median) / spread if spread > 0 else float("inf")
    curvature = denom / fine_step_s ** 2  # d2C/dtau2 at the peak, negative at a maximum
    uncertainty = (float(np.sqrt(2 * spread / -curvature)) if curvature < 0 and spread > 0
                   else float("inf"))
    (low_s, low_width), (high_s, high_width) = _parabola_peak(coarse, low), \
        _parabola_peak(coarse, high)
    halves = (low_s, high_s)
    # Each half's own peak width: a blend of two sources in one estimate widens its peak,
    # never the halves'.
    tolerance = max(2.0 * float(np.hypot(low_width, high_width)), coarse_step_s)
    if len(settings.bands) > 1:
        uncertainty = float(np.hypot(uncertainty, 0.5 * (low_s - high_s)))
    return ClockEstimate(offset, coarse, p / peak if peak > 0 else p, contrast,
                         coherence=float(np.max(q)), prominence=prominence,
                         uncertainty_s=uncertainty, half_offsets_s=halves,
                         halves_tolerance_s=tolerance)

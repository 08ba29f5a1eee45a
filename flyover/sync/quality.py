"""Data-quality checks of a pass: dead, clipped and outlying channels; track quality.

These are warnings, not errors: flagged channels are left out of beamforming (and out of the
unit-source chain, which uses the same weights) unless the campaign keeps them.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from flyover.acoustics.spectral import welch_coherence

DEAD_BELOW_DB = -40.0      # RMS this far under the array median: dead channel
OUTLIER_DB = 6.0           # RMS this far from its neighbours' median: outlier
CLIP_FRACTION = 1e-4       # share of samples at full scale above which a channel is clipped
FULL_SCALE = 0.999
COHERENCE_BAND_HZ = (100.0, 200.0)  # default low band for the neighbour coherence
INCOHERENT_BELOW = 0.5     # mean coherence with the nearest neighbours under which a channel
COHERENT_ARRAY = 0.8       # is flagged, when the array's median is above this


@dataclass
class ChannelAccumulator:
    """Running sums over blocks of a recording (so memory does not follow its length)."""

    n_channels: int
    sum_sq: np.ndarray = field(init=False)
    clipped: np.ndarray = field(init=False)
    count: int = 0

    def __post_init__(self):
        self.sum_sq = np.zeros(self.n_channels)
        self.clipped = np.zeros(self.n_channels, dtype=np.int64)

    def add(self, block_units) -> None:
        """Add a block of raw samples (n_channels, n) in full-scale units."""
        x = np.asarray(block_units, dtype=np.float64)
        self.sum_sq += np.sum(x * x, axis=1)
        self.clipped += np.sum(np.abs(x) >= FULL_SCALE, axis=1)
        self.count += x.shape[1]


def neighbour_coherence(samples, sample_rate_hz: float, mic_enu_m, n_neighbours: int = 3,
                        band_hz=COHERENCE_BAND_HZ) -> np.ndarray:
    """Mean magnitude-squared coherence of each channel with its nearest neighbours in a low band.

    Parameters
    ----------
    samples : ndarray, shape (n_channels, n)
        A stretch with the vehicle loud (near overhead), in any consistent unit.

    Returns
    -------
    ndarray, shape (n_channels,)
        Welch coherence (Hann, 50 % overlap) averaged over the band and the neighbours.
    """
    x = np.asarray(samples, dtype=float)
    pos = np.asarray(mic_enu_m, float)
    d = np.sqrt(((pos[:, None] - pos[None]) ** 2).sum(-1))
    nper = int(2 ** np.ceil(np.log2(0.1 * sample_rate_hz)))
    out = np.zeros(len(x))
    for i in range(len(x)):
        near = np.argsort(d[i])[1:n_neighbours + 1]
        with np.errstate(invalid="ignore", divide="ignore"):  # a dead channel has no power
            f, c = welch_coherence(x[i], x[near], sample_rate_hz,
                                   segment_samples=min(nper, x.shape[1]))
        inside = (f >= band_hz[0]) & (f <= band_hz[1])
        out[i] = float(np.mean(np.nan_to_num(c[:, inside])))
    return out


def channel_quality(acc: ChannelAccumulator, pa_per_unit, mic_enu_m, channels,
                    coherence=None, n_neighbours: int = 6) -> list[dict]:
    """Per channel: RMS (Pa), level re the array median, clipping, and a verdict.

    A channel is 'dead' when its calibrated RMS is ``DEAD_BELOW_DB`` under the array median,
    'clipped' when more than ``CLIP_FRACTION`` of its samples sit at full scale, an
    'outlier' when its RMS differs by more than ``OUTLIER_DB`` from the median of its nearest
    neighbours (a loose connector, a wrong calibration, a wind-noise hit), and 'incoherent' when
    its low-band coherence with its neighbours (``coherence``, from
    :func:`neighbour_coherence`) is under ``INCOHERENT_BELOW`` while the array's median is above
    ``COHERENT_ARRAY`` (a channel recording something else: a swapped cable, a broken capsule).
    """
    rms_units = np.sqrt(acc.sum_sq / max(acc.count, 1))
    rms_pa = rms_units * np.asarray(pa_per_unit, float)
    with np.errstate(divide="ignore"):
        level = 20 * np.log10(np.maximum(rms_pa, 1e-30) / np.median(rms_pa))
    pos = np.asarray(mic_enu_m, float)
    d = np.sqrt(((pos[:, None] - pos[None]) ** 2).sum(-1))
    coh = np.full(len(rms_pa), np.nan) if coherence is None else np.asarray(coherence, float)
    array_coherent = bool(np.nanmedian(coh) > COHERENT_ARRAY) if coherence is not None else False
    out = []
    for i, ch in enumerate(channels):
        near = np.argsort(d[i])[1:n_neighbours + 1]
        ref = np.median(rms_pa[near])
        rel = 20 * np.log10(max(rms_pa[i], 1e-30) / ref) if ref > 0 else 0.0
        clip_share = acc.clipped[i] / max(acc.count, 1)
        verdict = "ok"
        if level[i] < DEAD_BELOW_DB:
            verdict = "dead"
        elif clip_share > CLIP_FRACTION:
            verdict = "clipped"
        elif abs(rel) > OUTLIER_DB:
            verdict = "outlier"
        elif array_coherent and coh[i] < INCOHERENT_BELOW:
            verdict = "incoherent"
        out.append({"channel": int(ch), "rms_pa": float(rms_pa[i]),
                    "level_re_median_db": float(level[i]), "level_re_neighbours_db": float(rel),
                    "clipped_fraction": float(clip_share),
                    "neighbour_coherence": None if np.isnan(coh[i]) else float(coh[i]),
                    "verdict": verdict})
    return out


def track_quality(track, span_s) -> dict:
    """Position-noise estimate, largest sample gap, and speed and height variation in a span."""
    t = np.linspace(span_s[0], span_s[1], 200)
    speed = np.linalg.norm(track.velocity(t), axis=1)
    height = track.position(t)[:, 2]
    gaps = np.diff(track.time_s)
    return {"position_noise_estimate_m": track.residual_rms_m(),
            "largest_gap_s": float(gaps.max()), "speed_min_m_s": float(speed.min()),
            "speed_max_m_s": float(speed.max()), "height_range_m": float(np.ptp(height))}

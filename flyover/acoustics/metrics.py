"""Single-event metrics of a pass as received at one microphone: time-weighted A levels, their
maxima, the sound exposure level over the 10 dB-down interval, the equivalent level, and
one-third-octave band levels in short blocks.

Definitions (IEC 61672-1:2013, clause 3; common practice for flyover noise):

- A-weighted pressure p_A(t): the pressure through the A-weighting of IEC 61672-1 (applied here
  in the frequency domain with the standard's analytic response, so its magnitude is exact at
  every frequency; its phase is zero, which the squared and averaged quantities below do not
  depend on beyond the filter's own few-millisecond memory).
- Time-weighted level L_A,tau(t) = 10 lg( (1/tau) int_{-inf}^t p_A^2(x) e^{-(t-x)/tau} dx / p0^2 )
  with tau = 0.125 s (F, fast) or 1 s (S, slow): a first-order low pass of p_A^2, run here as
  the exact discrete exponential recursion sample by sample. The recording starts in the middle
  of the sound, not in silence: the detector starts settled, at the mean square of the first
  time constant (a meter switched on before the recording began), so that no maximum and no
  10 dB-down edge comes from the detector warming up.
- LAFmax, LASmax: their maxima over the pass.
- Sound exposure level LAE = 10 lg( int_{t1}^{t2} p_A^2 dt / (p0^2 * 1 s) ) over the 10 dB-down
  interval [t1, t2]: from the first to the last time at which L_AS is within 10 dB of LASmax.
- LAeq,T = 10 lg( (1/T) int_T p_A^2 dt / p0^2 ): over the whole span analysed, so that
  LAE over the same span = LAeq,T + 10 lg(T / 1 s).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.bands import ThirdOctaveBands, a_weighting_db
from flyover.acoustics.spectral import exponential_average
from flyover.model.constants import P0_PA

TIME_CONSTANT_S = {"F": 0.125, "S": 1.0}   # IEC 61672-1 time weightings
TEN_DB_DOWN = 10.0


def a_weighted(pressure_pa, sample_rate_hz: float, band_hz=None) -> np.ndarray:
    """A-weighted pressure (Pa), shape (n,): the IEC 61672-1 response applied to the spectrum,
    optionally only between ``band_hz = (low, high)`` (an analysis's band range).

    The signal is padded to twice its length so that the weighting's memory does not wrap
    around its ends.
    """
    x = np.asarray(pressure_pa, dtype=float)
    n = len(x)
    m = 2 * n
    f = np.fft.rfftfreq(m, 1.0 / sample_rate_hz)
    gain = np.zeros_like(f)
    gain[1:] = 10.0 ** (a_weighting_db(f[1:]) / 20.0)
    if band_hz is not None:
        gain[(f < band_hz[0]) | (f >= band_hz[1])] = 0.0
    return np.fft.irfft(np.fft.rfft(x, m) * gain, m)[:n]


def time_weighted_mean_square(p2, sample_rate_hz: float, time_constant_s: float) -> np.ndarray:
    """Exponentially time-weighted mean square (Pa^2) of a squared signal, shape (n,).

    The exact discrete form of d y/dt = (p^2 - y) / tau over each sample interval, started
    settled: its state before the first sample is the mean of ``p2`` over the first time
    constant (the whole signal if shorter). A signal that starts from silence starts from rest.
    """
    p2 = np.asarray(p2, dtype=float)
    a = np.exp(-1.0 / (sample_rate_hz * time_constant_s))
    n_settle = max(1, int(round(sample_rate_hz * time_constant_s)))
    settled = float(np.mean(p2[:n_settle])) if len(p2) else 0.0
    return exponential_average(p2, a, initial=settled)


def level_db(mean_square_pa2) -> np.ndarray:
    """10 lg(p^2 / p0^2), -inf for zero."""
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.asarray(mean_square_pa2, dtype=float) / P0_PA ** 2)


@dataclass(frozen=True)
class EventMetrics:
    """Single-event metrics of one signal (times in seconds from its first sample).

    Attributes
    ----------
    lafmax_db, lafmax_s, lasmax_db, lasmax_s : float
    lae_db : float
        Over the 10 dB-down interval of L_AS.
    ten_db_down_s : tuple of float
        Its first and last time.
    laeq_db, laeq_duration_s : float
        Over the whole signal.
    ten_db_down_complete : bool
        False when L_AS is still within 10 dB of its maximum at an end of the signal: the
        interval, and LAE with it, are then cut short by the recording.
    """

    lafmax_db: float
    lafmax_s: float
    lasmax_db: float
    lasmax_s: float
    lae_db: float
    ten_db_down_s: tuple[float, float]
    laeq_db: float
    laeq_duration_s: float
    ten_db_down_complete: bool

    @property
    def ten_db_down_duration_s(self) -> float:
        return self.ten_db_down_s[1] - self.ten_db_down_s[0]


def event_metrics(pressure_pa, sample_rate_hz: float, band_hz=None) -> tuple[EventMetrics, dict]:
    """The single-event metrics of a received pressure signal (see the module notes).

    Parameters
    ----------
    pressure_pa : ndarray, shape (n,)
        Pressure at the microphone (Pa), free of the ground-plate doubling or not: as measured.
    sample_rate_hz : float
    band_hz : (float, float), optional
        Keep only the frequencies of this range (to compare with levels of the analysed bands).

    Returns
    -------
    metrics : EventMetrics
    history : dict of str -> ndarray (n,)
        ``"LAF"`` and ``"LAS"``: the time-weighted levels (dB), sample by sample.
    """
    return metrics_of_mean_square(a_weighted(pressure_pa, sample_rate_hz, band_hz) ** 2,
                                  sample_rate_hz)


def metrics_of_mean_square(p2, sample_rate_hz: float) -> tuple[EventMetrics, dict]:
    """:func:`event_metrics` from the squared A-weighted pressure (Pa^2) or from an A-weighted
    mean-square envelope sampled at ``sample_rate_hz`` (a reconstructed level history): the time
    weightings and integrals act on the squared signal alone."""
    fs = float(sample_rate_hz)
    p2 = np.asarray(p2, dtype=float)
    laf = level_db(time_weighted_mean_square(p2, fs, TIME_CONSTANT_S["F"]))
    las = level_db(time_weighted_mean_square(p2, fs, TIME_CONSTANT_S["S"]))
    kf, ks = int(np.argmax(laf)), int(np.argmax(las))
    above = np.flatnonzero(las >= las[ks] - TEN_DB_DOWN)
    i1, i2 = int(above[0]), int(above[-1])
    energy = np.cumsum(p2) / fs                     # Pa^2 s
    exposure = energy[i2] - (energy[i1 - 1] if i1 > 0 else 0.0)
    n = len(p2)
    metrics = EventMetrics(
        float(laf[kf]), kf / fs, float(las[ks]), ks / fs,
        float(level_db(exposure / 1.0)), (i1 / fs, i2 / fs),
        float(level_db(energy[-1] / (n / fs))), n / fs,
        bool(i1 > 0 and i2 < n - 1))
    return metrics, {"LAF": laf, "LAS": las}


def lae_shortfall_db(metrics: EventMetrics, history: dict, *, closest_s: float,
                     closest_distance_m: float, speed_m_s: float) -> float:
    """How much LAE can miss where the signal cuts its 10 dB-down interval short (dB, 0 when
    it does not), estimated for a straight flight whose sound beyond each cut end falls off
    by spherical spreading from the level there.

    At a cut end, at time t_e from the closest approach, the level L_e is the higher of L_AF
    and L_AS there (L_AS trails a rising sound). Beyond it the mean square is taken as
    p_e^2 (d^2 + v^2 t_e^2) / (d^2 + v^2 t^2) until it is 10 dB under the higher of LASmax
    and L_e, one S time constant later than the spreading alone says (L_AS trails the
    sound), at t_10; its energy is p_e^2 (d^2 + v^2 t_e^2) / (v d) [atan(v t_10 / d) -
    atan(v t_e / d)] (the standard integral of 1 / (d^2 + v^2 t^2)). Directivity and
    absorption beyond the end are not known: the figure is an estimate of the shortfall's
    size, not a guarantee.

    Parameters
    ----------
    metrics : EventMetrics
    history : dict
        The signal's ``"LAF"`` and ``"LAS"`` histories (:func:`metrics_of_mean_square`).
    closest_s : float
        Time of the closest approach as received, seconds from the signal's first sample.
    closest_distance_m, speed_m_s : float
        Closest distance and speed of the flight.

    Returns
    -------
    float
        dB to add to LAE for its estimated full value; inf where a cut end lies on the near
        side of the closest approach (the peak itself may lie beyond it); NaN for a silent
        signal.
    """
    if metrics.ten_db_down_complete:
        return 0.0
    if not np.isfinite(metrics.lasmax_db):
        return float("nan")                           # a silent signal: no event to complete
    las, laf = np.asarray(history["LAS"], float), np.asarray(history["LAF"], float)
    n = len(las)
    rate = n / metrics.laeq_duration_s                # samples per second
    d, v = float(closest_distance_m), float(speed_m_s)
    missing = 0.0
    for k, outward in ((0, -1.0), (n - 1, 1.0)):
        if las[k] < metrics.lasmax_db - TEN_DB_DOWN:
            continue                                  # this end reached 10 dB down
        t_e = (k / rate - closest_s) * outward        # from the closest approach, outward
        if t_e < 0:
            return float("inf")
        level = max(las[k], laf[k])
        threshold = max(metrics.lasmax_db, level) - TEN_DB_DOWN
        r2_e = d * d + (v * t_e) ** 2
        t_10 = (np.sqrt(max(r2_e * 10.0 ** ((level - threshold) / 10.0) - d * d, 0.0)) / v
                + TIME_CONSTANT_S["S"])
        missing += (10.0 ** (level / 10.0) * r2_e / (v * d)
                    * (np.arctan(v * t_10 / d) - np.arctan(v * t_e / d)))
    return float(10.0 * np.log10(1.0 + missing / 10.0 ** (metrics.lae_db / 10.0)))


def band_level_history(pressure_pa, sample_rate_hz: float, bands: ThirdOctaveBands,
                       block_s: float = 0.5) -> tuple[np.ndarray, np.ndarray]:
    """One-third-octave band levels of consecutive blocks (energy per band from the block's
    spectrum, Parseval: rectangular blocks that tile the signal, so the blocks' energies add up
    to the signal's).

    Returns
    -------
    centre_s : ndarray, shape (n_blocks,)
        Block centres, seconds from the first sample.
    levels_db : ndarray, shape (n_blocks, n_bands)
        Band levels (dB re 20 uPa, mean square over the block); -inf for an empty band.
    """
    fs = float(sample_rate_hz)
    x = np.asarray(pressure_pa, dtype=float)
    n = int(round(block_s * fs))
    n_blocks = len(x) // n
    blocks = x[:n_blocks * n].reshape(n_blocks, n)
    spec = np.abs(np.fft.rfft(blocks, axis=1)) ** 2
    weight = np.full(spec.shape[1], 2.0)
    weight[0] = 1.0
    if n % 2 == 0:
        weight[-1] = 1.0
    power = spec * weight / n ** 2                   # mean square per line, Pa^2
    f = np.fft.rfftfreq(n, 1.0 / fs)
    out = np.stack([power[:, (f >= lo) & (f < hi)].sum(axis=1)
                    for lo, hi in zip(bands.lower_hz, bands.upper_hz)], axis=1)
    return (np.arange(n_blocks) + 0.5) * n / fs, level_db(out)

"""What every imaging method shares: the chain's settings, band powers from windowed spectra
(with and without diagonal removal) and the memory a window takes."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.ground import GroundSurface
from flyover.acoustics.bands import ThirdOctaveBands
from flyover.model.constants import CLEAN_LOOP_GAIN, CLEAN_MAX_SOURCES, FUNCTIONAL_EXPONENT


@dataclass(frozen=True)
class MethodTuning:
    """The imaging methods' tunables (``analysis.method_tuning``).

    Attributes
    ----------
    functional_exponent : float
        nu of functional beamforming.
    clean_loop_gain : float
        Share of each found source CLEAN-SC removes per iteration (small, so that sources a
        main-lobe width apart are told apart: at 0.6 one of two took 1.4 dB of the other's
        power, at 0.3 0.7 dB, at 0.1 0.4 dB for three times the iterations).
    clean_max_sources : int
        Iterations of CLEAN-SC per frequency line at most.
    """

    functional_exponent: float = FUNCTIONAL_EXPONENT
    clean_loop_gain: float = CLEAN_LOOP_GAIN
    clean_max_sources: int = CLEAN_MAX_SOURCES


@dataclass(frozen=True)
class ChainSettings:
    """How a window is processed (the same for the measurement and its unit point source).

    Attributes
    ----------
    bands : ThirdOctaveBands
    weights : ndarray, shape (n_mics,)
        Microphone weights (0 excludes a microphone).
    pressure_gain : float
        G: 2 for ground-plate microphones, 1 in free field.
    interpolation : {'cubic', 'sinc'}
    absorption : bool
        Compensate the measured path's ISO 9613-1 absorption.
    node_step : int
        Emission samples between the nodes where delays are computed exactly.
    chunk_points : int
        Grid points processed together (memory: chunk x n_mics x n_samples float32).
    image_mic_enu_m : ndarray, shape (n_mics, 3), or None
        Raised microphones: the microphones mirrored in the ground, whose reflection the chain
        removes per frequency line (:func:`ground_inverse`); None otherwise.
    ground : GroundSurface or None
        The ground under raised microphones (None: hard).
    csm_block_samples : int or None
        Samples per Welch block of the frequency-domain methods (None: a quarter window).
    tuning : MethodTuning
        The methods' tunables (the campaign's ``analysis.method_tuning``).
    """

    bands: ThirdOctaveBands
    weights: np.ndarray
    pressure_gain: float
    interpolation: str = "cubic"
    absorption: bool = True
    node_step: int = 128
    chunk_points: int = 32
    image_mic_enu_m: np.ndarray | None = None
    ground: GroundSurface | None = None
    csm_block_samples: int | None = None
    tuning: MethodTuning = MethodTuning()


@dataclass(frozen=True)
class BandPowers:
    """Band powers of a window on grid points (source strength at 1 m, Pa^2).

    Attributes
    ----------
    full : ndarray, shape (n_points, n_bands)
        Delay-and-sum with the whole cross-power (autopowers included).
    diagonal_removed : ndarray, shape (n_points, n_bands)
        With the autopowers removed and the normalisation (sum w)^2 - sum w^2; may be negative.
    residual : ndarray, shape (n_points, n_bands), or None
        A deconvolving method's diagonal-removed residual map (what it left unexplained), in
        the units of conventional beamforming; for a unit source, its conventional map. Source
        power integration adds the residual's integral to the region levels.
    variant : BandPowers or None
        The same maps by a variant of the method that is as defensible (CLEAN-SC's maps before
        its power re-fit): a region level that differs between the two by more than the
        tolerance of :mod:`flyover.imaging.integration` is not given.
    """

    full: np.ndarray
    diagonal_removed: np.ndarray
    residual: np.ndarray | None = None
    variant: "BandPowers | None" = None


def spectral_weights(n: int) -> tuple[np.ndarray, float]:
    """Hann window (float32) and the factor turning |X_k|^2 into one-sided power per bin."""
    win = np.hanning(n + 1)[:n].astype(np.float32)  # periodic Hann
    return win, 2.0 / (n * float(np.sum(win.astype(float) ** 2)))


def band_bins(bands: ThirdOctaveBands, n: int, sample_rate_hz: float) -> list[slice]:
    """FFT bins [k1, k2) whose frequencies fall in each band (lower edge inclusive)."""
    f = np.fft.rfftfreq(n, 1.0 / sample_rate_hz)
    return [slice(int(np.searchsorted(f, lo)), int(np.searchsorted(f, hi)))
            for lo, hi in zip(bands.lower_hz, bands.upper_hz)]


def signal_band_power(signal, bands: ThirdOctaveBands, sample_rate_hz: float) -> np.ndarray:
    """Band powers (mean square per band) of signals (..., n), as the chain forms them."""
    x = np.asarray(signal)
    win, norm = spectral_weights(x.shape[-1])
    spec = np.abs(np.fft.rfft(x * win, axis=-1)) ** 2 * norm
    return np.stack([spec[..., s].sum(-1) for s in band_bins(bands, x.shape[-1], sample_rate_hz)],
                    axis=-1)


def window_memory_bytes(n_grid: int, n_mics: int, n_samples: int, n_bands: int,
                        settings: ChainSettings) -> int:
    """Peak memory (bytes) the chain needs for one window: geometry of every grid point and
    microphone at the nodes, one chunk of de-Dopplerized signals and spectra, and the maps.

    This prices the per-microphone chain (:func:`_per_microphone_band_powers`, the direct
    definition): an upper bound for the summed chain the maps are made with, whose chunks hold
    a few sums per point instead of every microphone's signal (0.5 GB at most on the benchmark
    geometry).
    The workflow's memory requests are calibrated against it (:mod:`flyover.workflow.plan`)."""
    n_nodes = int(np.ceil((n_samples - 1) / settings.node_step)) + 1
    geometry = n_grid * n_mics * (n_nodes * 2 + 2) * 8
    chunk = min(settings.chunk_points, n_grid) * n_mics * n_samples * (4 + 8)
    maps = n_grid * n_bands * 8 * 2
    return int(geometry + chunk + maps)

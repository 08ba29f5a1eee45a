"""Standard uncertainty of a band level, propagated from the inputs by linearisation.

Each input's standard uncertainty is carried to the level of a region in a band through a
first-order sensitivity (the terms are independent and added in quadrature, GUM 5.1.2):

- calibration, ``calibration_db`` per microphone, independent: the beam power scales with the
  square of the mean gain, so the level's uncertainty is ``calibration_db / sqrt(N)``;
- calibration shared by every microphone, ``calibration_shared_db``: the calibrator's own level
  and the capsule type's response move every channel alike, so N microphones do not average
  it away (nor do many passes with one calibrator: see
  :func:`flyover.acoustics.statistics.mean_and_interval`);
- microphone positions, ``mic_position_m`` per coordinate, and the speed of sound from the
  temperature, ``temperature_k`` (c = 331.3 sqrt(1 + T/273.15) moves by c sigma_T / (2 T);
  delays across an aperture D change by D / c times that ratio, a position-like error of
  ``D sigma_c / (c sqrt(12))``, the rms over the aperture): phase errors k delta along the
  propagation direction make the delay-and-sum lose e^(-(k sigma)^2) of its power, which the
  unit sources (on the nominal positions) do not see. This is a bias, one-sided: the level is
  low by ``10 lg(e) (k sigma)^2`` dB on average (:func:`position_loss_db`), never high, so it
  is not in the symmetric budget: the interval's upper end is raised by it instead;
- the ground under raised microphones, ``flow_resistivity_factor``: the ground correction
  depends on the surface's flow resistivity, known to about a factor 2 (common practice for a
  fitted or tabled value); the correction's change over that factor either way, as a
  rectangular term (:func:`ground_correction_spread_db`);
- the track's position, the smoothed track's error ``track_m``, and the clock offset's
  ``clock_s`` as an along-track error V sigma_t: the level's distance correction 20 lg r moves by
  ``20 lg(e) sigma_r / r``, with sigma_r the error along the line of sight (the clock's part is
  V sigma_t cos(theta), theta the polar angle);
- the leakage solve's sensitivity, ``leakage_db``: how far the level moved when a unit source
  shifted within its region (the imaging's stability test): the source's true place in its
  region is unknown, so the level is known to within that much, a rectangular distribution of
  that half-width, ``leakage_db / sqrt(3)`` (GUM 4.3.7, from memory);
- the window's own scatter: a band power measured over T seconds of a band B Hz wide scatters by
  about 1/sqrt(B T) (noise) and less for tones; flyover takes it from the data, as the rms
  difference of consecutive windows' levels over sqrt(2) (``scatter_db``, computed by the
  levels stage per region and band).

The first four are checked on the simulator by the coverage benchmark
(``benchmarks/bench_uncertainty_coverage.py``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.acoustics.ground import GroundSurface, reflection_transfer

DB_PER_NEPER_POWER = 10.0 / np.log(10.0)     # 10 lg(e) = 4.343 dB
Z90 = 1.6449                                  # two-sided 90 % of the normal distribution


@dataclass(frozen=True)
class InputUncertainty:
    """Standard uncertainties of the inputs (defaults stated in docs/campaign-file.md).

    Attributes
    ----------
    calibration_db : float
        Per microphone, independent (a class 1 calibrator and careful work: 0.2 dB).
    mic_position_m : float
        Per coordinate of a surveyed microphone (a total station: 5 mm).
    temperature_k : float
        Of the air temperature on the path (0.5 K).
    clock_s : float
        Of the clock offset where nothing measured it (given by hand): 1 ms.
    calibration_shared_db : float
        Common to every microphone and pass: the calibrator's stated level and the capsule
        type's response (0.15 dB; about 0.1-0.2 dB is common practice).
    flow_resistivity_factor : float
        How far a soft ground's flow resistivity may be off, as a factor either way (2).
    """

    calibration_db: float = 0.2
    mic_position_m: float = 0.005
    temperature_k: float = 0.5
    clock_s: float = 0.001
    calibration_shared_db: float = 0.15
    flow_resistivity_factor: float = 2.0


def band_level_uncertainty_db(band_center_hz, *, distance_m, polar_deg, n_mics: int,
                              aperture_m: float, c_m_s: float, temperature_c: float,
                              speed_m_s: float, track_m: float, clock_s: float,
                              inputs: InputUncertainty, scatter_db=0.0,
                              leakage_db=0.0, ground_db=0.0) -> np.ndarray:
    """Standard uncertainty (dB) of band levels from the inputs and the window scatter (the
    microphone positions' one-sided bias apart: :func:`position_loss_db`).

    Parameters
    ----------
    band_center_hz : array
        Band centres (broadcast with ``distance_m``, ``polar_deg`` and ``scatter_db``).
    distance_m, polar_deg : array
        Of the window.
    n_mics : int
        Microphones used.
    aperture_m, c_m_s, temperature_c, speed_m_s : float
    track_m : float
        Standard error of the smoothed track's position.
    clock_s : float
        Standard uncertainty of the clock offset used.
    inputs : InputUncertainty
    scatter_db : array
        The window scatter of the level.
    leakage_db : array
        How far the level moved under the stability test's shifts (0 where it has none).
    ground_db : array
        How far the ground correction moves over the flow resistivity's factor
        (:func:`ground_correction_spread_db`; 0 off raised microphones).
    """
    f = np.asarray(band_center_hz, float)
    r = np.asarray(distance_m, float)
    along = speed_m_s * clock_s * np.abs(np.cos(np.deg2rad(np.asarray(polar_deg, float))))
    terms = [
        np.full_like(f, inputs.calibration_db / np.sqrt(max(n_mics, 1))),
        np.full_like(f, inputs.calibration_shared_db),
        2 * DB_PER_NEPER_POWER * np.hypot(track_m, along) / r,
        np.asarray(scatter_db, float),
        np.asarray(leakage_db, float) / np.sqrt(3.0),
        np.asarray(ground_db, float) / np.sqrt(3.0),
    ]
    return np.sqrt(sum(np.broadcast_to(t, np.broadcast(*terms).shape) ** 2 for t in terms))


def position_loss_db(band_center_hz, *, aperture_m: float, c_m_s: float, temperature_c: float,
                     inputs: InputUncertainty) -> np.ndarray:
    """The mean loss (dB, >= 0) of a band level to the microphones' position errors and the
    speed of sound's: ``10 lg(e) (k sigma)^2``, sigma the position error along the propagation
    direction with the temperature's position-like part (module notes). The level is low by
    this on average; the true level lies above it, never below."""
    k = 2 * np.pi * np.asarray(band_center_hz, float) / c_m_s
    sigma_c = c_m_s * inputs.temperature_k / (2.0 * (temperature_c + 273.15))
    position_like = np.hypot(inputs.mic_position_m, aperture_m * sigma_c / (c_m_s * np.sqrt(12)))
    return DB_PER_NEPER_POWER * (k * position_like) ** 2


# Lines per band and angles across the aperture over which the ground correction's sensitivity
# is averaged (the array smooths the two-path notches that one microphone would see).
_GROUND_LINES = 48
_GROUND_ANGLES = 5


def ground_correction_spread_db(bands, *, distance_m: float, polar_deg: float,
                                mic_height_m: float, aperture_m: float, c_m_s: float,
                                ground, factor: float) -> np.ndarray:
    """How far (dB) the expected two-path power gain of a band, ``10 lg mean |1 + (r1/r2) Q
    e^(-i k (r2 - r1))|^2``, moves when the ground's flow resistivity is multiplied or divided
    by ``factor``; the larger of the two. Averaged over the band's lines and over microphones
    across the aperture (their angles to the source); 0 for hard ground, which has no flow
    resistivity to be wrong.

    Parameters
    ----------
    bands : ThirdOctaveBands
    distance_m, polar_deg : float
        Source to array centre, and the polar angle (90 overhead).
    mic_height_m : float
        Of the microphones above the ground.
    ground : GroundSurface

    Returns
    -------
    ndarray, shape (n_bands,)
    """
    if ground is None or ground.surface == "hard":
        return np.zeros(len(bands))
    lines = np.linspace(0.0, 1.0, _GROUND_LINES)
    f = bands.lower_hz[:, None] * (bands.upper_hz / bands.lower_hz)[:, None] ** lines[None]
    theta = np.deg2rad(polar_deg)
    spread = np.arctan2(aperture_m / 2, distance_m) * np.linspace(-1, 1, _GROUND_ANGLES)
    above = distance_m * np.sin(theta + spread)      # source height over the microphones
    across = distance_m * np.cos(theta + spread)
    r1 = distance_m
    r2 = np.hypot(across, above + 2 * mic_height_m)
    cos_incidence = (above + 2 * mic_height_m) / r2

    def level(surface):
        q = reflection_transfer(f[..., None], cos_incidence, r2, c_m_s, surface)
        z = (r1 / r2) * q * np.exp(-2j * np.pi * f[..., None] * (r2 - r1) / c_m_s)
        return 10 * np.log10(np.mean(np.abs(1 + z) ** 2, axis=(1, 2)))

    sigma = ground.flow_resistivity_pa_s_m2
    nominal = level(ground)
    return np.max([np.abs(level(GroundSurface(ground.surface, sigma * x, ground.impedance_model))
                          - nominal) for x in (factor, 1 / factor)], axis=0)

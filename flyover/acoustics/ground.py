"""Reflection of sound by the ground under a raised microphone.

A microphone a height h above flat ground receives the direct sound and its reflection, which
comes from the image of the microphone mirrored in the ground: ``p = p_direct + Q p_image``.
Q is the spherical-wave reflection coefficient (Chien & Soroka 1975; Attenborough, Hayek &
Lawther 1980)::

    Q = R_p + (1 - R_p) F(w),   R_p = (Z cos(theta) - 1) / (Z cos(theta) + 1),
    w = (1 + i) / 2 sqrt(k R2) (cos(theta) + 1 / Z),   F(w) = 1 + i sqrt(pi) w e^(-w^2) erfc(-i w)

with theta the angle of incidence from the normal, R2 the length of the image path, k the wave
number and Z the ground's normalised surface impedance (locally reacting), all in the e^(-i w t)
time convention; ``e^(-w^2) erfc(-i w)`` is the Faddeeva function (scipy.special.wofz).
A hard ground has Q = 1 (a perfect image source). Soft ground takes Z from a one-parameter
empirical model of a porous ground by its effective flow resistivity sigma (Pa s / m^2):

- Delany & Bazley (1970): ``Z = 1 + 0.0571 X^-0.754 + i 0.087 X^-0.732``, X = rho0 f / sigma.
  Fitted for 0.01 < X < 1 (for grass, sigma ~ 200 kPa s/m^2: above about 1.7 kHz); below that it
  is extrapolated, and at very low X its real part of the admittance can turn negative.
- Miki (1990): ``Z = 1 + 5.50 (f / sigma_k)^-0.632 + i 8.43 (f / sigma_k)^-0.632`` with
  sigma_k in kPa s/m^2: a refit of the same data that stays physically admissible (positive
  real admittance) at low X, so it is the default here.

Typical effective flow resistivities (Embleton, Piercy & Daigle 1983, from memory): fresh snow
10-30, forest floor 20-80, grass 150-300, compacted dirt 2000-4000, asphalt 30000 kPa s/m^2.

Time convention at the interface: the functions here return Q in the e^(-i w t) convention of the
literature; :func:`reflection_transfer` gives the factor to multiply numpy FFT spectra with (the
complex conjugate).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.model.errors import require

RHO_AIR_KG_M3 = 1.2  # density of air in Delany & Bazley's X = rho0 f / sigma
IMPEDANCE_MODELS = ("miki", "delany-bazley")


@dataclass(frozen=True)
class GroundSurface:
    """The ground under raised microphones.

    Attributes
    ----------
    surface : {'hard', 'soft'}
    flow_resistivity_pa_s_m2 : float
        Effective flow resistivity of a soft ground (Pa s / m^2 = N s / m^4).
    impedance_model : {'miki', 'delany-bazley'}
    """

    surface: str = "hard"
    flow_resistivity_pa_s_m2: float = 200e3
    impedance_model: str = "miki"

    def __post_init__(self):
        require(self.surface in ("hard", "soft"), "unknown ground surface", "array.ground.surface",
                "'hard' or 'soft'", f"'{self.surface}'")
        require(self.impedance_model in IMPEDANCE_MODELS, "unknown impedance model",
                "array.ground.impedance_model", " or ".join(IMPEDANCE_MODELS),
                f"'{self.impedance_model}'")
        require(1e3 <= self.flow_resistivity_pa_s_m2 <= 1e8, "flow resistivity out of range",
                "array.ground.flow_resistivity_pa_s_m2",
                "Pa s/m^2 from 1e3 (fresh snow ~2e4) to 1e8; grass is about 2e5",
                f"{self.flow_resistivity_pa_s_m2}", "kPa s/m^2 must be multiplied by 1000")

    def describe(self) -> str:
        if self.surface == "hard":
            return "hard ground (a perfect image source, Q = 1)"
        return (f"soft ground, {self.impedance_model} impedance, flow resistivity "
                f"{self.flow_resistivity_pa_s_m2 / 1e3:g} kPa s/m^2, spherical-wave Q")


def surface_impedance(frequency_hz, flow_resistivity_pa_s_m2: float,
                      model: str = "miki") -> np.ndarray:
    """Normalised surface impedance Z (e^(-i w t) convention) of a porous ground.

    Parameters
    ----------
    frequency_hz : array
    flow_resistivity_pa_s_m2 : float
    model : {'miki', 'delany-bazley'}
    """
    f = np.asarray(frequency_hz, float)
    if model == "delany-bazley":
        x = RHO_AIR_KG_M3 * f / flow_resistivity_pa_s_m2
        return 1.0 + 0.0571 * x ** -0.754 + 1j * 0.087 * x ** -0.732
    y = (f / (flow_resistivity_pa_s_m2 / 1e3)) ** -0.632
    return 1.0 + 5.50 * y + 1j * 8.43 * y


def plane_wave_coefficient(impedance, cos_incidence) -> np.ndarray:
    """R_p = (Z cos(theta) - 1) / (Z cos(theta) + 1) of a locally reacting surface."""
    zc = np.asarray(impedance) * np.asarray(cos_incidence)
    return (zc - 1.0) / (zc + 1.0)


def boundary_loss_factor(w) -> np.ndarray:
    """F(w) = 1 + i sqrt(pi) w e^(-w^2) erfc(-i w), through the Faddeeva function."""
    from scipy.special import wofz  # scipy.special's import is slow; only raised arrays need it
    w = np.asarray(w, complex)
    return 1.0 + 1j * np.sqrt(np.pi) * w * wofz(w)


def spherical_wave_coefficient(frequency_hz, cos_incidence, image_path_m, c_m_s: float,
                               ground: GroundSurface) -> np.ndarray:
    """Q of the image path (e^(-i w t) convention), broadcast over the arguments.

    Parameters
    ----------
    frequency_hz : array
    cos_incidence : array
        cos(theta) of the image path's angle from the ground normal ((z_s + z_r) / R2).
    image_path_m : array
        R2, the length of the path from the source to the image microphone.
    c_m_s : float
    ground : GroundSurface
    """
    f = np.asarray(frequency_hz, float)
    shape = np.broadcast(f, cos_incidence, image_path_m).shape
    if ground.surface == "hard":
        return np.ones(shape, complex)
    # At 0 Hz the impedance is infinite and Q = 1: evaluate there at a tiny frequency instead.
    f = np.maximum(f, 1e-3)
    z = surface_impedance(f, ground.flow_resistivity_pa_s_m2, ground.impedance_model)
    cos = np.asarray(cos_incidence, float)
    k = 2 * np.pi * f / c_m_s
    rp = plane_wave_coefficient(z, cos)
    w = 0.5 * (1 + 1j) * np.sqrt(k * np.asarray(image_path_m, float)) * (cos + 1.0 / z)
    return np.broadcast_to(rp + (1.0 - rp) * boundary_loss_factor(w), shape)


def reflection_transfer(frequency_hz, cos_incidence, image_path_m, c_m_s: float,
                        ground: GroundSurface) -> np.ndarray:
    """Q as a factor on numpy FFT spectra (``X(f) = sum x e^(-i 2 pi f t)``): the complex
    conjugate of the e^(-i w t) value, so that a real time-domain filter results."""
    return np.conj(spherical_wave_coefficient(frequency_hz, cos_incidence, image_path_m, c_m_s,
                                              ground))

"""The air the sound travels through: speed of sound, absorption and wind.

Conventions (see design notes): temperatures in degrees Celsius at the interface, relative
humidity in percent, pressure in kPa, wind as a speed and the direction it blows *from*
(degrees clockwise from true north). Everything returned is SI.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.model.errors import require

# ISO 9613-1:1993 reference values.
REFERENCE_PRESSURE_KPA = 101.325
_T0_K = 293.15
_T01_K = 273.16
_KELVIN = 273.15

# Cramer (1993), J. Acoust. Soc. Am. 93(5), 2510-2525, Table III coefficients.
_CRAMER = (331.5024, 0.603055, -0.000528, 51.471935, 0.1495874, -0.000782, -1.82e-7, 3.73e-8,
           -2.93e-10, -85.20931, -0.228525, 5.91e-5, -2.835149, -2.15e-13, 29.179762, 0.000486)


@dataclass(frozen=True)
class Atmosphere:
    """The atmosphere of one pass (or a reference atmosphere).

    Attributes
    ----------
    temperature_c : float
    relative_humidity_pct : float
    pressure_kpa : float
    wind_speed_m_s : float
    wind_from_deg : float
        Direction the wind blows from, degrees clockwise from true north.
    speed_of_sound_m_s : float or None
        A measured speed of sound; when None, Cramer (1993) is used.
    """

    temperature_c: float
    relative_humidity_pct: float
    pressure_kpa: float = REFERENCE_PRESSURE_KPA
    wind_speed_m_s: float = 0.0
    wind_from_deg: float = 0.0
    speed_of_sound_m_s: float | None = None

    def __post_init__(self):
        require(-50.0 <= self.temperature_c <= 60.0, "temperature out of range",
                "atmosphere.temperature_c", "a temperature in degrees Celsius from -50 to 60",
                f"{self.temperature_c}", "was it given in kelvin or Fahrenheit?")
        require(0.0 <= self.relative_humidity_pct <= 100.0, "relative humidity out of range",
                "atmosphere.relative_humidity_pct", "a percentage from 0 to 100",
                f"{self.relative_humidity_pct}")
        require(50.0 <= self.pressure_kpa <= 110.0, "pressure out of range",
                "atmosphere.pressure_kpa", "a pressure in kPa from 50 to 110",
                f"{self.pressure_kpa}", "1013 hPa is 101.3 kPa")
        require(0.0 <= self.wind_speed_m_s <= 40.0, "wind speed out of range",
                "atmosphere.wind_speed_m_s", "a speed in m/s from 0 to 40",
                f"{self.wind_speed_m_s}")
        if self.speed_of_sound_m_s is not None:
            require(300.0 <= self.speed_of_sound_m_s <= 380.0, "speed of sound out of range",
                    "atmosphere.speed_of_sound_m_s", "a speed in m/s from 300 to 380",
                    f"{self.speed_of_sound_m_s}")

    @property
    def c_m_s(self) -> float:
        """Speed of sound: the measured value when given, else Cramer (1993)."""
        if self.speed_of_sound_m_s is not None:
            return float(self.speed_of_sound_m_s)
        return float(speed_of_sound_m_s(self.temperature_c, self.relative_humidity_pct,
                                        self.pressure_kpa))

    @property
    def wind_enu_m_s(self) -> np.ndarray:
        """Wind velocity vector in the site frame, shape (3,), m/s."""
        return wind_vector_enu_m_s(self.wind_speed_m_s, self.wind_from_deg)

    def absorption_db_per_m(self, frequency_hz):
        """ISO 9613-1 pure-tone absorption in this atmosphere, dB/m."""
        return absorption_db_per_m(frequency_hz, self.temperature_c, self.relative_humidity_pct,
                                   self.pressure_kpa)


def saturation_vapour_ratio(temperature_c):
    """Saturation vapour pressure over the reference pressure, ISO 9613-1 Annex B.

    Returns p_sat / p_r (dimensionless), with p_r = 101.325 kPa.
    """
    t_k = np.asarray(temperature_c, dtype=float) + _KELVIN
    exponent = -6.8346 * (_T01_K / t_k) ** 1.261 + 4.6151
    return 10.0 ** exponent


def water_vapour_molar_pct(temperature_c, relative_humidity_pct, pressure_kpa):
    """Molar concentration of water vapour h in percent, ISO 9613-1 Annex B."""
    return (np.asarray(relative_humidity_pct, dtype=float) * saturation_vapour_ratio(temperature_c)
            / (np.asarray(pressure_kpa, dtype=float) / REFERENCE_PRESSURE_KPA))


def relaxation_frequencies_hz(temperature_c, relative_humidity_pct, pressure_kpa):
    """Oxygen and nitrogen relaxation frequencies f_rO, f_rN (Hz), ISO 9613-1 eqs. (3), (4)."""
    pa = np.asarray(pressure_kpa, dtype=float) / REFERENCE_PRESSURE_KPA
    tr = (np.asarray(temperature_c, dtype=float) + _KELVIN) / _T0_K
    h = water_vapour_molar_pct(temperature_c, relative_humidity_pct, pressure_kpa)
    fr_o = pa * (24.0 + 4.04e4 * h * (0.02 + h) / (0.391 + h))
    fr_n = pa * tr ** -0.5 * (9.0 + 280.0 * h * np.exp(-4.170 * (tr ** (-1.0 / 3.0) - 1.0)))
    return fr_o, fr_n


def absorption_db_per_m(frequency_hz, temperature_c, relative_humidity_pct,
                        pressure_kpa=REFERENCE_PRESSURE_KPA):
    """Pure-tone atmospheric absorption coefficient, ISO 9613-1:1993 eq. (5).

    Parameters
    ----------
    frequency_hz : array_like
        Frequency of the tone as it travels through the air (Hz).
    temperature_c, relative_humidity_pct, pressure_kpa : float or array_like
        Broadcast against ``frequency_hz``.

    Returns
    -------
    ndarray
        Attenuation coefficient alpha in dB/m; the level loss over a path of s metres is alpha*s.
        ISO 9613-1 clause 7 states +-10 % accuracy for f/p_a from 4e-4 to 10 Hz/Pa (about 40 Hz
        to 1 MHz at sea level); below that the value is an extrapolation.
    """
    f = np.asarray(frequency_hz, dtype=float)
    pa = np.asarray(pressure_kpa, dtype=float) / REFERENCE_PRESSURE_KPA
    t_k = np.asarray(temperature_c, dtype=float) + _KELVIN
    tr = t_k / _T0_K
    fr_o, fr_n = relaxation_frequencies_hz(temperature_c, relative_humidity_pct, pressure_kpa)
    return 8.686 * f ** 2 * (
        1.84e-11 / pa * tr ** 0.5
        + tr ** -2.5 * (0.01275 * np.exp(-2239.1 / t_k) / (fr_o + f ** 2 / fr_o)
                        + 0.1068 * np.exp(-3352.0 / t_k) / (fr_n + f ** 2 / fr_n)))


def speed_of_sound_m_s(temperature_c, relative_humidity_pct, pressure_kpa=REFERENCE_PRESSURE_KPA,
                       co2_ppm=400.0):
    """Zero-frequency speed of sound in humid air, Cramer (1993).

    Water-vapour mole fraction from Davis (1992) (enhancement factor and saturation pressure).
    Cramer states validity from 0 to 30 degC and 75 to 102 kPa; outside it this extrapolates.

    Parameters
    ----------
    temperature_c, relative_humidity_pct, pressure_kpa : float or array_like
    co2_ppm : float
        CO2 mole fraction in parts per million.

    Returns
    -------
    ndarray or float
        Speed of sound in m/s.
    """
    t = np.asarray(temperature_c, dtype=float)
    p_pa = np.asarray(pressure_kpa, dtype=float) * 1e3
    t_k = t + _KELVIN
    enhancement = 1.00062 + 3.14e-8 * p_pa + 5.6e-7 * t ** 2
    p_sv = np.exp(1.2378847e-5 * t_k ** 2 - 1.9121316e-2 * t_k + 33.93711047 - 6.3431645e3 / t_k)
    xw = np.asarray(relative_humidity_pct, dtype=float) / 100.0 * enhancement * p_sv / p_pa
    xc = co2_ppm * 1e-6
    a = _CRAMER
    c = (a[0] + a[1] * t + a[2] * t ** 2
         + (a[3] + a[4] * t + a[5] * t ** 2) * xw
         + (a[6] + a[7] * t + a[8] * t ** 2) * p_pa
         + (a[9] + a[10] * t + a[11] * t ** 2) * xc
         + a[12] * xw ** 2 + a[13] * p_pa ** 2 + a[14] * xc ** 2 + a[15] * xw * p_pa * xc)
    return c


def wind_vector_enu_m_s(speed_m_s: float, from_deg: float) -> np.ndarray:
    """Wind velocity in the site frame from its speed and the direction it blows from.

    A wind *from* the north (0 deg) blows towards the south: (0, -speed, 0).

    Returns
    -------
    ndarray, shape (3,)
        East, north, up components in m/s (up is zero: the wind is horizontal).
    """
    phi = np.deg2rad(from_deg)
    return np.array([-speed_m_s * np.sin(phi), -speed_m_s * np.cos(phi), 0.0])

"""The air the sound travels through: speed of sound, absorption and wind.

Conventions (see design notes): temperatures in degrees Celsius at the interface, relative
humidity in percent, pressure in kPa, wind as a speed and the direction it blows *from*
(degrees clockwise from true north). Everything returned is SI.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from functools import cached_property

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


# Scale height of the pressure with height (hydrostatic, isothermal at about 15 degC): p falls
# by 1.2 % per 100 m.
PRESSURE_SCALE_HEIGHT_M = 8430.0
_PROFILE_POINTS = 33        # heights sampled along a path through a profile
_TABLE_HZ = np.geomspace(1.0, 2e5, 600)   # frequencies of a path's absorption table (log-log)


@dataclass(frozen=True)
class AtmosphereLayer:
    """The air at one height above the array (m). A profile interpolates linearly between its
    layers and holds the nearest one beyond them; a layer without wind takes the surface's."""

    height_m: float
    temperature_c: float
    relative_humidity_pct: float
    wind_speed_m_s: float | None = None
    wind_from_deg: float | None = None

    def __post_init__(self):
        require(0.0 <= self.height_m <= 5000.0, "profile height out of range",
                "atmosphere_profile.height_m", "metres above the array from 0 to 5000",
                f"{self.height_m}")
        require(-50.0 <= self.temperature_c <= 60.0, "profile temperature out of range",
                "atmosphere_profile.temperature_c", "degrees Celsius from -50 to 60",
                f"{self.temperature_c}")
        require(0.0 <= self.relative_humidity_pct <= 100.0, "profile humidity out of range",
                "atmosphere_profile.relative_humidity_pct", "a percentage from 0 to 100",
                f"{self.relative_humidity_pct}")


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
    profile : tuple of AtmosphereLayer
        Temperature, humidity and wind by height above the array (empty: uniform air).
    span_m : (float, float) or None
        The heights above the array that the sound paths span (:meth:`along`); with a profile,
        the absorption is then the mean over the layers the paths cross.
    """

    temperature_c: float
    relative_humidity_pct: float
    pressure_kpa: float = REFERENCE_PRESSURE_KPA
    wind_speed_m_s: float = 0.0
    wind_from_deg: float = 0.0
    speed_of_sound_m_s: float | None = None
    profile: tuple[AtmosphereLayer, ...] = ()
    span_m: tuple[float, float] | None = None

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
        """ISO 9613-1 pure-tone absorption in this atmosphere, dB/m: with a profile and a span,
        the mean over the heights a straight path crosses (layer by layer: horizontal layers
        take the same share of any straight path as of its height)."""
        if not (self.profile and self.span_m):
            return absorption_db_per_m(frequency_hz, self.temperature_c,
                                       self.relative_humidity_pct, self.pressure_kpa)
        f = np.asarray(frequency_hz, float)
        table = np.log(self._path_table)
        return np.exp(np.interp(np.log(np.clip(f, _TABLE_HZ[0], _TABLE_HZ[-1])),
                                np.log(_TABLE_HZ), table))

    @cached_property
    def _path_table(self) -> np.ndarray:
        """The path's mean absorption on ``_TABLE_HZ`` (interpolated log-log: smooth in f)."""
        t, rh, p, _ = self._along_heights()
        return _height_mean(absorption_db_per_m(_TABLE_HZ[None, :], t[:, None], rh[:, None],
                                                p[:, None]))

    def _along_heights(self):
        """Temperature, humidity, pressure and wind (n, 3) at heights spread over the span."""
        z = np.linspace(self.span_m[0], self.span_m[1], _PROFILE_POINTS)
        layers = sorted(self.profile, key=lambda k: k.height_m)
        heights = [k.height_m for k in layers]
        t = np.interp(z, heights, [k.temperature_c for k in layers])
        rh = np.interp(z, heights, [k.relative_humidity_pct for k in layers])
        p = self.pressure_kpa * np.exp(-z / PRESSURE_SCALE_HEIGHT_M)
        surface = self.wind_enu_m_s
        winds = np.array([surface if k.wind_speed_m_s is None else wind_vector_enu_m_s(
            k.wind_speed_m_s, k.wind_from_deg if k.wind_from_deg is not None
            else self.wind_from_deg) for k in layers])
        wind = np.stack([np.interp(z, heights, winds[:, i]) for i in range(3)], axis=1)
        return t, rh, p, wind

    def along(self, low_m: float, high_m: float) -> "Atmosphere":
        """The uniform atmosphere that stands for a profile over paths between two heights
        above the array: absorption averaged layer by layer, the speed of sound whose travel
        time matches (the harmonic mean), the mean wind. Without a profile: itself.
        Refraction (curved rays) is not modelled."""
        if not self.profile:
            return self
        low, high = sorted((float(low_m), float(high_m)))
        span = replace(self, span_m=(low, max(high, low + 1e-3)))
        t, rh, p, wind = span._along_heights()
        c = 1.0 / _height_mean(1.0 / speed_of_sound_m_s(t, rh, p))
        mean = _height_mean(wind)
        return replace(span, speed_of_sound_m_s=float(c),
                       wind_speed_m_s=float(np.hypot(mean[0], mean[1])),
                       wind_from_deg=float(np.rad2deg(np.arctan2(-mean[0], -mean[1])) % 360.0))


def _height_mean(values) -> np.ndarray:
    """Mean over the evenly spread heights of a span (axis 0), by the trapezoid rule."""
    v = np.asarray(values, float)
    return (v.sum(axis=0) - 0.5 * (v[0] + v[-1])) / (len(v) - 1)


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


def band_absorption_db(path_db, bands, *, spectrum_slope_db_per_octave: float = 0.0,
                       points: int = 801) -> np.ndarray:
    """Level loss of one-third-octave bands over a path, integrating the pure-tone loss over
    each band (the approach of SAE ARP 5534; its exact filter and procedure from memory).

    ``delta_B = -10 lg( int W(f) S(f) 10^(-delta(f) / 10) df / int W(f) S(f) df )`` with W the
    band filter's power response, here the 6th-order Butterworth-like one-third-octave shape
    ``1 / (1 + Q^6 (f / f_m - f_m / f)^6)``, ``Q = 1 / (10^0.05 - 10^-0.05)`` (the reference
    shape of IEC 61260-1 / ANSI S1.11 filters, common practice), S the source spectrum (a
    straight slope in dB per octave) and delta the pure-tone loss (dB) of the path.

    Parameters
    ----------
    path_db : callable
        ``path_db(frequency_hz) -> dB``: the pure-tone loss of the path, e.g.
        ``lambda f: atmosphere.absorption_db_per_m(f) * distance_m``.
    bands : ThirdOctaveBands
    spectrum_slope_db_per_octave : float

    Returns
    -------
    ndarray, shape (n_bands,)
    """
    fm = np.asarray(bands.center_hz, float)
    f = fm[:, None] * np.geomspace(0.25, 4.0, points)[None, :]
    q = 1.0 / (10 ** 0.05 - 10 ** -0.05)
    w = 1.0 / (1.0 + q ** 6 * (f / fm[:, None] - fm[:, None] / f) ** 6)
    w = w * 10.0 ** (spectrum_slope_db_per_octave * np.log2(f / fm[:, None]) / 10.0) * f
    loss = 10.0 ** (-np.asarray(path_db(f), float) / 10.0)
    # d(ln f) grid: the factor f above turns the integral over f into one over ln f.
    return -10.0 * np.log10(np.sum(w * loss, axis=1) / np.sum(w, axis=1))

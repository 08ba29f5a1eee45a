"""One-third-octave bands (IEC 61260-1, base 10) and frequency weightings (IEC 61672-1)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.model.errors import require

# IEC 61260-1:2014 nominal labels of the one-third-octave bands (x = -20 ... 13, 10 Hz ... 20 kHz).
_NOMINAL = (10, 12.5, 16, 20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400, 500,
            630, 800, 1000, 1250, 1600, 2000, 2500, 3150, 4000, 5000, 6300, 8000, 10000, 12500,
            16000, 20000)
_X_FIRST = -20

# IEC 61672-1:2013 Annex E pole frequencies (Hz) and 1 kHz normalisations (dB).
_F1, _F2, _F3, _F4 = 20.60, 107.7, 737.9, 12194.0
_A1000, _C1000 = -2.000, -0.062


@dataclass(frozen=True)
class ThirdOctaveBands:
    """A contiguous set of one-third-octave bands.

    Attributes
    ----------
    index : ndarray of int, shape (n_bands,)
        Band number x in f_m = 1000 * 10**(x / 10) Hz.
    """

    index: np.ndarray

    @property
    def center_hz(self) -> np.ndarray:
        """Exact midband frequencies f_m (Hz), IEC 61260-1 eq. (2) with G = 10**0.3, b = 3."""
        return 1000.0 * 10.0 ** (self.index / 10.0)

    @property
    def lower_hz(self) -> np.ndarray:
        """Lower band-edge frequencies f_1 = f_m * G**(-1/6) (Hz)."""
        return self.center_hz * 10.0 ** -0.05

    @property
    def upper_hz(self) -> np.ndarray:
        """Upper band-edge frequencies f_2 = f_m * G**(1/6) (Hz)."""
        return self.center_hz * 10.0 ** 0.05

    @property
    def nominal_hz(self) -> np.ndarray:
        """Nominal labels (Hz), e.g. 31.5, 63, 1250."""
        return np.array([_NOMINAL[x - _X_FIRST] for x in self.index], dtype=float)

    def __len__(self) -> int:
        return len(self.index)


def third_octave_bands(min_hz: float, max_hz: float) -> ThirdOctaveBands:
    """The one-third-octave bands whose exact midbands lie within [min_hz, max_hz].

    Band limits given as nominal labels (e.g. 50 and 5000) select the bands they name: the
    comparison allows the 2 % by which nominal labels differ from exact midbands.
    """
    require(0 < min_hz <= max_hz, "band range is empty or inverted",
            "analysis.band_min_hz/band_max_hz", "0 < band_min_hz <= band_max_hz",
            f"{min_hz} and {max_hz}")
    x_lo = int(np.ceil(10.0 * np.log10(min_hz / 1000.0) - 0.1))
    x_hi = int(np.floor(10.0 * np.log10(max_hz / 1000.0) + 0.1))
    require(x_lo >= _X_FIRST and x_hi <= _X_FIRST + len(_NOMINAL) - 1,
            "band range outside 10 Hz to 20 kHz", "analysis.band_min_hz/band_max_hz",
            "bands between 10 Hz and 20 kHz", f"{min_hz} to {max_hz} Hz")
    return ThirdOctaveBands(np.arange(x_lo, x_hi + 1))


def a_weighting_db(frequency_hz):
    """A-weighting in dB, IEC 61672-1:2013 eqs. (E.6) with the Annex E pole frequencies."""
    f2 = np.asarray(frequency_hz, dtype=float) ** 2
    ratio = (_F4 ** 2 * f2 ** 2
             / ((f2 + _F1 ** 2) * np.sqrt(f2 + _F2 ** 2) * np.sqrt(f2 + _F3 ** 2)
                * (f2 + _F4 ** 2)))
    return 20.0 * np.log10(ratio) - _A1000


def c_weighting_db(frequency_hz):
    """C-weighting in dB, IEC 61672-1:2013 eq. (E.1) with the Annex E pole frequencies."""
    f2 = np.asarray(frequency_hz, dtype=float) ** 2
    ratio = _F4 ** 2 * f2 / ((f2 + _F1 ** 2) * (f2 + _F4 ** 2))
    return 20.0 * np.log10(ratio) - _C1000


def sum_levels_db(levels_db, axis=None, weights_db=None):
    """Energetic sum of levels, 10 lg(sum 10**(L/10)), optionally with per-band weights added.

    NaN entries (bands without a level) are left out of the sum.
    """
    levels = np.asarray(levels_db, dtype=float)
    if weights_db is not None:
        levels = levels + np.asarray(weights_db, dtype=float)
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(np.nansum(10.0 ** (levels / 10.0), axis=axis))

"""One-third-octave bands and weightings against IEC 61260-1 and IEC 61672-1."""

import numpy as np
import pytest

from flyover.acoustics.bands import (a_weighting_db, c_weighting_db, sum_levels_db,
                                     third_octave_bands)


def test_band_geometry_iec_61260_1():
    # IEC 61260-1:2014 base-10 formulae (f_m = 1000 * 10**(x/10), edges x 10**(-+0.05)):
    # 1 kHz band 891.2509-1122.0185 Hz; 20 Hz band 19.9526 (17.7828-22.3872).
    b = third_octave_bands(20, 20000)
    assert len(b) == 31
    i = list(b.nominal_hz).index(1000)
    assert b.lower_hz[i] == pytest.approx(891.2509, abs=1e-4)
    assert b.upper_hz[i] == pytest.approx(1122.0185, abs=1e-4)
    assert b.center_hz[0] == pytest.approx(19.9526, abs=1e-4)
    assert b.lower_hz[0] == pytest.approx(17.7828, abs=1e-4)
    assert b.upper_hz[-1] == pytest.approx(22387.2114, abs=1e-3)
    np.testing.assert_allclose(b.upper_hz / b.lower_hz, 10 ** 0.1)
    # Nominal labels 20 Hz ... 20 kHz (IEC 61260-1 Annex E; pyfar and acoustic-toolbox agree).
    assert list(b.nominal_hz) == [20, 25, 31.5, 40, 50, 63, 80, 100, 125, 160, 200, 250, 315, 400,
                                  500, 630, 800, 1000, 1250, 1600, 2000, 2500, 3150, 4000, 5000,
                                  6300, 8000, 10000, 12500, 16000, 20000]


def test_nominal_limits_select_named_bands():
    b = third_octave_bands(50, 5000)
    assert b.nominal_hz[0] == 50 and b.nominal_hz[-1] == 5000


# IEC 61672-1:2013 Table 3 (phonometry transcription; exact base-10 frequencies, 0.1 dB).
TABLE_3 = [  # nominal, x, A, C
    (10, -20, -70.4, -14.3), (12.5, -19, -63.4, -11.2), (16, -18, -56.7, -8.5),
    (20, -17, -50.5, -6.2), (25, -16, -44.7, -4.4), (31.5, -15, -39.4, -3.0),
    (40, -14, -34.6, -2.0), (50, -13, -30.2, -1.3), (63, -12, -26.2, -0.8),
    (80, -11, -22.5, -0.5), (100, -10, -19.1, -0.3), (125, -9, -16.1, -0.2),
    (160, -8, -13.4, -0.1), (200, -7, -10.9, 0.0), (250, -6, -8.6, 0.0), (315, -5, -6.6, 0.0),
    (400, -4, -4.8, 0.0), (500, -3, -3.2, 0.0), (630, -2, -1.9, 0.0), (800, -1, -0.8, 0.0),
    (1000, 0, 0.0, 0.0), (1250, 1, 0.6, 0.0), (1600, 2, 1.0, -0.1), (2000, 3, 1.2, -0.2),
    (2500, 4, 1.3, -0.3), (3150, 5, 1.2, -0.5), (4000, 6, 1.0, -0.8), (5000, 7, 0.5, -1.3),
    (6300, 8, -0.1, -2.0), (8000, 9, -1.1, -3.0), (10000, 10, -2.5, -4.4),
    (12500, 11, -4.3, -6.2), (16000, 12, -6.6, -8.5), (20000, 13, -9.3, -11.2),
]


@pytest.mark.parametrize("nominal, x, a_db, c_db", TABLE_3)
def test_weightings_iec_61672_1_table_3(nominal, x, a_db, c_db):
    f = 1000.0 * 10.0 ** (x / 10.0)
    assert abs(a_weighting_db(f) - a_db) <= 0.05 + 1e-3
    assert abs(c_weighting_db(f) - c_db) <= 0.05 + 1e-3


def test_energetic_sum():
    # Two equal levels add 10 lg 2 = 3.0103 dB (common practice).
    assert sum_levels_db([60.0, 60.0]) == pytest.approx(63.0103, abs=1e-4)
    assert sum_levels_db([60.0, np.nan]) == pytest.approx(60.0)

"""A simulated campaign's truth in the terms of the measured levels."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from flyover.forward.moving_source import Broadband, DipoleLike, PointSource
from flyover.geometry.vehicle import Region
from flyover.sim.truth import body_direction, true_levels_db


def test_body_direction_of_the_levels_angles():
    # Polar from the nose, azimuth about x from straight down (+ starboard): overhead is
    # straight down (body z), polar 0 the nose, azimuth 90 deg at 90 deg starboard.
    np.testing.assert_allclose(body_direction([90.0, 0.0, 90.0], [0.0, 0.0, 90.0]),
                               [[0, 0, 1], [1, 0, 0], [0, 1, 0]], atol=1e-12)


def test_true_levels_add_the_region_sources_with_their_pattern():
    # Two white-noise sources in one region, one with a level pattern along the body x axis
    # (mean-square gain (1 - w) + w cos^2 of the angle to the axis); a third region holds none.
    from flyover.acoustics.bands import third_octave_bands
    from flyover.sim.scenario import PassScenario, Scenario
    from flyover.acoustics.atmosphere import Atmosphere
    flat = Broadband(70.0, 0.0, 20.0, 20000.0)
    a = PointSource("a", (1.0, 0.0, 0.0), (), flat, 1)
    b = PointSource("b", (1.2, 0.0, 0.0), (), flat, 2, DipoleLike((1.0, 0.0, 0.0), 0.75))
    flown = PassScenario("p", "l", 20.0, 30.0, 0.0, 3.0, 1.5, 0, 0.0, Atmosphere(15.0, 70.0),
                         gain_db={"a": 3.0})
    scenario = Scenario("s", np.zeros((1, 3)), 2.0, (a, b), (flown,), 8000.0, 30.0, 1.0, 0.0,
                        10.0, 0.0)
    regions = {"front": Region("front", (0.5, 1.5), (-0.5, 0.5)),
               "rear": Region("rear", (-1.5, -0.5), (-0.5, 0.5))}
    rows = pd.DataFrame({"region": ["front", "front", "rear", "total"],
                         "band_hz": [1000.0, 1000.0, 1000.0, 1000.0],
                         "emission_polar_deg": [90.0, 60.0, 90.0, 60.0],
                         "emission_azimuth_deg": [0.0, 0.0, 0.0, 0.0]})
    got = true_levels_db(scenario, "p", rows, regions)
    band = a.band_power_pa2(third_octave_bands(1000, 1000))[0]
    for i, polar in ((0, 90.0), (1, 60.0), (3, 60.0)):
        gain = 0.25 + 0.75 * np.cos(np.deg2rad(polar)) ** 2
        expected = band * (10 ** 0.3 + gain)
        assert got[i] == pytest.approx(10 * np.log10(expected / 4e-10), abs=1e-9)
    assert np.isnan(got[2])    # no source in the rear region: no truth
    with pytest.raises(KeyError, match="no pass"):
        true_levels_db(scenario, "other", rows, regions)

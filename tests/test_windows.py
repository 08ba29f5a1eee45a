"""Emission-time windows anchored on overhead."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.geometry.windows import emission_angles_deg, overhead_time_s, plan_windows
from flyover.geometry.track import straight_track

FS = 12800.0


@pytest.mark.parametrize("start_s", [0.0, 0.137, 1.05])
def test_one_window_centred_overhead_the_others_whole_hops_away(start_s):
    # A level pass at 30 m and 22 m/s, overhead 4.321 s after the epoch; the recording may start
    # anywhere: the windows are the same ones.
    track, *_ = straight_track(22.0, 30.0, 90.0, 4.321, -2.0, 12.0)
    centre = np.zeros(3)
    windows = plan_windows(track, centre, (start_s, 9.0), 0.25, 0.2, FS,
                           max_polar_offset_deg=60.0)
    centres = np.array([w.center_s for w in windows])
    hops = (centres - 4.321) / 0.2
    np.testing.assert_allclose(hops, np.round(hops), atol=1e-4)
    overhead = windows[int(np.argmin(np.abs(centres - 4.321)))]
    assert overhead.polar_angle_deg == pytest.approx(90.0, abs=0.01)
    # Polar angle by hand for a level pass over the point: 90 deg + atan(V dt / h).
    for w in windows:
        dt = w.center_s - 4.321
        assert w.polar_angle_deg == pytest.approx(90 + np.degrees(np.arctan(22 * dt / 30)),
                                                  abs=0.01)


def test_overhead_time_of_an_offset_pass_and_of_none():
    # Passing 10 m to the side: the polar angle is 90 deg at the closest approach all the same.
    track, *_ = straight_track(20.0, 40.0, 0.0, 3.0, -2.0, 8.0, over_enu_m=(10.0, 0.0))
    assert overhead_time_s(track, np.zeros(3), (0.0, 6.0)) == pytest.approx(3.0, abs=1e-5)
    assert overhead_time_s(track, np.zeros(3), (3.5, 6.0)) is None


def test_emission_azimuth_of_an_offset_pass_by_hand():
    # Flying east at 30 m, 20 m to the right (south) of the array: the array lies below and to
    # the left (port) of the vehicle. Body axes: x east, y south, z down; the line to the array
    # is (0, +20 north = -20 in y, +30 down): azimuth atan2(-20, 30) = -atan(20/30) = -33.69 deg.
    polar, azimuth = emission_angles_deg([[0.0, -20.0, 30.0]], [[90.0, 0.0, 0.0]], np.zeros(3),
                                         np.zeros(3))
    assert polar[0] == pytest.approx(90.0)
    assert azimuth[0] == pytest.approx(-np.degrees(np.arctan(20 / 30)), abs=1e-9)
    # The same line flown west (the array now on the right): +33.69 deg, the mirror image.
    _, west = emission_angles_deg([[0.0, -20.0, 30.0]], [[270.0, 0.0, 0.0]], np.zeros(3),
                                  np.zeros(3))
    assert west[0] == pytest.approx(np.degrees(np.arctan(20 / 30)), abs=1e-9)


def test_emission_angles_include_attitude_and_the_source_position():
    # Right wing down by 10 deg over the array: straight down lies 10 deg to starboard in body
    # axes (roll turns about x, so the polar angle stays 90 deg).
    polar, azimuth = emission_angles_deg([[0.0, 0.0, 30.0]], [[90.0, 0.0, 10.0]], np.zeros(3),
                                         np.zeros(3))
    assert (polar[0], azimuth[0]) == pytest.approx((90.0, 10.0))
    # Nose up 5 deg, array 30 m ahead and 30 m below: 45 deg below the horizon plus the pitch.
    polar, azimuth = emission_angles_deg([[0.0, 0.0, 30.0]], [[90.0, 5.0, 0.0]], np.zeros(3),
                                         [30.0, 0.0, 0.0])
    assert (polar[0], azimuth[0]) == pytest.approx((50.0, 0.0), abs=1e-9)
    # From a point 2 m ahead of the origin, overhead: atan(2 / 30) past 90 deg.
    polar, _ = emission_angles_deg([[0.0, 0.0, 30.0]], [[90.0, 0.0, 0.0]], [2.0, 0.0, 0.0],
                                   np.zeros(3))
    assert polar[0] == pytest.approx(90 + np.degrees(np.arctan(2 / 30)))

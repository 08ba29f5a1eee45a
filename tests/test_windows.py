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


@pytest.mark.parametrize("height_m, speed_m_s", [(30.0, 22.0), (60.0, 35.0)])
def test_polar_step_windows_lie_at_the_same_angles_whatever_the_height_and_speed(height_m,
                                                                                   speed_m_s):
    # A level pass over the point: polar = 90 deg + atan(V dt / h), so the window at 90 + k step
    # is centred at dt = h tan(k step) / V after overhead (the geometry, by hand).
    track, *_ = straight_track(speed_m_s, height_m, 90.0, 10.0, -2.0, 22.0)
    windows = plan_windows(track, np.zeros(3), (0.0, 20.0), 0.25, None, FS,
                           max_polar_offset_deg=70.0, polar_step_deg=10.0)
    angles = np.array([w.polar_angle_deg for w in windows])
    np.testing.assert_allclose(angles, np.arange(20.0, 161.0, 10.0), atol=1e-3)
    dt = height_m * np.tan(np.deg2rad(angles - 90.0)) / speed_m_s
    np.testing.assert_allclose([w.center_s for w in windows], 10.0 + dt, atol=1e-4)
    assert [w.index for w in windows] == list(range(len(windows)))


def test_polar_step_windows_stop_where_the_span_does():
    # The span ends 1 s after overhead: windows behind stop short of the 70 deg offset, and a
    # step must be given one way only.
    track, *_ = straight_track(22.0, 30.0, 90.0, 10.0, -2.0, 22.0)
    windows = plan_windows(track, np.zeros(3), (0.0, 11.0), 0.25, None, FS,
                           max_polar_offset_deg=70.0, polar_step_deg=10.0)
    last = windows[-1]
    assert last.center_s + 0.125 <= 11.0
    # The last centre at most 0.875 s after overhead: 90 + atan(22 x 0.875 / 30) = 122.7 deg.
    assert last.polar_angle_deg == pytest.approx(120.0, abs=1e-3)
    with pytest.raises(ValueError, match="exactly one"):
        plan_windows(track, np.zeros(3), (0.0, 11.0), 0.25, 0.25, FS, polar_step_deg=10.0)

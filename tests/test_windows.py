"""Emission-time windows anchored on overhead."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.geometry.windows import overhead_time_s, plan_windows
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

"""Attitude between logged samples against scipy's spherical linear interpolation (a
general-purpose reference library)."""

import numpy as np
import pytest
from scipy.spatial.transform import Rotation, Slerp

from flyover.geometry.attitude import AttitudeKeys


def _logged(n=120, seed=3):
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.uniform(0.02, 0.3, n))
    # Yaw wandering through north (350 -> 10 deg), pitch and roll a few degrees, one key a
    # half turn from the last (the longest turn an interval can take).
    ypr = np.c_[np.cumsum(rng.normal(0, 8, n)), rng.normal(0, 4, n), rng.normal(0, 6, n)]
    ypr[n // 2] = ypr[n // 2 - 1] + [179.0, 0.0, 0.0]
    return t, Rotation.from_euler("ZYX", ypr, degrees=True)


def test_the_same_rotations_as_scipy_slerp_at_keys_between_and_at_both_ends():
    t, rot = _logged()
    rng = np.random.default_rng(4)
    times = np.concatenate([t, rng.uniform(t[0], t[-1], 5000), [t[0], t[-1]]])
    ours = AttitudeKeys.from_rotations(t, rot)(times).as_matrix()
    ref = Slerp(t, rot)(times).as_matrix()
    assert np.max(np.abs(ours - ref)) < 1e-14


def test_tiny_turns_take_the_series_branch_like_scipy():
    # Consecutive attitudes 1e-5 rad apart: sin(a/2)/a by its Taylor series.
    t = np.array([0.0, 1.0, 2.0])
    rot = Rotation.from_rotvec([[0, 0, 0], [1e-5, 0, 0], [1e-5, 2e-5, 0]])
    times = np.linspace(0.0, 2.0, 41)
    ours = AttitudeKeys.from_rotations(t, rot)(times).as_quat()
    ref = Slerp(t, rot)(times).as_quat()
    assert np.max(np.abs(ours - ref)) < 1e-15


def test_times_outside_the_keys_and_bad_keys_are_refused():
    t, rot = _logged(10)
    keys = AttitudeKeys.from_rotations(t, rot)
    with pytest.raises(ValueError, match="outside the keys"):
        keys([t[-1] + 0.01])
    with pytest.raises(ValueError, match="strictly increasing"):
        AttitudeKeys.from_rotations(t[::-1], rot)

"""Track model: smoothing, derivatives, attitude, body points and checks."""

import numpy as np
import pytest

from flyover.geometry.track import fit_track
from flyover.model.errors import FlyoverInputError


def straight_samples(noise_m, rate_hz=10.0, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(-20.0, 20.0, 1.0 / rate_hz)
    truth = np.stack([25.0 * t, 3.0 + 0 * t, 40.0 + 0.5 * t], axis=1)
    return t, truth, truth + rng.normal(0, noise_m, truth.shape)


@pytest.mark.parametrize("noise", [0.02, 2.0])
def test_smoothing_removes_noise(noise):
    t, truth, noisy = straight_samples(noise)
    model = fit_track(t, noisy, position_noise_m=noise)
    inner = np.linspace(-15, 15, 200)
    err = model.position(inner) - np.stack([25 * inner, 3 + 0 * inner, 40 + 0.5 * inner], 1)
    # The fitted path is much closer to the truth than the samples are (averaging over the
    # samples a spline spans; common practice).
    assert np.sqrt(np.mean(err ** 2)) < 0.5 * noise
    np.testing.assert_allclose(model.velocity(inner), np.tile([25, 0, 0.5], (200, 1)),
                               atol=0.1 * max(noise, 0.05) * 10)
    assert model.residual_rms_m() == pytest.approx(noise, rel=0.2)


def test_yaw_from_ground_track():
    t = np.arange(0, 10, 0.1)
    p = np.stack([10 * t, 10 * t, 30 + 0 * t], 1)  # heading north-east
    model = fit_track(t, p, 0.01)
    np.testing.assert_allclose(model.attitude_deg([5.0])[0], [45, 0, 0], atol=1e-6)
    # A body point 1 m ahead of the origin lies along the heading.
    ahead = model.body_points_enu([[1.0, 0.0, 0.0]], [5.0])[0, 0] - model.position(5.0)
    np.testing.assert_allclose(ahead, [np.sqrt(0.5), np.sqrt(0.5), 0], atol=1e-6)


def test_yaw_through_the_air_in_a_crosswind():
    # The wind triangle (common practice in navigation): flying east over the ground at
    # 27.6 m/s with a 6 m/s wind from the north (blowing south), the air-relative velocity is
    # (27.6, +6) m/s, so the nose points atan(6 / 27.6) = 12.26 deg north of east: yaw 77.74 deg.
    # A source 2.5 m ahead of the origin then sits 2.5 sin(12.26 deg) = 0.53 m north of the
    # ground track, where the ground-track yaw would put it on the track.
    t = np.arange(0, 10, 0.1)
    p = np.stack([27.6 * t, 0 * t, 30 + 0 * t], 1)
    wind = np.array([0.0, -6.0, 0.0])
    model = fit_track(t, p, 0.01, wind_enu_m_s=wind)
    crab = np.rad2deg(np.arctan2(6.0, 27.6))
    assert crab == pytest.approx(12.26, abs=0.01)
    assert model.attitude_deg([5.0])[0, 0] == pytest.approx(90.0 - crab, abs=1e-6)
    ahead = model.body_points_enu([[2.5, 0.0, 0.0]], [5.0])[0, 0] - model.position(5.0)
    assert ahead[1] == pytest.approx(0.53, abs=0.005)
    assert "air-relative" in model.heading_source
    calm = model.with_wind(np.zeros(3))
    assert calm.attitude_deg([5.0])[0, 0] == pytest.approx(90.0, abs=1e-6)
    assert "ground velocity" in calm.heading_source


def test_attitude_interpolated_as_rotation():
    # Slerp halfway between yaw 350 and yaw 10 is yaw 0, not 180 (interpolation on rotations).
    t = np.arange(0, 1.0, 0.1)
    p = np.stack([t, 0 * t, 0 * t + 10], 1)
    att = np.zeros((len(t), 3))
    att[:5, 0] = 350.0
    att[5:, 0] = 10.0
    model = fit_track(t, p, 0.01, attitude_deg=att)
    yaw = model.attitude_deg([0.45])[0, 0]
    assert min(yaw, 360 - yaw) == pytest.approx(0.0, abs=1e-6)


def test_rotating_body_point_velocity():
    # A point 2 m along the wing of a vehicle yawing at 0.1 rad/s moves at omega * r = 0.2 m/s
    # relative to the origin (rigid-body kinematics).
    t = np.arange(0, 10, 0.1)
    p = np.stack([0 * t, 0 * t, 0 * t + 20], 1)
    att = np.stack([np.rad2deg(0.1 * t), 0 * t, 0 * t], 1)
    model = fit_track(t, p, 0.001, attitude_deg=att)
    v = model.body_points_velocity([[0, 2.0, 0]], [5.0])[0, 0]
    assert np.linalg.norm(v) == pytest.approx(0.2, rel=1e-3)


@pytest.mark.parametrize("mutate, message", [
    (lambda t, p: (np.r_[t[:5], t[4], t[6:]], p), "duplicate"),
    (lambda t, p: (np.r_[t[:5], t[6], t[5], t[7:]], p), "earlier"),
    (lambda t, p: (np.r_[t[:50], t[50:] + 3.0], p), "gap"),
    (lambda t, p: (t, np.r_[p[:30], p[30:31] + 500, p[31:]]), "jumps"),
])
def test_bad_tracks_are_refused(mutate, message):
    t, _, p = straight_samples(0.02)
    t2, p2 = mutate(t, p)
    with pytest.raises(FlyoverInputError, match=message):
        fit_track(t2, p2, 0.02)


def test_time_outside_track_is_refused():
    t, _, p = straight_samples(0.02)
    model = fit_track(t, p, 0.02)
    with pytest.raises(FlyoverInputError, match="outside the track"):
        model.position([25.0])

"""Travel times and Doppler factors against the straight level flyover (closed form)."""

import numpy as np
import pytest

from flyover.geometry.propagation import paths_between, travel_time_s

V, C, H = 30.0, 343.0, 100.0  # reference-values section 6.1 worked example
M = V / C


def emission_time_closed_form(t_r):
    # t_e = [t_r - sqrt(M^2 t_r^2 + (1 - M^2) h^2 / c^2)] / (1 - M^2)  (Morse & Ingard 1968 s11.2)
    return (t_r - np.sqrt(M ** 2 * t_r ** 2 + (1 - M ** 2) * H ** 2 / C ** 2)) / (1 - M ** 2)


@pytest.mark.parametrize("t_r, t_e, cos_theta, ratio", [
    # Worked example: V = 30 m/s, c = 343 m/s, h = 100 m (reference-values section 6.1, computed).
    (-2.0, -2.35707, 0.57736, 1.053183),
    (0.0, -0.29267, M, 1.0 / (1.0 - M ** 2)),
    (H / C, 0.0, 0.0, 1.0),
    (2.0, 1.67376, -0.44874, 0.962234),
])
def test_straight_flyover_worked_example(t_r, t_e, cos_theta, ratio):
    assert emission_time_closed_form(t_r) == pytest.approx(t_e, abs=1e-5)
    mic = np.zeros((1, 3))
    src = np.array([V * t_e, 0.0, H])
    p = paths_between(src, [V, 0.0, 0.0], mic, np.zeros(3), C)
    # Forward direction: emission + travel reproduces the reception time.
    assert t_e + p.travel_time_s[0] == pytest.approx(t_r, abs=1e-5)
    assert p.mach_r[0] == pytest.approx(M * cos_theta, abs=1e-6)
    # f_r / f_e = 1 / (1 - M cos theta_e) to 1e-6.
    assert 1.0 / p.doppler_factor[0] == pytest.approx(ratio, abs=1e-6)


def test_doppler_factor_is_derivative_of_reception_time():
    # dt_r/dt_e = 1 - M cos theta_e (reference-values 6.1), here with a crosswind too, checked by
    # central differences of the closed-form travel time.
    rng = np.random.default_rng(3)
    mics = rng.uniform(-5, 5, (6, 3)) * [1, 1, 0]
    wind = np.array([4.0, -3.0, 0.0])
    v = np.array([25.0, 5.0, 1.0])
    x0 = np.array([-40.0, 10.0, 60.0])
    dt = 1e-4

    def tr(tt):
        return tt + travel_time_s(x0 + v * tt, mics, wind, C)

    for t in (-1.0, 0.0, 1.3):
        numeric = (tr(t + dt) - tr(t - dt)) / (2 * dt)
        p = paths_between(x0 + v * t, v, mics, wind, C)
        np.testing.assert_allclose(p.doppler_factor, numeric, rtol=1e-8)


def test_travel_time_in_wind_satisfies_definition():
    # |x_m - x_s - U T| = c T (design notes).
    rng = np.random.default_rng(1)
    src = rng.uniform(-50, 50, (10, 3))
    mics = rng.uniform(-5, 5, (7, 3))
    wind = np.array([6.0, 2.0, 0.0])
    t = travel_time_s(src, mics, wind, C)
    lhs = np.linalg.norm(mics[None] - src[:, None] - wind * t[..., None], axis=-1)
    np.testing.assert_allclose(lhs, C * t, rtol=1e-12)

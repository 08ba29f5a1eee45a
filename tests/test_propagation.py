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


def test_spreading_along_the_convected_path_is_the_moving_medium_greens_function():
    # A source at rest over the ground in a uniform wind U (M = U / c): the free-space Green's
    # function of the convected wave equation is exp(...) / (4 pi R*) with
    # R* = sqrt((M.d)^2 + (1 - M^2) d.d) and travel time T = (R* - M.d) / (c (1 - M^2))
    # (Morse & Ingard 1968, Theoretical Acoustics, section 11.2; Dowling & Ffowcs Williams 1983,
    # ch. 9). The chain's spreading r = c T with one factor (1 - M_r) (a mass source) must give
    # R*: the straight distance |d| would be 2.9 % off for 10 m/s along the path.
    rng = np.random.default_rng(7)
    src = np.array([3.0, -4.0, 60.0])
    mics = rng.uniform(-30, 30, (12, 3)) * [1, 1, 0]
    wind = np.array([8.0, -6.0, 0.0])
    p = paths_between(src, np.zeros(3), mics, wind, C)
    d = mics - src
    m = wind / C
    md = d @ m
    r_star = np.sqrt(md ** 2 + (1 - m @ m) * np.einsum("ij,ij->i", d, d))
    np.testing.assert_allclose(p.travel_time_s, (r_star - md) / (C * (1 - m @ m)), rtol=1e-12)
    np.testing.assert_allclose(p.distance_m * (1 - p.mach_r), r_star, rtol=1e-12)
    # Straight down-wind, 100 m: c T = 100 c / (c + U) while |d| = 100.
    along = paths_between(np.zeros(3), np.zeros(3), np.array([[100.0, 0, 0]]),
                          np.array([10.0, 0, 0]), C)
    assert along.distance_m[0] == pytest.approx(100 * C / (C + 10.0), rel=1e-12)

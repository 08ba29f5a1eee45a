"""The ground correction's expected map powers of raised microphones: the compiled sums against
the model's formula written out in numpy (a naive reference), and the window's sweep factor
against direct quadrature."""

import numpy as np
import pytest

from flyover.imaging import _kernels
from flyover.imaging.ground_gains import GROUND_POWER_FLOOR, ground_gains, sweep_mean
from flyover.imaging.reception import ImagePaths


def _gains_reference(image, q, f, duration_s, weights):
    # The model of ground_gains' docstring, term by term.
    w = np.asarray(weights, float)[None, :, None]
    z = image.ratio[..., None] * q[None] * np.exp(
        -2j * np.pi * f[None, None, :] * image.delay_s[..., None])
    sweep = sweep_mean(f[None, None, :] * image.delay_rate[..., None] * duration_s)
    s1, s2 = float(w.sum()), float((w ** 2).sum())
    beam = (s1 ** 2 + 2.0 * s1 * np.sum(w * z * sweep, axis=1).real
            + np.abs(np.sum(w * z, axis=1)) ** 2)
    auto = np.sum(w ** 2 * (1.0 + np.abs(z) ** 2 + 2.0 * (z * sweep).real), axis=1)
    return (np.maximum(beam / s1 ** 2, GROUND_POWER_FLOOR),
            np.maximum((beam - auto) / (s1 ** 2 - s2), GROUND_POWER_FLOOR))


def test_compiled_gains_equal_the_formula():
    rng = np.random.default_rng(2)
    n_p, n_m, n_f = 37, 24, 53
    image = ImagePaths(delay_s=rng.uniform(1e-4, 8e-3, (n_p, n_m)),
                       ratio=rng.uniform(0.6, 0.99, (n_p, n_m)),
                       doppler=np.ones((n_p, n_m)), cos_incidence=np.ones((n_p, n_m)),
                       path_m=np.ones((n_p, n_m)),
                       delay_rate=rng.uniform(-2e-3, 2e-3, (n_p, n_m)))
    q = rng.uniform(0.5, 1.0, (n_m, n_f)) * np.exp(1j * rng.uniform(-1, 1, (n_m, n_f)))
    f = np.linspace(100.0, 5000.0, n_f)
    w = rng.uniform(0.5, 1.0, n_m)
    # Point 0 in the comb's notch at the first line: the reflection cancels the direct sound at
    # every microphone (the floor holds the gains).
    image.delay_s[0], image.ratio[0], image.delay_rate[0], q[:, 0] = 0.5 / f[0], 0.99, 0.0, 1.0
    got = ground_gains(image, q, f, 0.5, w)
    ref = _gains_reference(image, q, f, 0.5, w)
    for a, b in zip(got, ref):
        np.testing.assert_allclose(a, b, rtol=1e-11, atol=1e-13)
    assert got[0][0, 0] == got[1][0, 0] == GROUND_POWER_FLOOR and np.any(got[0] > 1.5)


@pytest.mark.parametrize("x", [0.0, 1.0, -2.0, 1e-12, 1 - 1e-11, 2 + 3e-9, -0.37, 2.5, 7.25,
                               -41.125])
def test_sweep_factor_is_the_hann_squared_mean_of_the_phase(x):
    # Direct quadrature of (1/T) int w(u)^2 e^(-i 2 pi x u / T) du / mean(w^2) over one period
    # of the periodic Hann window (common practice: w = sin^2(pi u / T) on [0, T), phase taken
    # from the window centre), with 200000 midpoints.
    u = (np.arange(200000) + 0.5) / 200000
    w2 = np.sin(np.pi * u) ** 4
    ref = np.sum(w2 * np.cos(2 * np.pi * x * (u - 0.5))) / np.sum(w2)
    got = _kernels._hann_squared_mean(x, _kernels._sin_pi(x))
    assert got == pytest.approx(ref, abs=1e-9)
    assert float(sweep_mean(x)) == pytest.approx(ref, abs=1e-9)
    assert got == pytest.approx(float(sweep_mean(x)), rel=1e-9, abs=1e-15)


def test_warped_line_autos_against_band_sums_and_a_naive_loop():
    # The summed chain's autopowers divided line by line under raised microphones. With every
    # gain 1 they are the band sums of the free-field chain: the reference's lines below a
    # warped band edge e counted as ceil(e / (s spacing)), read from cumulative sums. With
    # gains, the kernel against the rule written as a plain loop (line i warped to i s, in the
    # band when the band sums count it, divided by the gain of the band's line nearest i s).
    from flyover.acoustics.bands import third_octave_bands
    from flyover.imaging.chain import band_bins
    rng = np.random.default_rng(5)
    n_p, n_m, n_f, spacing = 5, 4, 800, 4.0
    bands = third_octave_bands(200, 2500)
    bins = band_bins(bands, 2 * (n_f - 1), 2 * (n_f - 1) * spacing)
    lines = np.array([[b.start, b.stop] for b in bins], np.int64)
    edges = np.stack([bands.lower_hz, bands.upper_hz], axis=1) / spacing
    power = rng.uniform(0.1, 1.0, (n_m, n_f))
    warp = rng.uniform(0.97, 1.03, (n_p, n_m))
    coef = rng.uniform(0.5, 2.0, (n_p, n_m, len(bands)))
    first = int(lines[0, 0])
    span = int(lines[-1, 1]) - first
    out = np.empty((n_p, len(bands)))
    _kernels.warped_line_autos(power, warp, coef, edges, lines, np.ones((n_p, span)), first, out)
    cumulative = np.concatenate([np.zeros((n_m, 1)), np.cumsum(power, axis=1)], axis=1)
    count = np.clip(np.ceil(edges[None, None] / warp[..., None, None]), 0, n_f).astype(int)
    below = np.take_along_axis(cumulative[None, :, :, None],
                               count.reshape(n_p, n_m, -1, 1), axis=2).reshape(count.shape)
    np.testing.assert_allclose(out, np.einsum("gmb,gmb->gb", coef, below[..., 1] - below[..., 0]),
                               rtol=1e-12)
    inverse = rng.uniform(0.2, 5.0, (n_p, span))
    _kernels.warped_line_autos(power, warp, coef, edges, lines, inverse, first, out)
    ref = np.zeros_like(out)
    for g in range(n_p):
        for m in range(n_m):
            s = warp[g, m]
            for b, (lo, hi) in enumerate(lines):
                for i in range(n_f):
                    if edges[b, 0] <= i * s < edges[b, 1]:
                        j = min(max(int(np.floor(i * s + 0.5)), lo), hi - 1)
                        ref[g, b] += coef[g, m, b] * power[m, i] * inverse[g, j - first]
    np.testing.assert_allclose(out, ref, rtol=1e-12)

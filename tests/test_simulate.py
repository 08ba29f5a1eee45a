"""The simulator against the formulas it implements."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import hilbert

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import third_octave_bands
from flyover.forward import _sinc
from flyover.forward.moving_source import (Broadband, DipoleLike, PointSource, Propagator,
                                           RotorTones, ShaftSpeed, SourceSignal, Tone,
                                           received_pressure_pa)
from flyover.model.constants import P0_PA
from flyover.geometry.propagation import paths_between
from flyover.imaging import _kernels
from flyover.geometry.track import straight_track

FS = 16000.0
V, H = 30.0, 40.0
ATM = Atmosphere(15.0, 70.0)
C = ATM.c_m_s
M = V / C


def level_flyover(tone_hz, gain=1.0, absorption=False, mic=(0.0, 0.0, 0.0), directivity=None):
    """A tone source flying east at V, height H, overhead at t = 2 s; 1 s of reception."""
    track, *_ = straight_track(V, H, 90.0, 2.0, -3.0, 6.0)
    src = PointSource("s", (0.0, 0.0, 0.0), tones=(Tone(tone_hz, 100.0),),
                      directivity=directivity)
    sig = SourceSignal(src, FS, -3.0, 6.0)
    prop = Propagator(np.array([mic]), ATM, gain, absorption)
    t = 1.6 + np.arange(int(FS)) / FS
    return t, received_pressure_pa(track, [sig], [np.zeros(3)], prop, FS, t[0], len(t))[0]


def closed_form_emission(t_r):
    # Straight level flyover, source at (V (t - 2), 0, H): Morse & Ingard (1968) s11.2 closed form
    # (reference-values section 6.1) shifted to overhead at t = 2 s.
    tr = t_r - 2.0
    te = (tr - np.sqrt(M ** 2 * tr ** 2 + (1 - M ** 2) * H ** 2 / C ** 2)) / (1 - M ** 2)
    x = V * te
    r = np.hypot(x, H)
    cos_theta = -x / r  # angle between velocity (+x) and source->observer vector
    return te + 2.0, r, cos_theta


def test_received_tone_frequency_is_doppler_shifted():
    # f_r = f_e / (1 - M cos theta_e)  (Morse & Ingard 1968 s11.2)
    # Measured from upward zero crossings (cubic-interpolated) over +-5 ms around each time.
    t, p = level_flyover(1000.0)
    for k in (2000, 6000, 9000, 13000):
        seg = slice(k - 80, k + 81)
        tt, pp = t[seg], p[seg]
        up = np.flatnonzero((pp[:-1] < 0) & (pp[1:] >= 0))
        crossings = [_root_near(tt, pp, i) for i in up if 1 <= i < len(pp) - 2]
        measured = (len(crossings) - 1) / (crossings[-1] - crossings[0])
        _, _, cos_theta = closed_form_emission(np.mean(crossings))
        assert measured == pytest.approx(1000.0 / (1 - M * cos_theta), rel=2e-5)


def test_received_waveform_is_the_closed_form_at_every_sample():
    # Emission times are solved on coarse nodes and splined to every sample: the waveform must
    # still be the closed form's, p = G A cos(2 pi f tau) / (r (1 - M cos theta)^2) (Morse &
    # Ingard 1968 s11.2), to a tenth of the recordings' float32 rounding (6e-8).
    t, p = level_flyover(1000.0, gain=2.0)
    te, r, cos_theta = closed_form_emission(t)
    a1 = np.sqrt(2) * 20e-6 * 10 ** (100 / 20)
    expected = 2.0 * a1 * np.cos(2 * np.pi * 1000.0 * te) / (r * (1 - M * cos_theta) ** 2)
    assert np.max(np.abs(p - expected)) < 1e-8 * np.max(np.abs(expected))


def _root_near(t, p, i):
    """Zero of the cubic through samples i-1..i+2 (Newton from the linear estimate)."""
    poly = np.polyfit(t[i - 1:i + 3] - t[i], p[i - 1:i + 3], 3)
    x = -p[i] * (t[i + 1] - t[i]) / (p[i + 1] - p[i])
    for _ in range(5):
        x -= np.polyval(poly, x) / np.polyval(np.polyder(poly), x)
    return t[i] + x


def test_received_amplitude_follows_source_model():
    # |p| = G sqrt(2) p_rms(1 m) / (r (1 - M_r)^2), design notes' moving monopole, G = 2.
    t, p = level_flyover(1000.0, gain=2.0)
    env = np.abs(hilbert(p))
    a1 = np.sqrt(2) * 20e-6 * 10 ** (100 / 20)
    for k in (3000, 8000, 12000):
        _, r, cos_theta = closed_form_emission(t[k])
        expected = 2.0 * a1 / (r * (1 - M * cos_theta) ** 2)
        assert 20 * np.log10(env[k] / expected) == pytest.approx(0.0, abs=0.01)


def test_directive_source_scales_the_amplitude_by_its_pattern():
    # The same flyover with a known pattern: the envelope is the moving monopole's times
    # sqrt((1 - w) + w (e . a)^2), e the emission direction in body axes. Flying east level,
    # body x is east and z down, so e = (cos theta_e, 0, H / r) from the closed form.
    pattern = DipoleLike((0.6, 0.0, 0.8), 0.75)
    t, p = level_flyover(1000.0, gain=2.0, directivity=pattern)
    env = np.abs(hilbert(p))
    a1 = np.sqrt(2) * 20e-6 * 10 ** (100 / 20)
    for k in (3000, 8000, 12000):
        _, r, cos_theta = closed_form_emission(t[k])
        g = 0.25 + 0.75 * (0.6 * cos_theta + 0.8 * H / r) ** 2
        expected = 2.0 * a1 * np.sqrt(g) / (r * (1 - M * cos_theta) ** 2)
        assert 20 * np.log10(env[k] / expected) == pytest.approx(0.0, abs=0.01)


def test_source_at_rest_in_wind_follows_the_moving_medium_greens_function():
    # A hovering tone source (mass source: exponent 1) in a 10 m/s wind: its received amplitude
    # is G A / R* with R* = sqrt((M.d)^2 + (1 - M^2) d.d), M = U / c (Morse & Ingard 1968,
    # section 11.2), at microphones up- and down-wind; the straight-line spreading would be off
    # by up to 0.13 dB here.
    wind_atm = Atmosphere(15.0, 70.0, wind_speed_m_s=10.0, wind_from_deg=270.0)  # blows east
    track, *_ = straight_track(0.0, 20.0, 90.0, 0.0, -3.0, 6.0)
    src = PointSource("s", (0.0, 0.0, 0.0), tones=(Tone(500.0, 100.0),), convective_exponent=1)
    mics = np.array([[-60.0, 0.0, 0.0], [60.0, 0.0, 0.0], [0.0, 40.0, 0.0]])
    prop = Propagator(mics, wind_atm, 1.0, absorption=False)
    t = 1.0 + np.arange(int(FS)) / FS
    p = received_pressure_pa(track, [SourceSignal(src, FS, -3.0, 6.0)], [np.zeros(3)], prop,
                             FS, t[0], len(t))
    a1 = np.sqrt(2) * 20e-6 * 10 ** (100 / 20)
    c = wind_atm.c_m_s
    m = wind_atm.wind_enu_m_s / c
    d = mics - np.array([0.0, 0.0, 20.0])
    r_star = np.sqrt((d @ m) ** 2 + (1 - m @ m) * np.einsum("ij,ij->i", d, d))
    env = np.abs(hilbert(p, axis=1))[:, 4000:12000].mean(axis=1)
    np.testing.assert_allclose(20 * np.log10(env / (a1 / r_star)), 0.0, atol=0.01)
    # The straight distance in place of c T, with the same M_r, is 0.26 dB off along the wind.
    m_r = paths_between(np.array([0.0, 0.0, 20.0]), np.zeros(3), mics, wind_atm.wind_enu_m_s,
                        c).mach_r
    straight = np.linalg.norm(d, axis=1) * (1 - m_r)
    assert np.max(np.abs(20 * np.log10(r_star / straight))) > 0.2


def test_absorption_matches_iso_9613_1_along_the_path():
    # Level loss alpha(f) * r (ISO 9613-1) at the frequency in the air, which without wind is the
    # received (Doppler-shifted) one.
    t, dry = level_flyover(4000.0)
    _, wet = level_flyover(4000.0, absorption=True)
    k = slice(7000, 9000)
    loss = 10 * np.log10(np.mean(dry[k] ** 2) / np.mean(wet[k] ** 2))
    _, r, cos_theta = closed_form_emission(t[8000])
    f_r = 4000.0 / (1 - M * cos_theta)
    assert loss == pytest.approx(ATM.absorption_db_per_m(f_r) * r, abs=0.02)


def test_sinc_interpolation_error_below_minus_60_db():
    # Band-limited content below 0.4 fs, evaluated off the sample grid: error vs the analytic
    # signal below -60 dB (the simulator's stated budget).
    rng = np.random.default_rng(7)
    f = rng.uniform(50, 0.4 * FS, 60)
    ph = rng.uniform(0, 2 * np.pi, 60)
    n = 4000
    grid = np.arange(n) / FS
    x = np.cos(2 * np.pi * f[None] * grid[:, None] + ph).sum(1)
    pos = rng.uniform(100, n - 100, 3000)
    exact = np.cos(2 * np.pi * f[None] * (pos[:, None] / FS) + ph).sum(1)
    got = _sinc.interp_sinc(x, pos, _sinc.sinc_table(), _sinc.SINC_HALF_WIDTH,
                            _sinc.SINC_TABLE_STEPS)
    err_db = 10 * np.log10(np.mean((got - exact) ** 2) / np.mean(exact ** 2))
    assert err_db < -60.0


def test_sinc_interpolation_sums_each_tap_as_written():
    # The compiled interpolation reads its table laid out by offset; its sums must be the
    # per-tap formula's bit for bit (the formula evaluated tap by tap, ends included, is the
    # naive reference), for positions anywhere, on and off the sample grid.
    rng = np.random.default_rng(3)
    x = rng.standard_normal(500)
    pos = np.concatenate([rng.uniform(-3.0, 503.0, 4000), np.arange(-2.0, 503.0, 0.25),
                          [17.0 + 2.0 ** -30, 40.0 - 2.0 ** -40]])
    table = _sinc.sinc_table()
    got = _sinc.interp_sinc(x, pos, table, _sinc.SINC_HALF_WIDTH, _sinc.SINC_TABLE_STEPS)
    naive = [_sinc._taps_checked.py_func(x, p, table, _sinc.SINC_HALF_WIDTH,
                                         _sinc.SINC_TABLE_STEPS) for p in pos]
    assert np.array_equal(got, naive)


def lagrange_read(signal, offset: float, n: int) -> np.ndarray:
    """The production kernel reading ``signal`` at ``offset + k`` (k < n), unit amplitude."""
    step = 128
    nodes = int(np.ceil((n - 1) / step)) + 1
    rx = (offset + np.arange(nodes) * step)[None, None, :].astype(float)
    out = np.empty((1, 1, n), np.float32)
    _kernels.dedoppler_cubic(np.asarray(signal, np.float32)[None], rx,
                             np.ones((1, 1, nodes), np.float32), step, out)
    return out[0, 0].astype(float)


def test_cubic_lagrange_reproduces_cubics():
    # 4-point Lagrange interpolation is exact for polynomials up to degree 3 (common practice);
    # float32 samples bound the agreement to about 1e-6. Read at fractions on the kernel's
    # table of phases (1/4096 sample; how far rounding to them moves a read is
    # test_tabulated_lagrange_reads_stay_within_their_bound's).
    x = np.arange(60.0) / 10
    y = 0.3 * x ** 3 - 2 * x ** 2 + x - 4
    for offset in (2.0, 2.375, 2.5, 2 + 1517 / 4096):
        s = (offset + np.arange(50)) / 10
        np.testing.assert_allclose(lagrange_read(y, offset, 50),
                                   0.3 * s ** 3 - 2 * s ** 2 + s - 4, rtol=2e-6, atol=2e-6)


def test_broadband_band_power_matches_spectrum():
    # The generated noise carries the designed one-third-octave band power (statistical: 60 s).
    bb = Broadband(80.0, -3.0, 100.0, 3000.0)
    src = PointSource("b", (0, 0, 0), broadband=bb, seed=3)
    sig = SourceSignal(src, FS, 0.0, 60.0)
    bands = third_octave_bands(200, 2500)
    spec = np.abs(np.fft.rfft(sig.samples)) ** 2 * 2 / len(sig.samples) ** 2
    f = np.fft.rfftfreq(len(sig.samples), 1 / FS)
    measured = [spec[(f >= lo) & (f < hi)].sum() for lo, hi in zip(bands.lower_hz, bands.upper_hz)]
    expected = src.band_power_pa2(bands)
    np.testing.assert_allclose(10 * np.log10(np.array(measured) / expected), 0.0, atol=0.3)
    # Slope -3 dB per octave: -1 dB per band (IEC 61260-1 base-10 bands, 10 bands per decade).
    assert 10 * np.log10(expected[1] / expected[0]) == pytest.approx(-1.0, abs=0.02)


def test_interpolation_error_budget_at_half_sample():
    # Design notes: linear interpolation loses 0.44 dB at 0.1 fs for half-sample delays. The
    # 4-point Lagrange loss at a half-sample delay is (9 cos(pi nu) - cos(3 pi nu)) / 8 in
    # amplitude (the Lagrange weights -1/16, 9/16, 9/16, -1/16; common practice): 0.030 dB at
    # 0.1 fs, the figure behind flyover.dedoppler's error budget and ACCURATE_FRACTION.
    n = np.arange(4000)
    for nu, cubic_db in ((0.1, 0.030), (0.135, 0.10), (0.25, 1.07)):
        x = np.cos(2 * np.pi * nu * n)
        pos = np.arange(100, 3900) + 0.5
        exact = np.cos(2 * np.pi * nu * pos)
        got = lagrange_read(x, 100.5, len(pos))
        loss = -20 * np.log10(np.abs(got @ exact) / (exact @ exact))
        formula = -20 * np.log10((9 * np.cos(np.pi * nu) - np.cos(3 * np.pi * nu)) / 8)
        assert loss == pytest.approx(formula, abs=1e-3)
        assert loss == pytest.approx(cubic_db, abs=0.01)
    linear = -20 * np.log10(np.cos(np.pi * 0.1))  # linear weights 1/2, 1/2
    assert linear == pytest.approx(0.44, abs=0.005)


@pytest.mark.parametrize("levels_db", [(90.0, 85.0, 80.0), tuple(90.0 - 2 * k for k in range(16))])
def test_rotor_harmonics_match_the_formula_evaluated_term_by_term(levels_db):
    # The compiled rotor against RotorTones' docstring formula in plain numpy (a naive
    # reference): A_k cos(2 pi k B rev(tau) + phi_k + j_k(tau)), the draws in their order. The
    # kernel steps each harmonic's phase from sample to sample where the step is small; 16
    # harmonics reach 4.3 kHz, whose steps are not, and are taken afresh.
    speed = ShaftSpeed((0.0, 0.4, 0.9), (5200.0, 5400.0, 5300.0))
    rotor = RotorTones(3, speed, levels_db, jitter_deg=3.0, seed=11)
    sig = SourceSignal(PointSource("r", (0, 0, 0), rotor=rotor), FS, -0.2, 1.2, gain_db=2.0)
    tau = np.sort(np.random.default_rng(5).uniform(-0.1, 1.1, 20000))
    rng = np.random.default_rng(11)
    expected = np.zeros_like(tau)
    for k, level in enumerate(rotor.levels_db, start=1):
        amp = np.sqrt(2.0) * P0_PA * 10.0 ** ((level + 2.0) / 20.0)
        start = rng.uniform(0.0, 2 * np.pi)
        rates, phases = rng.uniform(0.3, 3.0, 4), rng.uniform(0, 2 * np.pi, 4)
        jitter = np.deg2rad(3.0) / np.sqrt(2.0) / 2.0 * np.sin(
            2 * np.pi * rates[:, None] * tau + phases[:, None]).sum(axis=0)
        expected += amp * np.cos(2 * np.pi * k * 3 * speed.revolutions(tau) + start + jitter)
    np.testing.assert_allclose(sig(tau), expected, rtol=0, atol=1e-9 * np.abs(expected).max())


def test_shaft_angle_is_the_integral_of_its_speed():
    # Trapezoidal integration of the piecewise-linear speed is exact: compare with scipy's
    # cumulative trapezoid on a fine grid that holds every knot (general-purpose reference).
    from scipy.integrate import cumulative_trapezoid
    speed = ShaftSpeed((0.2, 0.5, 0.7), (6000.0, 6600.0, 6300.0))
    t = np.linspace(-0.5, 1.5, 2001)            # step 1 ms: the knots lie on it
    ref = cumulative_trapezoid(speed.rpm_at(t) / 60.0, t, initial=0.0)
    ref -= np.interp(0.0, t, ref)
    np.testing.assert_allclose(speed.revolutions(t), ref, atol=1e-9)


@pytest.mark.parametrize("n_samples", [1, 63, 64, 1000, 4097])
def test_spline_at_every_sample_is_scipys_bit_for_bit(n_samples):
    # Emission times and amplitudes solved every 64 samples (one knot before the first sample,
    # the last beyond the end), at every sample: as scipy's CubicSpline gives them, every bit,
    # across the ends of the pieces and where the samples leave the knots.
    from scipy.interpolate import CubicSpline

    from flyover.forward.moving_source import _at_samples
    rng = np.random.default_rng(n_samples)
    kc = (np.arange(n_samples // 64 + 3) - 1) * 64
    values = 0.5 + np.cumsum(rng.normal(size=(7, len(kc))), axis=1) * 1e-3
    reference = CubicSpline(kc, values, axis=1)(np.arange(n_samples))
    np.testing.assert_array_equal(_at_samples(kc, values, n_samples), reference)
    np.testing.assert_array_equal(_at_samples(kc, values, n_samples + 200),
                                  CubicSpline(kc, values, axis=1)(np.arange(n_samples + 200)))


def test_passes_simulated_in_parallel_write_the_same_files(tmp_path):
    import filecmp

    import soundfile as sf
    import yaml
    from conftest import TINY_SCENARIO
    from flyover.sim.demo import write_campaign
    (tmp_path / "scenario.yaml").write_text(yaml.safe_dump(TINY_SCENARIO))
    one, two = tmp_path / "one", tmp_path / "two by two"
    write_campaign(tmp_path / "scenario.yaml", one, progress=lambda *_: None)
    said = []
    write_campaign(tmp_path / "scenario.yaml", two, progress=said.append, workers=2)
    files = sorted(p.relative_to(one) for p in one.rglob("*") if p.is_file())
    assert len(files) > 5 and len(said) == len(TINY_SCENARIO["passes"])
    for f in files:
        if f.suffix == ".wav":   # libsndfile stamps a float WAV's PEAK chunk with the time
            assert np.array_equal(sf.read(one / f)[0], sf.read(two / f)[0]), f
        else:
            assert filecmp.cmp(one / f, two / f, shallow=False), f


def test_a_pass_that_fails_in_a_worker_stops_the_simulation_with_its_error(tmp_path):
    # A scenario whose recordings clip: the worker's worded error reaches the caller (a
    # process pool that hid it, or waited for ever, would leave the user nothing to act on).
    import yaml
    from conftest import TINY_SCENARIO
    from flyover.model.errors import FlyoverInputError
    from flyover.sim.demo import write_campaign
    scenario = dict(TINY_SCENARIO, recording=dict(TINY_SCENARIO["recording"], pa_per_unit=1e-4))
    (tmp_path / "scenario.yaml").write_text(yaml.safe_dump(scenario))
    with pytest.raises(FlyoverInputError, match="clips"):
        write_campaign(tmp_path / "scenario.yaml", tmp_path / "out", progress=lambda *_: None,
                       workers=2)

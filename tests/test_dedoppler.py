"""The de-Dopplerization engine against naive references and the source model's truths."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import assert_same_maps

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import third_octave_bands
from flyover.forward.moving_source import (Broadband, PointSource, Propagator, SourceSignal, Tone,
                                           received_pressure_pa)
from flyover.geometry.windows import plan_windows
from flyover.imaging import _kernels
from flyover.imaging.chain import BandPowers, ChainSettings, signal_band_power
from flyover.imaging.dedoppler import (OVERSAMPLING, dedopplerized_signals, oversampled,
                                       window_band_powers)
from flyover.imaging.reception import reception_geometry, required_frames
from flyover.imaging.methods import method_named
from flyover.imaging.resolution import main_lobe_width_m
from flyover.imaging.window import image_window, window_context
from flyover.geometry.vehicle import Region, VehicleGrid
from flyover.geometry.track import straight_track
from flyover.sim.scenario import incoherent_noise_pa, spiral_layout
from flyover.model.timebase import ArrayClock, RecordingClock

FS = 12800.0
MICS = spiral_layout(4, 8, 0.5, 6.0)          # 32 microphones, 12 m aperture
CLOCK = ArrayClock.of_recorders([RecordingClock(0, 0.0, FS)], np.zeros(len(MICS), int))


def rows(p, first, n):
    """The span each microphone reads: row m from frame first[m] (one recorder: one frame)."""
    return np.stack([p[m, f:f + n] for m, f in enumerate(first)])


def naive_dedoppler(signals, rx_pos, amp, step, n_out, phase_bits=None):
    """Plain numpy reference of the kernel: linear node interpolation, 4-point Lagrange (the
    fraction rounded to 1 / 2^phase_bits of a sample where given, as the kernel's table
    does)."""
    n_g, n_m, n_nodes = rx_pos.shape
    k = np.arange(n_out)
    nodes = np.arange(n_nodes) * step
    out = np.empty((n_g, n_m, n_out))
    for g in range(n_g):
        for m in range(n_m):
            x = np.interp(k, nodes, rx_pos[g, m])
            a = np.interp(k, nodes, amp[g, m].astype(float))
            i = np.floor(x).astype(int)
            d = x - i
            if phase_bits is not None:
                d = np.round(d * 2 ** phase_bits) / 2 ** phase_bits
            y = [signals[m, i + o].astype(float) for o in (-1, 0, 1, 2)]
            val = (-d * (d - 1) * (d - 2) / 6 * y[0] + (d + 1) * (d - 1) * (d - 2) / 2 * y[1]
                   - (d + 1) * d * (d - 2) / 2 * y[2] + (d + 1) * d * (d - 1) / 6 * y[3])
            out[g, m] = a * val
    return out


@pytest.mark.parametrize("seed", range(12))
def test_kernel_matches_numpy_reference(seed):
    rng = np.random.default_rng(seed)
    n_g, n_m, step = rng.integers(1, 6), rng.integers(1, 7), int(rng.choice([16, 64, 128]))
    n_out = int(rng.integers(50, 700))
    n_nodes = int(np.ceil((n_out - 1) / step)) + 1
    sig = rng.standard_normal((n_m, 3000)).astype(np.float32)
    rate = rng.uniform(0.85, 1.15)
    rx = (rng.uniform(10, 500, (n_g, n_m, 1)) + np.arange(n_nodes) * step * rate
          + rng.uniform(-0.5, 0.5, (n_g, n_m, n_nodes)))
    amp = rng.uniform(0.5, 80.0, (n_g, n_m, n_nodes)).astype(np.float32)
    out = np.empty((n_g, n_m, n_out), np.float32)
    _kernels.dedoppler_cubic(sig, rx, amp, step, out)
    ref = naive_dedoppler(sig, rx, amp, step, n_out, _kernels.PHASE_BITS)
    scale = np.max(np.abs(ref))
    assert np.max(np.abs(out - ref)) <= 1e-4 * scale
    # The summed kernel: weighted sums over microphones of the same signals, its positions
    # given as reception times of a clock (sample 0 at origin_s, rate samples per second).
    coef = rng.uniform(-1, 1, (n_g, 2, n_m)).astype(np.float32)
    origin, rate = rng.uniform(0, 1, n_m), rng.uniform(7900, 8100, n_m)
    sums = np.empty((n_g, 2, n_out), np.float32)
    _kernels.dedoppler_summed(sig, rx / rate[:, None] + origin[:, None], origin, rate,
                              amp.astype(float), coef, step, sums)
    np.testing.assert_allclose(sums, np.einsum("gqm,gmk->gqk", coef, ref),
                               atol=1e-4 * scale * n_m)


@pytest.mark.parametrize("wind_m_s", [(0.0, 0.0, 0.0), (6.0, -4.0, 0.5)])
def test_compiled_paths_match_numpy_reference(wind_m_s):
    # The compiled path geometry against paths_between (the numpy closed form it restates),
    # moving sources in calm air and in a wind.
    from flyover.geometry.propagation import paths_between
    rng = np.random.default_rng(3)
    pos = rng.uniform(-40, 40, (5, 7, 3)) + [0, 0, 35]
    vel = rng.uniform(-30, 30, (5, 7, 3))
    mics = rng.uniform(-6, 6, (9, 3)) * [1, 1, 0]
    times = np.linspace(1.0, 1.2, 5)
    wind = np.array(wind_m_s)
    reception, amplitude = np.empty((7, 9, 5)), np.empty((7, 9, 5))
    end = [np.empty((7, 9)) for _ in range(3)]
    _kernels.paths_on_grid(pos, vel, mics, wind, 340.0, times, 2.0, reception, amplitude, *end)
    ref = paths_between(pos[:, :, None, :], vel[:, :, None, :], mics[None, None], wind, 340.0)
    np.testing.assert_allclose(reception, (times[:, None, None] + ref.travel_time_s)
                               .transpose(1, 2, 0), rtol=1e-13)
    np.testing.assert_allclose(amplitude, (ref.distance_m * (1 - ref.mach_r) ** 2 / 2.0)
                               .transpose(1, 2, 0), rtol=1e-12)
    for got, want in zip(end, (ref.distance_m, ref.mach_r, ref.doppler_factor)):
        np.testing.assert_allclose(got, want[-1], rtol=1e-12, atol=1e-14)


def test_line_beam_powers_match_numpy_reference():
    # The compiled beam power of a unit line source (phase stepped between evenly spaced
    # lines, computed afresh across a gap) against its definition evaluated with numpy, for
    # two sets (source positions) with lines of their own.
    rng = np.random.default_rng(4)
    ratio = rng.uniform(0.5, 2.0, (2, 30, 12))
    advance = rng.uniform(-2e-3, 2e-3, (2, 30, 12))
    f = np.stack([500.0 + 4.0 * np.arange(90), 2000.0 + 12.0 * np.arange(90)])
    f[0, 40:] += 1.5
    gain = rng.uniform(0.8, 1.2, (2, 90, 12)) * np.exp(1j * rng.uniform(0, 6, (2, 90, 12)))
    out = np.empty((2, 30, 90))
    _kernels.line_beam_powers(ratio, advance, f, gain, out)
    ref = np.abs(np.einsum("spm,spmf,sfm->spf", ratio,
                           np.exp(2j * np.pi * f[:, None, None, :] * advance[..., None]),
                           gain)) ** 2
    np.testing.assert_allclose(out, ref, rtol=1e-10)


def test_steered_line_powers_match_numpy_reference():
    # The unit source's beam and autopowers at one instant, its steering formed inside the
    # kernel, against the same formed with numpy and line_beam_powers (checked above) and the
    # autopowers' matrix product; with the ground's path (raised microphones), the expected
    # beam |A|^2 + 2 Re(conj(A) B) + |C|^2 of the three sums formed with numpy.
    rng = np.random.default_rng(6)
    n_s, n_p, n_m, n_f = 3, 25, 12, 16
    amp_g, rx_g = rng.uniform(30, 60, (n_p, n_m)), rng.uniform(0.1, 0.2, (n_p, n_m))
    amp_s, rx_s = rng.uniform(30, 60, (n_s, n_m)), rng.uniform(0.1, 0.2, (n_s, n_m))
    doppler = rng.uniform(0.9, 1.1, (n_s, n_m))
    band_gain = rng.uniform(0.8, 1.2, (n_s, n_p, n_m))
    f = 400.0 * (1 + np.arange(n_s))[:, None] + 4.0 * np.arange(n_f)
    gain = rng.uniform(0.8, 1.2, (n_s, n_f, n_m)) * np.exp(1j * rng.uniform(0, 6, (n_s, n_f, n_m)))
    u2 = rng.uniform(0.5, 1.0, (n_s, n_f, n_m))
    beam, auto = np.ones((n_s, n_p, n_f)), np.ones((n_s, n_p, n_f))
    no_image = np.zeros((n_s, 0, n_f, n_m), complex)
    _kernels.steered_line_powers(amp_g, rx_g, amp_s, rx_s, doppler, band_gain, f, gain,
                                 no_image, u2, 0.25, beam, auto)
    ratio = amp_g[None] / amp_s[:, None, :] * band_gain
    advance = (rx_g[None] - rx_s[:, None, :]) / doppler[:, None, :]
    out = np.empty((n_s, n_p, n_f))
    _kernels.line_beam_powers(ratio, advance, f, gain, out)
    np.testing.assert_allclose(beam, 1 + 0.25 * out, rtol=1e-10)
    np.testing.assert_allclose(auto, 1 + 0.25 * np.einsum("spm,sfm->spf", ratio ** 2, u2),
                               rtol=1e-12)

    image = 0.8 * np.exp(1j * rng.uniform(0, 6, (n_s, 2, n_f, n_m))) * gain[:, None]
    beam[:] = 1.0
    _kernels.steered_line_powers(amp_g, rx_g, amp_s, rx_s, doppler, band_gain, f, gain,
                                 image, u2, 0.25, beam, auto)
    phasor = ratio[..., None] * np.exp(2j * np.pi * f[:, None, None, :] * advance[..., None])
    a, b, c = (np.einsum("spmf,sfm->spf", phasor, g) for g in (gain, image[:, 0], image[:, 1]))
    expected = np.abs(a) ** 2 + 2 * (np.conj(a) * b).real + np.abs(c) ** 2
    np.testing.assert_allclose(beam, 1 + 0.25 * expected, rtol=1e-10)


def test_tabulated_lagrange_reads_stay_within_their_bound():
    # The kernels round the read's fraction to 1 / 2^PHASE_BITS sample: against exact 4-point
    # Lagrange reads of a band-limited signal (content to 0.135 fs, the cubic read's accurate
    # range), the difference stays within the timing error's bound. By Bernstein's inequality
    # a signal band-limited to nu has |x'| <= 2 pi nu max|x| per sample; the rounding moves a
    # read by at most 2^-(PHASE_BITS + 1) sample.
    rng = np.random.default_rng(3)
    n = 4096
    spectrum = np.fft.rfft(rng.standard_normal((3, n)))
    spectrum[:, int(0.135 * n):] = 0.0
    sig = np.fft.irfft(spectrum, n).astype(np.float32)
    rx = rng.uniform(100.0, 200.0, (2, 3, 1)) + np.arange(9) * 128 * rng.uniform(
        0.9, 1.1, (2, 3, 1))
    amp = np.ones((2, 3, 9), np.float32)
    exact = naive_dedoppler(sig, rx, amp, 128, 1024)
    out = np.empty((2, 3, 1024), np.float32)
    _kernels.dedoppler_cubic(sig, rx, amp, 128, out)
    bound = 2 * np.pi * 0.135 * np.abs(sig).max(axis=1) * 2.0 ** -(_kernels.PHASE_BITS + 1)
    assert np.all(np.abs(out - exact).max(axis=2) <= bound)
    # The table holds 4-point Lagrange's weights at its phases (at d = 1/2 the familiar
    # (-1, 9, 9, -1) / 16 of midpoint cubic interpolation: common practice).
    d = np.array([0.0, 0.25, 0.5, 1.0])
    j = (d * 2 ** _kernels.PHASE_BITS).astype(int)
    np.testing.assert_allclose(_kernels.lagrange_table()[j], [
        [0, 1, 0, 0], [-7 / 128, 105 / 128, 35 / 128, -5 / 128],
        [-1 / 16, 9 / 16, 9 / 16, -1 / 16], [0, 0, 1, 0]], atol=1e-7)


def test_compiled_sincos_matches_numpy():
    # The steering loops' polynomial sine and cosine against numpy's (the C library's) over
    # the phases they meet and past them, including the quarter-period edges where the
    # branch-free quadrant choice switches.
    x = np.concatenate([np.linspace(-3000.0, 3000.0, 200001),
                        (np.arange(-64, 65) * np.pi / 4
                         + np.array([[-1e-12], [0.0], [1e-12]])).ravel()])
    got = np.array([_kernels._sincos(v) for v in x])
    np.testing.assert_allclose(got[:, 0], np.sin(x), rtol=0, atol=2e-13)
    np.testing.assert_allclose(got[:, 1], np.cos(x), rtol=0, atol=2e-13)


def test_tabulated_absorption_gains_match_direct_evaluation():
    # The chain's absorption gains are read from a table over M_r and distance; against the
    # band-mean gain evaluated directly (ISO 9613-1 per sub-frequency) for every grid point
    # and microphone of a window 60 degrees before overhead, where both vary most.
    from flyover.imaging.reception import _band_power_gains, absorption_gains, reception_geometry
    atm = Atmosphere(10.0, 40.0)
    track, *_ = straight_track(30.0, 40.0, 90.0, 2.0, -3.0, 7.0)
    window = plan_windows(track, MICS.mean(0), (0.2, 3.8), 0.25, 0.25, 51200.0)[0]
    points = VehicleGrid((-3.0, 3.0), (-2.0, 2.0), 0.5).points_m()
    geo = reception_geometry(track, window, points, MICS, atm, 2.0)
    settings = ChainSettings(third_octave_bands(100, 10000), np.ones(len(MICS)), 2.0)
    direct = np.sqrt(_band_power_gains(atm, settings.bands, geo.mach_r_center,
                                       geo.distance_center_m))
    assert direct.max() > 1.5                      # the test covers real compensation
    got = absorption_gains(settings, atm, geo)
    np.testing.assert_allclose(20 * np.log10(got), 20 * np.log10(direct), atol=1e-5)


def one_source_pass(source, wind=(0.0, 0.0), noise_spl_db=None, gain=2.0, absorption=True,
                    cross_m=0.0, seed=9):
    """Signals of one pass (east at 25 m/s, 35 m up, overhead at 2 s) at the 32 microphones."""
    atm = Atmosphere(15.0, 70.0, wind_speed_m_s=float(np.hypot(*wind)),
                     wind_from_deg=float(np.rad2deg(np.arctan2(-wind[0], -wind[1])) % 360))
    track, *_ = straight_track(25.0, 35.0, 90.0, 2.0, -3.0, 7.0, over_enu_m=(0.0, cross_m))
    sources = source if isinstance(source, list) else [source]
    sigs = [SourceSignal(s, FS, -3.0, 7.0) for s in sources]
    prop = Propagator(MICS, atm, gain, absorption)
    n = int(4 * FS)
    p = received_pressure_pa(track, sigs, [np.array(s.body_m) for s in sources], prop, FS, 0.0, n)
    if noise_spl_db is not None:
        p += incoherent_noise_pa(len(MICS), n, noise_spl_db, seed)
    return track, atm, sigs, p.astype(np.float32)


def windows_near_overhead(track, max_offset_deg, window_s=0.25, hop_s=0.25):
    return plan_windows(track, MICS.mean(0), (0.4, 3.6), window_s, hop_s, FS,
                        max_polar_offset_deg=max_offset_deg)


def test_round_trip_point_source():
    # A point source de-Dopplerized at its true position returns its own signal: band levels
    # within 0.1 dB up to 0.1 fs (cubic) and waveform correlation >= 0.999 (design notes' unit
    # test of the chain; content kept below 0.1 fs for the waveform).
    src = PointSource("s", (0.6, -0.3, 0.0), broadband=Broadband(90.0, 0.0, 80.0, 0.1 * FS), seed=4)
    bands = third_octave_bands(100, 0.1 * FS)
    for absorption, wind in ((False, (0.0, 0.0)), (True, (0.0, 0.0)), (True, (5.0, -3.0))):
        track, atm, (sig,), p = one_source_pass(src, wind=wind, absorption=absorption)
        st = ChainSettings(bands, np.ones(len(MICS)), 2.0, absorption=absorption)
        for w in windows_near_overhead(track, 50)[::3]:
            geo = reception_geometry(track, w, [src.body_m], MICS, atm, 2.0)
            first, n = required_frames(geo, CLOCK, "cubic")
            bp = window_band_powers(rows(p, first, n), first, geo, CLOCK, w, st, atm)
            truth = signal_band_power(sig(w.emission_times_s), bands, FS)
            assert np.max(np.abs(10 * np.log10(bp.diagonal_removed[0] / truth))) < 0.1
            assert np.max(np.abs(10 * np.log10(bp.full[0] / truth))) < 0.1
            if not absorption:
                a = dedopplerized_signals(rows(p, first, n), first, geo, CLOCK, w, st)[0]
                s = sig(w.emission_times_s)
                assert min(np.corrcoef(a[m], s)[0, 1] for m in range(len(MICS))) >= 0.999


def test_sinc_option_extends_the_band():
    # With 4x band-limited oversampling the round trip holds to 0.1 dB up to 0.3 fs, where cubic
    # alone loses more (4-point Lagrange error budget in flyover.dedoppler).
    src = PointSource("s", (0.0, 0.0, 0.0), broadband=Broadband(90.0, 0.0, 80.0, 0.38 * FS), seed=2)
    track, atm, (sig,), p = one_source_pass(src, absorption=False)
    bands = third_octave_bands(1000, 0.3 * FS)
    w = windows_near_overhead(track, 10)[0]
    geo = reception_geometry(track, w, [src.body_m], MICS, atm, 2.0)
    first, n = required_frames(geo, CLOCK, "sinc")
    truth = signal_band_power(sig(w.emission_times_s), bands, FS)
    errors = {}
    for method in ("cubic", "sinc"):
        st = ChainSettings(bands, np.ones(len(MICS)), 2.0, interpolation=method, absorption=False)
        bp = window_band_powers(rows(p, first, n), first, geo, CLOCK, w, st, atm)
        errors[method] = 10 * np.log10(bp.full[0] / truth)
    assert np.max(np.abs(errors["sinc"])) < 0.1
    assert errors["cubic"][-1] < -0.2


@pytest.mark.parametrize("fraction, max_loss_db", [(0.1, 0.001), (0.4, 0.1), (0.45, 0.1)])
def test_sinc_option_keeps_tones_to_its_stated_range(fraction, max_loss_db):
    # The docstring's claim: oversampled 4x, then 4-point Lagrange (the kernel's), a tone up to
    # 0.45 fs keeps its amplitude within 0.1 dB at any fractional delay. Reference: the tone's
    # exact value at the read positions; the kernel itself is checked against naive_dedoppler.
    n = 4096
    x = np.cos(2 * np.pi * fraction * np.arange(n) + 0.3).astype(np.float32)
    up = oversampled(x[None, :])
    pos = np.sort(np.random.default_rng(3).uniform(1200, 2800, 1500))
    rx = (pos * OVERSAMPLING)[None, None, :]
    out = np.empty((1, 1, len(pos) - 1), np.float32)   # node k is output sample k (step 1)
    _kernels.dedoppler_cubic(up, np.ascontiguousarray(rx), np.ones_like(rx, np.float32), 1, out)
    exact = np.cos(2 * np.pi * fraction * pos[:-1] + 0.3)
    gain = float(np.dot(out[0, 0], exact) / np.dot(exact, exact))
    assert abs(20 * np.log10(gain)) < max_loss_db
    assert np.sqrt(np.mean((out[0, 0] - gain * exact) ** 2)) < 0.003


def test_tone_is_found_at_its_emitted_frequency():
    # Raw microphone: f_e / (1 - M cos theta_e) (Morse & Ingard 1968 s11.2); de-Dopplerized: f_e.
    f_e = 1000.0
    src = PointSource("t", (0.0, 0.0, 0.0), tones=(Tone(f_e, 95.0),))
    track, atm, _, p = one_source_pass(src, absorption=False)
    st = ChainSettings(third_octave_bands(500, 2000), np.ones(len(MICS)), 2.0, absorption=False)
    w = [w for w in windows_near_overhead(track, 50, window_s=1.0, hop_s=0.5)
         if w.polar_angle_deg < 70][0]
    geo = reception_geometry(track, w, [src.body_m], MICS, atm, 2.0)
    first, n = required_frames(geo, CLOCK, "cubic")
    a = dedopplerized_signals(rows(p, first, n), first, geo, CLOCK, w, st)[0, 0]
    assert peak_frequency(a, FS) == pytest.approx(f_e, rel=1e-3)
    # Raw channel 0 over the reception span of the same emission window.
    raw = p[0, first[0]:first[0] + n]
    m_cos = 25.0 / atm.c_m_s * np.cos(np.deg2rad(angle_to_mic(w, MICS[0])))
    assert peak_frequency(raw, FS) == pytest.approx(f_e / (1 - m_cos), rel=1e-3)
    assert abs(f_e / (1 - m_cos) - f_e) > 40  # the shift is 40 times the tolerance


def angle_to_mic(window, mic):
    d = mic - window.position_enu_m
    v = window.velocity_enu_m_s
    return np.rad2deg(np.arccos(d @ v / (np.linalg.norm(d) * np.linalg.norm(v))))


def peak_frequency(x, fs):
    """Frequency of the largest spectral peak, refined by a parabola on the dB spectrum."""
    n = len(x) * 8
    spec = 20 * np.log10(np.abs(np.fft.rfft(x * np.hanning(len(x)), n)) + 1e-30)
    k = int(np.argmax(spec))
    a, b, c = spec[k - 1:k + 2]
    return (k + 0.5 * (a - c) / (a - 2 * b + c)) * fs / n


@pytest.mark.parametrize("wind", [(0.0, 0.0), (4.0, -3.0)])
@pytest.mark.parametrize("body", [(0.9, 0.0, 0.0), (-0.4, 0.8, 0.0)])
def test_map_peak_at_the_source(wind, body):
    # Peak within one grid step and within 0.1 main-lobe width (1.22 lambda z / D, Rayleigh) of
    # the true position, along (x) and across (y) track, with and without wind.
    src = PointSource("s", body, broadband=Broadband(90.0, 0.0, 100.0, 3000.0), seed=5)
    track, atm, _, p = one_source_pass(src, wind=wind, noise_spl_db=45.0)
    grid = VehicleGrid((-2.0, 2.0), (-1.6, 1.6), 0.1)
    bands = third_octave_bands(2000, 2500)
    st = ChainSettings(bands, np.ones(len(MICS)), 2.0)
    for w in windows_near_overhead(track, 30)[::4]:
        ctx = window_context(w, track=track, clock=CLOCK, atmosphere=atm, mic_enu_m=MICS,
                             grid_points_m=grid.points_m(), settings=st, workers=2)
        first, n = ctx.first_frame, ctx.n_frames
        bp = window_band_powers(rows(p, first, n), first, ctx.geometry, CLOCK, w, st, atm,
                                workers=2)
        for b in range(len(bands)):
            peak = grid.points_m()[np.argmax(bp.diagonal_removed[:, b])]
            width = main_lobe_width_m(bands.center_hz[b], w.distance_m, 12.0, atm.c_m_s)
            err = np.abs(peak[:2] - np.array(body[:2]))
            assert np.all(err <= grid.spacing_m + 1e-9)
            assert np.all(err <= 0.1 * width + 1e-9)


def test_two_sources_region_levels():
    # Two sources 2.6 m apart: from 800 Hz up at least 1.6 main-lobe widths (1.22 lambda z / D,
    # z <= 40 m, D = 12 m), so the bands checked are clearly separated ones. (At 630 Hz, 1.25
    # widths, the random cross-term of two independent sources in a 0.5 s window reached 1.3 dB
    # for the 6 dB weaker one.) Incoherent microphone noise 10-20 dB below the sources;
    # diagonal removal on.
    # Region levels within 1.0 dB of the truth (the sources' own band power in the window)
    # within 30 deg of overhead, wherever the region's source is at most 6 dB weaker.
    front = PointSource("front", (1.2, 0.0, 0.0), tones=(Tone(630.0, 88.0),),
                        broadband=Broadband(86.0, -2.0, 100.0, 4000.0), seed=11)
    rear = PointSource("rear", (-1.4, 0.0, 0.0), broadband=Broadband(84.0, 0.0, 100.0, 4000.0),
                       seed=12)
    # Received band level at the array ~ L(1 m) - 20 lg 35 + 6 (ground plate) ~ 60 dB at 1 kHz;
    # white noise of 55 dB SPL at 12.8 kHz puts ~41 dB in the 1 kHz band (19 dB below) and ~46 dB
    # in the 3150 Hz band (about 11 dB below the weaker source there).
    track, atm, sigs, p = one_source_pass([front, rear], noise_spl_db=55.0)
    regions = {"front": Region("front", (0.5, 1.9), (-0.7, 0.7)),
               "rear": Region("rear", (-2.1, -0.7), (-0.7, 0.7))}
    grid = VehicleGrid((-2.6, 2.6), (-1.2, 1.2), 0.2)
    bands = third_octave_bands(800, 3150)
    st = ChainSettings(bands, np.ones(len(MICS)), 2.0)
    checked = 0
    errors = []
    for w in windows_near_overhead(track, 30, window_s=0.5, hop_s=0.5):
        ctx = window_context(w, track=track, clock=CLOCK, atmosphere=atm, mic_enu_m=MICS,
                             grid_points_m=grid.points_m(), settings=st, workers=2)
        first, n = ctx.first_frame, ctx.n_frames
        res = image_window(rows(p, first, n), ctx, method=method_named("time-domain"),
                           grid_points_m=grid.points_m(), regions=regions)
        truth = {s.source.name: signal_band_power(s(w.emission_times_s), bands, FS) for s in sigs}
        for name, other in (("front", "rear"), ("rear", "front")):
            ok = 10 * np.log10(truth[name] / truth[other]) >= -6.0
            err = 10 * np.log10(res.region_power[name] / truth[name])
            errors += list(err[ok])
            checked += int(ok.sum())
    errors = np.array(errors)
    assert checked >= 20
    assert np.max(np.abs(errors)) <= 1.0
    assert np.sqrt(np.mean(errors ** 2)) <= 0.5  # the goal, as an RMS over all checks


def test_diagonal_removal_with_noise_only():
    # Incoherent noise only: the expected diagonal-removed map is zero (Dougherty 2002; reference
    # values 6.6) while the full map keeps the noise / N.
    track, atm, _, _ = one_source_pass(PointSource("quiet", (0, 0, 0), tones=(Tone(100.0, 0.0),)))
    p = incoherent_noise_pa(len(MICS), int(4 * FS), 70.0, 3).astype(np.float32)
    bands = third_octave_bands(400, 3150)
    st = ChainSettings(bands, np.ones(len(MICS)), 2.0, absorption=False)
    dr, full = [], []
    for w in windows_near_overhead(track, 50):
        ctx = window_context(w, track=track, clock=CLOCK, atmosphere=atm, mic_enu_m=MICS,
                             grid_points_m=[[0.0, 0.0, 0.0]], settings=st)
        first, n = ctx.first_frame, ctx.n_frames
        bp = window_band_powers(rows(p, first, n), first, ctx.geometry, CLOCK, w, st, atm)
        dr.append(bp.diagonal_removed[0] / bp.full[0].mean())
        full.append(bp.full[0] / bp.full[0].mean())
    # One grid point, disjoint windows and bands: independent values. Their mean is zero within
    # 4 standard errors; a coherent source would give 1.
    dr = np.concatenate(dr)
    assert abs(np.mean(dr)) < 4 * np.std(dr) / np.sqrt(len(dr))
    assert abs(np.mean(dr)) < 0.1 * np.mean(np.concatenate(full))


def test_diagonal_removal_scales_a_source_by_n_minus_1_over_n():
    # With a source only: <(sum a)^2 - sum a^2> / N^2 = s (N - 1) / N before normalisation
    # (Dougherty 2002; reference values 6.6), and exactly s after dividing by N^2 - N.
    src = PointSource("s", (0.0, 0.0, 0.0), broadband=Broadband(90.0, 0.0, 100.0, 1200.0), seed=8)
    track, atm, (sig,), p = one_source_pass(src, absorption=False)
    bands = third_octave_bands(400, 1000)
    n = len(MICS)
    st = ChainSettings(bands, np.ones(n), 2.0, absorption=False)
    w = windows_near_overhead(track, 10)[0]
    geo = reception_geometry(track, w, [src.body_m], MICS, atm, 2.0)
    first, nf = required_frames(geo, CLOCK, "cubic")
    bp = window_band_powers(rows(p, first, nf), first, geo, CLOCK, w, st, atm)
    truth = signal_band_power(sig(w.emission_times_s), bands, FS)
    before = bp.diagonal_removed[0] * (n ** 2 - n) / n ** 2
    np.testing.assert_allclose(10 * np.log10(before / truth), 10 * np.log10((n - 1) / n),
                               atol=0.02)
    # The same from the per-microphone signals with the design notes' time-domain formula.
    a = dedopplerized_signals(rows(p, first, nf), first, geo, CLOCK, w, st)[0].astype(float)
    lo, hi = bands.lower_hz[1], bands.upper_hz[1]
    spec = np.fft.rfft(a * np.hanning(a.shape[1] + 1)[:-1], axis=1)
    f = np.fft.rfftfreq(a.shape[1], 1 / FS)
    spec[:, (f < lo) | (f >= hi)] = 0
    ab = np.fft.irfft(spec, a.shape[1], axis=1)
    td = np.mean(ab.sum(0) ** 2 - (ab ** 2).sum(0)) / (n ** 2 - n)
    win = np.hanning(a.shape[1] + 1)[:-1]
    td /= np.mean(win ** 2)
    assert 10 * np.log10(td / bp.diagonal_removed[0, 1]) == pytest.approx(0.0, abs=0.01)


@pytest.mark.parametrize(("top_hz", "wind"), [(1000, (0.0, 0.0)), (3150, (5.0, -3.0))])
def test_summed_chain_matches_every_microphones_spectra(top_hz, wind):
    # The time-domain maps with the microphones summed before the FFT (low-rank absorption
    # gains, autopowers from a time-warped reference point, reduced rate after a low-pass)
    # against the maps from every microphone's own spectrum (the direct definition of the
    # design notes' band powers): two sources and noise, absorption on, in calm air and wind.
    from flyover.imaging.dedoppler import (_per_microphone_band_powers, _UsedChain, decimation,
                                           window_band_powers)
    from flyover.imaging.reception import absorption_gains
    front = PointSource("front", (1.2, 0.0, 0.0), tones=(Tone(630.0, 88.0),),
                        broadband=Broadband(86.0, -2.0, 100.0, 5000.0), seed=11)
    rear = PointSource("rear", (-1.4, 0.3, 0.0), broadband=Broadband(84.0, 0.0, 100.0, 5000.0),
                       seed=12)
    track, atm, _, p = one_source_pass([front, rear], wind=wind, noise_spl_db=55.0)
    points = VehicleGrid((-2.6, 2.6), (-1.2, 1.2), 0.2).points_m()
    st = ChainSettings(third_octave_bands(250, top_hz), np.ones(len(MICS)), 2.0)
    reductions = set()
    for w in windows_near_overhead(track, 50)[::3]:
        ctx = window_context(w, track=track, clock=CLOCK, atmosphere=atm, mic_enu_m=MICS,
                             grid_points_m=points, settings=st)
        span = rows(p, ctx.first_frame, ctx.n_frames)
        reductions.add(decimation(st, ctx.geometry, FS)[0])
        got = window_band_powers(span, ctx.first_frame, ctx.geometry, CLOCK, w, st, atm)
        chain = _UsedChain(span, ctx.first_frame, ctx.geometry, CLOCK, np.ones(len(MICS)),
                           absorption_gains(st, atm, ctx.geometry))
        ref = _per_microphone_band_powers(chain, w, st, atm, reduce_rate=False)
        # The reduced rate moves the full maps by up to 3e-4 of the band's peak, 1e-5 without.
        assert_same_maps(got, ref, points, (front, rear))
    assert reductions == ({4} if top_hz == 1000 else {1})


def test_a_few_points_are_read_at_the_full_rate():
    # Under DECIMATE_FROM_POINTS points (the track check's single anchor) the low-pass costs
    # more than the reads it saves: they are de-Dopplerized at the full rate, and their maps
    # are the whole grid's (made at a quarter of the rate) at those points (conftest's
    # assert_same_maps, the bounds the summed chain keeps against the direct definition).
    from flyover.imaging.dedoppler import DECIMATE_FROM_POINTS, decimation, window_band_powers
    from flyover.imaging.reception import subset
    front = PointSource("front", (1.2, 0.0, 0.0), broadband=Broadband(86.0, -2.0, 100.0, 5000.0),
                        seed=11)
    track, atm, _, p = one_source_pass([front], noise_spl_db=55.0)
    points = VehicleGrid((-2.6, 2.6), (-1.2, 1.2), 0.2).points_m()
    st = ChainSettings(third_octave_bands(250, 1000), np.ones(len(MICS)), 2.0)
    w = windows_near_overhead(track, 30)[0]
    ctx = window_context(w, track=track, clock=CLOCK, atmosphere=atm, mic_enu_m=MICS,
                         grid_points_m=points, settings=st)
    span = rows(p, ctx.first_frame, ctx.n_frames)
    few = np.argsort(np.hypot(*(points[:, :2] - np.array([1.2, 0.0])).T))[:DECIMATE_FROM_POINTS - 1]
    near = subset(ctx.geometry, few)
    assert decimation(st, ctx.geometry, FS)[0] == 4
    assert decimation(st, near, FS)[0] == 1
    whole = window_band_powers(span, ctx.first_frame, ctx.geometry, CLOCK, w, st, atm)
    got = window_band_powers(span, ctx.first_frame, near, CLOCK, w, st, atm)
    assert_same_maps(got, BandPowers(whole.full[few], whole.diagonal_removed[few]),
                     points[few], (front,))


def test_gain_terms_are_the_fewest_within_tolerance():
    # The summed chain's low-rank absorption gains on a real window's geometry (ISO 9613-1
    # gains to 5 kHz, 60 degrees from overhead): every gain within GAIN_TOLERANCE of the
    # largest, one term fewer is not; and no rank-k form of the stacked band profiles does
    # better than the truncated SVD (Eckart-Young), which numpy's SVD gives as the reference.
    from flyover.imaging.dedoppler import GAIN_TOLERANCE, gain_terms
    from flyover.imaging.reception import absorption_gains
    track, atm, _, _ = one_source_pass([PointSource("a", (0.0, 0.0, 0.0), tones=(
        Tone(500.0, 80.0),))], noise_spl_db=40.0)
    st = ChainSettings(third_octave_bands(200, 5000), np.ones(len(MICS)), 2.0)
    w = windows_near_overhead(track, 60)[0]
    ctx = window_context(w, track=track, clock=CLOCK, atmosphere=atm, mic_enu_m=MICS,
                         grid_points_m=VehicleGrid((-2.6, 2.6), (-1.2, 1.2), 0.2).points_m(),
                         settings=st)
    weighted = absorption_gains(st, atm, ctx.geometry).astype(float)
    coef, basis = gain_terms(weighted)
    k = len(basis)
    top = np.abs(weighted).max()
    error = np.abs(np.einsum("gkm,kb->gmb", coef, basis) - weighted).max() / top
    assert error <= GAIN_TOLERANCE
    np.testing.assert_allclose(basis @ basis.T, np.eye(k), atol=1e-12)
    flat = weighted.reshape(-1, weighted.shape[-1])
    u, sv, vt = np.linalg.svd(flat, full_matrices=False)
    fewer = (u[:, :k - 1] * sv[:k - 1]) @ vt[:k - 1]
    assert k == 1 or np.abs(fewer - flat).max() / top > GAIN_TOLERANCE
    # The same subspace as the SVD's leading k (the Gram route loses nothing that matters).
    np.testing.assert_allclose(np.abs(basis @ vt[:k].T), np.eye(k), atol=1e-6)


def test_lowpass_keeps_its_passband_and_stops_above():
    # The summed chain's low-pass: a tone in the passband passes unchanged (to 1e-4 of its
    # amplitude, away from the ends), one beyond the stop edge is gone (below -80 dB).
    from flyover.imaging.dedoppler import lowpassed
    t = np.arange(8192) / FS
    keep = np.sin(2 * np.pi * 1100.0 * t)
    drop = np.sin(2 * np.pi * 2500.0 * t)
    out = lowpassed(np.stack([keep, drop]), 1200.0, 2000.0, FS)
    mid = slice(1000, -1000)
    assert np.max(np.abs(out[0, mid] - keep[mid])) < 1e-4
    assert np.max(np.abs(out[1, mid])) < 1e-4


def test_sinc_oversampling_is_done_once_a_window(monkeypatch):
    # The 'sinc' option oversamples every channel 4x before reading: once per window, not once
    # per chunk of grid points, in both time-domain chains.
    from flyover.imaging import dedoppler
    from flyover.imaging.dedoppler import (_per_microphone_band_powers, _summed_band_powers,
                                           _UsedChain)
    from flyover.imaging.reception import absorption_gains
    src = PointSource("s", (0.5, 0.0, 0.0), broadband=Broadband(86.0, 0.0, 100.0, 3000.0),
                      seed=4)
    track, atm, _, p = one_source_pass([src])
    w = windows_near_overhead(track, 20)[0]
    points = VehicleGrid((-1.0, 1.0), (-0.4, 0.4), 0.4).points_m()           # 18 points
    st = ChainSettings(third_octave_bands(500, 1000), np.ones(len(MICS)), 2.0,
                       interpolation="sinc", chunk_points=4)
    ctx = window_context(w, track=track, clock=CLOCK, atmosphere=atm, mic_enu_m=MICS,
                         grid_points_m=points, settings=st)
    chain = _UsedChain(rows(p, ctx.first_frame, ctx.n_frames), ctx.first_frame, ctx.geometry,
                       CLOCK, np.ones(len(MICS)), absorption_gains(st, atm, ctx.geometry))
    calls = []
    original = dedoppler.oversampled
    monkeypatch.setattr(dedoppler, "oversampled", lambda x: calls.append(1) or original(x))
    for form in (_per_microphone_band_powers, _summed_band_powers):
        calls.clear()
        maps = form(chain, w, st, atm)
        assert len(calls) == 1, form.__name__
        assert np.all(np.isfinite(maps.full)) and maps.full.shape == (len(points), len(st.bands))

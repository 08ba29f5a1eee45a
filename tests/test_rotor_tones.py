"""Per-rotor tones: each rotor's blade-passing harmonics from its own shaft speed.

The accuracy checks run the project's simulator (rotors locked to their shafts, speeds written to
a PX4 ULog) through the workflow's stages, against the harmonic levels and frequencies the
simulation was given.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml

from flyover.acoustics.orders import OrderTrack, fit_orders, separable_groups
from flyover.forward.moving_source import ShaftSpeed
from flyover.model.constants import P0_PA

FS = 8000.0


def test_shaft_revolutions_integrate_a_piecewise_linear_speed_exactly():
    speed = ShaftSpeed((0.0, 1.0), (6000.0, 6600.0))
    # 100 rev/s rising to 110 rev/s over 1 s: 105 revolutions, then 110 a second.
    np.testing.assert_allclose(speed.revolutions([0.0, 0.5, 1.0, 2.0, -1.0]),
                               [0.0, 0.5 * 102.5, 105.0, 215.0, -100.0])


def test_joint_fit_follows_a_ramp_that_a_fixed_frequency_fft_smears():
    # A 4-blade rotor ramping 5 % in a 0.5 s window (400 to 420 Hz at k = 1, bins of 2 Hz)
    # beside a steady one 3 % slower: the joint fit along the shaft angles returns both
    # amplitudes; the Hann FFT's peak of the same window loses several dB of the ramping tone.
    n = int(0.5 * FS)
    t = np.arange(n) / FS
    ramp = ShaftSpeed((0.0, 0.5), (6000.0, 6300.0)).revolutions(t)
    steady = ShaftSpeed.constant(5820.0).revolutions(t)
    x = 1.0 * np.cos(2 * np.pi * 4 * ramp + 0.3) + 0.5 * np.cos(2 * np.pi * 4 * steady - 1.0)
    fits = fit_orders(x, [OrderTrack("a", 4, 1, ramp), OrderTrack("b", 4, 1, steady)], FS)
    assert fits[0].amplitude_pa == pytest.approx(1.0, rel=1e-6)
    assert fits[1].amplitude_pa == pytest.approx(0.5, rel=1e-6)
    assert fits[0].phase_rad == pytest.approx(0.3, abs=1e-6)
    assert fits[0].frequency_hz == pytest.approx(410.0, rel=1e-3)
    win = np.hanning(n)
    spectrum = np.abs(np.fft.rfft(x * win)) * 2 / win.sum()
    f = np.fft.rfftfreq(n, 1 / FS)
    fft_peak = spectrum[(f > 398) & (f < 422)].max()
    assert 20 * np.log10(fft_peak / 1.0) < -3.0


def test_rotors_at_the_same_speed_are_not_separable():
    t = np.arange(int(0.25 * FS)) / FS
    a = ShaftSpeed.constant(5000.0).revolutions(t)
    b = ShaftSpeed.constant(5010.0).revolutions(t)       # 0.3 Hz apart at k = 1: bin 4 Hz
    c = ShaftSpeed.constant(5400.0).revolutions(t)
    tracks = [OrderTrack("a", 2, 1, a), OrderTrack("b", 2, 1, b), OrderTrack("c", 2, 1, c)]
    assert sorted(map(sorted, separable_groups(tracks))) == [[0, 1], [2]]
    x = np.cos(2 * np.pi * 2 * a) + np.cos(2 * np.pi * 2 * b + 1.0) + np.cos(2 * np.pi * 2 * c)
    fits = fit_orders(x, tracks, FS)
    assert [f.separable for f in fits] == [False, False, True]
    # The group gets no level; the third rotor, 13 Hz (three bins) away, keeps its own within
    # 0.2 dB (the group's column cannot absorb the pair's beating exactly).
    assert np.isnan(fits[0].amplitude_pa) and np.isnan(fits[1].amplitude_pa)
    assert abs(20 * np.log10(fits[2].amplitude_pa)) < 0.2


def test_a_harmonic_that_is_not_there_is_not_given_a_level():
    # A tone of amplitude 1 in white noise of rms s = 0.1 over n = 8000 samples: in a Hann
    # spectrum (sum w = n / 2, sum w^2 = 3 n / 8; common practice) the noise stands as high as a
    # tone of amplitude 2 s sqrt(3 n / 8) / (n / 2), so the SNR is 51.2 dB, give or take the
    # scatter of a 9-bin average (about 1.4 dB); an order with no tone stands near 0 dB.
    rng = np.random.default_rng(3)
    t = np.arange(int(1.0 * FS)) / FS
    rev = ShaftSpeed.constant(6000.0).revolutions(t)
    x = np.cos(2 * np.pi * 2 * rev) + rng.normal(0.0, 0.1, len(t))
    fits = fit_orders(x, [OrderTrack("a", 2, 1, rev), OrderTrack("a", 4, 2, rev)], FS)
    n = len(t)
    expected = 20 * np.log10(1 / (2 * 0.1 * np.sqrt(3 * n / 8) / (n / 2)))
    assert expected == pytest.approx(51.25, abs=0.01)
    assert fits[0].snr_db == pytest.approx(expected, abs=3.0)
    assert fits[1].snr_db < 6.0


def _rotor_window(speeds: dict, *, logged_error: dict, noise_pa: float, seed: int):
    """One 0.5 s window at a hub: 2-blade rotors with harmonics k = 1..4 (amplitudes 1, 0.6,
    0.35, 0.2 Pa, random phases) along their true speeds (rpm at the window's start and end),
    white noise; and the tracks a fit gets, along the logged speeds (true x (1 + error))."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(0.5 * FS)) / FS
    amplitudes = {1: 1.0, 2: 0.6, 3: 0.35, 4: 0.2}
    x = rng.normal(0.0, noise_pa, len(t))
    truth, tracks = {}, []
    for rotor, (start, end) in speeds.items():
        true_rev = ShaftSpeed((0.0, 0.5), (start, end)).revolutions(t)
        scale = 1.0 + logged_error.get(rotor, 0.0)
        logged = ShaftSpeed((0.0, 0.5), (start * scale, end * scale)).revolutions(t)
        for k, a in amplitudes.items():
            x += a * np.cos(2 * np.pi * 2 * k * true_rev + rng.uniform(0, 2 * np.pi))
            truth[(rotor, k)] = a
            tracks.append(OrderTrack(rotor, 2 * k, k, logged))
    return x, tracks, truth


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_converging_and_crossing_rotors_get_a_level_only_where_the_fit_separates_them(seed):
    # Eight 2-blade rotors in one 0.5 s window (bins of 2 Hz): r1 and r2 converged to 0.1 %
    # (0.4 bin apart even at the 8th order); r3 and r4 crossing fast at mid-window (5 % apart
    # at its ends); r7 and r8 crossing slowly, their first harmonics one bin apart at the
    # window's ends (a rule of "more than a bin apart somewhere" calls them separable, yet
    # their columns are 0.89 correlated); r5 steady and r6 0.7 bin above it at the first
    # harmonic. Each is logged 0.05 % off. Every level given is within 1 dB of the truth or
    # inside its 90 % interval; no component whose true columns correlate above the threshold
    # with another's gets a level; the converged pair gets none at all.
    from flyover.acoustics.orders import SEPARATION_CORRELATION, column_correlations, refine_speeds
    speeds = {"r1": (4800.0, 4800.0), "r2": (4805.0, 4805.0), "r3": (4900.0, 5150.0),
              "r4": (5150.0, 4900.0), "r5": (5400.0, 5400.0), "r6": (5442.0, 5442.0),
              "r7": (5970.0, 6030.0), "r8": (6030.0, 5970.0)}
    error = {r: 0.0005 * (-1) ** i for i, r in enumerate(speeds)}
    x, tracks, truth = _rotor_window(speeds, logged_error=error, noise_pa=0.05, seed=seed)
    hubs = dict.fromkeys(speeds, x)
    refined, kept = refine_speeds(hubs, tracks)
    assert {"r1", "r2", "r3", "r4", "r7", "r8"} <= set(kept)   # neighbours: logged speeds kept
    fits = fit_orders(x, refined, FS)
    true_tracks = _rotor_window(speeds, logged_error={}, noise_pa=0.0, seed=seed)[1]
    rho = column_correlations(true_tracks)
    np.fill_diagonal(rho, 0.0)
    given = 0
    for i, fit in enumerate(fits):
        if rho[i].max() > SEPARATION_CORRELATION or fit.rotor in ("r1", "r2"):
            assert not fit.separable and np.isnan(fit.level_db), (fit.rotor, fit.harmonic)
            continue
        if not fit.separable:
            continue
        true_db = 20 * np.log10(truth[(fit.rotor, fit.harmonic)] / np.sqrt(2) / P0_PA)
        err = fit.level_db - true_db
        assert abs(err) < 1.0 or abs(err) < 1.6449 * fit.level_sd_db, (fit, true_db)
        given += 1
    assert given >= 16       # r3 to r6 throughout, r7 and r8 at their 3rd and 4th harmonics
    # The slow crossing's first harmonics: grouped although a bin apart at the ends.
    slow = [f for f in fits if f.rotor in ("r7", "r8") and f.harmonic == 1]
    assert all(not f.separable and f.correlation > 0.85 for f in slow)


def test_tone_uncertainty_matches_the_scatter_and_the_noise_bias_is_taken_off():
    # A weak tone (amplitude 0.02 Pa) in white noise of 0.05 Pa over 0.5 s: the least-squares
    # coefficients scatter with variance 2 s^2 / n each (white noise, common practice), so the
    # amplitude's standard deviation is 0.05 sqrt(2 / 4000) = 1.1 mPa. Over 400 windows the
    # stated uncertainty matches the scatter within 15 %, and the mean of the bias-corrected
    # amplitude squared is within 5 % of the truth where the raw one is 2 var / A^2 = 6 % high.
    rng = np.random.default_rng(7)
    n = int(0.5 * FS)
    rev = ShaftSpeed.constant(6000.0).revolutions(np.arange(n) / FS)
    amplitudes, stated = [], []
    for _ in range(400):
        x = 0.02 * np.cos(2 * np.pi * 2 * rev + rng.uniform(0, 6.3)) + rng.normal(0, 0.05, n)
        (fit,) = fit_orders(x, [OrderTrack("a", 2, 1, rev)], FS)
        amplitudes.append(fit.amplitude_pa)
        stated.append(fit.amplitude_sd_pa)
    expected_sd = 0.05 * np.sqrt(2 / n)
    assert np.mean(stated) == pytest.approx(expected_sd, rel=0.15)
    assert np.std(amplitudes) == pytest.approx(expected_sd, rel=0.15)
    assert np.mean(np.square(amplitudes)) == pytest.approx(0.02 ** 2, rel=0.05)


# A multicopter's four rotors 0.5 m apart at speeds 2 % apart (6 % in all), harmonics 1-4, flown
# over a 24-microphone array at 30 m: the array's main lobe at the first harmonic is over 10 m
# wide, so the map shows one blob; the rotors' own speeds tell them apart.
ROTORS = {"r1": ([0.25, 0.25, 0.0], 4800.0), "r2": ([0.25, -0.25, 0.0], 4896.0),
          "r3": ([-0.25, 0.25, 0.0], 4992.0), "r4": ([-0.25, -0.25, 0.0], 5088.0)}
HARMONICS_DB = [88.0, 84.0, 80.0, 76.0]


def scenario(rotors: dict, *, noise_spl_db=30.0, rotor_rpm=None, harmonics_db=HARMONICS_DB,
             blades=2):
    return {
        "name": "rotor test campaign",
        "site": {"origin_lat_deg": 47.0, "origin_lon_deg": 8.0, "origin_height_m": 400.0},
        "array": {"arms": 4, "per_arm": 6, "r_min_m": 0.5, "r_max_m": 4.0,
                  "mounting": "ground-plate"},
        "recording": {"sample_rate_hz": FS, "subtype": "FLOAT", "noise_spl_db": noise_spl_db,
                      "pa_per_unit": 50.0, "calibration_spread_db": 0.1},
        "gnss": {"rate_hz": 10, "noise_m": 0.02},
        "sources": [{"name": n, "body_m": body, "seed": 11 + k,
                     "rotor": {"blades": blades, "rpm": rpm, "harmonics_db": harmonics_db,
                               "jitter_deg": 3.0, "motor": k + 1, "seed": 40 + k}}
                    for k, (n, (body, rpm)) in enumerate(rotors.items())],
        "passes": {"p1": {"label": "hover-speed", "speed_m_s": 15.0, "height_m": 30.0,
                          "heading_deg": 90.0, "duration_s": 4.0, "track_format": "ulog",
                          "recording_start_utc": "2026-06-01T10:00:00.000Z",
                          "clock_offset_s": 0.05, **({"rotor_rpm": rotor_rpm} if rotor_rpm
                                                     else {}),
                          "atmosphere": {"temperature_c": 15.0, "relative_humidity_pct": 70.0,
                                         "wind_speed_m_s": 1.0, "wind_from_deg": 200.0}}},
        "campaign": {
            "vehicle": {"grid": {"x_m": [-1.0, 1.0], "y_m": [-1.0, 1.0], "spacing_m": 0.5},
                        "regions": {"rotors": {"x_m": [-0.5, 0.5], "y_m": [-0.5, 0.5]}},
                        "rotors": {n: {"body_m": body, "blades": blades, "motor": k + 1}
                                   for k, (n, (body, _)) in enumerate(rotors.items())}},
            "analysis": {"window_s": 0.5, "hop_s": 0.5, "band_min_hz": 125, "band_max_hz": 800,
                         "max_polar_offset_deg": 40.0, "reference_distance_m": 50.0,
                         "reference_atmosphere": {"temperature_c": 25.0,
                                                  "relative_humidity_pct": 70.0}},
            "output": "results"},
    }


def run_pass(folder, data) -> pd.DataFrame:
    from flyover.io.config import load_campaign
    from flyover.io.results.rotor_tones import ROTOR_TONES
    from flyover.pipeline import align, image, levels, tones
    from flyover.sim.demo import write_campaign
    (folder / "scenario.yaml").write_text(yaml.safe_dump(data))
    write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
    campaign = load_campaign(folder / "campaign.yaml")
    out = campaign.output / "p1"
    align.run(campaign, "p1", out)
    image.run(campaign, "p1", out, threads=2, quiet=True)
    levels.run(campaign, "p1", out)
    tones.run(campaign, "p1", out)
    return ROTOR_TONES.read(out)


@pytest.mark.slow
def test_four_rotors_one_blob_each_harmonic_within_1_db(tmp_path):
    from flyover.imaging.resolution import main_lobe_width_m
    table = run_pass(tmp_path, scenario(ROTORS))
    assert main_lobe_width_m(2 * 4800 / 60, 30.0, 8.0, 340.0) > 10 * 0.5    # one blob
    assert len(table) > 0 and table["separable"].all() and table["level_1m_db"].notna().all()
    assert set(table["rotor"]) == set(ROTORS) and set(table["harmonic"]) == {1, 2, 3, 4}
    truth_f = table["rotor"].map({n: rpm for n, (_, rpm) in ROTORS.items()}) \
        * table["order"] / 60.0
    assert np.max(np.abs(table["frequency_hz"] / truth_f - 1)) < 0.001
    err = table["level_1m_db"] - table["harmonic"].map(dict(enumerate(HARMONICS_DB, 1)))
    assert np.max(np.abs(err)) < 1.0, table.loc[np.abs(err).idxmax()]


@pytest.mark.slow
def test_a_ramping_rotor_keeps_its_level_where_a_fixed_frequency_fft_does_not(tmp_path):
    # One 4-blade rotor speeding up 10 % a second: 5 % within each 0.5 s window (the first
    # harmonic sweeps 16 Hz, eight bins of the window).
    from flyover.io.config import load_campaign
    from flyover.pipeline._span import dedopplerize_span
    from flyover.pipeline.context import load_aligned_pass
    rotor = {"r1": ([0.0, 0.0, 0.0], 4800.0)}
    ramp = [[-4.0, 4800.0 * 0.6], [6.0, 4800.0 * 1.6]]       # 480 rpm a second
    table = run_pass(tmp_path, scenario(rotor, rotor_rpm={"r1": ramp}, blades=4))
    first = table[table["harmonic"] == 1]
    assert len(first) >= 3
    assert np.max(np.abs(first["level_1m_db"] - HARMONICS_DB[0])) < 1.0
    # The same window through a Hann FFT (peak bin, amplitude-normalised): several dB low.
    campaign = load_campaign(tmp_path / "campaign.yaml")
    inputs, _ = load_aligned_pass(campaign, "p1", campaign.output / "p1")
    windows = pd.read_csv(campaign.output / "p1" / "windows.csv")
    w = windows[windows["status"] == "analysed"].iloc[len(first) // 2]
    n = int(round(w["duration_s"] * FS))
    start = w["center_s"] - 0.5 * (n - 1) / FS
    hub = dedopplerize_span(campaign, inputs, start, n, [0.0, 0.0, 0.0]).mean(axis=0)
    win = np.hanning(n)
    spec = np.abs(np.fft.rfft(hub * win)) * 2 / win.sum()
    f = np.fft.rfftfreq(n, 1 / FS)
    f1 = first.loc[first["window"] == w["window"], "frequency_hz"].iloc[0]
    near = (f > f1 * 0.95) & (f < f1 * 1.05)
    fft_db = 20 * np.log10(spec[near].max() / np.sqrt(2) / P0_PA)
    fit_db = first.loc[first["window"] == w["window"], "level_1m_db"].iloc[0]
    assert fit_db - fft_db > 3.0


@pytest.mark.slow
def test_rotors_at_one_speed_are_flagged_not_separable(tmp_path):
    rotors = {"r1": ([0.25, 0.0, 0.0], 5000.0), "r2": ([-0.25, 0.0, 0.0], 5000.0)}
    table = run_pass(tmp_path, scenario(rotors))
    assert len(table) > 0
    assert not table["separable"].any()
    assert table["level_1m_db"].isna().all()
    assert (table["note"].str.contains("not separable")).all()


@pytest.mark.slow
def test_rotors_converging_and_crossing_through_the_whole_chain(tmp_path):
    # Four rotors over the pass, as the ESCs log them: r2 closing on r1 (2 % apart at the start,
    # 0.2 % at the end), r3 and r4 crossing at mid-pass. Every level the chain gives is within
    # 1 dB of the simulated harmonic or inside its 90 % interval, and no harmonic whose columns
    # (on the true speeds) correlate above the threshold with another's gets one.
    from flyover.acoustics.orders import SEPARATION_CORRELATION, column_correlations
    from flyover.acoustics.orders import OrderTrack as Track
    rotors = {"r1": ([0.25, 0.25, 0.0], 4800.0), "r2": ([0.25, -0.25, 0.0], 4896.0),
              "r3": ([-0.25, 0.25, 0.0], 5000.0), "r4": ([-0.25, -0.25, 0.0], 5200.0)}
    rpm = {"r1": [[-4.0, 4800.0], [8.0, 4800.0]], "r2": [[-4.0, 4896.0], [0.0, 4896.0],
                                                         [4.0, 4810.0], [8.0, 4810.0]],
           "r3": [[-4.0, 4900.0], [0.0, 4900.0], [4.0, 5300.0], [8.0, 5300.0]],
           "r4": [[-4.0, 5300.0], [0.0, 5300.0], [4.0, 4900.0], [8.0, 4900.0]]}
    table = run_pass(tmp_path, scenario(rotors, rotor_rpm=rpm))
    truth_db = table["harmonic"].map(dict(enumerate(HARMONICS_DB, 1)))
    given = table["level_1m_db"].notna()
    err = (table["level_1m_db"] - truth_db)[given]
    inside = err.abs() < np.maximum(1.0, 1.6449 * table.loc[given, "uncertainty_db"])
    assert inside.all(), table[given][~inside]
    assert given.sum() >= 0.5 * len(table)
    # The true speeds of each window (the simulated schedule, linear between its points).
    from flyover.forward.moving_source import ShaftSpeed
    for window, g in table.groupby("window"):
        t = pd.to_datetime(g["time_utc"].iloc[0]) - pd.Timestamp("2026-06-01T10:00:00Z")
        centre = t.total_seconds()
        tau = centre - 0.25 + np.arange(int(0.5 * FS)) / FS
        tracks = [Track(r, int(o), int(k), ShaftSpeed(tuple(np.array(rpm[r])[:, 0]),
                                                      tuple(np.array(rpm[r])[:, 1])
                                                      ).revolutions(tau))
                  for r, o, k in zip(g["rotor"], g["order"], g["harmonic"])]
        rho = column_correlations(tracks)
        np.fill_diagonal(rho, 0.0)
        crowded = rho.max(axis=1) > SEPARATION_CORRELATION + 0.1
        assert g["level_1m_db"].isna().to_numpy()[crowded].all(), g[crowded]


@pytest.mark.slow
def test_a_tone_under_incoherent_noise_10_db_above_it(tmp_path):
    # At the microphone below the pass the first harmonic (88 dB at 1 m, 160 Hz) arrives at
    # about 88 - 20 lg 30 + 6 = 64.5 dB (ground plate); white noise of 95 dB over 0-4 kHz puts
    # 95 - 10 lg(4000 / 37) = 74.7 dB in its one-third-octave band (160 Hz, 37 Hz wide, IEC
    # 61260-1), 10 dB above the tone at every microphone: the array's gain (24 independent
    # microphones) and the fit over 0.5 s bring it out.
    rotor = {"r1": ([0.0, 0.0, 0.0], 4800.0)}
    table = run_pass(tmp_path, scenario(rotor, noise_spl_db=95.0))
    first = table[table["harmonic"] == 1]
    assert len(first) >= 3
    assert np.max(np.abs(first["level_1m_db"] - HARMONICS_DB[0])) < 1.5


def test_speed_search_scores_a_trial_by_the_residual_lstsq_leaves():
    # The search's residual from the normal equations against numpy's lstsq (SVD; a
    # general-purpose reference) on two rotors' columns 3 % apart in speed, with noise.
    from flyover.acoustics.orders import _design, _residual_power
    t = np.arange(6400) / FS
    tracks = [OrderTrack("a", k * 2, k, ShaftSpeed.constant(6000.0).revolutions(t))
              for k in (1, 2, 3)]
    tracks += [OrderTrack("b", k * 3, k, ShaftSpeed.constant(4120.0).revolutions(t))
               for k in (1, 2)]
    groups = separable_groups(tracks)
    design = _design(tracks, groups)
    rng = np.random.default_rng(8)
    x = design @ rng.normal(0, 1, design.shape[1]) + rng.normal(0, 0.1, len(t))
    coef, *_ = np.linalg.lstsq(design, x, rcond=None)
    expected = float(np.sum((x - design @ coef) ** 2))
    assert _residual_power(x, design) == pytest.approx(expected, rel=1e-10)

"""Received levels reconstructed from a directivity, against the forward model."""

from __future__ import annotations

import numpy as np
import pytest

from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.metrics import event_metrics, metrics_of_mean_square
from flyover.acoustics.reconstruct import (Directivity, energy_sum, received_history,
                                          reference_flight)
from flyover.forward.moving_source import (Broadband, PointSource, Propagator, SourceSignal,
                                           received_pressure_pa)
from flyover.model.constants import P0_PA

FS = 25600.0
BANDS = third_octave_bands(50, 8000)
SOURCE = PointSource("s", (0.0, 0.0, 0.0), broadband=Broadband(88.0, -2.0, 45.0, 9000.0),
                     seed=11)


def flat_directivity() -> Directivity:
    """The simulated source's band levels at 1 m, the same at every angle (a monopole)."""
    level = 10 * np.log10(SOURCE.band_power_pa2(BANDS) / P0_PA ** 2)
    angles = np.arange(5.0, 176.0, 5.0)
    return Directivity(angles, BANDS.center_hz, np.tile(level, (len(angles), 1)))


def test_overhead_band_level_by_hand():
    # Overhead (M_r = 0, r = h): P = G^2 p0^2 10^(L/10) / h^2 * 10^(-alpha h / 10).
    atm = Atmosphere(25.0, 70.0)
    track = reference_flight(50.0, 20.0, duration_s=20.0)
    d = flat_directivity()
    h = received_history(d, track=track, observer_enu_m=[0, 0, 0], reception_s=[50 / atm.c_m_s],
                         atmosphere=atm, pressure_gain=2.0)
    assert h.polar_deg[0] == pytest.approx(90.0, abs=0.01)
    expected = (4 * P0_PA ** 2 * 10 ** (d.level_1m_db[0] / 10) / 50 ** 2
                * 10 ** (-atm.absorption_db_per_m(BANDS.center_hz) * 50 / 10))
    np.testing.assert_allclose(h.power_pa2[0], expected, rtol=1e-3)


@pytest.mark.parametrize("wind", [(0.0, 0.0, 0.0), (0.0, -6.0, 0.0)])
def test_reconstructed_metrics_match_the_simulated_flyover(wind):
    # The forward model's pressure at a ground-plate microphone under a 30 m/s pass at 40 m,
    # measured with event_metrics; the reconstruction from the source's band levels: LASmax and
    # LAE within 0.5 dB (Doppler, convective amplification, absorption and timing all enter).
    atm = Atmosphere(15.0, 70.0, wind_speed_m_s=float(np.hypot(*wind[:2])), wind_from_deg=0.0)
    track = reference_flight(40.0, 30.0, duration_s=30.0)
    mic = np.array([[0.0, 0.0, 0.0]])
    signal = SourceSignal(SOURCE, FS, -15.0, 14.0)
    p = received_pressure_pa(track, [signal], [np.zeros(3)], Propagator(mic, atm, 2.0), FS, -10.0,
                             int(20.0 * FS))[0]
    measured, _ = event_metrics(p, FS)
    t = -10.0 + np.arange(0, 20.0, 0.01)
    h = received_history(flat_directivity(), track=track, observer_enu_m=mic[0], reception_s=t,
                         atmosphere=atm, pressure_gain=2.0)
    rebuilt, _ = metrics_of_mean_square(h.a_weighted_mean_square(), 100.0)
    assert rebuilt.lasmax_db == pytest.approx(measured.lasmax_db, abs=0.5)
    assert rebuilt.lae_db == pytest.approx(measured.lae_db, abs=0.5)


def test_the_reconstruction_puts_back_the_convective_exponent_the_levels_took_off():
    # A source radiating with (1 - M_r)^-3 in pressure (the forward model's declared exponent)
    # at 60 m/s, 30 m up: the reconstruction with the same exponent matches the simulated
    # flyover's LAE within 0.5 dB; one that puts back the monopole's (1 - M_r)^-2 misses the
    # difference of the two amplifications, more than 0.5 dB at M = 0.18.
    from dataclasses import replace
    atm = Atmosphere(15.0, 70.0)
    track = reference_flight(30.0, 60.0, duration_s=30.0)
    mic = np.array([[0.0, 0.0, 0.0]])
    source = replace(SOURCE, convective_exponent=3.0)
    signal = SourceSignal(source, FS, -15.0, 14.0)
    p = received_pressure_pa(track, [signal], [np.zeros(3)], Propagator(mic, atm, 2.0), FS, -3.0,
                             int(6.0 * FS))[0]
    measured, _ = event_metrics(p, FS)
    t = -3.0 + np.arange(0, 6.0, 0.01)        # inside the directivity's 5-175 deg
    rebuilt = {}
    for n in (2.0, 3.0):
        d = replace(flat_directivity(), convective_exponent=n)
        h = received_history(d, track=track, observer_enu_m=mic[0], reception_s=t,
                             atmosphere=atm, pressure_gain=2.0)
        rebuilt[n] = metrics_of_mean_square(h.a_weighted_mean_square(), 100.0)[0]
    assert rebuilt[3.0].lae_db == pytest.approx(measured.lae_db, abs=0.5)
    assert abs(rebuilt[2.0].lae_db - measured.lae_db) > 0.5


def test_components_sum_is_never_below_a_component():
    # The energy sum of components (a louder one measured from 40 to 140 deg, a quieter one only
    # from 75 to 105 deg) against each of them, through the metrics stage's own steps (longest
    # covered stretch, then the metrics): LASmax and LAE of a sum of positive mean squares are at
    # least those of any part (the detectors and integrals are linear and positive). Summing only
    # where every part is covered cut the sum to the narrow part's angles and put its LAE 3.7 dB
    # under the louder part's.
    from flyover.pipeline.metrics import covered_stretch
    atm = Atmosphere(15.0, 70.0)
    track = reference_flight(30.0, 20.0, duration_s=40.0)
    t = np.arange(-15.0, 15.0, 0.01)
    d = flat_directivity()
    parts = []
    for (lo, hi), offset_db in (((40.0, 140.0), 0.0), ((75.0, 105.0), -4.0)):
        keep = (d.polar_deg >= lo) & (d.polar_deg <= hi)
        part = Directivity(d.polar_deg[keep], d.band_center_hz, d.level_1m_db[keep] + offset_db)
        parts.append(received_history(part, track=track, observer_enu_m=[0, 0, 0],
                                      reception_s=t, atmosphere=atm, pressure_gain=2.0)
                     .a_weighted_mean_square())
    total = energy_sum(parts)
    assert np.all(total[np.isfinite(parts[1])] >= parts[1][np.isfinite(parts[1])])

    def metrics(env):
        return metrics_of_mean_square(env[covered_stretch(env)], 100.0)[0]
    summed = metrics(total)
    for part in parts:
        m = metrics(part)
        assert summed.lasmax_db >= m.lasmax_db - 1e-9
        assert summed.lae_db >= m.lae_db - 1e-9
    assert np.isnan(energy_sum([np.array([np.nan, 1.0]), np.array([np.nan, np.nan])])[0])


def test_raised_microphone_over_hard_ground_adds_the_image_path():
    # 1.2 m up over hard ground, overhead at 100 m: direct and reflected paths nearly equal,
    # energies added: 10 lg 2 = +3.0 dB on one free-field path (G = 1), i.e. 3 dB under a ground
    # plate (G = 2, +6 dB).
    atm = Atmosphere(25.0, 70.0)
    track = reference_flight(100.0, 20.0, duration_s=20.0)
    kw = dict(track=track, reception_s=[100 / atm.c_m_s], atmosphere=atm)
    plate = received_history(flat_directivity(), observer_enu_m=[0, 0, 0], pressure_gain=2.0,
                             **kw)
    raised = received_history(flat_directivity(), observer_enu_m=[0, 0, 1.2], pressure_gain=1.0,
                              ground_image=True, **kw)
    diff = 10 * np.log10(raised.power_pa2[0] / plate.power_pa2[0])
    np.testing.assert_allclose(diff, -3.0, atol=0.15)


@pytest.mark.slow
def test_rebuilt_on_the_measured_path_matches_the_measurement(tmp_path):
    # A simulated 9 s pass at 25 m (windows to 80 deg either side of overhead): the total's
    # directivity carried back along the measured path to the metrics microphone gives the
    # LASmax and LAE measured there in the same bands within 1 dB (the check).
    import copy

    import yaml
    from conftest import TINY_SCENARIO

    from flyover.io.config import load_campaign
    from flyover.io.results.event_metrics import RECONSTRUCTED
    from flyover.pipeline import align, image, levels, metrics
    from flyover.sim.demo import write_campaign
    scenario = copy.deepcopy(TINY_SCENARIO)
    scenario["passes"] = {"p1": dict(scenario["passes"]["p1"], duration_s=9.0, height_m=25.0)}
    scenario["campaign"]["analysis"]["max_polar_offset_deg"] = 80.0
    (tmp_path / "scenario.yaml").write_text(yaml.safe_dump(scenario))
    write_campaign(tmp_path / "scenario.yaml", tmp_path, progress=lambda *_: None)
    campaign = load_campaign(tmp_path / "campaign.yaml")
    out = tmp_path / "results" / "p1"
    for stage in (align, image, levels, metrics):
        stage.run(campaign, "p1", out, **({"quiet": True} if stage is image else {}))
    table = RECONSTRUCTED.read(out).set_index(["route", "component"])
    measured = table.loc[("measured", "total")]
    rebuilt = table.loc[("rebuilt on the measured path", "total")]
    assert rebuilt["lasmax_db"] == pytest.approx(measured["lasmax_db"], abs=1.0)
    assert rebuilt["lae_db"] == pytest.approx(measured["lae_db"], abs=1.0)
    same = table.loc[("measured over the rebuilt stretch", "total")]
    assert rebuilt["lae_db"] == pytest.approx(same["lae_db"], abs=1.0)
    # The reference flight (50 m, the reference distance) is twice as high: quieter.
    assert table.loc[("reference flight", "total"), "lasmax_db"] < measured["lasmax_db"] - 3
    assert {"front", "rear", "components"} <= set(
        table.loc["rebuilt on the measured path"].index)

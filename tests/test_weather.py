"""A weather station's file averaged over each pass, with its spread and limits."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml

from flyover.acoustics.weather import WeatherSamples, mean_wind, weather_flags, weather_over
from flyover.campaign import WeatherLimits
from flyover.model.errors import FlyoverInputError

T0 = int(np.datetime64("2026-06-01T10:00:00", "ns").astype(np.int64))
S = 1_000_000_000


def test_wind_direction_is_averaged_as_a_vector():
    # Winds from 350 and 10 deg at 5 m/s: the mean comes from 0 deg (north), not 180 deg, at
    # 5 cos(10 deg) = 4.924 m/s (the cross components cancel).
    speed, direction = mean_wind([5.0, 5.0], [350.0, 10.0])
    assert direction == pytest.approx(0.0, abs=1e-9) or direction == pytest.approx(360.0)
    assert speed == pytest.approx(5 * np.cos(np.deg2rad(10.0)))
    # Opposite winds cancel; a steady wind is itself.
    assert mean_wind([3.0, 3.0], [90.0, 270.0])[0] == pytest.approx(0.0, abs=1e-12)
    assert mean_wind([4.0, 4.0, 4.0], [225.0] * 3) == pytest.approx((4.0, 225.0))


def station(n=30, temperature=None, speed=None, direction=None):
    t = T0 + np.arange(n) * S
    return WeatherSamples(t, np.asarray(temperature if temperature is not None
                                        else 15.0 + 0.01 * np.arange(n)),
                          np.full(n, 70.0), np.full(n, 96.5),
                          np.asarray(speed if speed is not None else np.full(n, 2.0)),
                          np.asarray(direction if direction is not None else np.full(n, 200.0)))


def test_means_over_the_span_by_hand_and_their_spread():
    w = station(temperature=15.0 + 0.1 * np.arange(30),
                speed=np.where(np.arange(30) % 2 == 0, 1.0, 3.0),
                direction=np.where(np.arange(30) % 2 == 0, 350.0, 10.0))
    atm, summary = weather_over(w, T0 + 10 * S, T0 + 19 * S, where="station.csv")
    # Rows 10..19: temperatures 16.0..16.9 (mean 16.45, spread 0.9 K); winds of 1 m/s from 350
    # deg and 3 m/s from 10 deg in turn: the mean vector has a north part (1 + 3)/2 cos 10 deg
    # and an east part (3 - 1)/2 sin 10 deg, so it comes from atan(sin 10 / (2 cos 10)) = 5.0 deg.
    assert summary["samples"] == 10
    assert atm.temperature_c == pytest.approx(16.45)
    assert summary["temperature_spread_k"] == pytest.approx(0.9)
    assert atm.wind_speed_m_s == pytest.approx(np.hypot(2 * np.cos(np.deg2rad(10)),
                                                        np.sin(np.deg2rad(10))))
    assert atm.wind_from_deg == pytest.approx(np.degrees(np.arctan2(np.sin(np.deg2rad(10)),
                                                                    2 * np.cos(np.deg2rad(10)))))
    assert summary["wind_speed_spread_m_s"] == pytest.approx(2.0)
    assert summary["wind_speed_scalar_mean_m_s"] == pytest.approx(2.0)
    with pytest.raises(FlyoverInputError, match="does not cover the pass"):
        weather_over(w, T0 + 25 * S, T0 + 40 * S, where="station.csv")


def test_limits_flag_wind_crosswind_and_spreads():
    limits = WeatherLimits()
    calm = {"wind_speed_m_s": 2.0, "wind_from_deg": 90.0, "wind_speed_spread_m_s": 1.0,
            "temperature_spread_k": 0.3}
    assert weather_flags(calm, limits, track_heading_deg=90.0) == []
    # 5 m/s straight across an eastbound pass: over the 7 kt (3.6 m/s) crosswind limit only.
    across = dict(calm, wind_speed_m_s=5.0, wind_from_deg=0.0)
    flags = weather_flags(across, limits, track_heading_deg=90.0)
    assert len(flags) == 1 and flags[0].startswith("mean crosswind 5.0 m/s")
    gusty = dict(calm, wind_speed_spread_m_s=4.0, temperature_spread_k=1.5)
    assert len(weather_flags(gusty, limits, track_heading_deg=90.0)) == 2


def write_station(folder, start_ns, end_ns, **extra):
    t = np.arange(start_ns, end_ns, S)
    k = np.arange(len(t))
    frame = pd.DataFrame({"time_utc": [str(np.datetime64(int(v), "ns")) + "Z" for v in t],
                          "temperature_c": 15.0 + 0.01 * k, "relative_humidity_pct": 70.0,
                          "pressure_kpa": 96.5, "wind_speed_m_s": 1.0 + 0.5 * (k % 3),
                          "wind_from_deg": 190.0 + 10 * (k % 3), **extra})
    frame.to_csv(folder / "station.csv", index=False)
    return frame


def use_weather(folder):
    path = folder / "campaign.yaml"
    data = yaml.safe_load(path.read_text())
    data["weather"] = "station.csv"
    for p in data["passes"].values():
        p.pop("atmosphere", None)
    path.write_text(yaml.safe_dump(data))
    return path


def test_a_pass_takes_the_mean_over_its_analysed_stretch(tiny_copy, capsys):
    from flyover.cli import main
    from flyover.io.config import load_campaign
    from flyover.pipeline.context import analysed_stretch_s, load_pass
    start = int(np.datetime64("2026-06-01T09:59:00", "ns").astype(np.int64))
    frame = write_station(tiny_copy, start, start + 600 * S)
    campaign = load_campaign(use_weather(tiny_copy))
    inputs = load_pass(campaign, "p1")
    lo, hi = analysed_stretch_s(inputs, campaign.analysis.max_polar_offset_deg)
    t = pd.to_datetime(frame["time_utc"]).astype("int64").to_numpy()
    rows = frame[(t >= inputs.clock.utc_ns(lo)) & (t <= inputs.clock.utc_ns(hi))]
    assert len(rows) >= 2
    assert inputs.atmosphere.temperature_c == pytest.approx(rows["temperature_c"].mean())
    e = np.mean(rows["wind_speed_m_s"] * np.sin(np.deg2rad(rows["wind_from_deg"])))
    n = np.mean(rows["wind_speed_m_s"] * np.cos(np.deg2rad(rows["wind_from_deg"])))
    assert inputs.atmosphere.wind_speed_m_s == pytest.approx(np.hypot(e, n))
    assert inputs.weather["samples"] == len(rows)
    assert main(["check", str(tiny_copy / "campaign.yaml")]) == 0
    out = capsys.readouterr().out
    assert "weather file:" in out and "track file track.csv: CSV, 10.0 Hz" in out


def test_a_track_without_attitude_is_fitted_once_in_wind(tiny_copy, monkeypatch):
    # A track of positions only: its yaw follows the velocity through the weather file's
    # wind. Without a lever arm the positions do not depend on the yaw, so the track is fitted
    # once and given the wind; naive reference: a fresh fit with that wind.
    import flyover.pipeline.context as context
    from flyover.geometry.track import fit_track
    from flyover.io.config import load_campaign
    track = pd.read_csv(tiny_copy / "p1" / "track.csv")
    track.drop(columns=["yaw_deg", "pitch_deg", "roll_deg"]).to_csv(tiny_copy / "p1" / "track.csv",
                                                                     index=False)
    start = int(np.datetime64("2026-06-01T09:59:00", "ns").astype(np.int64))
    write_station(tiny_copy, start, start + 600 * S)
    campaign = load_campaign(use_weather(tiny_copy))
    fits = []
    monkeypatch.setattr(context, "fit_track", lambda *a, **k: fits.append(k) or fit_track(*a, **k))
    inputs = context.load_pass(campaign, "p1")
    wind = inputs.atmosphere.wind_enu_m_s
    assert np.hypot(*wind[:2]) > 0.5 and len(fits) == 1
    assert "air-relative" in inputs.track.heading_source
    samples = inputs.track_samples
    fresh = fit_track(inputs.clock.seconds_since_epoch(samples.utc_ns), samples.enu_m,
                      campaign.passes["p1"].track_position_noise_m, wind_enu_m_s=wind)
    t = np.linspace(inputs.track.start_s, inputs.track.end_s, 50)
    np.testing.assert_array_equal(inputs.track.position(t), fresh.position(t))
    np.testing.assert_array_equal(inputs.track.attitude_deg(t), fresh.attitude_deg(t))


def test_weather_refusals(tiny_copy, capsys):
    from flyover.cli import main
    start = int(np.datetime64("2026-06-01T10:02:00", "ns").astype(np.int64))
    write_station(tiny_copy, start, start + 60 * S)          # misses p1 (10:00)
    path = use_weather(tiny_copy)
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "the weather file does not cover the pass" in err and "station.csv" in err
    data = yaml.safe_load(path.read_text())
    data["passes"]["p1"]["atmosphere"] = {"temperature_c": 15.0, "relative_humidity_pct": 70.0}
    path.write_text(yaml.safe_dump(data))
    assert main(["check", str(path)]) == 2
    assert "types its atmosphere although the campaign has a weather file" in \
        capsys.readouterr().err

"""Bad inputs of every file type give one clear error: file, row or key, expected, found."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import soundfile as sf
from conftest import edit_campaign as edit_config

from flyover.io.config import load_campaign
from flyover.io.readers.soundfile_recording import read_span, recording_info
from flyover.model.errors import FlyoverInputError
from flyover.pipeline.context import load_pass


def load_all(folder):
    campaign = load_campaign(folder / "campaign.yaml")
    for name in campaign.passes:
        load_pass(campaign, name)


def expect_error(folder, *fragments):
    with pytest.raises(FlyoverInputError) as info:
        load_all(folder)
    text = info.value.message
    for frag in fragments:
        assert frag in text, text
    assert "Traceback" not in text
    return text


def test_valid_campaign_loads(tiny_campaign_dir):
    load_all(tiny_campaign_dir)


def test_regions_lie_in_the_grid_plane_and_carry_their_source_type(tiny_copy):
    # A map plane below the body origin (body z down): the unit sources at the region centres
    # must sit in it, or source power integration compares points off the plane.
    def change(d):
        d["vehicle"]["grid"]["z_m"] = 0.3
        d["vehicle"]["regions"]["front"]["convective_exponent"] = 3
    edit_config(tiny_copy, change)
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    assert [r.center_m[2] for r in campaign.regions.values()] == [0.3, 0.3]
    assert campaign.regions["front"].convective_exponent == 3.0
    assert campaign.regions["rear"].convective_exponent == 2.0
    assert np.all(campaign.grid.points_m()[:, 2] == 0.3)


def test_raised_microphones_need_their_heights(tiny_copy):
    # A pass flown over the array on stands: its own layout must say how high each microphone
    # is above the ground, and a ground is refused for microphones that are not raised.
    def raised(d):
        d["passes"]["p1"]["array"] = {"layout": "layout.csv", "mounting": "raised",
                                      "ground": {"surface": "soft"}}
    edit_config(tiny_copy, raised)
    expect_error(tiny_copy, "raised microphones need their heights above the ground",
                 "mic_height_m", "layout.csv")
    layout = pd.read_csv(tiny_copy / "layout.csv")
    layout["mic_height_m"] = 1.2
    layout.to_csv(tiny_copy / "layout.csv", index=False)
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    inputs = load_pass(campaign, "p1")
    assert inputs.array.mounting == "raised" and inputs.array.ground.surface == "soft"
    np.testing.assert_allclose(inputs.layout.image_enu_m[:, 2],
                               inputs.layout.enu_m[:, 2] - 2.4, atol=1e-9)
    assert load_pass(campaign, "p2").array.mounting == "ground-plate"
    # Only a method that models the ground's reflection may be the headline for raised
    # microphones (comparison methods that do not are skipped for those passes).
    edit_config(tiny_copy, lambda d: d["analysis"].update(method="clean-sc"))
    expect_error(tiny_copy, "does not model raised microphones", "clean-sc", "time-domain")
    edit_config(tiny_copy, lambda d: d["analysis"].pop("method"))
    edit_config(tiny_copy, lambda d: d["array"].update(ground={"surface": "hard"}))
    expect_error(tiny_copy, "a ground is given for microphones that are not raised")


def test_unknown_key_suggests_the_closest(tiny_copy):
    edit_config(tiny_copy, lambda d: d["analysis"].update(windw_s=0.2))
    expect_error(tiny_copy, "unknown key 'analysis.windw_s'", "did you mean 'window_s'?")


def test_unknown_key_in_a_pass(tiny_copy):
    edit_config(tiny_copy, lambda d: d["passes"]["p1"].update(trak="x.csv"))
    expect_error(tiny_copy, "passes.p1.trak", "did you mean 'track'?")


def test_out_of_range_value_names_the_path(tiny_copy):
    edit_config(tiny_copy, lambda d: d["passes"]["p1"]["atmosphere"].update(
        relative_humidity_pct=120))
    expect_error(tiny_copy, "passes.p1.atmosphere.relative_humidity_pct", "from 0 to 100", "120")


def test_wrong_type(tiny_copy):
    edit_config(tiny_copy, lambda d: d["analysis"].update(window_s="long"))
    expect_error(tiny_copy, "analysis.window_s", "expected a number", "'long'")


def test_missing_key(tiny_copy):
    edit_config(tiny_copy, lambda d: d["passes"]["p2"].pop("track"))
    expect_error(tiny_copy, "missing key 'passes.p2.track'")


def test_inverted_band_range(tiny_copy):
    edit_config(tiny_copy, lambda d: d["analysis"].update(band_min_hz=2000, band_max_hz=200))
    expect_error(tiny_copy, "band range inverted")


def test_yaml_syntax_error_has_line_number(tiny_copy):
    path = tiny_copy / "campaign.yaml"
    lines = path.read_text().splitlines()
    lines.insert(3, "  broken: [1, 2")
    path.write_text("\n".join(lines))
    expect_error(tiny_copy, "YAML syntax error", "line")


def test_missing_file(tiny_copy):
    (tiny_copy / "p1" / "track.csv").unlink()
    expect_error(tiny_copy, "track file not found", "track.csv")


def test_msl_heights_need_geoid(tiny_copy):
    edit_config(tiny_copy, lambda d: d["passes"]["p1"].update(track_height_datum="msl"))
    expect_error(tiny_copy, "geoid undulation")


def test_layout_wrong_columns(tiny_copy):
    df = pd.read_csv(tiny_copy / "layout.csv").rename(columns={"lat_deg": "latitude"})
    df.to_csv(tiny_copy / "layout.csv", index=False)
    expect_error(tiny_copy, "layout file has the wrong columns", "channel,lat_deg,lon_deg,height_m")


def test_layout_duplicate_channel(tiny_copy):
    df = pd.read_csv(tiny_copy / "layout.csv")
    df.loc[3, "channel"] = 2
    df.to_csv(tiny_copy / "layout.csv", index=False)
    expect_error(tiny_copy, "channel 2 appears more than once", "rows [3, 5]")


def test_layout_non_numeric(tiny_copy):
    df = pd.read_csv(tiny_copy / "layout.csv", dtype=str)
    df.loc[4, "lon_deg"] = "8.0O1"
    df.to_csv(tiny_copy / "layout.csv", index=False)
    expect_error(tiny_copy, "column 'lon_deg' is not a number", "row 6", "8.0O1")


def test_layout_collinear(tiny_copy):
    df = pd.read_csv(tiny_copy / "layout.csv")
    df["lat_deg"] = 47.0
    df["lon_deg"] = 8.0 + np.arange(len(df)) * 1e-5
    df.to_csv(tiny_copy / "layout.csv", index=False)
    expect_error(tiny_copy, "all microphones lie on one line")


def test_channel_count_mismatch(tiny_copy):
    df = pd.read_csv(tiny_copy / "layout.csv").iloc[:-2]
    df.to_csv(tiny_copy / "layout.csv", index=False)
    expect_error(tiny_copy, "layout and recording disagree", "14 microphone channels",
                 "16 channels in the recording", "extra_channels")


def test_calibration_negative(tiny_copy):
    df = pd.read_csv(tiny_copy / "p1" / "calibration.csv")
    df.loc[5, "pa_per_unit"] = -1.0
    df.to_csv(tiny_copy / "p1" / "calibration.csv", index=False)
    expect_error(tiny_copy, "calibration factor of channel 6 is not positive", "row 7")


def test_calibration_missing_channel(tiny_copy):
    df = pd.read_csv(tiny_copy / "p1" / "calibration.csv").iloc[1:]
    df.to_csv(tiny_copy / "p1" / "calibration.csv", index=False)
    expect_error(tiny_copy, "calibration is missing channels", "[1]")


def test_track_without_time_zone(tiny_copy):
    df = pd.read_csv(tiny_copy / "p1" / "track.csv", dtype=str)
    df.loc[7, "time_utc"] = df.loc[7, "time_utc"].rstrip("Z")
    df.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    text = expect_error(tiny_copy, "has no time zone", "row 9")
    assert "+02:00" in text


def test_track_time_with_a_year_out_of_range(tiny_copy):
    # Found by the fuzz test: a year cut to 0026 overflowed int64 nanoseconds with a traceback.
    df = pd.read_csv(tiny_copy / "p1" / "track.csv", dtype=str)
    df.loc[0, "time_utc"] = "0" + df.loc[0, "time_utc"][1:]
    df.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    expect_error(tiny_copy, "outside the years 1678 to 2261", "row 2")


def test_track_not_covering_the_recording(tiny_copy):
    edit_config(tiny_copy, lambda d: d["passes"]["p1"].update(
        recording_start_utc="2026-06-01T11:00:00.000Z"))
    expect_error(tiny_copy, "the track does not cover the recording", "GPS time")


def test_track_unsorted(tiny_copy):
    df = pd.read_csv(tiny_copy / "p1" / "track.csv", dtype=str)
    df.iloc[[10, 11]] = df.iloc[[11, 10]].to_numpy()
    df.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    expect_error(tiny_copy, "earlier than the row before")


def test_track_lat_lon_swapped(tiny_copy):
    df = pd.read_csv(tiny_copy / "p1" / "track.csv")
    df["lat_deg"], df["lon_deg"] = df["lon_deg"].copy(), df["lat_deg"].copy()
    df.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    expect_error(tiny_copy, "never comes within", "swapped")


def test_track_heights_below_array(tiny_copy):
    # A mean-sea-level height read as ellipsoidal moves Up by the geoid undulation (~47 m here).
    df = pd.read_csv(tiny_copy / "p1" / "track.csv")
    df["height_m"] -= 47.0
    df.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    expect_error(tiny_copy, "never above the array", "mean sea level")


def test_truncated_recording(tiny_copy):
    path = tiny_copy / "p1" / "recording.wav"
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - 10000])
    expect_error(tiny_copy, "recording is truncated", "frames on disk")


def test_not_audio(tiny_copy):
    (tiny_copy / "p1" / "recording.wav").write_text("this is not audio\n" * 50)
    expect_error(tiny_copy, "not a readable audio file")


def test_empty_track(tiny_copy):
    (tiny_copy / "p1" / "track.csv").write_text("")
    expect_error(tiny_copy, "track file is empty")


def test_read_span_reads_only_the_span(tiny_campaign_dir):
    info = recording_info(tiny_campaign_dir / "p1" / "recording.wav")
    full, _ = sf.read(str(info.path), dtype="float32", always_2d=True)
    part = read_span(info, 1000, 500, channels=[2, 5], block_frames=128)
    np.testing.assert_array_equal(part, full[1000:1500, [2, 5]].T)


def test_nan_in_recording(tmp_path):
    x = np.zeros((1000, 2), dtype=np.float32)
    x[400, 1] = np.nan
    sf.write(tmp_path / "r.wav", x, 8000, subtype="FLOAT")
    with pytest.raises(FlyoverInputError, match="NaN or Inf") as info:
        read_span(recording_info(tmp_path / "r.wav"), 0, 1000)
    assert "channel 2, frame 400" in info.value.message


def test_rf64_and_w64_headers_are_read(tmp_path):
    x = (np.random.default_rng(0).standard_normal((3000, 3)) * 0.1).astype(np.float32)
    for fmt in ("RF64", "W64"):
        p = tmp_path / f"r-{fmt}.wav"
        sf.write(p, x, 8000, subtype="PCM_24", format=fmt)
        assert recording_info(p).n_frames == 3000
        p.write_bytes(p.read_bytes()[:-900])
        with pytest.raises(FlyoverInputError, match="truncated"):
            recording_info(p)


@pytest.mark.parametrize("change, words", [
    (lambda s: s["array"].update(armz=4), ["unknown key 'array.armz'", "arms"]),
    (lambda s: s["array"].pop("arms"), ["missing key 'array.arms'"]),
])
def test_a_bad_scenario_file_is_worded_like_a_bad_campaign_file(tmp_path, change, words):
    # The simulator's scenario file goes through the same checked reader as the campaign file:
    # the key, what was expected, a suggestion; no jsonschema message.
    import copy

    import yaml
    from conftest import TINY_SCENARIO

    from flyover.sim.scenario_file import load_scenario
    s = copy.deepcopy(TINY_SCENARIO)
    change(s)
    (tmp_path / "scenario.yaml").write_text(yaml.safe_dump(s))
    with pytest.raises(FlyoverInputError) as info:
        load_scenario(tmp_path / "scenario.yaml")
    text = str(info.value)
    for w in words:
        assert w in text, text

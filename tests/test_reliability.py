"""Data-quality warnings, bounded reading, read-only inputs and the rest of the bad-input
catalogue."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import soundfile as sf
from conftest import edit_campaign as edit

from flyover.io.config import load_campaign
from flyover.io.readers import soundfile_recording as recording_io
from flyover.model.errors import FlyoverInputError
from flyover.pipeline import align, image
from flyover.pipeline.check import check_campaign


def damage_recording(path, change):
    data, fs = sf.read(str(path), dtype="float32", always_2d=True)
    change(data)
    sf.write(str(path), data, fs, subtype="FLOAT")


def test_dead_clipped_and_outlier_channels_are_flagged_and_left_out(tiny_copy):
    def change(x):
        x[:, 2] = 0.0                       # channel 3: dead
        x[::50, 4] = 1.0                    # channel 5: at full scale every 50th sample
        x[:, 6] *= 4.0                      # channel 7: +12 dB against its neighbours
    damage_recording(tiny_copy / "p1" / "recording.wav", change)
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    out = tiny_copy / "results" / "p1"
    summary = align.run(campaign, "p1", out)
    verdicts = {q["channel"]: q["verdict"] for q in summary["channel_quality"]}
    assert verdicts[3] == "dead" and verdicts[5] == "clipped" and verdicts[7] == "outlier"
    assert sum(v != "ok" for v in verdicts.values()) == 3
    assert summary["quality_excluded_channels"] == [3, 5, 7]
    assert summary["channels_used"] == 13
    # The imaging uses the reduced array (and so does its unit-source chain).
    image.run(campaign, "p1", out, threads=2, quiet=True)
    assert (out / "region_power.csv").exists()


def test_channel_recording_something_else_is_incoherent(tiny_copy):
    # Same RMS, other sound (a swapped or broken channel): only the low-band coherence with its
    # neighbours gives it away.
    rng = np.random.default_rng(4)

    def change(x):
        x[:, 8] = rng.standard_normal(len(x)).astype(np.float32) * np.std(x[:, 8])
    damage_recording(tiny_copy / "p1" / "recording.wav", change)
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    out = tiny_copy / "results" / "p1"
    summary = align.run(campaign, "p1", out)
    q = {q["channel"]: q for q in summary["channel_quality"]}
    assert q[9]["verdict"] == "incoherent"
    assert abs(q[9]["level_re_neighbours_db"]) < 6.0
    assert summary["quality_flagged_channels"] == [9]
    # Its neighbours lose a third of their coherence (channel 9 is one of their three), yet
    # stay clear of the threshold; the array as a whole stays coherent.
    assert np.median([v["neighbour_coherence"] for v in q.values()]) > 0.8


def test_config_can_keep_a_flagged_channel(tiny_copy):
    damage_recording(tiny_copy / "p1" / "recording.wav", lambda x: x.__setitem__(
        (slice(None), 6), x[:, 6] * 4.0))
    path = edit(tiny_copy, lambda d: d["passes"]["p1"].update(keep_channels=[7]))
    out = tiny_copy / "results" / "p1"
    summary = align.run(load_campaign(path), "p1", out)
    assert summary["quality_flagged_channels"] == [7]
    assert summary["quality_excluded_channels"] == []


def test_only_the_needed_span_is_read(tiny_copy, monkeypatch):
    # The imaging reads per window only the frames its sound spans: in total about the analysed
    # span (windows do not overlap here), never the whole file at once.
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    out = tiny_copy / "results" / "p1"
    align.run(campaign, "p1", out)
    calls = []
    original = recording_io.read_span

    def counting(info, start, n, *args, **kwargs):
        calls.append(n)
        return original(info, start, n, *args, **kwargs)

    monkeypatch.setattr(recording_io, "read_span", counting)
    image.run(campaign, "p1", out, threads=2, quiet=True)
    info = recording_io.recording_info(tiny_copy / "p1" / "recording.wav")
    windows = pd.read_csv(out / "windows.csv")
    analysed = (windows["status"] == "analysed").sum()
    assert len(calls) == analysed
    assert max(calls) < 0.2 * info.n_frames
    assert sum(calls) < 1.3 * analysed * 0.25 * info.sample_rate_hz


@pytest.mark.parametrize("change, fragments", [
    (lambda d: d["passes"]["p1"]["atmosphere"].update(temperature_c=300), ["temperature_c",
                                                                           "from -50 to 60"]),
    (lambda d: d["vehicle"]["grid"].update(spacing_m=-0.1), ["vehicle.grid.spacing_m"]),
    (lambda d: d["analysis"].update(reference_distance_m=0), ["reference_distance_m"]),
    (lambda d: d["vehicle"]["regions"].update(far={"x_m": [10, 11], "y_m": [0, 1]}),
     ["region 'far' lies outside the vehicle grid"]),
    (lambda d: d["passes"]["p1"].update(exclude_channels=[40]), ["excluded channels are not in"]),
    (lambda d: d["vehicle"]["regions"].update(thin={"x_m": [0.1, 0.2], "y_m": [0.1, 0.2]}),
     ["region 'thin' holds no grid point"]),
    (lambda d: d["passes"]["p1"].update(clock_offset_s="later"), ["clock_offset_s", "'auto'"]),
    (lambda d: d["array"].update(mounting="tripod"), ["array.mounting", "ground-plate"]),
])
def test_more_config_errors(tiny_copy, change, fragments):
    path = edit(tiny_copy, change)
    with pytest.raises(FlyoverInputError) as info:
        check_campaign(load_campaign(path))
    for frag in fragments:
        assert frag in info.value.message, info.value.message


def test_semicolon_separated_calibration(tiny_copy):
    # A spreadsheet export with ';' separators and decimal commas (common in Europe).
    df = pd.read_csv(tiny_copy / "p1" / "calibration.csv")
    (tiny_copy / "p1" / "calibration.csv").write_text(
        df.to_csv(sep=";", index=False).replace(".", ","))
    with pytest.raises(FlyoverInputError, match="comma-separated") as info:
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))
    assert "wrong columns" in info.value.message


def test_extra_channel_that_is_not_a_microphone(tiny_copy):
    # A timing track (PPS) recorded on channel 16: not in the layout, declared as extra.
    df = pd.read_csv(tiny_copy / "layout.csv")
    df[df["channel"] != 16].to_csv(tiny_copy / "layout.csv", index=False)
    with pytest.raises(FlyoverInputError, match="extra_channels"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))
    path = edit(tiny_copy, lambda d: d["array"].update(extra_channels=[16]))
    campaign = load_campaign(path)
    summary = check_campaign(campaign)
    assert summary[0]["channels_used"] == 15
    out = tiny_copy / "results" / "p1"
    align.run(campaign, "p1", out)
    image.run(campaign, "p1", out, threads=2, quiet=True)
    assert (out / "region_power.csv").exists()


def test_empty_layout(tiny_copy):
    (tiny_copy / "layout.csv").write_text("channel,lat_deg,lon_deg,height_m\n")
    with pytest.raises(FlyoverInputError, match="layout file has no data rows"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))


def test_layout_nan(tiny_copy):
    df = pd.read_csv(tiny_copy / "layout.csv", dtype=str)
    df.loc[2, "height_m"] = "NaN"
    df.to_csv(tiny_copy / "layout.csv", index=False)
    with pytest.raises(FlyoverInputError, match="row 4"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))


def test_coincident_microphones(tiny_copy):
    df = pd.read_csv(tiny_copy / "layout.csv", dtype=str)
    df.loc[5, ["lat_deg", "lon_deg", "height_m"]] = df.loc[4, ["lat_deg", "lon_deg", "height_m"]]
    df.to_csv(tiny_copy / "layout.csv", index=False)
    with pytest.raises(FlyoverInputError, match="channels 5 and 6 are at the same position"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))


def test_calibration_zero(tiny_copy):
    df = pd.read_csv(tiny_copy / "p2" / "calibration.csv")
    df.loc[0, "pa_per_unit"] = 0.0
    df.to_csv(tiny_copy / "p2" / "calibration.csv", index=False)
    with pytest.raises(FlyoverInputError, match="channel 1 is not positive"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))


def test_sample_rates_differ_between_passes(tiny_copy):
    path = tiny_copy / "p2" / "recording.wav"
    data, fs = sf.read(str(path), dtype="float32")
    sf.write(str(path), data, fs * 2, subtype="FLOAT")
    with pytest.raises(FlyoverInputError, match="sample rate") as info:
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))
    assert "p1" in info.value.message and "p2" in info.value.message


def test_track_duplicate_time_and_gap(tiny_copy):
    df = pd.read_csv(tiny_copy / "p1" / "track.csv", dtype=str)
    dup = pd.concat([df.iloc[:20], df.iloc[19:20], df.iloc[20:]], ignore_index=True)
    dup.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    with pytest.raises(FlyoverInputError, match="duplicate"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))
    gap = pd.concat([df.iloc[:20], df.iloc[40:]], ignore_index=True)
    gap.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    with pytest.raises(FlyoverInputError, match="gap of 2.10 s"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))


def test_track_heights_in_feet(tiny_copy):
    # A track exported in feet: 430 m ellipsoidal becomes 1411 "m", about 1000 m above the array.
    df = pd.read_csv(tiny_copy / "p1" / "track.csv")
    df["height_m"] *= 3.28084
    df.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    with pytest.raises(FlyoverInputError, match="feet"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))


def test_track_never_near_the_array(tiny_copy):
    df = pd.read_csv(tiny_copy / "p1" / "track.csv")
    df["lat_deg"] += 0.05  # 5.6 km north
    df.to_csv(tiny_copy / "p1" / "track.csv", index=False)
    with pytest.raises(FlyoverInputError, match="never comes near the array"):
        check_campaign(load_campaign(tiny_copy / "campaign.yaml"))


def test_grid_too_large_for_memory(tiny_copy):
    path = edit(tiny_copy, lambda d: d["vehicle"]["grid"].update(x_m=[-200, 200], y_m=[-200, 200],
                                                                 spacing_m=0.05))
    with pytest.raises(FlyoverInputError, match="too large") as info:
        check_campaign(load_campaign(path))
    assert "spacing_m" in info.value.message


def test_inputs_are_never_modified(tiny_copy):
    from flyover.io.digest import file_digest
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    before = {f: file_digest(f) for f in campaign.input_files()}
    out = tiny_copy / "results" / "p1"
    align.run(campaign, "p1", out)
    image.run(campaign, "p1", out, threads=2, quiet=True)
    assert {f: file_digest(f) for f in campaign.input_files()} == before
    assert json.loads((out / "alignment.json").read_text())["pass"] == "p1"


def test_simulated_campaign_with_moved_files_is_refused(tiny_copy):
    # A campaign with a 'scenario' names the simulator's files; another path is a clear error.
    from flyover.workflow.plan import CampaignPlan
    path = edit(tiny_copy, lambda d: d.update(scenario="scenario.yaml") or
                d["passes"]["p1"].update(track="elsewhere.csv"))
    with pytest.raises(FlyoverInputError, match="passes.p1.track"):
        CampaignPlan.load(path)

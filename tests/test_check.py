"""`flyover check` refuses what a run would trip over: one case per class of awkward input.

Every refusal goes through the command line here: exit 2, the file, key or row named, and no
traceback.
"""

from __future__ import annotations

import errno

import numpy as np
import pandas as pd
import pytest
import soundfile as sf
from conftest import edit_campaign

from flyover.cli import main


def refused(path, capsys, *fragments) -> str:
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    for fragment in fragments:
        assert fragment in err, err
    return err


def test_a_key_given_twice(tiny_copy, capsys):
    # A pass block pasted twice: YAML would silently keep the last one.
    path = tiny_copy / "campaign.yaml"
    text = path.read_text()
    block = text[text.index("  p2:"):text.index("scenario:") if "scenario:" in text else None]
    path.write_text(text.replace("  p2:", block.rstrip("\n") + "\n  p2:", 1))
    refused(path, capsys, "key 'p2' is given twice", "line")


def test_shared_settings_through_anchors_and_the_merge_key(tiny_copy):
    # YAML 1.1's merge key (yaml.org/type/merge.html): p2 takes p1's atmosphere through an
    # anchor and overrides its temperature beside the merge, which is not a repeated key.
    import yaml

    from flyover.io.config import load_campaign
    path = tiny_copy / "campaign.yaml"
    data = yaml.safe_load(path.read_text())
    humidity = data["passes"]["p1"]["atmosphere"]["relative_humidity_pct"]
    data["passes"]["p2"]["atmosphere"] = "MERGED"
    text = yaml.safe_dump(data, sort_keys=True)
    text = text.replace("\n    atmosphere:\n", "\n    atmosphere: &atm\n", 1)
    text = text.replace("    atmosphere: MERGED\n",
                        "    atmosphere:\n      <<: *atm\n      temperature_c: 21.5\n")
    assert "&atm" in text and "<<: *atm" in text
    path.write_text(text)
    p2 = load_campaign(path).passes["p2"].atmosphere
    assert p2.temperature_c == 21.5 and p2.relative_humidity_pct == humidity


def test_a_pass_named_by_a_number(tiny_copy, capsys):
    path = tiny_copy / "campaign.yaml"
    path.write_text(path.read_text().replace("  p2:", "  1:"))
    refused(path, capsys, "key '1' is read as a int", "put it in quotes: '1'")


def test_a_time_yaml_turns_into_a_date(tiny_copy, capsys):
    path = tiny_copy / "campaign.yaml"
    text = path.read_text()
    start = [line for line in text.splitlines() if "recording_start_utc" in line][0]
    path.write_text(text.replace(start, start.replace("'", "")))
    refused(path, capsys, "recording_start_utc", "YAML reads this value as a datetime")


def test_a_stray_microphone_and_a_layout_in_millimetres(tiny_copy, capsys):
    layout = pd.read_csv(tiny_copy / "layout.csv")
    stray = layout.copy()
    stray.loc[3, "lat_deg"] += 0.009  # about 1 km north
    stray.to_csv(tiny_copy / "layout.csv", index=False)
    refused(tiny_copy / "campaign.yaml", capsys, "beyond a ground array",
            f"channel {layout.channel[3]}", "stray")
    site = pd.DataFrame({"channel": layout.channel, "east_m": np.arange(len(layout)) * 250.0,
                         "north_m": (np.arange(len(layout)) % 4) * 300.0, "up_m": 0.0})
    site.to_csv(tiny_copy / "layout.csv", index=False)
    refused(tiny_copy / "campaign.yaml", capsys, "beyond a ground array", "millimetres")


@pytest.mark.parametrize("change, fragments", [
    (lambda d: d["analysis"].update(band_min_hz=1150, band_max_hz=1200),
     ["no one-third-octave band in the band range"]),
    (lambda d: d["analysis"].update(band_max_hz=5000), ["half the sample rate (4000 Hz)"]),
    (lambda d: d["analysis"].update(reference_distance_m=float("inf")),
     ["positive finite distance"]),
    (lambda d: d["analysis"].update(window_s=10.0, hop_s=10.0),
     ["window is longer than the recording"]),
    (lambda d: d["analysis"].update(window_polar_step_deg=10.0), ["exactly one of the two"]),
    (lambda d: d["analysis"].update(reference_flight={"adjustment": "helicoptre"}),
     ["unknown certification-style adjustment", "helicopter"]),
    (lambda d: d["analysis"].pop("hop_s"), ["exactly one of the two", "neither"]),
    (lambda d: d["vehicle"]["regions"].update(mid={"x_m": [0.0, 1.0], "y_m": [-0.5, 0.5]}),
     ["overlap", "count their sound twice"]),
    (lambda d: d["analysis"].update(comparisons=[["a", "b"]]),
     ["no pass is labelled 'b'", "analysis.comparisons[0]"]),
    (lambda d: d["analysis"].update(comparisons=[["a", "a"]]), ["a label compared with itself"]),
])
def test_set_up_that_does_not_fit_together(tiny_copy, capsys, change, fragments):
    refused(edit_campaign(tiny_copy, change), capsys, *fragments)


def test_nan_samples_and_a_silent_recording(tiny_copy, capsys):
    rec = tiny_copy / "p1" / "recording.wav"
    data, fs = sf.read(rec, dtype="float32")
    bad = data.copy()
    bad[12000, 5] = np.nan
    sf.write(rec, bad, fs, subtype="FLOAT")
    refused(tiny_copy / "campaign.yaml", capsys, "NaN or Inf", "channel 6, frame 12000")
    sf.write(rec, np.zeros_like(data), fs, subtype="FLOAT")
    refused(tiny_copy / "campaign.yaml", capsys, "holds only zeros", "recorder armed")


def test_a_track_that_never_moves(tiny_copy, capsys):
    track = pd.read_csv(tiny_copy / "p2" / "track.csv")
    for col in ("lat_deg", "lon_deg", "height_m"):
        track[col] = track[col].iloc[len(track) // 2]
    track.to_csv(tiny_copy / "p2" / "track.csv", index=False)
    refused(tiny_copy / "campaign.yaml", capsys, "the track never moves", "track.csv")


@pytest.mark.parametrize("output, fragment", [
    ("p1", "the output folder holds an input file"),
    (".", "the output folder holds an input file"),
    ("layout.csv", "the output folder is a file"),
    ("layout.csv/results", "the output folder lies below a file"),
])
def test_output_folders_that_cannot_work(tiny_copy, capsys, output, fragment):
    refused(edit_campaign(tiny_copy, lambda d: d.update(output=output)), capsys, fragment,
            "key output")
    assert not (tiny_copy / "results").exists()


def test_an_input_that_cannot_be_read(tiny_copy, capsys):
    (tiny_copy / "p1" / "calibration.csv").unlink()
    (tiny_copy / "p1" / "calibration.csv").mkdir()
    refused(tiny_copy / "campaign.yaml", capsys, "calibration", "p1/calibration.csv")


def test_full_disk_mid_run_gives_flyovers_message(tiny_copy, capsys, monkeypatch):
    # A write failing with ENOSPC inside a stage: flyover's message, the file, the room left.
    import flyover.io.results as results

    def full(path, text):
        raise OSError(errno.ENOSPC, "No space left on device", str(path))

    # Every JSON result (alignment.json first) is written through the package's one writer.
    monkeypatch.setattr(results, "write_text", full)
    assert main(["stage", "align", "--campaign", str(tiny_copy / "campaign.yaml"),
                 "--pass", "p1"]) == 1
    err = capsys.readouterr().err
    assert "alignment.json: could not be written or read: No space left on device" in err
    assert "MiB free; the pass's results need about" in err and "Traceback" not in err


def test_results_that_would_not_fit_on_the_disk(tiny_copy, capsys, monkeypatch):
    # Checked before anything is written: the estimate of the results against the free space.
    from collections import namedtuple

    from flyover.pipeline import check
    usage = namedtuple("usage", "total used free")
    monkeypatch.setattr(check.shutil, "disk_usage", lambda path: usage(10 ** 9, 10 ** 9, 2 ** 20))
    err = refused(tiny_copy / "campaign.yaml", capsys, "not enough free space for the results",
                  "found 1 MiB free")
    need = float(err.split("expected about ")[1].split(" MiB")[0])
    assert 2 < need < 50  # two tiny passes: maps, figures, tables and their share of the report


def test_warnings_for_bands_beyond_the_interpolation_and_mixed_labels(tiny_copy, capsys):
    # 8 kHz recording, cubic interpolation accurate to 0.135 fs = 1080 Hz; the 1000 Hz band's
    # upper edge (1122 Hz) is received higher still ahead of the vehicle: f / (1 - M cos theta).
    edit_campaign(tiny_copy, lambda d: d["analysis"].update(band_max_hz=1000))
    assert main(["check", str(tiny_copy / "campaign.yaml")]) == 0
    out = capsys.readouterr().out
    assert "warning: bands from 1000 Hz are received above the cubic interpolation's" in out
    # Passes of one label flown 30 m and 38 m up (each 12 % off their median), at one speed.
    from flyover.pipeline.check import _label_warnings
    from flyover.io.config import load_campaign
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    summaries = [{"pass": "p1", "height_above_array_m": 30.0, "speed_m_s": 20.0, "warnings": []},
                 {"pass": "p2", "height_above_array_m": 38.0, "speed_m_s": 20.3, "warnings": []}]
    _label_warnings(campaign, summaries)
    assert all(len(s["warnings"]) == 1 and "height" in s["warnings"][0] for s in summaries)
    assert "label 'a'" in summaries[0]["warnings"][0]


def test_a_track_that_stops_before_overhead(tiny_copy, capsys):
    # The GNSS log ends while the vehicle still approaches: its last point is the nearest, and
    # the closest distance and overhead time printed were the track's end (32.3 m for a true
    # 30 m). No 90 deg window can be formed, so check refuses the pass, unless the campaign
    # says it is meant to be partial.
    track = pd.read_csv(tiny_copy / "p1" / "track.csv")
    track.iloc[: int(len(track) * 0.4)].to_csv(tiny_copy / "p1" / "track.csv", index=False)
    refused(tiny_copy / "campaign.yaml", capsys, "pass p1 gives no 90 deg window",
            "still approaching", "track.csv", "passes.p1.partial: true")
    edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].update(partial=True))
    assert main(["check", str(tiny_copy / "campaign.yaml")]) == 0


def test_method_tunables_come_from_the_campaign(tiny_copy, capsys):
    # analysis.method_tuning reaches the imaging chain; an impossible loop gain is refused.
    from flyover.acoustics.bands import third_octave_bands
    from flyover.io.config import load_campaign
    from flyover.pipeline.context import load_pass
    from flyover.pipeline.image import image_chain_settings
    path = edit_campaign(tiny_copy, lambda d: d["analysis"].update(method_tuning={
        "functional_exponent": 16, "clean_loop_gain": 0.1, "clean_max_sources": 50}))
    campaign = load_campaign(path)
    settings = image_chain_settings(campaign, load_pass(campaign, "p1"),
                                    third_octave_bands(200, 800))
    tuning = settings.tuning
    assert (tuning.functional_exponent, tuning.clean_loop_gain,
            tuning.clean_max_sources) == (16, 0.1, 50)
    edit_campaign(tiny_copy, lambda d: d["analysis"].update(method_tuning={
        "clean_loop_gain": 0.0}))
    assert main(["check", str(path)]) == 2
    assert "clean_loop_gain" in capsys.readouterr().err


def test_region_grid_points_counted_on_the_axes():
    # The region checks count grid points from the axes (a 400 m grid at 5 cm would otherwise
    # build 64 million points before refusing itself); naive reference: the points themselves.
    from flyover.geometry.vehicle import Region, VehicleGrid
    grid = VehicleGrid((-2.0, 2.0), (-1.2, 1.2), 0.1)
    points = grid.points_m()
    for region in (Region("a", (0.5, 1.9), (-0.7, 0.7)), Region("b", (-0.05, 0.05), (0.3, 0.3)),
                   Region("c", (0.52, 0.58), (0.0, 1.0)), Region("d", (-2.0, 2.0), (-1.2, 1.2))):
        mx, my = grid.axis_masks(region)
        assert mx.sum() * my.sum() == region.contains(points).sum(), region.name

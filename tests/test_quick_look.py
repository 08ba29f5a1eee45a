"""The quick look after a pass: the checks that need no imaging, the acoustic track check and a
coarse map near overhead, written apart from the signed results."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import soundfile as sf
from conftest import edit_campaign

from flyover.acoustics.bands import a_weighting_db, third_octave_bands
from flyover.io.config import load_campaign
from flyover.workflow.quick_look import MAP_FIGURE, SUMMARY, coarse_grid, quick_look


def test_a_quick_look_gives_the_levels_near_overhead_apart_from_the_results(tiny_copy):
    # The tiny pass p1 flies straight and level over the array: accepted, nothing to fly
    # again. The total of both regions near overhead, A-weighted over the bands it gives,
    # against the simulator's truth (both sources' band powers summed, by hand) within 1.5 dB:
    # one 0.25 s window of noise scatters 1-2 dB per band (1 / sqrt(B T)), less over bands.
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    folder = tiny_copy / "results" / "quick-look" / "p1"
    look = quick_look(campaign, "p1", folder)
    assert look["quick_look"] and look["status"] == "accepted" and not look["fly_again"]
    assert (folder / MAP_FIGURE).stat().st_size > 10_000
    assert json.loads((folder / SUMMARY).read_text())["status"] == "accepted"
    assert not (tiny_copy / "results" / "p1").exists()     # the signed results are untouched
    levels = pd.DataFrame(look["levels"])
    total = levels[(levels["region"] == "total") & levels["valid"]]
    truth = pd.read_csv(tiny_copy / "truth.csv")
    truth = truth[truth["pass"] == "p1"].groupby("band_hz")["level_1m_db"].apply(
        lambda s: 10 * np.log10(np.sum(10 ** (s / 10))))
    bands = third_octave_bands(200, 800)
    a = dict(zip(bands.nominal_hz, a_weighting_db(bands.center_hz)))
    given = total["band_hz"].to_numpy()
    expected = 10 * np.log10(np.sum(10 ** ((truth.loc[given].to_numpy()
                                             + [a[b] for b in given]) / 10)))
    assert len(given) >= 5
    assert abs(look["overall"]["total"]["a_weighted_1m_db"] - expected) < 1.5
    assert look["seconds"] < 60


def test_a_recording_still_being_written_is_read_as_far_as_it_goes(tiny_copy):
    # The recorder is still writing: the file holds the pass's first 1.8 s of 3. The quick look
    # reads what is there, says the recording ends before the pass's span, and counts the
    # windows recorded so far.
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    spec = campaign.passes["p1"]
    data, fs = sf.read(spec.recording_files[0], dtype="float32")
    span = ["2026-06-01T10:00:00.000Z", "2026-06-01T10:00:03.000Z"]
    live = tiny_copy / "p1" / "live.wav"
    with sf.SoundFile(live, "w", int(fs), data.shape[1], subtype="FLOAT") as writer:
        writer.write(data[: int(1.8 * fs)])
        writer.flush()
        campaign = load_campaign(edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].update(
            recording="p1/live.wav", span_utc=span)))
        look = quick_look(campaign, "p1", tiny_copy / "look")
    texts = [f["text"] for f in look["findings"]]
    assert any("still being written" in t for t in texts)
    assert 0 < look["windows_recorded"] < look["windows_planned"]
    assert look["recording_end_utc"].startswith("2026-06-01T10:00:01.8")


def test_a_pass_known_to_be_flown_badly_is_flown_again(tiny_copy):
    # The finder's verdict that a flyover was not flown as a pass (here: turning) is a
    # rejection whatever the recording shows: the quick look says to fly again.
    from flyover.model.signoff import REJECT, Finding
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    turning = Finding("flown as a pass", "no", "straight, level and steady", "", REJECT,
                      "not flown as a pass: turning")
    look = quick_look(campaign, "p1", tiny_copy / "look", also=[turning])
    assert look["status"] == "rejected" and look["fly_again"]
    assert look["findings"][0]["text"] == "not flown as a pass: turning"


def test_the_coarse_grid_keeps_the_extent_and_thins_the_points():
    from flyover.geometry.vehicle import VehicleGrid
    grid = VehicleGrid((-3.0, 3.0), (-2.4, 2.4), 0.1)
    coarse = coarse_grid(grid, max_points=400)
    assert np.prod(coarse.shape) <= 400 < np.prod(VehicleGrid(
        grid.x_m, grid.y_m, coarse.spacing_m - grid.spacing_m).shape)
    assert coarse.x_axis_m[0] == grid.x_m[0] and coarse.y_axis_m[0] == grid.y_m[0]

"""The acoustic check of a track on simulated passes: the true track is in focus, a track one
metre high or with its heights in feet is found out and flags the pass."""

from __future__ import annotations

import copy
import shutil

import numpy as np
import pandas as pd
import pytest
import yaml
from conftest import TINY_SCENARIO

from flyover.acoustics.bands import third_octave_bands
from flyover.geometry.windows import plan_windows
from flyover.io.config import load_campaign
from flyover.campaign import SignoffLimits
from flyover.pipeline._resources import chain_settings
from flyover.pipeline.context import load_pass
from flyover.pipeline.signoff import track_findings
from flyover.pipeline.trackcheck import CHECK_POLAR_OFFSET_DEG
from flyover.sync.track_check import scan_track_offset

FEET_PER_M = 1 / 0.3048      # the international foot (exact)


@pytest.fixture(scope="module")
def pass_20m(tmp_path_factory):
    """A 15 m/s pass 20 m over a 36-microphone, 10 m spiral at 16 kHz (2 sources, 1 m apart)."""
    from flyover.sim.demo import write_campaign
    folder = tmp_path_factory.mktemp("trackcheck")
    s = copy.deepcopy(TINY_SCENARIO)
    s["array"] = {"arms": 6, "per_arm": 6, "r_min_m": 0.5, "r_max_m": 5.0,
                  "mounting": "ground-plate"}
    s["recording"]["sample_rate_hz"] = 16000
    for source in s["sources"]:
        source["broadband"]["max_hz"] = 6000
    s["passes"] = {"p1": dict(s["passes"]["p1"], height_m=20.0, duration_s=4.0,
                              speed_m_s=15.0)}
    s["campaign"]["analysis"].update(band_min_hz=400, band_max_hz=4000)
    (folder / "scenario.yaml").write_text(yaml.safe_dump(s))
    write_campaign(folder / "scenario.yaml", folder, progress=lambda *_: None)
    return folder


def height_offset(folder, tmp_path, revise, axis="height"):
    """The check's offset along an axis for the pass with its track revised by ``revise``."""
    work = tmp_path / "campaign"
    shutil.copytree(folder, work)
    track = pd.read_csv(work / "p1" / "track.csv")
    revise(track)
    track.to_csv(work / "p1" / "track.csv", index=False)
    campaign = load_campaign(work / "campaign.yaml")
    inputs = load_pass(campaign, "p1")
    an = campaign.analysis
    windows = plan_windows(inputs.track, inputs.layout.center_enu_m, inputs.recording_span_s,
                           an.window_s, an.window_s, inputs.sample_rate_hz,
                           max_polar_offset_deg=CHECK_POLAR_OFFSET_DEG)
    pick = [windows[int(round(k))] for k in np.linspace(0, len(windows) - 1, 5)]
    settings = chain_settings(inputs, third_octave_bands(400, 4000), "cubic")
    reach = max(3.0, 0.8 * float(inputs.track.position(pick[2].center_s)[2]))
    return scan_track_offset(lambda first, n: inputs.read_pressure_pa(first, n, pad=True),
                             inputs.track, pick, campaign.regions["front"].center_m,
                             inputs.layout.enu_m, inputs.atmosphere, inputs.clock, settings,
                             axis=axis, reach_m=reach if axis == "height" else 3.0)


def flags(result) -> list:
    """The sign-off's findings for one axis's result (the front region is 1 m x 1 m)."""
    check = {"anchor": "centre of region 'front'",
             "region_half_extent_m": {"height": 0.0, "along-track": 0.5, "lateral": 0.5},
             "axes": {result.axis: {"offset_m": result.offset_m,
                                    "uncertainty_m": result.uncertainty_m,
                                    "at_edge": result.at_edge, "decided": result.decided,
                                    "peak_focus": result.peak_focus}}}
    return track_findings(check, SignoffLimits().track_offset_max_m)


def test_the_true_track_is_in_focus(pass_20m, tmp_path):
    # Simulated truth: the sources sit on the track (offset 0). Seen on the way: 1 mm in
    # height, 2 mm laterally, with resolutions of 0.24 m and 0.06 m.
    r = height_offset(pass_20m, tmp_path, lambda t: None)
    assert r.decided and abs(r.offset_m) < 0.1 and r.uncertainty_m < 0.5
    assert flags(r) == []
    lateral = height_offset(pass_20m, tmp_path / "lat", lambda t: None, axis="lateral")
    assert lateral.decided and abs(lateral.offset_m) < 0.1 and flags(lateral) == []


def test_a_track_one_metre_high_is_flagged(pass_20m, tmp_path):
    def up(track):
        track["height_m"] += 1.0
    r = height_offset(pass_20m, tmp_path, up)
    assert r.offset_m == pytest.approx(-1.0, abs=0.15)
    assert [f.rule for f in flags(r)] == ["track height against the sound"]


def test_track_heights_in_feet_are_flagged(pass_20m, tmp_path):
    # Ellipsoidal heights exported in feet, the site at 400 m: every height above the site is
    # 3.28 times too high, and the origin moves with it; only the height above the array
    # matters to the check: 20 m read as 65.6 m.
    def feet(track):
        track["height_m"] = 400.0 + (track["height_m"] - 400.0) * FEET_PER_M
    r = height_offset(pass_20m, tmp_path, feet)
    assert r.decided and r.offset_m == pytest.approx(20.0 - 20.0 * FEET_PER_M, abs=1.5)
    assert flags(r) and "check the track's heights" in flags(r)[0].text


def test_block_reads_equal_direct_reads_and_read_each_stretch_once(pass_20m, monkeypatch):
    # The scan's reader serves overlapping spans from wider blocks: every value as a direct
    # padded read gives it (inside, across both ends of the recording, wholly outside), and
    # the spans of one stretch take one read of the files.
    campaign = load_campaign(pass_20m / "campaign.yaml")
    inputs = load_pass(campaign, "p1")
    n_mics, total = len(inputs.layout.channel), inputs.recorders[0].recording.n_frames
    rng = np.random.default_rng(2)
    direct = type(inputs).read_pressure_pa
    calls = []
    monkeypatch.setattr(type(inputs), "read_pressure_pa",
                        lambda self, *a, **k: calls.append(a[1]) or direct(self, *a, **k))
    read = inputs.block_reader(800)
    starts = [20000, 20000 + 300, 20000 - 500, -300, total - 200, total + 5000]
    for start in starts + list(rng.integers(19500, 20500, 20)):
        first = np.full(n_mics, int(start))
        np.testing.assert_array_equal(read(first, 1000), direct(inputs, first, 1000, pad=True))
    assert len(calls) == 4          # the stretch near 20000, the two ends, and beyond the end


def test_forward_block_reads_equal_direct_reads_and_drop_passed_blocks(pass_20m, monkeypatch):
    # A sweep along the pass (the listen step): spans that move on by a hop, microphones a few
    # frames apart; reads reach ahead, and blocks the sweep has passed are dropped.
    campaign = load_campaign(pass_20m / "campaign.yaml")
    inputs = load_pass(campaign, "p1")
    n_mics = len(inputs.layout.channel)
    direct = type(inputs).read_pressure_pa
    calls = []
    monkeypatch.setattr(type(inputs), "read_pressure_pa",
                        lambda self, *a, **k: calls.append(a[1]) or direct(self, *a, **k))
    read = inputs.block_reader(100, ahead_frames=4000, forward=True)
    spread = np.arange(n_mics) % 7 * 10                      # up to 60 frames between mics
    for start in range(10000, 30000, 512):
        first = start + spread
        np.testing.assert_array_equal(read(first, 1024), direct(inputs, first, 1024, pad=True))
    # Each read serves the spans that start within 4000 frames of its first: eight hops of
    # 512, so the 40 spans take 5 reads.
    assert len(calls) == 5
    # Going back re-reads (dropped blocks are not kept) and still gives direct reads' values.
    np.testing.assert_array_equal(read(10000 + spread, 1024),
                                  direct(inputs, 10000 + spread, 1024, pad=True))
    assert len(calls) == 6

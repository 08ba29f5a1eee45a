"""The passes of a flight day found in one continuous recording and a whole-flight log."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import soundfile as sf
import yaml
from conftest import edit_campaign

from flyover.geometry.flight_passes import (FoundPass, PassTolerances, find_flyovers,
                                            proposed_labels)
from flyover.sim.flight_day import racetrack_day

START_NS = int(pd.Timestamp("2026-06-01T11:00:00Z").value)
LEGS = [(30.0, 10.0), (30.0, 10.0), (30.0, 10.0), (45.0, 12.0), (45.0, 12.0), (45.0, 12.0)]


def write_track_csv(path, time_s, enu_m):
    """A flight log in flyover's track CSV (site frame), its times from START_NS."""
    utc = START_NS + np.round(np.asarray(time_s) * 1e9).astype(np.int64)
    pd.DataFrame({"time_utc": [str(np.datetime64(int(v), "ns")) + "Z" for v in utc],
                  "east_m": enu_m[:, 0], "north_m": enu_m[:, 1], "up_m": enu_m[:, 2]}).to_csv(
        path, index=False)


def write_flight_day(folder, *, recording_delay_s: float = 0.0):
    """Six passes back and forth at two heights and speeds, then a circle whose path crosses
    over the array and a hover over it, logged at 10 Hz with 3 cm of noise; the recorder runs
    through the whole flight (or starts ``recording_delay_s`` late). The flight goes into the
    campaign file's flights; its passes are not written."""
    from flyover.io.config import load_campaign
    from flyover.pipeline.context import load_layout
    centre = load_layout(load_campaign(folder / "campaign.yaml"), "p1").center_enu_m
    time_s, enu, flown = racetrack_day(LEGS, circle_overhead=(45.0, 30.0, 8.0),
                                       hover_overhead_s=20.0, noise_m=0.03, seed=3)
    write_track_csv(folder / "flight.csv", time_s, enu + centre)
    # The finder reads only the recording's header: a long, quiet file at a low rate.
    rate = 1000
    frames = int((time_s[-1] + 10.0 - recording_delay_s) * rate)
    sf.write(folder / "flight.wav", np.zeros((frames, 16), np.int16), rate, subtype="PCM_16")
    start = str(np.datetime64(START_NS - 5_000_000_000 + int(recording_delay_s * 1e9), "ns"))

    def change(d):
        d["flights"] = {"morning": {
            "recording": "flight.wav", "recording_start_utc": start + "Z",
            "calibration": d["passes"]["p1"]["calibration"], "track": "flight.csv",
            "track_position_noise_m": 0.03, "clock_offset_s": 0.0,
            "atmosphere": d["passes"]["p1"]["atmosphere"]}}
        d["analysis"]["max_polar_offset_deg"] = 70.0
    edit_campaign(folder, change)
    return flown


def test_every_pass_of_the_day_found_as_flown(tiny_copy):
    # The flight as planned: three eastbound and three westbound legs, 8 m beside the array
    # (it on their left), at 30 m and 10 m/s, then 45 m and 12 m/s. Every leg is found with
    # its direction, height, speed and offset; the circle over the array is listed with the
    # reason it is not a pass, the turns and the hover are not passes.
    from flyover.pipeline.find_passes import find_day
    flown = write_flight_day(tiny_copy)
    campaign, flyovers, labels = find_day(tiny_copy / "campaign.yaml")
    passes = [f for f in flyovers if not f.problems]
    assert len(passes) == len(flown) == 6
    for f, leg in zip(passes, flown):
        g = f.found
        assert (f.utc_ns(g.overhead_s) - START_NS) * 1e-9 == pytest.approx(leg.overhead_s,
                                                                           abs=0.2)
        assert abs((g.course_deg - leg.course_deg + 180) % 360 - 180) < 1.0
        assert g.height_m == pytest.approx(leg.height_m, abs=0.1)
        assert g.speed_m_s == pytest.approx(leg.speed_m_s, rel=0.01)
        assert g.offset_m == pytest.approx(leg.offset_m, abs=0.1)
        assert f.covered
    # Labels as flown: one per height and speed.
    assert [lab for f, lab in zip(flyovers, labels) if not f.problems] == (
        ["30m-10ms"] * 3 + ["45m-12ms"] * 3)
    others = [f for f in flyovers if f.problems]
    assert others and all(any(p.startswith("turning") for p in f.problems) for f in others)
    # Not flown as a pass: what the quick look of it is told, as rejections (fly again).
    for f in others:
        told = f.flight_findings()
        assert told and all(x.outcome == "reject" for x in told)
        assert any("turning" in x.text for x in told)
    assert all(f.flight_findings() == [] for f in passes)
    assert all(f.found.overhead_s > passes[-1].found.end_s for f in others)
    # The spans: apart, and each holding its stretch from first emission to last reception.
    spans = np.array([f.span_utc_ns for f in passes])
    assert (spans[1:, 0] >= spans[:-1, 1]).all()
    for f in passes:
        assert f.span_utc_ns[0] < f.utc_ns(f.found.start_s)
        assert f.span_utc_ns[1] > f.utc_ns(f.found.end_s) + 0.1e9


def test_found_passes_pasted_into_the_campaign_load_and_cut_the_recording(tiny_copy, capsys):
    # The command's entries, pasted under 'passes', give a campaign whose passes each read
    # only their span of the one recording and log.
    from flyover.cli import main
    from flyover.io.config import load_campaign
    from flyover.pipeline.context import load_pass
    write_flight_day(tiny_copy)
    assert main(["find-passes", str(tiny_copy / "campaign.yaml"), "--out",
                 str(tiny_copy / "found")]) == 0
    out = capsys.readouterr().out
    assert "6 passes of" in out and "turning" in out
    entries = yaml.safe_load((tiny_copy / "found" / "found-passes.yaml").read_text())["passes"]
    assert list(entries) == [f"morning-{k:02d}" for k in range(1, 7)]
    table = pd.read_csv(tiny_copy / "found" / "found-passes.csv")
    assert table["is_pass"].sum() == 6 and (table.loc[~table["is_pass"], "reasons"] != "").all()
    campaign = load_campaign(edit_campaign(tiny_copy, lambda d: d.update(passes=entries)))
    assert {p.label for p in campaign.passes.values()} == {"30m-10ms", "45m-12ms"}
    inputs = load_pass(campaign, "morning-04")
    lo, hi = inputs.clock.utc_ns(np.array(inputs.recording_span_s))
    assert (lo, hi) == tuple(campaign.passes["morning-04"].span_utc_ns)
    assert inputs.spec.recording_files == campaign.passes["morning-01"].recording_files


def test_a_pass_the_recording_misses_is_listed_with_the_reason(tiny_copy):
    # The recorder started 30 s into the flight: the first pass's stretch is not recorded.
    from flyover.pipeline.find_passes import find_day
    write_flight_day(tiny_copy, recording_delay_s=30.0)
    _, flyovers, labels = find_day(tiny_copy / "campaign.yaml")
    first = flyovers[0]
    assert not first.covered and labels[0] == ""
    assert "recording does not hold" in "; ".join(first.problems)
    assert sum(not f.problems for f in flyovers) == 5


def test_climbing_or_slowing_legs_are_not_passes():
    # A leg that climbs at 6 % (about 10 m across the analysed angles, 90 +- 70 deg at 30 m),
    # or slows by a third, is listed with its reason; a straight, level, steady one is a pass.
    t = np.arange(0.0, 60.0, 0.1)
    x = -300.0 + 10.0 * t
    level = np.stack([x, np.zeros_like(t), np.full_like(t, 30.0)], 1)
    climbing = level + np.stack([0 * t, 0 * t, 0.06 * x], 1)
    slowing = np.stack([-300.0 + 12.0 * t - 0.08 * t ** 2, 0 * t, 0 * t + 30], 1)
    tol = PassTolerances(max_polar_offset_deg=70.0)
    (ok,) = find_flyovers(t, level, np.zeros(3), tol)
    assert ok.is_pass and ok.course_deg == pytest.approx(90.0, abs=0.01)
    (up,) = find_flyovers(t, climbing, np.zeros(3), tol)
    assert any(p.startswith("climbing") for p in up.problems)
    (slow,) = find_flyovers(t, slowing, np.zeros(3), tol)
    assert any(p.startswith("speed varies") for p in slow.problems)


def test_labels_cluster_height_speed_and_rotor_speed():
    # Worked by hand: heights 30, 30.5, 45 m, speeds 10, 10.2, 12 m/s, and at 30 m two rotor
    # speeds 5000 and 5600 rpm (12 % apart: two settings).
    def found(h, v):
        return FoundPass(0.0, -1.0, 1.0, 90.0, h, v, 0.0)
    passes = [found(30.0, 10.0), found(30.5, 10.2), found(45.0, 12.0), found(30.2, 10.1)]
    assert proposed_labels(passes, height_m=3.0, speed_pct=10.0) == [
        "30m-10ms", "30m-10ms", "45m-12ms", "30m-10ms"]
    assert proposed_labels(passes, height_m=3.0, speed_pct=10.0,
                           rpm=[5000.0, 5600.0, 6000.0, 5050.0]) == [
        "30m-10ms-5025rpm", "30m-10ms-5600rpm", "45m-12ms", "30m-10ms-5025rpm"]


@pytest.mark.slow
def test_a_flight_day_runs_from_one_recording_and_log(tiny_copy):
    # Four legs back and forth at 20 and 30 m, heard by the tiny array in one continuous
    # recording and logged in one track: the passes found, pasted into the campaign, run
    # through the workflow each from its span; a changed span re-runs that pass alone.
    from conftest import planned, snakemake

    from flyover.io.config import load_campaign
    from flyover.pipeline.context import load_layout
    from flyover.pipeline.find_passes import find_day, pass_entries_yaml
    from flyover.sim.flight_day import write_flight_recording
    from flyover.sim.scenario_file import load_scenario
    scenario, _, _ = load_scenario(tiny_copy / "scenario.yaml")
    campaign = load_campaign(tiny_copy / "campaign.yaml")
    centre = load_layout(campaign, "p1").center_enu_m
    legs = [(20.0, 10.0), (20.0, 10.0), (30.0, 12.0), (30.0, 12.0)]
    time_s, enu, flown = racetrack_day(legs, half_length_m=190.0)
    enu = enu + centre
    atmosphere = campaign.passes["p1"].atmosphere
    write_flight_recording(tiny_copy / "flight.wav", scenario, time_s, enu, atmosphere,
                           start_s=1.0, duration_s=time_s[-1] - 2.0)
    write_track_csv(tiny_copy / "flight.csv", time_s, enu)

    def flight(d):
        d["flights"] = {"morning": {
            "recording": "flight.wav", "track": "flight.csv", "clock_offset_s": 0.0,
            "recording_start_utc": str(np.datetime64(START_NS + 1_000_000_000, "ns")) + "Z",
            "calibration": d["passes"]["p1"]["calibration"], "track_position_noise_m": 0.02,
            "atmosphere": d["passes"]["p1"]["atmosphere"]}}
        d["analysis"].pop("hop_s")
        # The angles down to 10 dB under the peak, as the single-event metrics need them.
        d["analysis"].update(window_polar_step_deg=13.0, max_polar_offset_deg=78.0)
    edit_campaign(tiny_copy, flight)
    _, flyovers, labels = find_day(tiny_copy / "campaign.yaml")
    assert [f.problems for f in flyovers] == [()] * 4
    entries = yaml.safe_load(pass_entries_yaml(flyovers, labels, source="test"))["passes"]
    edit_campaign(tiny_copy, lambda d: d.update(passes=entries))
    res = snakemake("--configfile", str(tiny_copy / "campaign.yaml"), cwd=tiny_copy)
    assert res.returncode == 0, res.stderr[-3000:]
    # Each pass was analysed over its own span, at the height and speed it was flown.
    signed = pd.read_csv(tiny_copy / "results" / "signoff.csv").set_index("pass")
    for name, leg in zip(entries, flown):
        assert signed.loc[name, "height_m"] == pytest.approx(leg.height_m, abs=0.5)
        assert signed.loc[name, "speed_m_s"] == pytest.approx(leg.speed_m_s, rel=0.02)
        windows = pd.read_csv(tiny_copy / "results" / name / "windows.csv")
        assert (windows["status"] == "analysed").sum() >= 5
    # One span moved by a tenth of a second: that pass re-runs, no other.
    first = next(iter(entries))
    moved = [str(np.datetime64(pd.Timestamp(v).value + 100_000_000, "ns")) + "Z"
             for v in entries[first]["span_utc"]]
    edit_campaign(tiny_copy, lambda d: d["passes"][first].update(span_utc=moved))
    rerun = {p for _, p in planned(tiny_copy) if p}
    assert rerun == {first}
    # On the field: the quick look of the flight's newest flyover, from the recording and log
    # alone, says what the full sign-off of that pass says.
    from flyover.cli import main
    assert main(["quick-look", str(tiny_copy / "campaign.yaml"), "--flight", "morning",
                 "--out", str(tiny_copy / "look")]) == 0
    look = yaml.safe_load((tiny_copy / "look" / "quick-look.json").read_text())
    assert look["status"] == signed.loc[list(entries)[-1], "status"]
    assert look["label"] == entries[list(entries)[-1]]["label"] and not look["fly_again"]

"""The sign-off of a pass: each rule against a pass that breaks it, and the status it gives."""

from __future__ import annotations

import numpy as np
import pandas as pd

from flyover.campaign import SignoffLimits, WeatherLimits
from flyover.model.signoff import ACCEPTED, FLAGGED, REJECTED, status_of
from flyover.model.signoff import label_findings
from flyover.pipeline.signoff import pass_findings


def facts(**changes) -> dict:
    """A clean pass: calm air, every window analysed (one at 90 deg), timing channels to 5 us,
    complete metrics; ``changes`` replace alignment keys or whole tables."""
    alignment = {"atmosphere": {"wind_speed_m_s": 1.0, "wind_from_deg": 0.0},
                 "weather": None, "course_deg": 0.0, "reaches_overhead": True,
                 "microphones": 48, "quality_excluded_channels": [],
                 "clock_offset_uncertainty_s": 5e-6}
    windows = pd.DataFrame({"status": ["analysed"] * 5,
                            "polar_angle_deg": [70.0, 80.0, 90.0, 100.0, 110.0]})
    metrics = pd.DataFrame({"ten_db_down_complete": [True], "lasmax_db": [70.0],
                            "lae_db": [75.0]})
    reconstructed = pd.DataFrame({"route": ["reference flight"], "component": ["total"],
                                  "complete": [True]})
    out = {"alignment": alignment, "windows": windows, "metrics": metrics,
           "reconstructed": reconstructed}
    for key, value in changes.items():
        if key in out:
            out[key] = value
        else:
            alignment[key] = value
    return out


def judged(partial: bool = False, **changes):
    found = pass_findings(facts(**changes), limits=SignoffLimits(),
                          weather_limits=WeatherLimits(), clock_given_s=1e-3, partial=partial)
    return status_of(found), found


def test_a_clean_pass_is_accepted():
    assert judged() == (ACCEPTED, [])


def test_crosswind_over_the_limit_flags_the_pass():
    # 7 kt mean crosswind (3.6 m/s, common certification practice, from memory): 5 m/s from
    # the east across a pass flown north is over it; the same wind along the track is not.
    status, found = judged(atmosphere={"wind_speed_m_s": 5.0, "wind_from_deg": 90.0})
    assert status == FLAGGED and [f.rule for f in found] == ["mean crosswind"]
    assert found[0].measured == 5.0 and found[0].limit == 3.6
    assert judged(atmosphere={"wind_speed_m_s": 5.0, "wind_from_deg": 180.0})[0] == ACCEPTED


def test_a_pass_without_its_90_deg_window_is_rejected_unless_partial():
    early = pd.DataFrame({"status": ["analysed"] * 3, "polar_angle_deg": [40.0, 50.0, 60.0]})
    status, found = judged(windows=early)
    assert status == REJECTED and found[0].rule == "90 deg window"
    assert judged(reaches_overhead=False)[0] == REJECTED
    assert judged(partial=True, windows=early)[0] == FLAGGED


def test_skipped_windows_left_out_channels_clock_and_incomplete_metrics_flag():
    half = pd.DataFrame({"status": ["analysed", "skipped"] * 3,
                         "polar_angle_deg": [90.0] * 6})
    cases = {"windows skipped": dict(windows=half),
             "channels left out": dict(quality_excluded_channels=list(range(6))),
             "clock uncertainty": dict(clock_offset_uncertainty_s=0.004),
             "measured single-event metrics": dict(metrics=pd.DataFrame(
                 {"ten_db_down_complete": [False], "lae_shortfall_db": [1.26]})),
             "reference-flight metrics": dict(reconstructed=pd.DataFrame(
                 {"route": ["reference flight"], "component": ["total"],
                  "complete": [False], "lae_shortfall_db": [np.inf]}))}
    for rule, change in cases.items():
        status, found = judged(**change)
        assert status == FLAGGED and [f.rule for f in found] == [rule], rule
    # A cut-short LAE says by about how much, or that it cannot say.
    _, (short,) = judged(**cases["measured single-event metrics"])
    assert short.measured == 1.3 and "about 1.3 dB short" in short.text
    _, (unknown,) = judged(**cases["reference-flight metrics"])
    assert "cannot be estimated" in unknown.text
    # A clock given by hand is held to its stated uncertainty (1 ms here: at the limit).
    del_clock = facts()
    del del_clock["alignment"]["clock_offset_uncertainty_s"]
    assert status_of(pass_findings(del_clock, limits=SignoffLimits(),
                                   weather_limits=WeatherLimits(), clock_given_s=1e-3,
                                   partial=False)) == ACCEPTED


def test_height_off_its_label_flags_even_heights_in_feet():
    # Three passes of one label at 30 m, one logged in feet (98.4 m): only it is flagged.
    heights = {"a": 30.0, "b": 30.4, "c": 98.4}
    speeds = {"a": 20.0, "b": 20.1, "c": 20.0}
    found = label_findings(heights, speeds, dict.fromkeys(heights, "cruise"), SignoffLimits())
    assert [f.rule for f in found["c"]] == ["height against the label"]
    assert found["a"] == [] and found["b"] == []


def test_an_undecided_track_check_says_so_and_flags():
    # No source at the anchor (best focus 0.05, under the 0.2 a true anchor clears): the check
    # cannot decide, and says so rather than reporting its offset as a finding of fact.
    from flyover.pipeline.signoff import track_findings
    check = {"anchor": "centre of region 'front'", "region_half_extent_m": {"height": 0.0},
             "axes": {"height": {"offset_m": 3.2, "uncertainty_m": None, "at_edge": False,
                                 "decided": False, "peak_focus": 0.05}}}
    found = track_findings(check, SignoffLimits().track_offset_max_m)
    assert [f.measured for f in found] == ["undecided"] and "cannot decide" in found[0].text
    assert status_of(found) == FLAGGED

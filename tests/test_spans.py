"""Passes cut from longer recordings: a span of the recording and track per pass."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import edit_campaign

from flyover.io.config import load_campaign
from flyover.model.errors import FlyoverInputError

START = "2026-06-01T10:00:00.600Z"   # the tiny campaign's p1 records from 10:00:00.000 for 3 s
END = "2026-06-01T10:00:02.600Z"


def test_a_span_limits_the_pass_to_its_stretch(tiny_copy):
    # Only the span is the pass: its recording span, and every window the imaging plans,
    # lie inside it (the clock's offset of 0.1 s moves the recording, not the span).
    from flyover.pipeline import align, image
    from flyover.pipeline.context import load_pass
    campaign = load_campaign(edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].update(
        span_utc=[START, END])))
    inputs = load_pass(campaign, "p1")
    first, last = inputs.clock.utc_ns(np.array(inputs.recording_span_s))
    assert (first, last) == (pd.Timestamp(START).value, pd.Timestamp(END).value)
    out = tiny_copy / "results" / "p1"
    align.run(campaign, "p1", out)
    image.run(campaign, "p1", out, threads=2, quiet=True)
    windows = pd.read_csv(out / "windows.csv")
    analysed = windows[windows["status"] == "analysed"]
    starts = pd.to_datetime(analysed["start_utc"]).astype("int64")
    ends = starts + (analysed["duration_s"] * 1e9).astype("int64")
    assert len(analysed) >= 3
    assert (starts >= pd.Timestamp(START).value).all() and (ends <= pd.Timestamp(END).value).all()


def test_only_the_pass_whose_span_changes_reruns(tiny_copy):
    # The span is one of the pass's own settings: its re-run fingerprint changes, the other
    # pass's does not.
    from flyover.campaign import PASS_INPUTS
    from flyover.model.reads import read_values
    before = load_campaign(tiny_copy / "campaign.yaml")
    after = load_campaign(edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].update(
        span_utc=[START, END])))
    assert read_values(before, PASS_INPUTS, "p1") != read_values(after, PASS_INPUTS, "p1")
    assert read_values(before, PASS_INPUTS, "p2") == read_values(after, PASS_INPUTS, "p2")


def test_spans_of_one_recording_must_be_apart(tiny_copy):
    def share(span_a, span_b):
        def change(d):
            d["passes"]["p1"].pop("span_utc", None)
            d["passes"]["p2"] = dict(d["passes"]["p1"])
            for name, span in (("p1", span_a), ("p2", span_b)):
                if span:
                    d["passes"][name]["span_utc"] = span
        return edit_campaign(tiny_copy, change)
    with pytest.raises(FlyoverInputError, match="passes p1 and p2 overlap") as err:
        load_campaign(share([START, END], ["2026-06-01T10:00:02.000Z",
                                           "2026-06-01T10:00:02.900Z"]))
    assert "p1 [2026-06-01T10:00:00.600" in err.value.message
    # Apart, they load; so do passes that take the whole recording alike (the same flight
    # analysed twice, under two labels).
    load_campaign(share(None, None))
    load_campaign(share(["2026-06-01T10:00:00.100Z", "2026-06-01T10:00:01.400Z"],
                        ["2026-06-01T10:00:01.500Z", "2026-06-01T10:00:02.900Z"]))
    with pytest.raises(FlyoverInputError, match="ends before it starts"):
        load_campaign(edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].update(
            span_utc=[END, START])))


def test_a_span_outside_the_recording_is_refused(tiny_copy):
    from flyover.pipeline.context import load_pass
    campaign = load_campaign(edit_campaign(tiny_copy, lambda d: d["passes"]["p1"].update(
        span_utc=["2026-06-01T11:00:00Z", "2026-06-01T11:00:05Z"])))
    with pytest.raises(FlyoverInputError, match="p1's span lies outside its recording") as err:
        load_pass(campaign, "p1")
    assert "2026-06-01T10:00:00" in err.value.message


def test_passes_take_their_flights_recording_and_track(tiny_copy):
    # A flight is a recording and log that several passes share: each pass takes its keys
    # where it gives none of its own, so the passes read exactly as if written out in full.
    def change(d):
        flight = {k: v for k, v in d["passes"]["p1"].items() if k != "label"}
        d["flights"] = {"morning": flight}
        d["passes"] = {"a": {"flight": "morning", "span_utc": [START, "2026-06-01T10:00:01.500Z"],
                             "label": "x"},
                       "b": {"flight": "morning", "span_utc": ["2026-06-01T10:00:01.500Z", END],
                             "label": "y", "track_position_noise_m": 0.5}}
    written = load_campaign(tiny_copy / "campaign.yaml").passes["p1"]
    campaign = load_campaign(edit_campaign(tiny_copy, change))
    a, b = campaign.passes["a"], campaign.passes["b"]
    assert (a.recording_files, a.track, a.calibration) == (
        written.recording_files, written.track, written.calibration)
    assert a.track_position_noise_m == written.track_position_noise_m
    assert b.track_position_noise_m == 0.5 and (a.label, b.label) == ("x", "y")
    # The flights campaign holds the flights as passes over their whole recording and log.
    from flyover.io.config import flights_campaign
    whole = flights_campaign(tiny_copy / "campaign.yaml").passes["morning"]
    assert whole.span_utc_ns is None and whole.recording_files == written.recording_files


@pytest.mark.parametrize("change, words", [
    (lambda d: d["passes"]["p1"].update(flight="evening"), "names no known flight"),
    (lambda d: d.update(flights={"morning": {**d["passes"]["p1"]}}) or d["passes"]["p2"].update(
        flight="morning"), "flight morning gives 'label'"),
    (lambda d: d.update(passes={}), "no pass"),
])
def test_flight_refusals(tiny_copy, change, words):
    with pytest.raises(FlyoverInputError, match=words) as err:
        load_campaign(edit_campaign(tiny_copy, change))
    assert "campaign.yaml" in str(err.value)


def test_a_pass_cut_from_a_long_recording_reads_its_own_stretch_of_time_code(tmp_path):
    # A 60 s recording with an IRIG-B channel, a pass spanning 5 s of it from 30 s: the
    # recorder's clock is decoded from the span and 10 s either side (not the whole file) and
    # agrees with the whole recording's to 20 us and 0.5 ppm.
    import soundfile as sf

    from flyover.campaign import RecorderSpec
    from flyover.io.recorders import join_files
    from flyover.pipeline._channels import recorder_clock
    from flyover.sim.timing import irig_b_signal
    fs, base, start = 8000.0, 1_780_000_000, 0.3
    t = start + np.arange(int(60 * fs)) / (fs * (1 + 20e-6))
    code = irig_b_signal(t, base, form="dcls", rise_s=1 / fs)
    sf.write(tmp_path / "long.wav", np.stack([np.zeros_like(code), code], 1).astype(np.float32),
             int(fs), subtype="FLOAT")
    own = int((base + start + 0.05) * 1e9)
    spec = RecorderSpec("rack", (tmp_path / "long.wav",), start_utc_ns=own)
    asked = []

    class Logged:   # the recorder's stream, noting every stretch read
        def __init__(self, stream):
            self.stream = stream

        def __getattr__(self, name):
            return getattr(self.stream, name)

        def read(self, first, n, channels=None):
            asked.append((first, n))
            return self.stream.read(first, n, channels)
    stream = Logged(join_files(spec.files))
    span = (int((base + 30.3) * 1e9), int((base + 35.3) * 1e9))
    cut, fit, _ = recorder_clock(spec, stream, {"irig": 1}, 0.0, None, "test", span_utc_ns=span)
    assert min(a for a, _ in asked) >= int(19 * fs) and max(a + n for a, n in asked) <= int(
        46 * fs)
    whole, whole_fit, _ = recorder_clock(spec, stream, {"irig": 1}, 0.0, None, "test")
    assert abs(fit.start_utc_ns - whole_fit.start_utc_ns) < 20_000
    assert abs(fit.drift_ppm - whole_fit.drift_ppm) < 0.5 and abs(fit.drift_ppm - 20) < 0.5

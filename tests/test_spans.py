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

"""Stage: align a pass (clock, track, recording) and draw its track check figure."""

from __future__ import annotations

import json
from pathlib import Path

from ..campaign import Campaign
from ..io.atomic import write_text
from ..io.passdata import load_pass
from ..plots import track_figure, save_figure
from .check import pass_summary


def run(campaign: Campaign, pass_name: str, alignment_json: Path, track_png: Path) -> dict:
    """Write ``alignment.json`` (clock, coverage, overhead time) and the track figure."""
    inputs = load_pass(campaign, pass_name)
    summary = pass_summary(inputs)
    summary["recording_start_utc_ns"] = int(inputs.spec.recording_start_utc_ns)
    summary["epoch_utc_ns"] = int(inputs.clock.epoch_utc_ns)
    summary["rate_error_ppm"] = inputs.clock.rate_error_ppm
    summary["clock_offset_source"] = ("estimated" if inputs.spec.clock_offset_s == "auto"
                                      else "config")
    fig = track_figure(inputs, summary)
    save_figure(fig, track_png)
    write_text(alignment_json, json.dumps(summary, indent=2, sort_keys=True) + "\n")
    return summary


def clock_offset_from_alignment(alignment_json: Path) -> float:
    """The clock offset an alignment stage decided on (config value or estimate)."""
    return float(json.loads(Path(alignment_json).read_text())["clock_offset_s"])


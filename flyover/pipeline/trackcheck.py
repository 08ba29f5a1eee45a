"""Stage: the acoustic check of a pass's track (:mod:`flyover.sync.track_check`): the offsets of
the track in height, along-track and laterally that bring the dominant source into best focus."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from flyover.acoustics.bands import third_octave_bands
from flyover.geometry.windows import plan_windows
from flyover.io.results import write_json
from flyover.io.results.levels import LEVELS
from flyover.io.results.track_check import NAME as TRACK_CHECK
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.model.reads import guarded
from flyover.pipeline._resources import chain_settings
from flyover.pipeline.context import load_aligned_pass
from flyover.sync.track_check import scan_track_offset

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("analysis.window_s", "analysis.band_min_hz", "analysis.band_max_hz",
                       "regions")
# Windows within this angle of overhead, at most this many, spread evenly: a vertical offset
# shows as along-track shifts of opposite sign ahead of and behind overhead.
CHECK_POLAR_OFFSET_DEG = 35.0
CHECK_WINDOWS = 5
# The scans' reach: laterally and along-track a few metres (a survey or antenna error); in
# height most of the height itself (heights in feet are 3.28 times too high).
HORIZONTAL_REACH_M = 3.0
HEIGHT_REACH_FRACTION = 0.8


def dominant_anchor(campaign: Campaign, levels) -> tuple[np.ndarray, str, tuple]:
    """The body point to focus on: the pass's clock anchor where given, else the centre of the
    region with the most energy at 1 m in the windows nearest overhead. Returns the point, its
    description and the region's half-extent (x, y) in metres ((0, 0) for an anchor)."""
    parts = levels[(levels["region"] != "total")].copy()
    near = (parts["polar_angle_deg"] - 90.0).abs()
    parts = parts[near <= near.min() + 1e-6]
    # Compared over the bands where every region has a level: a region given in more bands
    # would otherwise outweigh a louder one (a quick look's coarse map gave 7 and 6 bands).
    given = np.isfinite(parts["level_1m_db"].astype(float))
    shared = given.groupby(parts["band_hz"]).transform("all")
    if shared.any():
        parts = parts[shared]
    energy = (10 ** (parts["level_1m_db"].astype(float) / 10)).groupby(parts["region"]).sum()
    if len(energy) == 0 or not np.isfinite(energy).any() or energy.max() <= 0:
        name = next(iter(campaign.regions))
    else:
        name = str(energy.idxmax())
    region = campaign.regions[name]
    half = (abs(region.x_m[1] - region.x_m[0]) / 2, abs(region.y_m[1] - region.y_m[0]) / 2)
    return np.asarray(region.center_m, float), f"centre of region '{name}'", half


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> dict:
    """Write ``track_check.json``: per axis the offset of best focus, its uncertainty, whether
    it lies at the scan's edge and whether the scan could decide."""
    campaign = guarded(campaign, READS, stage="trackcheck", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, alignment = load_aligned_pass(campaign, pass_name, out_dir)
    record = track_check_record(campaign, inputs, alignment, LEVELS.read(out_dir))
    write_json(out_dir, TRACK_CHECK, record)
    return record


def track_check_record(campaign: Campaign, inputs, alignment: dict, levels) -> dict:
    """The check itself (``track_check.json``'s record) on a loaded pass; ``levels`` (rows of
    levels.csv: region, polar angle, level at 1 m) choose the dominant region to focus on."""
    an = campaign.analysis
    spec = inputs.spec
    if spec.clock_anchor_m is not None:
        anchor, what, half = np.asarray(spec.clock_anchor_m, float), "the clock anchor", (0, 0)
    else:
        anchor, what, half = dominant_anchor(campaign, levels)
    fs = inputs.sample_rate_hz
    windows = plan_windows(inputs.track, inputs.layout.center_enu_m, inputs.recording_span_s,
                           an.window_s, an.window_s, fs,
                           max_polar_offset_deg=CHECK_POLAR_OFFSET_DEG)
    record = {"anchor_body_m": [float(v) for v in anchor], "anchor": what,
              "region_half_extent_m": {"along-track": half[0], "lateral": half[1],
                                       "height": 0.0},
              "windows": len(windows), "axes": {}}
    if windows:
        pick = [windows[int(round(k))] for k in
                np.linspace(0, len(windows) - 1, min(CHECK_WINDOWS, len(windows)))]
        bands = third_octave_bands(max(an.band_min_hz, 250.0), an.band_max_hz)
        settings = chain_settings(inputs, bands, "cubic")
        height = float(alignment["height_above_array_m"])

        height_reach = max(HORIZONTAL_REACH_M, HEIGHT_REACH_FRACTION * height)
        # Every offset of a scan reads about the same frames of a window: the blocks reach
        # as far as the sound moves over the largest offset, and 50 ms more.
        read_frames = inputs.block_reader(int(np.ceil(
            (height_reach / inputs.atmosphere.c_m_s + 0.05) * fs)))
        for axis in ("height", "along-track", "lateral"):
            reach = height_reach if axis == "height" else HORIZONTAL_REACH_M
            r = scan_track_offset(read_frames, inputs.track, pick, anchor, inputs.layout.enu_m,
                                  inputs.atmosphere, inputs.clock, settings, axis=axis,
                                  reach_m=reach)
            record["axes"][axis] = {
                "offset_m": r.offset_m, "uncertainty_m": r.uncertainty_m if np.isfinite(
                    r.uncertainty_m) else None,
                "at_edge": r.at_edge, "decided": r.decided, "peak_focus": r.peak_focus,
                "reach_m": reach,
                "scan_offsets_m": [round(float(v), 4) for v in r.scan_offsets_m],
                "scan_focus": [round(float(v), 5) for v in r.scan_focus]}
    return record

"""The quick look after a pass (``flyover quick-look``): within a minute, is the pass good, or
must it be flown again? The sign-off rules that need no imaging (track coverage and the 90 deg
window, weather and crosswind, clock, channels, height and speed against the label), the
acoustic track check, and a coarse map of the window nearest overhead by the frequency-domain
method with the component levels there.

A quick look is not a result: it is written to ``OUTPUT/quick-look/PASS/``, never into the
pass's folder, and the workflow never reads it.
"""

from __future__ import annotations

import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.bands import a_weighting_db, third_octave_bands
from flyover.acoustics.reference import level_1m_db
from flyover.campaign import Campaign
from flyover.geometry.vehicle import VehicleGrid
from flyover.imaging.methods import method_named
from flyover.imaging.reception import valid_bands
from flyover.imaging.window import TOTAL, image_window, window_context
from flyover.io.figures import map_figure, save_figure
from flyover.io.results import write_json
from flyover.io.results.alignment import NAME as ALIGNMENT, read_alignment
from flyover.io.results.event_metrics import EVENT_METRICS, RECONSTRUCTED
from flyover.model.signoff import FLAG, Finding, label_findings, status_of
from flyover.model.timebase import iso_utc
from flyover.pipeline import align
from flyover.pipeline.context import load_aligned_pass
from flyover.pipeline.image import image_chain_settings, pass_windows, window_row
from flyover.pipeline.signoff import pass_findings
from flyover.pipeline.trackcheck import track_check_record

FOLDER = "quick-look"
SUMMARY = "quick-look.json"
MAP_FIGURE = "quick-look-map.png"
METHOD = "frequency-domain"
# The coarse map: the vehicle grid thinned until it holds at most this many points.
MAX_POINTS = 400
# What the quick look cannot say without the whole workflow.
NOT_CHECKED = ("single-event metrics and their 10 dB-down interval",
               "reference-flight metrics", "levels of every window (only the one nearest "
               "overhead, on a coarse grid, by the frequency-domain method)")


def coarse_grid(grid: VehicleGrid, max_points: int = MAX_POINTS) -> VehicleGrid:
    """The vehicle grid at whole multiples of its spacing until it holds ``max_points`` at most."""
    k = 1
    while np.prod(replace(grid, spacing_m=grid.spacing_m * k).shape) > max_points:
        k += 1
    return replace(grid, spacing_m=grid.spacing_m * k)


def quick_look(campaign: Campaign, pass_name: str, folder, *, peers: dict | None = None,
               also=()) -> dict:
    """Look at one pass quickly and say whether it must be flown again.

    Parameters
    ----------
    campaign : Campaign
    pass_name : str
    folder : path-like
        Where the quick look writes (``OUTPUT/quick-look/PASS`` by default in the command):
        its alignment, track figure, coarse map and ``quick-look.json``.
    peers : dict, optional
        The label's other passes flown so far, name -> (height_m, speed_m_s), for the check
        against the label (default: those of the campaign's passes of the label that the
        workflow has aligned).
    also : sequence of Finding
        What is already known against the pass (the finder's verdict on how it was flown).

    Returns
    -------
    dict
        ``status`` (the sign-off's word for what it could check), ``fly_again``, ``findings``,
        ``levels`` (per region and band near overhead, at 1 m), ``not_checked`` and
        ``seconds`` (wall time).
    """
    start = time.perf_counter()
    folder = Path(folder)
    align.run(campaign, pass_name, folder)
    inputs, alignment = load_aligned_pass(campaign, pass_name, folder)
    an = campaign.analysis
    bands = third_octave_bands(an.band_min_hz, an.band_max_hz)
    settings = image_chain_settings(campaign, inputs, bands)
    grid = coarse_grid(campaign.grid)
    points = grid.points_m()
    # Planned over the pass's span where it has one: a recording still being written then
    # shows the windows it does not hold yet.
    span = campaign.passes[pass_name].span_utc_ns
    planned_s = (inputs.recording_span_s if span is None else
                 tuple(float(v) for v in inputs.clock.seconds_since_epoch(np.array(span))))
    windows = pass_windows(inputs, an, planned_s)
    rows, held = [], []
    for w in windows:
        ctx = window_context(w, track=inputs.track, clock=inputs.clock,
                             atmosphere=inputs.atmosphere, mic_enu_m=inputs.layout.enu_m,
                             grid_points_m=points, settings=settings,
                             diagonal_removal=an.diagonal_removal, workers=2)
        recorded = inputs.holds(ctx.first_frame, ctx.n_frames)
        rows.append({"window": w.index, "polar_angle_deg": w.polar_angle_deg,
                     "status": "analysed" if recorded else "skipped",
                     "reason": "" if recorded else "sound reaches the array outside the "
                                                   "recording"})
        if recorded:
            held.append((w, ctx))
    levels = pd.DataFrame(columns=["window", "polar_angle_deg", "region", "band_hz",
                                   "level_1m_db", "valid", "note"])
    if held:
        w, ctx = min(held, key=lambda h: abs(h[0].polar_angle_deg - 90.0))
        method = method_named(METHOD)
        res = image_window(inputs.read_pressure_pa(ctx.first_frame, ctx.n_frames), ctx,
                           method=method, grid_points_m=points,
                           regions=campaign.regions)
        valid, why = valid_bands(ctx.centre_geometry, w, settings, spectrum_samples=(
            method.spectrum_samples(w.n_samples, settings)))
        levels = _window_levels(res, w, campaign, bands, valid, why)
        fig = map_figure(res.diagonal_removed if an.diagonal_removal else res.full,
                         replace(campaign, grid=grid), bands, f"{pass_name} (quick look)",
                         window_row(w, inputs.clock, inputs.layout.center_enu_m),
                         an.map_dynamic_range_db, res.verdicts)
        save_figure(fig, folder / MAP_FIGURE)
    check = track_check_record(campaign, inputs, alignment, levels)
    findings = pass_findings(
        {"alignment": alignment, "windows": pd.DataFrame(rows, columns=[
            "window", "polar_angle_deg", "status", "reason"]),
         # The metrics are the workflow's: none here (NOT_CHECKED).
         "metrics": pd.DataFrame(columns=EVENT_METRICS.column_names),
         "reconstructed": pd.DataFrame(columns=RECONSTRUCTED.column_names),
         "track_check": check},
        limits=campaign.signoff_limits, weather_limits=campaign.weather_limits,
        clock_given_s=an.uncertainty.clock_s, partial=campaign.passes[pass_name].partial)
    findings = list(also) + findings + _label_findings(campaign, pass_name, alignment, peers)
    end_ns = int(inputs.clock.utc_ns(inputs.recording_span_s[1]))
    if span is not None and end_ns < span[1]:
        findings.append(Finding("recording", iso_utc(end_ns), iso_utc(span[1]), "", FLAG,
                                f"the recording ends at {iso_utc(end_ns)}, before the pass's "
                                f"span ({iso_utc(span[1])}): still being written? The quick "
                                "look read what is there"))
    status = status_of(findings)
    summary = {
        "quick_look": True,
        "note": "a quick look, not a signed result: run the workflow for the pass's levels",
        "pass": pass_name, "label": campaign.passes[pass_name].label, "status": status,
        "fly_again": status == "rejected",
        "findings": [f.as_dict() for f in findings],
        "windows_planned": len(windows), "windows_recorded": len(held),
        "recording_end_utc": iso_utc(end_ns),
        "map_method": METHOD, "map_grid_spacing_m": grid.spacing_m,
        "levels": levels.replace({np.nan: None}).to_dict("records"),
        "overall": _overall(levels, bands),
        "not_checked": list(NOT_CHECKED),
        "seconds": round(time.perf_counter() - start, 1)}
    write_json(folder, SUMMARY, summary)
    return summary


def _window_levels(res, w, campaign: Campaign, bands, valid, why) -> pd.DataFrame:
    """Per region (and the total) and band: the level at 1 m, and whether it can be given."""
    rows = []
    for name in list(campaign.regions) + [TOTAL]:
        v = res.verdicts.get(name)
        for b in range(len(bands)):
            ok = bool(valid[b]) and (bool(v.valid[b]) if v else True)
            rows.append({"window": w.index, "polar_angle_deg": w.polar_angle_deg,
                         "region": name, "band_hz": float(bands.nominal_hz[b]),
                         "level_1m_db": float(level_1m_db(res.region_power[name][b])) if ok
                         else np.nan, "valid": ok,
                         "note": why[b] if not valid[b] else (v.note[b] if v else "")})
    return pd.DataFrame(rows)


def _overall(levels: pd.DataFrame, bands) -> dict:
    """Per region: the A-weighted sum of its levels at 1 m over the bands where it has one,
    and how many bands that is (bands without a level are left out, and said so)."""
    if len(levels) == 0:
        return {}
    weight = dict(zip(bands.nominal_hz.astype(float), a_weighting_db(bands.center_hz)))
    out = {}
    for region, g in levels.groupby("region", sort=False):
        given = g[np.isfinite(g["level_1m_db"].astype(float))]
        a = given["level_1m_db"].astype(float) + given["band_hz"].map(weight)
        out[str(region)] = {"a_weighted_1m_db": (float(10 * np.log10(np.sum(10 ** (a / 10))))
                                                 if len(a) else None),
                            "bands": f"{len(given)} of {len(g)}"}
    return out


def _label_findings(campaign: Campaign, pass_name: str, alignment: dict, peers) -> list:
    """Height and speed against the label's passes flown so far, as the sign-off compares
    them."""
    label = campaign.passes[pass_name].label
    if peers is None:
        peers = {}
        for name, spec in campaign.passes.items():
            folder = campaign.output / name
            if name != pass_name and spec.label == label and (folder / ALIGNMENT).exists():
                other = read_alignment(folder)
                peers[name] = (other["height_above_array_m"], other["speed_m_s"])
    heights = {pass_name: alignment["height_above_array_m"]} | {
        n: h for n, (h, _) in peers.items()}
    speeds = {pass_name: alignment["speed_m_s"]} | {n: v for n, (_, v) in peers.items()}
    labels = {n: label for n in heights}
    return label_findings(heights, speeds, labels, campaign.signoff_limits)[pass_name]

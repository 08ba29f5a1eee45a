"""Stage: per window, de-Dopplerized maps on the vehicle grid and the region powers."""

from __future__ import annotations

import io
import os
import sys
import tempfile
from dataclasses import replace
from pathlib import Path

import numba
import numpy as np
import pandas as pd

from flyover.acoustics.bands import third_octave_bands
from flyover.geometry.windows import plan_windows, region_angles
from flyover.imaging.chain import ChainSettings
from flyover.imaging.reception import valid_bands
from flyover.imaging.methods import method_named
from flyover.imaging.resolution import main_lobe_width_m
from flyover.imaging.window import TOTAL, image_window, window_context
from flyover.io.figures import map_figure, save_figure
from flyover.io.results.maps import (FIGURE_FOLDER, figure_windows, window_figure_name,
                                     write_maps)
from flyover.io.results.region_angles import REGION_ANGLES
from flyover.io.results.region_power import REGION_POWER
from flyover.io.results.windows import NO_WINDOW, WINDOWS
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.model.reads import guarded
from flyover.model.timebase import iso_utc
from flyover.pipeline._forks import can_fork, forked_map
from flyover.pipeline._resources import chain_settings, check_memory, windows_at_once
from flyover.pipeline.context import load_aligned_pass
from flyover.pipeline.progress import Progress

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("grid", "regions", "outline_m", "analysis.window_s", "analysis.hop_s",
                       "analysis.window_polar_step_deg", "analysis.method_tuning",
                       "analysis.band_min_hz", "analysis.band_max_hz", "analysis.method",
                       "passes.{pass}.other_methods",
                       "analysis.interpolation", "analysis.diagonal_removal",
                       "analysis.max_polar_offset_deg", "analysis.map_dynamic_range_db")



def pass_windows(inputs, analysis, span_s=None) -> list:
    """The emission-time windows the campaign's analysis plans on a pass, over its recording
    (or over ``span_s``, seconds after the pass epoch)."""
    return plan_windows(inputs.track, inputs.layout.center_enu_m,
                        inputs.recording_span_s if span_s is None else span_s,
                        analysis.window_s, analysis.hop_s, inputs.sample_rate_hz,
                        max_polar_offset_deg=analysis.max_polar_offset_deg,
                        polar_step_deg=analysis.window_polar_step_deg)


def image_chain_settings(campaign: Campaign, inputs, bands) -> ChainSettings:
    """The pass's chain with the campaign's interpolation and method tunables."""
    an = campaign.analysis
    return replace(chain_settings(inputs, bands, an.interpolation), tuning=an.method_tuning)


def run(campaign: Campaign, pass_name: str, out_dir: Path, *, threads: int = 1,
        quiet: bool = False) -> None:
    """Image every window of a pass; write maps.npz, windows.csv, region_power.csv, figures."""
    campaign = guarded(campaign, READS, stage="image", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, _ = load_aligned_pass(campaign, pass_name, out_dir)
    check_memory(campaign, inputs)
    an = campaign.analysis
    atm = inputs.atmosphere
    clock = inputs.clock
    bands = third_octave_bands(an.band_min_hz, an.band_max_hz)
    settings = image_chain_settings(campaign, inputs, bands)
    points = campaign.grid.points_m()
    # The headline method first: its maps are the pass's; the others' go to the tables and a
    # side-by-side figure of the window nearest overhead.
    methods = [method_named(m) for m in (an.method, *campaign.passes[pass_name].other_methods)]
    if settings.image_mic_enu_m is not None:
        skipped = [m.name for m in methods if not m.raised_microphones]
        methods = [m for m in methods if m.raised_microphones]
        if skipped and not quiet:
            print(f"{pass_name}: {', '.join(skipped)} skipped: they do not model the ground "
                  "reflection of raised microphones", file=sys.stderr)
    mics = inputs.layout.enu_m
    windows = pass_windows(inputs, an)
    progress = Progress(len(windows), f"{pass_name} imaging",
                        stream=io.StringIO() if quiet else None)
    rows, region_rows, maps_dr, maps_full, done = [], [], [], [], []
    drawn = {}      # window -> what its map figures would show
    nx, ny = campaign.grid.shape
    # Whole windows at a time in forked workers, the threads shared among them (_forks); one
    # window at a time, its kernels on every thread.
    at_once = windows_at_once(campaign, inputs, threads) if len(windows) > 1 and can_fork() \
        else 1
    each = max(1, threads // at_once)
    if at_once == 1:
        numba.set_num_threads(each)     # (here only: started threads would forbid the forks)
    elif not quiet:
        print(f"{pass_name}: imaging {at_once} windows at a time, {each} thread(s) each",
              file=sys.stderr)

    def image_one(w):
        """A window's windows.csv row, region_power.csv rows and every method's results
        (None where it was skipped)."""
        row = window_row(w, clock, inputs.layout.center_enu_m)
        ctx = window_context(w, track=inputs.track, clock=clock, atmosphere=atm, mic_enu_m=mics,
                             grid_points_m=points, settings=settings,
                             diagonal_removal=an.diagonal_removal,
                             workers=each)
        geo, first, n = ctx.centre_geometry, ctx.first_frame, ctx.n_frames
        if not inputs.holds(first, n):
            row.update(status="skipped", reason="sound reaches the array outside the recording")
            return row, [], None
        signals = inputs.read_pressure_pa(first, n)
        width = main_lobe_width_m(bands.center_hz, w.distance_m, inputs.layout.aperture_m,
                                  atm.c_m_s)
        results, region_rows = [], []
        for method in methods:
            res = image_window(signals, ctx, method=method, grid_points_m=points,
                               regions=campaign.regions)
            results.append(res)
            valid, why = valid_bands(geo, w, settings, spectrum_samples=(
                method.spectrum_samples(w.n_samples, settings) if method.spectrum_samples
                else None))
            region_rows += _region_rows(res, w, method.name, campaign, bands, width, valid,
                                        why)
        row.update(status="analysed", reason="")
        return row, region_rows, results

    # The map figures the pass page will likely show are drawn as their windows come back,
    # while the workers image the rest, into a folder of their own; moved into place at the
    # end (a step that fails keeps the last run's figures).
    likely = set(figure_windows([w.index for w in windows], [w.polar_angle_deg for w in windows]))
    with tempfile.TemporaryDirectory(dir=out_dir, prefix=".map-figures-") as ready:
        early = {}          # window -> its figures' names, drawn into ready
        for w, (row, rows_w, results) in zip(windows, forked_map(
                image_one, windows, processes=at_once, threads_each=each)):
            rows.append(row)
            if results is None:
                progress.step(f"window {w.index} skipped")
                continue
            region_rows += rows_w
            res = results[0]
            maps_dr.append(res.diagonal_removed.T.reshape(len(bands), nx, ny))
            maps_full.append(res.full.T.reshape(len(bands), nx, ny))
            done.append(w)
            shown = [(pass_name, _shown_maps(res, an), res.verdicts)]
            if len(methods) > 1 and w.index == _nearest_overhead(windows):
                shown += [(f"{pass_name} ({m.name})", _shown_maps(other, an), other.verdicts,
                           m.name) for m, other in zip(methods[1:], results[1:])]
            drawn[w.index] = (row, shown)
            if w.index in likely or len(shown) > 1:
                early[w.index] = _draw_window(Path(ready), w.index, row, shown, campaign,
                                              bands)
            progress.step(f"window {w.index} at {w.polar_angle_deg:.0f} deg")
        progress.close()
        if not windows:
            print(f"{pass_name}: {NO_WINDOW}", file=sys.stderr)
        # The figures' folder exists even when no window could be analysed: the step still
        # succeeded.
        _draw_maps(out_dir / FIGURE_FOLDER, drawn, done, campaign, bands, ready=Path(ready),
                   early=early)
    WINDOWS.write(out_dir, pd.DataFrame(rows))
    REGION_POWER.write(out_dir, pd.DataFrame(region_rows, columns=REGION_POWER.column_names))
    REGION_ANGLES.write(out_dir, _angle_rows(done, campaign, inputs))
    shape = (len(done), len(bands)) + campaign.grid.shape
    write_maps(out_dir, x_m=campaign.grid.x_axis_m, y_m=campaign.grid.y_axis_m,
               band_hz=bands.nominal_hz, band_center_hz=bands.center_hz,
               window=[w.index for w in done],
               time_utc_ns=[clock.utc_ns(w.center_s) for w in done],
               polar_angle_deg=[w.polar_angle_deg for w in done],
               diagonal_removed=np.array(maps_dr, np.float32).reshape(shape),
               full=np.array(maps_full, np.float32).reshape(shape))


def _draw_maps(folder: Path, drawn: dict, done, campaign, bands, *, ready: Path,
               early: dict) -> None:
    """The map figures of the windows the pass page shows, and of the other methods at the
    window nearest overhead (those ``early`` holds, drawn into ``ready``, moved in; the others
    drawn now); figures of an earlier run that this one did not draw are removed (the folder
    is the step's output)."""
    folder.mkdir(parents=True, exist_ok=True)
    keep = set(figure_windows([w.index for w in done], [w.polar_angle_deg for w in done]))
    keep |= {w for w, (_, shown) in drawn.items() if len(shown) > 1}
    written = set()
    for w in sorted(keep):
        if w in early:
            for name in early[w]:
                os.replace(ready / name, folder / name)
            written.update(early[w])
        else:
            written.update(_draw_window(folder, w, *drawn[w], campaign, bands))
    for old in folder.glob("window-*.png"):
        if old.name not in written:
            old.unlink()


def _draw_window(folder: Path, window: int, row: dict, shown, campaign, bands) -> list[str]:
    """A window's map figures (one per method shown) into ``folder``: their names."""
    names = []
    for title, maps, verdicts, *method in shown:
        fig = map_figure(maps, campaign, bands, title, row,
                         campaign.analysis.map_dynamic_range_db, verdicts)
        names.append(window_figure_name(window, *method))
        save_figure(fig, folder / names[-1])
    return names


def _shown_maps(res, analysis) -> np.ndarray:
    """The maps a figure shows: diagonal-removed when the analysis removes the diagonal."""
    return res.diagonal_removed if analysis.diagonal_removal else res.full


def _nearest_overhead(windows) -> int:
    """The index of the planned window nearest to 90 deg (-1 without windows)."""
    return min(windows, key=lambda w: abs(w.polar_angle_deg - 90.0)).index if windows else -1


def _region_rows(res, w, method: str, campaign, bands, width, valid, why) -> list:
    """region_power.csv's rows of one window and method."""
    rows = []
    for name in list(campaign.regions) + [TOTAL]:
        v = res.verdicts.get(name)
        for b in range(len(bands)):
            rows.append({
                "window": w.index, "method": method, "region": name,
                "band_hz": bands.nominal_hz[b],
                "power_1m_pa2": res.region_power[name][b],
                "map_sum_pa2": res.region_map_sum[name][b] if v else np.nan,
                "psf_sum_pa2": res.region_psf_sum[name][b] if v else np.nan,
                "unit_power_pa2": res.unit_power[name][b] if v else np.nan,
                "residual_power_pa2": (res.region_residual[name][b]
                                       if name in res.region_residual else np.nan),
                "resolved": bool(v.resolved[b]) if v else True,
                "dominant": bool(v.dominant[b]) if v else False,
                "stability_db": v.stability_db[b] if v else np.nan,
                "region_valid": (bool(v.valid[b]) if v
                                 else bool(np.isfinite(res.region_power[name][b]))),
                "region_note": v.note[b] if v else "",
                "main_lobe_width_m": width[b],
                "band_valid": bool(valid[b]), "band_note": why[b]})
    return rows


def _angle_rows(windows, campaign, inputs) -> pd.DataFrame:
    """region_angles.csv: each region's angles (the body origin's for the total) per window,
    from the windows' exact positions and attitudes."""
    position = np.array([w.position_enu_m for w in windows], float).reshape(-1, 3)
    attitude = np.array([w.attitude_deg for w in windows], float).reshape(-1, 3)
    velocity = np.array([w.velocity_enu_m_s for w in windows], float).reshape(-1, 3)
    atm = inputs.atmosphere
    parts = []
    centres = {name: r.center_m for name, r in campaign.regions.items()} | {TOTAL: np.zeros(3)}
    for name, centre in centres.items():
        angles = region_angles(position, attitude, velocity, centre, inputs.layout.center_enu_m,
                               wind_enu_m_s=atm.wind_enu_m_s, c_m_s=atm.c_m_s)
        parts.append(pd.DataFrame({"window": [w.index for w in windows], "region": name,
                                   **angles}))
    return pd.concat(parts, ignore_index=True)[REGION_ANGLES.column_names]


def window_row(w, clock, array_center) -> dict:
    """windows.csv's row of a window (its status and reason still empty)."""
    return {"window": w.index, "status": "", "reason": "",
            "start_utc": iso_utc(int(clock.utc_ns(w.start_s))),
            "time_utc": iso_utc(int(clock.utc_ns(w.center_s))),
            "center_s": w.center_s, "duration_s": w.n_samples / w.sample_rate_hz,
            "east_m": w.position_enu_m[0], "north_m": w.position_enu_m[1],
            "up_m": w.position_enu_m[2],
            "height_m": w.position_enu_m[2] - array_center[2], "speed_m_s": w.speed_m_s,
            "velocity_east_m_s": w.velocity_enu_m_s[0],
            "velocity_north_m_s": w.velocity_enu_m_s[1],
            "velocity_up_m_s": w.velocity_enu_m_s[2],
            "yaw_deg": w.attitude_deg[0], "pitch_deg": w.attitude_deg[1],
            "roll_deg": w.attitude_deg[2], "polar_angle_deg": w.polar_angle_deg,
            "distance_m": w.distance_m}

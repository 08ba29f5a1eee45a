"""Stage: per window, de-Dopplerized maps on the vehicle grid and the region powers."""

from __future__ import annotations

import io
from pathlib import Path

import numba
import numpy as np
import pandas as pd

from ..bands import third_octave_bands
from ..campaign import Campaign
from ..dedoppler import ChainSettings, valid_bands
from ..imaging import TOTAL, frames_for_window, image_window
from ..io.atomic import atomic_path
from ..io.passdata import load_pass
from ..io.tables import write_csv
from ..levels import main_lobe_width_m, regions_resolved
from ..plots import map_figure, save_figure
from ..progress import Progress
from ..timebase import iso_utc
from ..windows import plan_windows
from .align import clock_offset_from_alignment, quality_exclusions
from .check import check_memory


def run(campaign: Campaign, pass_name: str, alignment_json: Path, out_dir: Path,
        threads: int = 1, quiet: bool = False) -> None:
    """Image every window of a pass; write maps.npz, windows.csv, region_power.csv, figures."""
    numba.set_num_threads(max(1, threads))
    inputs = load_pass(campaign, pass_name, clock_offset_from_alignment(alignment_json),
                       quality_exclusions(alignment_json))
    check_memory(campaign, inputs)
    an = campaign.analysis
    atm = inputs.spec.atmosphere
    clock = inputs.clock
    bands = third_octave_bands(an.band_min_hz, an.band_max_hz)
    fs = inputs.recording.sample_rate_hz
    settings = ChainSettings(bands, inputs.weights, campaign.array.pressure_gain,
                             an.interpolation)
    points = campaign.grid.points_m()
    mics = inputs.layout.enu_m
    windows = plan_windows(inputs.track, inputs.layout.center_enu_m, inputs.recording_span_s,
                           an.window_s, an.hop_s, fs, an.max_polar_offset_deg)
    centers = [r.center_m for r in campaign.regions.values()]
    progress = Progress(len(windows), f"{pass_name} imaging",
                        stream=io.StringIO() if quiet else None)
    rows, region_rows, maps_dr, maps_full, done = [], [], [], [], []
    nx, ny = campaign.grid.shape
    for w in windows:
        row = _window_row(w, clock, inputs.layout.center_enu_m)
        geo, first, n = frames_for_window(inputs.track, w, points, mics, atm, clock, settings)
        if first < 0 or first + n > inputs.recording.n_frames:
            row.update(status="skipped", reason="sound reaches the array outside the recording")
            rows.append(row)
            progress.step(f"window {w.index} skipped")
            continue
        signals = inputs.read_pressure_pa(first, n)
        res = image_window(signals, first, geo, inputs.track, w, points, campaign.regions, mics,
                           atm, clock, settings, an.diagonal_removal, threads)
        resolved = regions_resolved(centers, bands.center_hz, w.distance_m,
                                    inputs.layout.aperture_m, atm.c_m_s)
        width = main_lobe_width_m(bands.center_hz, w.distance_m, inputs.layout.aperture_m,
                                  atm.c_m_s)
        valid, why = valid_bands(geo, w, settings)
        for name in list(campaign.regions) + [TOTAL]:
            single = name != TOTAL
            for b in range(len(bands)):
                region_rows.append({
                    "window": w.index, "region": name, "band_hz": bands.nominal_hz[b],
                    "power_1m_pa2": res.region_power[name][b],
                    "map_sum_pa2": res.region_map_sum[name][b] if single else np.nan,
                    "psf_sum_pa2": res.region_psf_sum[name][b] if single else np.nan,
                    "unit_power_pa2": res.unit_power[name][b] if single else np.nan,
                    "resolved": bool(resolved[b]) if single else True,
                    "main_lobe_width_m": width[b],
                    "band_valid": bool(valid[b]), "band_note": why[b]})
        row.update(status="analysed", reason="")
        rows.append(row)
        maps_dr.append(res.diagonal_removed.T.reshape(len(bands), nx, ny))
        maps_full.append(res.full.T.reshape(len(bands), nx, ny))
        done.append(w)
        fig = map_figure(res.diagonal_removed if an.diagonal_removal else res.full, campaign,
                         bands, pass_name, row, an.map_dynamic_range_db)
        save_figure(fig, out_dir / "maps" / f"window-{w.index:03d}.png")
        progress.step(f"window {w.index} at {w.polar_angle_deg:.0f} deg")
    progress.close()
    write_csv(out_dir / "windows.csv", pd.DataFrame(rows))
    write_csv(out_dir / "region_power.csv", pd.DataFrame(region_rows), float_format="%.6e")
    _write_maps(out_dir / "maps.npz", campaign, bands, done, clock, maps_dr, maps_full)


def _window_row(w, clock, array_center) -> dict:
    return {"window": w.index, "status": "", "reason": "",
            "start_utc": iso_utc(int(clock.utc_ns(w.start_s))),
            "time_utc": iso_utc(int(clock.utc_ns(w.center_s))),
            "center_s": w.center_s, "duration_s": w.n_samples / w.sample_rate_hz,
            "east_m": w.position_enu_m[0], "north_m": w.position_enu_m[1],
            "up_m": w.position_enu_m[2],
            "height_m": w.position_enu_m[2] - array_center[2], "speed_m_s": w.speed_m_s,
            "yaw_deg": w.attitude_deg[0], "pitch_deg": w.attitude_deg[1],
            "roll_deg": w.attitude_deg[2], "polar_angle_deg": w.polar_angle_deg,
            "distance_m": w.distance_m}


def _write_maps(path, campaign, bands, windows, clock, maps_dr, maps_full) -> None:
    shape = (0, len(bands)) + campaign.grid.shape
    with atomic_path(path) as tmp:
        with open(tmp, "wb") as fh:
            np.savez_compressed(
                fh,
                x_m=campaign.grid.x_axis_m, y_m=campaign.grid.y_axis_m,
                band_hz=bands.nominal_hz, band_center_hz=bands.center_hz,
                window=np.array([w.index for w in windows], dtype=int),
                time_utc_ns=np.array([clock.utc_ns(w.center_s) for w in windows], dtype=np.int64),
                polar_angle_deg=np.array([w.polar_angle_deg for w in windows]),
                diagonal_removed=np.array(maps_dr, dtype=np.float32).reshape(
                    (-1,) + shape[1:]) if maps_dr else np.zeros(shape, np.float32),
                full=np.array(maps_full, dtype=np.float32).reshape(
                    (-1,) + shape[1:]) if maps_full else np.zeros(shape, np.float32),
                units=np.array("Pa^2: band power of the source strength at 1 m; axes "
                               "(window, band, x_m, y_m); body axes x forward, y starboard"))

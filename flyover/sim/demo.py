"""Stage: write a whole simulated campaign (recordings, layout, calibrations, tracks, truth)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.reference import level_1m_db
from flyover.io.atomic import write_text
from flyover.io.csvtable import write_csv
from flyover.io.readers.soundfile_recording import write_recording
from flyover.io.scenario import load_scenario
from flyover.model.errors import FlyoverInputError
from flyover.sim.scenario import simulate_pass
from flyover.sync.timebase import iso_utc


def pass_files(out_dir: Path, pass_name: str, fmt: str = "wav") -> dict[str, Path]:
    """Where the simulator writes the files of one pass."""
    base = Path(out_dir) / pass_name
    return {"recording": base / f"recording.{fmt}", "calibration": base / "calibration.csv",
            "track": base / "track.csv"}


def write_campaign(scenario_path, out_dir, progress=print) -> None:
    """Simulate every pass of a scenario and write the files a real campaign would have.

    Writes ``layout.csv``, ``<pass>/recording.wav|flac``, ``<pass>/calibration.csv``,
    ``<pass>/track.csv``, ``truth.csv`` (band levels of each source at 1 m) and, when the scenario
    has a ``campaign`` block, a ready ``campaign.yaml``.
    """
    scenario, site, raw = load_scenario(scenario_path)
    out = Path(out_dir)
    fmt = raw["recording"].get("format", "wav")
    subtype = raw["recording"].get("subtype", "FLOAT")
    lat, lon, h = site.to_wgs84(scenario.mic_enu_m)
    n_mics = len(scenario.mic_enu_m)
    write_csv(out / "layout.csv", pd.DataFrame({
        "channel": np.arange(1, n_mics + 1), "lat_deg": lat, "lon_deg": lon, "height_m": h}),
        float_format="%.9f")
    bands = third_octave_bands(20, 10000)
    truth_rows = []
    for ps in scenario.passes:
        progress(f"simulating {ps.name}: {n_mics} microphones, {ps.duration_s} s")
        sim = simulate_pass(scenario, ps)
        files = pass_files(out, ps.name, fmt)
        peak = float(np.max(np.abs(sim.units)))
        if peak >= 1.0:
            raise FlyoverInputError(f"simulated pass {ps.name} clips", str(scenario_path),
                                    "a peak below full scale", f"{peak:.2f} of full scale",
                                    "raise recording.pa_per_unit in the scenario")
        write_recording(files["recording"], sim.units, scenario.sample_rate_hz, subtype)
        write_csv(files["calibration"], pd.DataFrame({"channel": np.arange(1, n_mics + 1),
                                                      "pa_per_unit": sim.pa_per_unit}),
                  float_format="%.9g")
        epoch = ps.recording_start_utc_ns + int(round(ps.clock_offset_s * 1e9))
        utc = epoch + np.round(sim.gnss_time_s * 1e9).astype(np.int64)
        tl, tn, th = site.to_wgs84(sim.gnss_enu_m)
        write_csv(files["track"], pd.DataFrame({
            "time_utc": [iso_utc(int(u)) for u in utc], "lat_deg": tl, "lon_deg": tn,
            "height_m": th, "roll_deg": sim.gnss_attitude_deg[:, 2],
            "pitch_deg": sim.gnss_attitude_deg[:, 1], "yaw_deg": sim.gnss_attitude_deg[:, 0]}),
            float_format="%.9f")
        for src in scenario.sources:
            power = src.band_power_pa2(bands, ps.gain_db.get(src.name, 0.0))
            for k in np.flatnonzero(power > 0):
                truth_rows.append({"pass": ps.name, "source": src.name,
                                   "band_hz": bands.nominal_hz[k],
                                   "level_1m_db": level_1m_db(power[k])})
    write_csv(out / "truth.csv", pd.DataFrame(truth_rows), float_format="%.4f")
    if "campaign" in raw:
        write_text(out / "campaign.yaml", yaml.safe_dump(_campaign_mapping(scenario, raw, fmt),
                                                         sort_keys=False))


def _campaign_mapping(scenario, raw, fmt) -> dict:
    camp = dict(raw["campaign"])
    camp = {"site": raw["site"], "array": {"layout": "layout.csv",
                                           "mounting": raw["array"]["mounting"]}, **camp}
    camp["passes"] = {
        ps.name: {"label": ps.label, **{k: str(v) for k, v in pass_files(Path("."), ps.name, fmt)
                                        .items()},
                  "recording_start_utc": iso_utc(ps.recording_start_utc_ns),
                  "clock_offset_s": ps.clock_offset_s,
                  "track_position_noise_m": max(scenario.gnss_noise_m, 1e-3),
                  "atmosphere": raw["passes"][ps.name]["atmosphere"]}
        for ps in scenario.passes}
    camp.setdefault("output", "results")
    return camp

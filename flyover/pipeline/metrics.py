"""Stage: the single-event metrics of a pass as received at its reference microphone (LAFmax,
LASmax, LAE over the 10 dB-down interval, LAeq) with the level and band histories."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.metrics import band_level_history, event_metrics
from flyover.io.figures import level_history_figure, save_figure
from flyover.io.results.event_metrics import BAND_HISTORY, EVENT_METRICS, LEVEL_HISTORY
from flyover.model.campaign import PASS_INPUTS, Campaign
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import guarded
from flyover.pipeline.context import PassInputs, load_aligned_pass, pass_summary
from flyover.sync.timebase import iso_utc

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("analysis.metrics_channel",)

HISTORY_STEP_S = 0.01
BAND_BLOCK_S = 0.5


def reference_microphone(campaign: Campaign, inputs: PassInputs) -> int:
    """Layout row of the microphone the metrics are measured at: the campaign's
    ``analysis.metrics_channel``, else the used microphone nearest the array centre."""
    chosen = campaign.analysis.metrics_channel
    channels = inputs.layout.channel.tolist()
    if chosen is not None:
        if chosen not in channels:
            raise FlyoverInputError("the metrics channel is not in the layout",
                                    f"{campaign.config_path}, key analysis.metrics_channel",
                                    f"one of the layout's channels {channels[0]}-{channels[-1]}",
                                    f"{chosen}")
        return channels.index(chosen)
    used = np.flatnonzero(inputs.weights > 0)
    d = np.linalg.norm(inputs.layout.enu_m[used] - inputs.layout.center_enu_m, axis=1)
    return int(used[np.argmin(d)])


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write event_metrics.csv, level_history.csv, band_history.csv and level_history.png."""
    campaign = guarded(campaign, READS, stage="metrics", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, _ = load_aligned_pass(campaign, pass_name, out_dir)
    mic = reference_microphone(campaign, inputs)
    first, n = inputs.covered_frames(pass_summary(inputs)["covered_s"])
    pressure = inputs.read_microphone_pa(mic, int(first[mic]), n)
    fs = float(inputs.clock.rate_hz[mic])          # the recorder's true rate: true seconds
    t0 = float(inputs.clock.start_s[mic] + first[mic] / fs)
    metrics, history = event_metrics(pressure, fs)

    def utc(t_s):
        return iso_utc(int(inputs.clock.utc_ns(t0 + t_s)))

    row = {"channel": int(inputs.layout.channel[mic]),
           "lafmax_db": metrics.lafmax_db, "lafmax_utc": utc(metrics.lafmax_s),
           "lasmax_db": metrics.lasmax_db, "lasmax_utc": utc(metrics.lasmax_s),
           "lae_db": metrics.lae_db,
           "ten_db_down_start_utc": utc(metrics.ten_db_down_s[0]),
           "ten_db_down_end_utc": utc(metrics.ten_db_down_s[1]),
           "ten_db_down_s": metrics.ten_db_down_duration_s,
           "ten_db_down_complete": metrics.ten_db_down_complete,
           "laeq_db": metrics.laeq_db, "laeq_duration_s": metrics.laeq_duration_s,
           "as_measured": campaign.array.mounting}
    EVENT_METRICS.write(out_dir, pd.DataFrame([row]))
    step = max(1, int(round(HISTORY_STEP_S * fs)))
    k = np.arange(0, n, step)
    level_history = pd.DataFrame({"time_utc": [utc(v) for v in k / fs], "time_s": t0 + k / fs,
                                  "laf_db": history["LAF"][k], "las_db": history["LAS"][k]})
    LEVEL_HISTORY.write(out_dir, level_history)
    bands = third_octave_bands(25.0, min(10000.0, 0.45 * fs))
    centre_s, levels = band_level_history(pressure, fs, bands, BAND_BLOCK_S)
    band_history = pd.DataFrame({
        "time_utc": np.repeat([utc(c) for c in centre_s], len(bands)),
        "time_s": np.repeat(t0 + centre_s, len(bands)),
        "band_hz": np.tile(bands.nominal_hz, len(centre_s)),
        "level_db": levels.ravel()})
    BAND_HISTORY.write(out_dir, band_history)
    figure_row = dict(row, ten_db_down_start_s=t0 + metrics.ten_db_down_s[0],
                      ten_db_down_end_s=t0 + metrics.ten_db_down_s[1])
    save_figure(level_history_figure(level_history, band_history, figure_row, pass_name),
                out_dir / "level_history.png")

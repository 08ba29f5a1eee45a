"""Stage: check figures of a pass: the track with the analysed windows, and spectrograms of one
microphone beside the de-Dopplerized signal of the vehicle's main region."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from scipy.signal import spectrogram

from ..campaign import Campaign
from ..io.passdata import load_pass
from ..plots import save_figure, spectrogram_figure, track_figure
from ._span import dedopplerize_span
from .align import clock_offset_from_alignment, quality_exclusions
from .check import pass_summary


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write qc_track.png and qc_spectrogram.png for one pass."""
    out_dir = Path(out_dir)
    alignment = out_dir / "alignment.json"
    inputs = load_pass(campaign, pass_name, clock_offset_from_alignment(alignment),
                       quality_exclusions(alignment))
    summary = pass_summary(inputs)
    windows = pd.read_csv(out_dir / "windows.csv")
    done = windows[windows["status"] == "analysed"]
    save_figure(track_figure(inputs, summary, done["center_s"].to_numpy()),
                out_dir / "qc_track.png")
    fs = inputs.recording.sample_rate_hz
    main = next(iter(campaign.regions.values()))
    a = None
    if len(done):
        start = float(done["center_s"].min() - done["duration_s"].iloc[0] / 2)
        n = int((done["center_s"].max() + done["duration_s"].iloc[0] / 2 - start) * fs)
        # None when the span runs past the recording for the region centre.
        a = dedopplerize_span(campaign, inputs, start, n, main.center_m)
    if a is None:
        save_figure(spectrogram_figure(None, None, pass_name, "", 1.0), out_dir /
                    "qc_spectrogram.png")
        return
    used = inputs.weights > 0
    beam = np.average(a[used], axis=0, weights=inputs.weights[used])
    # The same stretch as received: emission times plus about the closest travel time.
    delay_s = summary["closest_distance_m"] / inputs.spec.atmosphere.c_m_s
    first = max(0, int(inputs.clock.sample_index(start + delay_s)))
    signals = inputs.read_pressure_pa(first, min(n, inputs.recording.n_frames - first))
    mic = int(np.argmin(np.linalg.norm(inputs.layout.enu_m - inputs.layout.center_enu_m, axis=1)))
    nper = int(2 ** np.round(np.log2(0.08 * fs)))
    raw = spectrogram(signals[mic].astype(float), fs, nperseg=nper, noverlap=nper * 3 // 4)
    dd = spectrogram(beam.astype(float), fs, nperseg=nper, noverlap=nper * 3 // 4)
    fig = spectrogram_figure(raw, dd, pass_name,
                             f"channel {inputs.layout.channel[mic]} (as received)",
                             campaign.analysis.band_max_hz * 1.2, main.name)
    save_figure(fig, out_dir / "qc_spectrogram.png")

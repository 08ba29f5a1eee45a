"""Stage: check figures of a pass: the track with the analysed windows, and spectrograms of one
microphone beside the de-Dopplerized signal of the vehicle's main region."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from scipy.signal import spectrogram

from ..bands import third_octave_bands
from ..campaign import Campaign
from ..dedoppler import ChainSettings, dedopplerized_signals, reception_geometry, required_frames
from ..io.passdata import load_pass
from ..plots import save_figure, spectrogram_figure, track_figure
from ..windows import Window
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
    if len(done) == 0:
        save_figure(spectrogram_figure(None, None, pass_name, "", 1.0), out_dir /
                    "qc_spectrogram.png")
        return
    fs = inputs.recording.sample_rate_hz
    start = float(done["center_s"].min() - done["duration_s"].iloc[0] / 2)
    n = int((done["center_s"].max() + done["duration_s"].iloc[0] / 2 - start) * fs)
    track = inputs.track
    span = Window(-1, start, n, fs, track.position(start), track.velocity(start),
                  track.attitude_deg(start), 90.0, 0.0)
    main = next(iter(campaign.regions.values()))
    bands = third_octave_bands(campaign.analysis.band_min_hz, campaign.analysis.band_max_hz)
    settings = ChainSettings(bands, inputs.weights, campaign.array.pressure_gain, "cubic",
                             absorption=False)
    geo = reception_geometry(track, span, [main.center_m], inputs.layout.enu_m,
                             inputs.spec.atmosphere, settings.pressure_gain, settings.node_step)
    first, count = required_frames(geo, inputs.clock, "cubic")
    first, count = max(first, 0), min(count, inputs.recording.n_frames - max(first, 0))
    signals = inputs.read_pressure_pa(first, count)
    a = dedopplerized_signals(signals, first, geo, inputs.clock, span, settings)[0]
    used = inputs.weights > 0
    beam = np.average(a[used], axis=0, weights=inputs.weights[used])
    mic = int(np.argmin(np.linalg.norm(inputs.layout.enu_m - inputs.layout.center_enu_m, axis=1)))
    nper = int(2 ** np.round(np.log2(0.08 * fs)))
    raw = spectrogram(signals[mic].astype(float), fs, nperseg=nper, noverlap=nper * 3 // 4)
    dd = spectrogram(beam.astype(float), fs, nperseg=nper, noverlap=nper * 3 // 4)
    fig = spectrogram_figure(raw, dd, pass_name,
                             f"channel {inputs.layout.channel[mic]} (as received)",
                             campaign.analysis.band_max_hz * 1.2, main.name)
    save_figure(fig, out_dir / "qc_spectrogram.png")

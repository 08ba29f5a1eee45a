"""Stage: check figures of a pass: the track with the analysed windows, and spectrograms of one
microphone beside the de-Dopplerized signal of the vehicle's main region."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from flyover.acoustics.spectral import spectrogram_density
from flyover.io.figures import save_figure, spectrogram_figure, track_figure
from flyover.io.results.qc import SPECTROGRAM_FIGURE, TRACK_FIGURE
from flyover.io.results.windows import read_analysed
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.model.reads import guarded
from flyover.pipeline._span import dedopplerize_span, received_stretch
from flyover.pipeline._facts import pass_summary
from flyover.pipeline.context import load_aligned_pass

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("regions", "analysis.band_min_hz", "analysis.band_max_hz")



def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write qc_track.png and qc_spectrogram.png for one pass."""
    campaign = guarded(campaign, READS, stage="qc", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, _ = load_aligned_pass(campaign, pass_name, out_dir)
    summary = pass_summary(inputs)
    done = read_analysed(out_dir)
    save_figure(track_figure(inputs, summary, done["center_s"].to_numpy()),
                TRACK_FIGURE.path(out_dir))
    fs = inputs.sample_rate_hz
    main = next(iter(campaign.regions.values()))
    a = None
    if len(done):
        start = float(done["center_s"].min() - done["duration_s"].iloc[0] / 2)
        n = int((done["center_s"].max() + done["duration_s"].iloc[0] / 2 - start) * fs)
        # None when the span runs past the recording for the region centre.
        a = dedopplerize_span(campaign, inputs, start, n, main.center_m)
    if a is None:
        save_figure(spectrogram_figure(None, None, pass_name, "", 1.0),
                    SPECTROGRAM_FIGURE.path(out_dir))
        return
    beam = weighted_mean_rows(a, inputs.weights)
    # The same stretch as the centre microphone received it.
    mic = inputs.center_microphone
    heard = received_stretch(inputs, mic, (start, start + n / fs))[1]
    nper = int(2 ** np.round(np.log2(0.08 * fs)))
    raw = spectrogram_density(heard, fs, segment_samples=nper, overlap=nper * 3 // 4)
    dd = spectrogram_density(beam.astype(float), fs, segment_samples=nper,
                             overlap=nper * 3 // 4)
    fig = spectrogram_figure(raw, dd, pass_name,
                             f"channel {inputs.layout.channel[mic]} (as received)",
                             campaign.analysis.band_max_hz * 1.2, main.name)
    save_figure(fig, SPECTROGRAM_FIGURE.path(out_dir))


def weighted_mean_rows(rows, weights) -> np.ndarray:
    """``np.average(rows[used], axis=0, weights=weights[used])`` over the rows of positive
    weight, float64: the same products summed in the same order, a row at a time. The one
    call's float64 temporaries of the whole span (190 MB on a demo pass) cost a fresh process
    0.4 s of page faults."""
    weights = np.asarray(weights, float)
    total = np.zeros(np.shape(rows)[1])
    for row, w in zip(rows, weights):
        if w > 0:
            total += row.astype(float) * w
    return total / np.sum(weights[weights > 0])

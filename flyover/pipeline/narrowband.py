"""Stage: narrowband spectra. For every analysed window and region, the channels de-Dopplerized
to the region's centre and their Welch density in source time, with the diagonal removed
(:mod:`flyover.acoustics.narrowband`); the figure marks the rotors' blade-passing harmonics
where the pass has rotor speeds (rotor_tones.csv)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.narrowband import narrowband_psd
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.imaging.reception import absorption_line_gains
from flyover.io.figures import narrowband_figure, save_figure
from flyover.io.results.narrowband import NARROWBAND, NARROWBAND_FIGURE
from flyover.io.results.rotor_tones import ROTOR_TONES
from flyover.io.results.windows import read_analysed
from flyover.model.constants import P0_PA
from flyover.model.reads import guarded
from flyover.pipeline._span import dedopplerize_span
from flyover.pipeline.context import load_aligned_pass

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("regions", "analysis.band_min_hz", "analysis.band_max_hz")
# Line spacing of the spectra: Hann segments of 1 / RESOLUTION_HZ s (a window shorter than
# that is one segment, at its own spacing).
RESOLUTION_HZ = 8.0


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write narrowband.csv and narrowband.png for one pass."""
    campaign = guarded(campaign, READS, stage="narrowband", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, _ = load_aligned_pass(campaign, pass_name, out_dir)
    windows = read_analysed(out_dir)
    fs = inputs.sample_rate_hz
    top = campaign.analysis.band_max_hz * 2 ** (1 / 6)
    frames = []
    for _, w in windows.iterrows():
        n = int(round(float(w["duration_s"]) * fs))
        start = float(w["center_s"]) - 0.5 * (n - 1) / fs
        segment = min(n, int(round(fs / RESOLUTION_HZ)))
        for name, region in campaign.regions.items():
            span = dedopplerize_span(campaign, inputs, start, n, region.center_m,
                                     with_geometry=True)
            if span is None:
                continue
            signals, geo = span
            f = np.fft.rfftfreq(segment, 1.0 / fs)
            f, full, removed = narrowband_psd(
                signals, fs, segment_samples=segment, weights=inputs.weights,
                line_gain=absorption_line_gains(inputs.atmosphere, f, geo))
            keep = (f > 0) & (f <= top)
            with np.errstate(divide="ignore", invalid="ignore"):
                frames.append(pd.DataFrame({
                    "window": int(w["window"]), "polar_angle_deg": float(w["polar_angle_deg"]),
                    "region": name, "frequency_hz": f[keep],
                    "psd_db": np.where(removed[keep] > 0,
                                       10 * np.log10(removed[keep] / P0_PA ** 2), np.nan),
                    "psd_full_db": 10 * np.log10(full[keep] / P0_PA ** 2),
                    "resolution_hz": fs / segment}))
    table = (pd.concat(frames, ignore_index=True) if frames
             else pd.DataFrame(columns=NARROWBAND.column_names))
    NARROWBAND.write(out_dir, table)
    save_figure(narrowband_figure(table, ROTOR_TONES.read(out_dir), pass_name),
                NARROWBAND_FIGURE.path(out_dir))

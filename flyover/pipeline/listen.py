"""Stage: the pass as sound. For every region, the array focused on its centre in source time
over the analysed span (:mod:`flyover.acoustics.waveform`: de-Dopplerized block by block, each
microphone's path absorption undone per line, overlap-added), and the centre microphone as
received over the same stretch; WAV files in ``listen/`` and their index ``listen.csv``
(:mod:`flyover.io.results.listen`)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.waveform import focused_block, hann_taper, overlap_add
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.imaging.reception import absorption_line_gains
from flyover.io.results.listen import (CENTER_MICROPHONE, FOLDER, LISTEN, full_scale_pa,
                                       read_wav, region_file, write_wav)
from flyover.io.results.windows import read_analysed
from flyover.model.constants import P0_PA
from flyover.model.reads import guarded
from flyover.pipeline._span import dedopplerize_span, received_stretch
from flyover.pipeline.context import PassInputs, load_aligned_pass, utc_at

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("regions", "analysis.band_min_hz")
# Blocks of about this length follow the path's geometry (absorption, distance) along the
# span; a block's line spacing, 1 / BLOCK_S, is well below the lowest analysed band.
BLOCK_S = 0.16
# The microphones' first frames of one block differ by the array's travel times (tens of ms)
# and move apart as the vehicle passes: reads begin this much before a block's.
READ_MARGIN_S = 0.1


def analysed_span_s(windows) -> tuple[float, float]:
    """Emission times (s after the pass epoch) from the first analysed window's start to the
    last one's end."""
    half = 0.5 * windows["duration_s"].to_numpy(float)
    centre = windows["center_s"].to_numpy(float)
    return float(np.min(centre - half)), float(np.max(centre + half))


def focused_waveform(campaign: Campaign, inputs: PassInputs, body_m, start_s: float,
                     n_samples: int) -> np.ndarray:
    """The array focused on a body point over ``n_samples`` of emission time from
    ``start_s`` (Pa at 1 m): blocks a half block apart, overlap-added. A block the track or
    the recording does not hold is silence; so the first and last half blocks fade in and
    out unless the data reach beyond the span."""
    fs = inputs.sample_rate_hz
    block = 2 * max(1, int(round(BLOCK_S * fs / 2)))
    hop = block // 2
    taper = hann_taper(block)
    frequency_hz = np.fft.rfftfreq(block, 1.0 / fs)
    # One block before the span, so that its first samples get their full weight.
    first_s = start_s - hop / fs
    n_blocks = int(np.ceil((n_samples + hop) / hop))
    # The blocks move on along the pass: read a second ahead at a time, not once per block.
    read = inputs.block_reader(int(READ_MARGIN_S * fs), ahead_frames=int(fs), forward=True)

    def one(k):
        span = dedopplerize_span(campaign, inputs, first_s + k * hop / fs, block, body_m,
                                 with_geometry=True, read=read)
        if span is None:
            return None
        signals, geo = span
        return focused_block(signals, weights=inputs.weights, taper=taper,
                             line_gain=absorption_line_gains(inputs.atmosphere, frequency_hz,
                                                             geo))

    whole = overlap_add((one(k) for k in range(n_blocks)), hop, n_samples + hop)
    return whole[hop:]


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write listen.csv and the WAV files of ``listen/`` for one pass."""
    campaign = guarded(campaign, READS, stage="listen", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, _ = load_aligned_pass(campaign, pass_name, out_dir)
    windows = read_analysed(out_dir)
    (out_dir / FOLDER).mkdir(exist_ok=True)
    rows = []
    if len(windows):
        fs = inputs.sample_rate_hz
        start_s, end_s = analysed_span_s(windows)
        n = int(round((end_s - start_s) * fs))
        focused = {name: focused_waveform(campaign, inputs, region.center_m, start_s, n)
                   for name, region in campaign.regions.items()}
        scale = full_scale_pa(*focused.values())
        for index, (name, signal) in enumerate(focused.items()):
            rows.append({"file": region_file(index, name), "what": "region", "region": name,
                         "start_utc": utc_at(inputs.clock, start_s), "full_scale_pa": scale,
                         "about": f"{pass_name}, region {name}: delay-and-sum in source time, "
                                  "Pa at 1 m", "signal": signal})
        mic = inputs.center_microphone
        received_s, heard = received_stretch(inputs, mic, (start_s, end_s))
        channel = int(inputs.layout.channel[mic])
        rows.append({"file": f"{FOLDER}/{CENTER_MICROPHONE}", "what": "microphone",
                     "channel": channel, "start_utc": utc_at(inputs.clock, received_s),
                     "full_scale_pa": full_scale_pa(heard),
                     "about": f"{pass_name}, channel {channel} as received, Pa",
                     "signal": heard})
        for row in rows:
            write_wav(out_dir / row["file"], row.pop("signal"), fs, row["full_scale_pa"],
                      row.pop("about"))
            decoded, rate = read_wav(out_dir, row["file"], row["full_scale_pa"])
            mean_square = float(np.mean(decoded ** 2)) if decoded.size else 0.0
            row.update(duration_s=len(decoded) / rate, sample_rate_hz=rate,
                       level_db=10 * np.log10(mean_square / P0_PA ** 2) if mean_square > 0
                       else np.nan)
    # Files of regions since renamed or removed would pass for this run's.
    kept = {out_dir / row["file"] for row in rows}
    for old in (out_dir / FOLDER).glob("*.wav"):
        if old not in kept:
            old.unlink()
    LISTEN.write(out_dir, pd.DataFrame(rows, columns=LISTEN.column_names))

"""Peak memory of a pass that is a 60 s excerpt of a 30 min, 64-channel, 51.2 kHz recording.

The RF64 file (23.6 GB of float32 samples) is written sparsely in a temporary folder: silence
everywhere except the 60 s around the flyover, which is simulated. The align and image stages
then run in their own processes, which report their peak resident memory. Asserts nothing.

Run:  python benchmarks/bench_long_recording.py [--keep DIR]
"""

from __future__ import annotations

import argparse
import os
import struct
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import soundfile as sf
import yaml

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from _measure import measured_stage  # noqa: E402

from flyover.acoustics.atmosphere import Atmosphere  # noqa: E402
from flyover.forward.moving_source import (Broadband, PointSource, Propagator,  # noqa: E402
                                           SourceSignal, Tone, received_pressure_pa)
from flyover.geometry.frames import SiteFrame  # noqa: E402
from flyover.io.readers.soundfile_recording import (_declared_data_bytes,  # noqa: E402
                                                    recording_info)
from flyover.geometry.track import straight_track  # noqa: E402
from flyover.sim.scenario import incoherent_noise_pa, spiral_layout  # noqa: E402
from flyover.model.timebase import iso_utc  # noqa: E402

FS = 51200
N_MICS = 64
TOTAL_S = 1800.0
EXCERPT_START_S = 720.0
EXCERPT_S = 60.0
PA_PER_UNIT = 20.0


def sparse_rf64(path: Path, n_frames: int) -> int:
    """A float32 RF64 file of silent frames, allocated sparsely; returns the data offset."""
    sf.write(str(path), np.zeros((1, N_MICS), np.float32), FS, subtype="FLOAT", format="RF64")
    offset, _ = _declared_data_bytes(path)
    data_bytes = n_frames * N_MICS * 4
    with open(path, "r+b") as fh:
        head = fh.read(12 + 8 + 24)
        assert head[12:16] == b"ds64"
        fh.seek(20)
        fh.write(struct.pack("<QQQ", offset - 8 + data_bytes, data_bytes, n_frames))
    os.truncate(path, offset + data_bytes)
    return offset


def build(folder: Path) -> Path:
    site = SiteFrame(47.3817, 8.0512, 412.0)
    mics = spiral_layout(8, 8, 0.6, 6.0)
    atm = Atmosphere(16.0, 70.0, 96.4, 2.0, 250.0)
    overhead = EXCERPT_START_S + EXCERPT_S / 2
    truth, t, enu, att = straight_track(22.0, 35.0, 90.0, overhead, EXCERPT_START_S - 3,
                                        EXCERPT_START_S + EXCERPT_S + 3, rate_hz=10.0)
    sources = [PointSource("propulsion", (1.1, 0.0, 0.0), (Tone(215.0, 98.0),),
                           Broadband(86.0, -2.0, 60.0, 8000.0), 101),
               PointSource("airframe", (-1.4, 0.0, 0.0), (), Broadband(84.0, -1.0, 60.0, 8000.0),
                           202)]
    signals = [SourceSignal(s, FS, EXCERPT_START_S - 3, EXCERPT_START_S + EXCERPT_S)
               for s in sources]
    prop = Propagator(mics, atm, 2.0)
    rec = folder / "long.wav"
    offset = sparse_rf64(rec, int(TOTAL_S * FS))
    chunk = 5.0
    with open(rec, "r+b") as fh:
        for k in range(int(EXCERPT_S / chunk)):
            start = EXCERPT_START_S + k * chunk
            n = int(chunk * FS)
            p = received_pressure_pa(truth, signals, [np.array(s.body_m) for s in sources], prop,
                                     FS, start, n)
            p += incoherent_noise_pa(N_MICS, n, 40.0, k)
            fh.seek(offset + int(round(start * FS)) * N_MICS * 4)
            fh.write((p / PA_PER_UNIT).T.astype("<f4").tobytes())
    lat, lon, h = site.to_wgs84(mics)
    pd.DataFrame({"channel": np.arange(1, N_MICS + 1), "lat_deg": lat, "lon_deg": lon,
                  "height_m": h}).to_csv(folder / "layout.csv", index=False, float_format="%.9f")
    pd.DataFrame({"channel": np.arange(1, N_MICS + 1), "pa_per_unit": PA_PER_UNIT}).to_csv(
        folder / "calibration.csv", index=False)
    start_ns = int(np.datetime64("2026-06-17T07:30:00", "ns").astype(np.int64))
    tl, tn, th = site.to_wgs84(enu)
    pd.DataFrame({"time_utc": [iso_utc(start_ns + int(round(x * 1e9))) for x in t],
                  "lat_deg": tl, "lon_deg": tn, "height_m": th}).to_csv(
        folder / "track.csv", index=False, float_format="%.9f")
    campaign = {
        "site": {"origin_lat_deg": 47.3817, "origin_lon_deg": 8.0512, "origin_height_m": 412.0},
        "array": {"layout": "layout.csv", "mounting": "ground-plate"},
        "passes": {"long": {"recording": "long.wav", "calibration": "calibration.csv",
                            "recording_start_utc": iso_utc(start_ns), "track": "track.csv",
                            "clock_offset_s": 0.0, "track_position_noise_m": 0.01,
                            "atmosphere": {"temperature_c": 16.0, "relative_humidity_pct": 70.0,
                                           "pressure_kpa": 96.4, "wind_speed_m_s": 2.0,
                                           "wind_from_deg": 250.0}}},
        "vehicle": {"grid": {"x_m": [-3.0, 3.0], "y_m": [-2.4, 2.4], "spacing_m": 0.3},
                    "regions": {"propulsion": {"x_m": [0.4, 1.8], "y_m": [-0.7, 0.7]},
                                "airframe": {"x_m": [-2.4, -0.6], "y_m": [-1.0, 1.0]}}},
        "analysis": {"window_s": 0.25, "hop_s": 0.5, "band_min_hz": 200, "band_max_hz": 5000,
                     "reference_distance_m": 50.0, "max_polar_offset_deg": 30.0,
                     "reference_atmosphere": {"temperature_c": 25.0,
                                              "relative_humidity_pct": 70.0}},
        "output": "results"}
    (folder / "campaign.yaml").write_text(yaml.safe_dump(campaign, sort_keys=False))
    return folder / "campaign.yaml"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--keep", type=Path, help="build in this folder and keep it")
    args = ap.parse_args()
    ctx = tempfile.TemporaryDirectory() if args.keep is None else None
    folder = Path(ctx.name) if ctx else args.keep
    folder.mkdir(parents=True, exist_ok=True)
    try:
        t0 = time.perf_counter()
        campaign = build(folder)
        info = recording_info(folder / "long.wav")
        on_disk = os.stat(folder / "long.wav").st_blocks * 512
        print(f"recording: {info.n_channels} channels, {info.duration_s / 60:.0f} min at "
              f"{info.sample_rate_hz:.0f} Hz, {info.path.stat().st_size / 1e9:.1f} GB "
              f"({on_disk / 1e9:.2f} GB allocated), built in {time.perf_counter() - t0:.0f} s")
        for name in ("align", "image"):
            wall, peak = measured_stage(name, campaign, "long", folder / "results" / "long")
            print(f"{name} stage: {wall:.1f} s, peak resident memory {peak:.0f} MB")
        windows = pd.read_csv(folder / "results" / "long" / "windows.csv")
        print(f"windows analysed: {(windows['status'] == 'analysed').sum()}")
    finally:
        if ctx:
            ctx.cleanup()


if __name__ == "__main__":
    main()

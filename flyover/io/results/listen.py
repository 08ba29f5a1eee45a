"""``listen.csv``: the pass as sound, one WAV file per region and one of the centre microphone,
in the pass's ``listen/`` folder (:mod:`flyover.acoustics.waveform`).

A region's file is the array focused on the region's centre in source time over the analysed
span (source strength at 1 m); the centre microphone's is what it received over the same
stretch. Samples are 16-bit PCM (every browser and player reads it); a sample of 1.0 is
``full_scale_pa`` pascals, stated in the table and in the file's comment. The regions of a pass
share one full scale, so their files keep their loudness relative to each other.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import soundfile

from flyover.io.atomic import atomic_path
from flyover.io.results import TableFile

FOLDER = "listen"
CENTER_MICROPHONE = "center-microphone.wav"
SUBTYPE = "PCM_16"
HEADROOM_DB = 1.0   # the loudest sample of a file's group sits this far below full scale

LISTEN = TableFile("listen.csv", (
    ("file", f"path inside the pass's folder ({FOLDER}/...)"),
    ("what", "'region' (delay-and-sum focused on the region's centre, source time, at 1 m) or "
             "'microphone' (the centre microphone as received)"),
    ("region", "region name; empty for the microphone"),
    ("channel", "recording channel of the microphone; empty for a region"),
    ("start_utc", "ISO 8601 UTC of the first sample: emission time for a region, reception "
                  "time for the microphone"),
    ("duration_s", "s"),
    ("sample_rate_hz", "Hz"),
    ("full_scale_pa", "Pa of a sample of 1.0"),
    ("level_db", "dB re 20 uPa, the file's equivalent level over its duration and every "
                 "frequency it holds (not only the analysed bands), as decoded; at 1 m for a "
                 "region; empty for a silent file"),
), float_format="%.6g")


def region_file(index: int, region: str) -> str:
    """The WAV file of a region (its order in the campaign and a file-safe form of its name),
    inside the pass's folder."""
    safe = re.sub(r"[^\w.-]+", "_", region).strip("._") or "region"
    return f"{FOLDER}/region-{index + 1:02d}-{safe}.wav"


def full_scale_pa(*signals) -> float:
    """A full scale that holds the loudest sample of ``signals`` with :data:`HEADROOM_DB` to
    spare (1 Pa where all are silent)."""
    peak = max((float(np.max(np.abs(s))) for s in signals if np.size(s)), default=0.0)
    return peak * 10 ** (HEADROOM_DB / 20) if peak > 0 else 1.0


def write_wav(path, signal_pa, sample_rate_hz: float, full_scale: float, about: str) -> Path:
    """Write a pressure signal as 16-bit PCM, a sample of 1.0 being ``full_scale`` Pa."""
    path = Path(path)
    with atomic_path(path) as tmp:
        with soundfile.SoundFile(tmp, "w", samplerate=int(round(sample_rate_hz)), channels=1,
                                 subtype=SUBTYPE, format="WAV") as fh:
            fh.comment = f"{about}; full scale {full_scale:.6g} Pa"
            fh.write(np.clip(np.asarray(signal_pa, float) / full_scale, -1.0, 1.0))
    return path


def read_wav(folder, file: str, full_scale: float) -> tuple[np.ndarray, float]:
    """A listening file's signal in Pa and its sample rate."""
    data, rate = soundfile.read(Path(folder) / file, dtype="float64")
    return data * full_scale, float(rate)

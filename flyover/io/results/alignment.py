"""``alignment.json``: a pass's clock, coverage, overhead time and data quality (JSON object).

Keys the later stages rely on are listed in :data:`REQUIRED_KEYS`; everything else is for the
report and the engineer.
"""

from __future__ import annotations

from pathlib import Path

from flyover.acoustics.atmosphere import Atmosphere
from flyover.io.results import FigureFile, read_json, write_json
from flyover.model.errors import FlyoverInputError

NAME = "alignment.json"
TRACK_FIGURE = FigureFile("track.png", "the track over the array, as aligned")
REQUIRED_KEYS = {
    "clock_offset_s": "s, the clock offset used (config value or estimate)",
    "epoch_utc_ns": "ns since 1970 UTC of the first sample",
    "quality_excluded_channels": "channels the data-quality checks left out",
    "channels": "channels in the recording",
    "channels_used": "channels in the beamforming",
    "overhead_utc": "ISO 8601 UTC of the closest approach",
    "closest_distance_m": "m",
    "array_center_enu_m": "m, site frame: the array centre the emission angles point to",
    "atmosphere": "the atmosphere used: typed, or the weather file's mean over the pass",
}


def write_alignment(folder, summary: dict) -> Path:
    """Write the alignment (sorted keys, indented: stable bytes for identical results)."""
    missing = sorted(set(REQUIRED_KEYS) - set(summary))
    if missing:
        raise RuntimeError(f"{NAME}: keys {missing} missing")
    return write_json(folder, NAME, summary)


def read_alignment(folder) -> dict:
    """Read a pass's alignment back, checking the keys later stages need."""
    path = Path(folder) / NAME
    data = read_json(folder, NAME, "align")
    missing = sorted(set(REQUIRED_KEYS) - set(data))
    if missing:
        raise FlyoverInputError(f"{NAME} lacks keys {missing}", str(path),
                                hint="it was written by another flyover version: re-run the "
                                     "workflow")
    return data


def pass_atmosphere(alignment: dict) -> Atmosphere:
    """The atmosphere a pass was processed with (typed or from the weather file)."""
    a = alignment["atmosphere"]
    return Atmosphere(a["temperature_c"], a["relative_humidity_pct"], a["pressure_kpa"],
                      a["wind_speed_m_s"], a["wind_from_deg"], a.get("speed_of_sound_m_s"))


def clock_uncertainty_s(alignment: dict, given_s: float) -> float:
    """The clock offset's standard uncertainty: the acoustic estimate's, the timing channels'
    (the largest of the recorders'), or ``given_s``, the stated default for a clock given by
    hand (``analysis.uncertainty.clock_s``)."""
    if "clock_offset_uncertainty_s" in alignment:
        return float(alignment["clock_offset_uncertainty_s"])
    timed = [r["offset_uncertainty_s"] for r in alignment.get("recorders", [])
             if r.get("clock_method") == "timing channel"]
    if timed and len(timed) == len(alignment["recorders"]):
        return float(max(timed))
    return float(given_s)

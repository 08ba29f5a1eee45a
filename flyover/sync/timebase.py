"""Absolute times and the recording clock.

Absolute times are integer nanoseconds since 1970-01-01T00:00:00 UTC (numpy datetime64[ns]
semantics); float seconds are used only relative to a pass epoch, so that no precision is lost
over long recordings. Sample n of a recording was taken at
``recording_start_utc + clock_offset_s + n / (fs * (1 + rate_error_ppm * 1e-6))``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from flyover.model.errors import require

GPS_MINUS_UTC_S = 18  # leap seconds between GPS time and UTC since 2017-01-01 (IERS Bulletin C)


def iso_utc(utc_ns: int) -> str:
    """ISO 8601 text with a 'Z' zone: milliseconds when exact, else nanoseconds.

    e.g. 2026-05-14T09:31:07.300Z
    """
    unit = "ms" if int(utc_ns) % 1_000_000 == 0 else "ns"
    return str(np.datetime64(int(utc_ns), "ns").astype(f"datetime64[{unit}]")) + "Z"


@dataclass(frozen=True)
class RecordingClock:
    """The time base of one recording.

    Attributes
    ----------
    start_utc_ns : int
        Nominal UTC time of sample 0 as written by the recorder, ns since the Unix epoch.
    clock_offset_s : float
        Correction added to the recorder's times (design notes: ``clock_offset_s``).
    sample_rate_hz : float
        Nominal sample rate in the file header.
    rate_error_ppm : float
        Relative error of the recorder's sample clock: the true rate is
        ``sample_rate_hz * (1 + rate_error_ppm * 1e-6)``.
    """

    start_utc_ns: int
    clock_offset_s: float
    sample_rate_hz: float
    rate_error_ppm: float = 0.0

    def __post_init__(self):
        require(self.sample_rate_hz > 0, "sample rate must be positive", "recording",
                "a positive sample rate in Hz", f"{self.sample_rate_hz}")
        require(abs(self.rate_error_ppm) < 1000.0, "sample-rate error implausible",
                "rate_error_ppm", "less than 1000 ppm", f"{self.rate_error_ppm}")

    @property
    def epoch_utc_ns(self) -> int:
        """The pass epoch: the corrected UTC time of sample 0 (ns). Float times count from it."""
        return int(self.start_utc_ns) + int(round(self.clock_offset_s * 1e9))

    @property
    def true_rate_hz(self) -> float:
        return self.sample_rate_hz * (1.0 + self.rate_error_ppm * 1e-6)

    def sample_time_s(self, sample_index) -> np.ndarray:
        """Time of (fractional) sample indices, seconds after the pass epoch."""
        return np.asarray(sample_index, dtype=float) / self.true_rate_hz

    def sample_index(self, time_s) -> np.ndarray:
        """Fractional sample index at times given in seconds after the pass epoch."""
        return np.asarray(time_s, dtype=float) * self.true_rate_hz

    def seconds_since_epoch(self, utc_ns) -> np.ndarray:
        """Absolute UTC times (int ns) to float seconds after the pass epoch."""
        return (np.asarray(utc_ns, dtype=np.int64) - self.epoch_utc_ns) / 1e9

    def utc_ns(self, time_s) -> np.ndarray:
        """Float seconds after the pass epoch to absolute UTC (int64 ns)."""
        return self.epoch_utc_ns + np.round(np.asarray(time_s, dtype=float) * 1e9).astype(np.int64)

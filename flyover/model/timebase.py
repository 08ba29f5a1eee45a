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


def iso_utc(utc_ns: int) -> str:
    """ISO 8601 text with a 'Z' zone: milliseconds when exact, else nanoseconds.

    e.g. 2026-05-14T09:31:07.300Z
    """
    unit = "ms" if int(utc_ns) % 1_000_000 == 0 else "ns"
    return str(np.datetime64(int(utc_ns), "ns").astype(f"datetime64[{unit}]")) + "Z"


class _EpochTimes:
    """Conversions between absolute UTC and float seconds after ``self.epoch_utc_ns``."""

    def seconds_since_epoch(self, utc_ns) -> np.ndarray:
        """Absolute UTC times (int ns) to float seconds after the pass epoch."""
        return (np.asarray(utc_ns, dtype=np.int64) - self.epoch_utc_ns) / 1e9

    def utc_ns(self, time_s) -> np.ndarray:
        """Float seconds after the pass epoch to absolute UTC (int64 ns)."""
        return self.epoch_utc_ns + np.round(np.asarray(time_s, dtype=float) * 1e9).astype(np.int64)


@dataclass(frozen=True)
class RecordingClock(_EpochTimes):
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


@dataclass(frozen=True)
class ArrayClock(_EpochTimes):
    """The sample clocks of a pass's microphones on one time base (the pass epoch).

    Sample ``k`` of microphone ``m`` was taken ``start_s[m] + k / rate_hz[m]`` seconds after
    the epoch. Microphones of one recorder share its clock; several recorders each keep their
    own start and true rate, so that no channel is ever resampled: their clock models enter the
    reception-time mapping directly.

    Attributes
    ----------
    epoch_utc_ns : int
        UTC of the pass epoch (ns since the Unix epoch): the first recorder's corrected start.
    start_s : ndarray, shape (n_mics,)
        Time of each microphone's sample 0, seconds after the epoch.
    rate_hz : ndarray, shape (n_mics,)
        True sample rate of each microphone's recorder.
    recorder : ndarray of int, shape (n_mics,)
        Which recorder each microphone belongs to (0-based).
    """

    epoch_utc_ns: int
    start_s: np.ndarray
    rate_hz: np.ndarray
    recorder: np.ndarray

    @classmethod
    def of_recorders(cls, clocks: list[RecordingClock], recorder_of_mic) -> ArrayClock:
        """The array's clock from its recorders' clocks (the first one sets the epoch)."""
        rec = np.asarray(recorder_of_mic, dtype=int)
        epoch = clocks[0].epoch_utc_ns
        start = np.array([(c.epoch_utc_ns - epoch) / 1e9 for c in clocks])
        rate = np.array([c.true_rate_hz for c in clocks])
        return cls(epoch, start[rec], rate[rec], rec)

    def take(self, mics) -> ArrayClock:
        """The clock of some microphones only (index or boolean mask)."""
        return ArrayClock(self.epoch_utc_ns, self.start_s[mics], self.rate_hz[mics],
                          self.recorder[mics])

    def sample_index(self, time_s) -> np.ndarray:
        """Fractional sample index of each microphone at times after the epoch.

        ``time_s`` has the microphones on its second-to-last axis, shape (..., n_mics, n);
        the result has the same shape.
        """
        return (np.asarray(time_s, dtype=float) - self.start_s[:, None]) * self.rate_hz[:, None]

    def sample_time_s(self, sample_index) -> np.ndarray:
        """Times (s after the epoch) of fractional sample indices, shape (..., n_mics, n)."""
        return self.start_s[:, None] + np.asarray(sample_index, dtype=float) / self.rate_hz[:, None]

    def first_frames(self, index) -> np.ndarray:
        """Per microphone, the first frame its recorder must read for fractional indices of
        shape (..., n_mics, n): the floor of the lowest index over the recorder's microphones,
        so that all channels of one recorder are read from one frame."""
        idx = np.asarray(index, dtype=float)
        low = np.floor(idx.reshape(-1, idx.shape[-2], idx.shape[-1]).min(axis=(0, 2)))
        first = np.empty(len(low), dtype=np.int64)
        for r in np.unique(self.recorder):
            mine = self.recorder == r
            first[mine] = int(low[mine].min())
        return first

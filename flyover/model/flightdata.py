"""What a track file holds once read: positions, attitude and motor speeds against UTC.

Every track reader (:mod:`flyover.io.readers`) returns a :class:`TrackSamples`, whatever the
format: positions already in the site frame, attitude resampled onto the position times, and each
motor's speed at its own times.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class MotorSpeeds:
    """One motor's (or ESC's) speed as logged.

    Attributes
    ----------
    motor : int
        Its number in the log, from 1 (PX4 ESC index + 1, ArduPilot ESC instance + 1).
    utc_ns : ndarray, shape (n,)
    rpm : ndarray, shape (n,)
        Shaft revolutions per minute.
    """

    motor: int
    utc_ns: np.ndarray
    rpm: np.ndarray


@dataclass(frozen=True)
class TrackSamples:
    """Raw track samples as read.

    Attributes
    ----------
    utc_ns : ndarray, shape (n,)
        Absolute times (int ns UTC) of the positions.
    enu_m : ndarray, shape (n, 3)
        Site-frame positions of the GNSS antenna (or of the autopilot's estimate).
    attitude_deg : ndarray, shape (n, 3), or None
        Yaw, pitch, roll at the position times.
    source : str
        The format, e.g. ``"PX4 ULog (vehicle_global_position)"``.
    motors : tuple of MotorSpeeds
    notes : tuple of str
        What the reader dropped or assumed (samples without a GNSS fix, a UTC mapping).
    """

    utc_ns: np.ndarray
    enu_m: np.ndarray
    attitude_deg: np.ndarray | None
    source: str = "CSV"
    motors: tuple[MotorSpeeds, ...] = ()
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def holds(self) -> list[str]:
        """What the file gives: position, attitude, rotor speeds."""
        return (["position"] + (["attitude"] if self.attitude_deg is not None else [])
                + (["rotor speeds"] if self.motors else []))

    def rate_hz(self) -> float:
        """Median position rate."""
        dt = np.diff(self.utc_ns) / 1e9
        return float(1.0 / np.median(dt)) if len(dt) else float("nan")

    def between(self, start_ns: int, end_ns: int) -> "TrackSamples":
        """The samples within [start, end] (motor speeds too)."""
        keep = (self.utc_ns >= start_ns) & (self.utc_ns <= end_ns)
        motors = tuple(MotorSpeeds(m.motor, m.utc_ns[k], m.rpm[k]) for m in self.motors
                       for k in [(m.utc_ns >= start_ns) & (m.utc_ns <= end_ns)])
        att = None if self.attitude_deg is None else self.attitude_deg[keep]
        return TrackSamples(self.utc_ns[keep], self.enu_m[keep], att, self.source, motors,
                            self.notes)

"""TDMS recordings (NI DAQ systems) through nptdms, read span by span.

A TDMS file holds groups of channels. flyover's recording is every waveform channel of the file
(a channel with a ``wf_increment`` property) in file order, numbered from 1 and named
``group/channel``; the campaign file picks channels by that number or by name (``group/channel``,
or the channel's name alone where no other group has it). Values are read scaled (nptdms applies
the file's NI scaling), in the file's units. The first sample's time is the waveform property
``wf_start_time`` (a TDMS timestamp: seconds since 1904-01-01 UTC and 2^-64 s fractions, read
raw so that no precision is lost); the sample rate is ``1 / wf_increment``. All the waveform
channels of a file must share the increment, the start and the length.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
from nptdms import ChannelObject, GroupObject, RootObject, TdmsFile, TdmsWriter

from flyover.io.readers import Reader, register
from flyover.model.errors import FlyoverInputError

_TDMS_EPOCH_S = -2082844800  # 1904-01-01T00:00:00Z in Unix seconds


def tdms_timestamp_ns(stamp) -> int:
    """A raw TDMS timestamp (nptdms ``TdmsTimestamp``) as ns since the Unix epoch."""
    return ((int(stamp.seconds) + _TDMS_EPOCH_S) * 1_000_000_000
            + (int(stamp.second_fractions) * 1_000_000_000 + (1 << 63)) // (1 << 64))


@dataclass(frozen=True)
class TdmsRecording:
    """A TDMS file as a recording (the :class:`flyover.io.readers.Recording` interface)."""

    path: Path
    sample_rate_hz: float
    n_channels: int
    n_frames: int
    channel_names: tuple[str, ...]
    start_utc_ns: int | None
    format: str = "TDMS"
    time_reference: str = "TDMS wf_start_time"

    @property
    def duration_s(self) -> float:
        return self.n_frames / self.sample_rate_hz

    def read(self, start_frame: int, n_frames: int, channels=None) -> np.ndarray:
        """float32 (n_channels, n_frames) of scaled values; ``channels`` 0-based."""
        if start_frame < 0 or start_frame + n_frames > self.n_frames or n_frames <= 0:
            raise FlyoverInputError("span outside the recording", str(self.path),
                                    f"frames within 0 to {self.n_frames}",
                                    f"{start_frame} to {start_frame + n_frames}")
        chans = range(self.n_channels) if channels is None else [int(c) for c in channels]
        out = np.empty((len(chans), n_frames), dtype=np.float32)
        with TdmsFile.open(str(self.path)) as fh:
            objects = _waveforms(fh)
            for row, c in enumerate(chans):
                out[row] = objects[c].read_data(offset=start_frame, length=n_frames)
        if not np.all(np.isfinite(out)):
            row, idx = np.argwhere(~np.isfinite(out))[0]
            raise FlyoverInputError("recording contains NaN or Inf", str(self.path),
                                    "finite samples",
                                    f"channel {self.channel_names[chans[row]]}, frame "
                                    f"{start_frame + idx}")
        return out


def _waveforms(fh) -> list:
    return [c for g in fh.groups() for c in g.channels() if "wf_increment" in c.properties]


def read_tdms_header(path) -> TdmsRecording:
    """Open a TDMS file's metadata and describe its waveform channels.

    Raises
    ------
    FlyoverInputError
        Not a TDMS file, no waveform channel, or channels that differ in rate, start or length.
    """
    path = Path(path)
    if not path.is_file():
        raise FlyoverInputError("recording not found", str(path), "an existing TDMS file")
    try:
        with TdmsFile.open(str(path), raw_timestamps=True) as fh:
            chans = _waveforms(fh)
            facts = [(f"{c.group_name}/{c.name}", float(c.properties["wf_increment"]),
                      c.properties.get("wf_start_time"), len(c)) for c in chans]
    except (ValueError, KeyError, OSError, EOFError) as exc:
        raise FlyoverInputError("not a readable TDMS file", str(path), "a TDMS file",
                                str(exc).split("\n")[0]) from None
    if not facts:
        raise FlyoverInputError("no waveform channel in the TDMS file", str(path),
                                "channels with the wf_increment property (DAQ waveforms)")
    name0, inc0, start0, n0 = facts[0]
    for name, inc, start, n in facts[1:]:
        if inc != inc0 or n != n0 or (start is not None and start0 is not None
                                      and tdms_timestamp_ns(start) != tdms_timestamp_ns(start0)):
            raise FlyoverInputError(
                "waveform channels of one TDMS file differ", str(path),
                f"one sample rate, start and length for all ({name0}: {1 / inc0:g} Hz, {n0} "
                f"samples)", f"{name}: {1 / inc:g} Hz, {n} samples",
                "write each DAQ task to its own file and list it under its own recorder")
    if inc0 <= 0 or n0 == 0:
        raise FlyoverInputError("TDMS waveform holds no samples", str(path),
                                "a positive wf_increment and samples", f"{inc0}, {n0} samples")
    rate = 1.0 / inc0
    if abs(rate - round(rate)) < 1e-9 * rate:  # 1 / (1 / 25600) is not exactly 25600 in binary
        rate = float(round(rate))
    return TdmsRecording(path, rate, len(facts), n0, tuple(f[0] for f in facts),
                         None if start0 is None else tdms_timestamp_ns(start0))


def write_tdms(path, samples, sample_rate_hz: float, start_utc_ns: int, names,
               group: str = "daq") -> None:
    """Write waveform channels to a TDMS file with nptdms's writer (start and increment set).

    Parameters
    ----------
    samples : ndarray, shape (n_channels, n_frames)
    names : sequence of str
        Channel names, in order.
    """
    from flyover.io.atomic import atomic_path
    props = {"wf_start_time": np.datetime64(int(start_utc_ns), "ns"),
             "wf_increment": 1.0 / sample_rate_hz, "wf_start_offset": 0.0}
    with atomic_path(Path(path)) as tmp, TdmsWriter(str(tmp)) as writer:
        writer.write_segment([RootObject({}), GroupObject(group)]
                             + [ChannelObject(group, name, np.asarray(x, np.float32),
                                              properties=props)
                                for name, x in zip(names, samples)])


def _sniff(path: Path) -> bool:
    with open(path, "rb") as fh:
        return fh.read(4) == b"TDSm"


register(Reader("recording", "TDMS", (".tdms",), read_tdms_header, _sniff))

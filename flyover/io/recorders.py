"""One recorder's consecutive files (a take split by the recorder) read as one stream.

Recorders split long takes into files of a fixed size or duration. The files of one recorder
are opened through the recording readers (:mod:`flyover.io.readers`), put in order by the start
times they carry, and checked to follow each other to within one sample; files without a time
reference are joined end to end in the order given. Reading stays span by span: a span that
crosses a file boundary reads the end of one file and the start of the next.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from flyover.io.readers import Recording, read
from flyover.model.errors import FlyoverInputError
from flyover.model.timebase import iso_utc


@dataclass(frozen=True)
class JoinedRecording:
    """Consecutive files of one recorder as one recording (the :class:`Recording` interface).

    Attributes
    ----------
    parts : tuple of Recording
        The files in time order.
    offsets : tuple of int
        Frame of the joined stream at which each file starts.
    """

    parts: tuple[Recording, ...]
    offsets: tuple[int, ...]

    @property
    def path(self) -> Path:
        return self.parts[0].path

    @property
    def paths(self) -> list[Path]:
        return [p.path for p in self.parts]

    @property
    def sample_rate_hz(self) -> float:
        return self.parts[0].sample_rate_hz

    @property
    def n_channels(self) -> int:
        return self.parts[0].n_channels

    @property
    def n_frames(self) -> int:
        return self.offsets[-1] + self.parts[-1].n_frames

    @property
    def duration_s(self) -> float:
        return self.n_frames / self.sample_rate_hz

    @property
    def format(self) -> str:
        return self.parts[0].format

    @property
    def start_utc_ns(self) -> int | None:
        """The recorder's own time of its first sample (from the first file), if it has one."""
        return getattr(self.parts[0], "start_utc_ns", None)

    @property
    def time_reference(self) -> str:
        return getattr(self.parts[0], "time_reference", "")

    @property
    def channel_names(self) -> tuple[str, ...]:
        return getattr(self.parts[0], "channel_names", ())

    def read(self, start_frame: int, n_frames: int, channels=None) -> np.ndarray:
        """float32 (n_channels, n_frames) in recorded units across file boundaries."""
        if start_frame < 0 or start_frame + n_frames > self.n_frames or n_frames <= 0:
            raise FlyoverInputError("span outside the recording", str(self.path),
                                    f"frames within 0 to {self.n_frames}",
                                    f"{start_frame} to {start_frame + n_frames}")
        pieces = []
        for part, off in zip(self.parts, self.offsets):
            lo = max(start_frame, off)
            hi = min(start_frame + n_frames, off + part.n_frames)
            if hi > lo:
                pieces.append(part.read(lo - off, hi - lo, channels))
        return pieces[0] if len(pieces) == 1 else np.concatenate(pieces, axis=1)


def join_files(paths, *, where: str = "") -> JoinedRecording:
    """Open a recorder's files and join them by their start times.

    Parameters
    ----------
    paths : sequence of path-like
        The files of one recorder (any order when they carry start times).
    where : str
        The recorder, for messages (e.g. ``"campaign.yaml, passes.p4.recording[0]"``).

    Raises
    ------
    FlyoverInputError
        Files with different sample rates or channel counts, or consecutive files with a gap or
        an overlap of more than one sample (both files named, the gap in samples and ms).
    """
    parts = [read("recording", p) for p in paths]
    first = parts[0]
    for p in parts[1:]:
        if p.sample_rate_hz != first.sample_rate_hz or p.n_channels != first.n_channels:
            raise FlyoverInputError(
                "files of one recorder differ in sample rate or channel count", where,
                f"{first.sample_rate_hz:g} Hz and {first.n_channels} channels as in "
                f"{first.path.name}",
                f"{p.sample_rate_hz:g} Hz and {p.n_channels} channels in {p.path.name}",
                "list each recorder's files under their own recorder")
    starts = [getattr(p, "start_utc_ns", None) for p in parts]
    timed = all(s is not None for s in starts)
    if timed:
        order = np.argsort(np.array(starts, dtype=np.int64), kind="stable")
        parts = [parts[i] for i in order]
        starts = [starts[i] for i in order]
    fs = first.sample_rate_hz
    offsets = [0]
    for k in range(1, len(parts)):
        offsets.append(offsets[-1] + parts[k - 1].n_frames)
        if not timed:
            continue
        expected_ns = starts[k - 1] + parts[k - 1].n_frames / fs * 1e9
        gap = (starts[k] - expected_ns) * 1e-9 * fs
        if abs(gap) > 1.0:
            kind = "a gap" if gap > 0 else "an overlap"
            raise FlyoverInputError(
                f"consecutive files of one recorder leave {kind}", where,
                f"{parts[k].path.name} to start one sample after {parts[k - 1].path.name} ends "
                f"({iso_utc(int(round(expected_ns)))})",
                f"{kind} of {abs(gap):.0f} samples ({abs(gap) / fs * 1000:.3f} ms): "
                f"{parts[k].path.name} starts at {iso_utc(starts[k])}",
                "a file of the take is missing, or files of another take are listed")
    return JoinedRecording(tuple(parts), tuple(offsets))

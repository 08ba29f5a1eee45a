"""Multichannel recordings (WAV, RF64, W64, FLAC) through soundfile, read span by span.

Only the samples a pass needs are read (seek, then read), so memory follows the analysed span,
not the file. Before anything is read the header is checked against the file size: libsndfile
silently clamps the frame count of a truncated WAV, and a plain WAV written past 4 GiB carries a
wrapped size field. A WAV still being written (its data size not yet filled in) is read as far
as it goes.
"""

from __future__ import annotations

import io
import struct
from dataclasses import dataclass
from pathlib import Path

import xml.etree.ElementTree as ET

import numpy as np
import soundfile as sf

from flyover.io import bwf
from flyover.io.readers import Reader, register
from flyover.model.errors import FlyoverInputError

_W64_DATA = b"data\xf3\xac\xd3\x11\x8c\xd1\x00\xc0\x4f\x8e\xdb\x8a"


@dataclass(frozen=True)
class RecordingInfo:
    """What a recording's header says.

    Attributes
    ----------
    path : Path
    sample_rate_hz : float
    n_channels : int
    n_frames : int
    format, subtype : str
        soundfile's names, e.g. 'RF64', 'PCM_24'.
    start_utc_ns : int or None
        UTC of the first sample from a Broadcast WAV time reference (``bext``, else iXML).
    time_reference : str
        Where ``start_utc_ns`` came from, empty when the file has none.
    channel_names : tuple of str
        Track names from iXML, in channel order (empty when absent).
    """

    path: Path
    sample_rate_hz: float
    n_channels: int
    n_frames: int
    format: str
    subtype: str
    start_utc_ns: int | None = None
    time_reference: str = ""
    channel_names: tuple[str, ...] = ()

    @property
    def duration_s(self) -> float:
        return self.n_frames / self.sample_rate_hz

    def read(self, start_frame: int, n_frames: int, channels=None) -> np.ndarray:
        """float32 (n_channels, n_frames) in full-scale units; see :func:`read_span`."""
        return read_span(self, start_frame, n_frames, channels)


def _riff_chunks(path: Path):
    """(chunk id, body offset, body size) of a RIFF/RF64 WAVE file, the data chunk last; nothing
    for other formats. The data chunk's size comes from the ds64 chunk where RF64 needs it."""
    with open(path, "rb") as fh:
        head = fh.read(12)
        if len(head) < 12 or head[:4] not in (b"RIFF", b"RF64") or head[8:12] != b"WAVE":
            return
        ds64_data = None
        while True:
            hdr = fh.read(8)
            if len(hdr) < 8:
                return
            cid, size = hdr[:4], struct.unpack("<I", hdr[4:])[0]
            if cid == b"ds64":
                ds64_data = struct.unpack("<Q", fh.read(size)[8:16])[0]
                fh.seek(size % 2, 1)
                continue
            if cid == b"data":
                declared = ds64_data if (head[:4] == b"RF64" and size == 0xFFFFFFFF) else size
                yield cid, fh.tell(), int(declared)
                return
            yield cid, fh.tell(), size
            fh.seek(size + size % 2, 1)


def _declared_data_bytes(path: Path) -> tuple[int, int] | None:
    """(data offset, declared data bytes) from a RIFF/RF64/W64 header, or None for other formats."""
    for cid, offset, size in _riff_chunks(path):
        if cid == b"data":
            return offset, size
    with open(path, "rb") as fh:
        head = fh.read(12)
        if head[:4] == b"riff":  # Sony Wave64: 16-byte GUID ids, 8-byte sizes including header
            fh.seek(40)
            while True:
                hdr = fh.read(24)
                if len(hdr) < 24:
                    return None
                size = struct.unpack("<Q", hdr[16:])[0]
                if hdr[:16] == _W64_DATA:
                    return fh.tell(), int(size) - 24
                fh.seek(size - 24 + (-size) % 8, 1)
    return None


def recording_info(path) -> RecordingInfo:
    """Open a recording's header, check it against the file size, and describe it.

    Raises
    ------
    FlyoverInputError
        Missing, empty, not audio, or truncated (fewer frames on disk than the header says).
    """
    path = Path(path)
    if not path.is_file():
        raise FlyoverInputError("recording not found", str(path),
                                "an existing WAV/RF64/W64/FLAC file")
    size = path.stat().st_size
    if size == 0:
        raise FlyoverInputError("recording is empty", str(path), "audio data", "0 bytes")
    try:
        info = sf.info(str(path))
    except (sf.LibsndfileError, RuntimeError, TypeError) as exc:
        raise FlyoverInputError("not a readable audio file", str(path),
                                "WAV, RF64, W64 or FLAC", str(exc).split("\n")[0]) from None
    frame_bytes = None
    subtype_bytes = {"PCM_16": 2, "PCM_24": 3, "PCM_32": 4, "FLOAT": 4, "DOUBLE": 8, "PCM_U8": 1,
                     "PCM_S8": 1}
    if info.subtype in subtype_bytes:
        frame_bytes = subtype_bytes[info.subtype] * info.channels
    declared = _declared_data_bytes(path) if frame_bytes else None
    n_frames = info.frames
    if declared is not None:
        offset, data_bytes = declared
        on_disk = size - offset
        if data_bytes in (0, 0xFFFFFFFF) and info.format == "WAV":
            # A recorder still writing has not yet filled in the data size (zero, or the
            # placeholder): the samples on disk so far are the recording.
            data_bytes = on_disk - on_disk % frame_bytes
        header_frames = data_bytes // frame_bytes
        if on_disk < data_bytes:
            raise FlyoverInputError(
                "recording is truncated", str(path),
                f"{header_frames} frames as the header says ({data_bytes} bytes of samples)",
                f"{on_disk // frame_bytes} frames on disk",
                "the copy or the recorder stopped early: copy the file again from the recorder")
        if on_disk - data_bytes >= 2 ** 32 and info.format == "WAV":
            raise FlyoverInputError(
                "the WAV header's size field has wrapped", str(path),
                "a file under 4 GiB, or RF64/W64 for larger recordings",
                f"{on_disk} bytes of samples but a header declaring {data_bytes}",
                "the file was written past 4 GiB as plain WAV; re-export it as RF64 or W64")
        n_frames = header_frames
    if info.frames <= 0:
        raise FlyoverInputError("recording holds no samples", str(path), "audio frames", "0")
    return RecordingInfo(path, float(info.samplerate), int(info.channels), int(n_frames),
                         info.format, info.subtype, *_broadcast_wav_facts(path, info.samplerate))


def _broadcast_wav_facts(path: Path, sample_rate_hz: float):
    """(start UTC ns or None, its source, iXML track names) of a (Broadcast) WAV file."""
    chunks = {}
    for cid, offset, size in _riff_chunks(path):
        if cid in (b"bext", b"iXML") and cid not in chunks:
            with open(path, "rb") as fh:
                fh.seek(offset)
                chunks[cid] = fh.read(size)
    start, source, names = None, "", ()
    try:
        if b"iXML" in chunks:
            ixml = bwf.parse_ixml(chunks[b"iXML"])
            names = ixml.track_names
            if ixml.time_reference_samples is not None and ixml.date:
                start = bwf.start_utc_ns(ixml.date, "", ixml.time_reference_samples,
                                         ixml.time_reference_rate_hz or sample_rate_hz)
                source = "iXML time stamp"
        if b"bext" in chunks:
            bext = bwf.parse_bext(chunks[b"bext"])
            if bext.origination_date:
                start = bwf.start_utc_ns(bext.origination_date, bext.origination_time,
                                         bext.time_reference_samples, sample_rate_hz)
                source = "Broadcast WAV time reference (bext)"
    except (ValueError, ET.ParseError) as exc:
        raise FlyoverInputError("the Broadcast WAV metadata cannot be read", str(path),
                                "a bext chunk as EBU Tech 3285 lays it out, and well-formed iXML",
                                str(exc)) from None
    return start, source, names


def read_span(info: RecordingInfo, start_frame: int, n_frames: int, channels=None,
              block_frames: int = 1 << 16) -> np.ndarray:
    """Read frames [start_frame, start_frame + n_frames) of some channels as float32.

    Parameters
    ----------
    info : RecordingInfo
    start_frame, n_frames : int
        The span; it must lie inside the recording.
    channels : sequence of int, optional
        0-based channel indices to keep (all when None).
    block_frames : int
        Frames read at a time, so that unused channels never occupy memory for the whole span.

    Returns
    -------
    ndarray, shape (n_channels, n_frames), float32
        Samples as read in floating point (PCM scaled to +-1 full scale).
    """
    if start_frame < 0 or start_frame + n_frames > info.n_frames or n_frames <= 0:
        raise FlyoverInputError("span outside the recording", str(info.path),
                                f"frames within 0 to {info.n_frames}",
                                f"{start_frame} to {start_frame + n_frames}")
    chans = np.arange(info.n_channels) if channels is None else np.asarray(channels, dtype=int)
    out = np.empty((len(chans), n_frames), dtype=np.float32)
    try:
        with sf.SoundFile(str(info.path)) as fh:
            fh.seek(start_frame)
            done = 0
            while done < n_frames:
                k = min(block_frames, n_frames - done)
                block = fh.read(k, dtype="float32", always_2d=True)
                if block.shape[0] != k:
                    raise FlyoverInputError("recording ended early", str(info.path),
                                            f"{n_frames} frames from frame {start_frame}",
                                            f"{done + block.shape[0]}")
                out[:, done:done + k] = block[:, chans].T
                done += k
    except sf.LibsndfileError as exc:
        raise FlyoverInputError("recording could not be decoded", str(info.path),
                                found=str(exc).split("\n")[0]) from None
    if not np.all(np.isfinite(out)):
        ch, idx = np.argwhere(~np.isfinite(out))[0]
        raise FlyoverInputError("recording contains NaN or Inf", str(info.path),
                                "finite samples",
                                f"channel {chans[ch] + 1}, frame {start_frame + idx}",
                                "the recorder or an export step wrote invalid floats")
    return out


def write_recording(path, samples, sample_rate_hz: float, subtype: str = "FLOAT", *,
                    start_utc_ns: int | None = None) -> None:
    """Write a multichannel recording; RF64 when the data would pass 4 GiB, FLAC by extension.

    Parameters
    ----------
    samples : ndarray, shape (n_channels, n_frames)
        Values in full-scale units.
    start_utc_ns : int, optional
        Write a Broadcast WAV whose ``bext`` time reference gives this start (rounded to a
        sample); WAV only.
    """
    from flyover.io.atomic import atomic_path
    path = Path(path)
    data = np.asarray(samples).T
    n_ch = data.shape[1]
    if path.suffix.lower() == ".flac":
        if n_ch > 8:
            raise FlyoverInputError("FLAC holds at most 8 channels", str(path), "<= 8 channels",
                                    f"{n_ch}", "write WAV/RF64 instead")
        fmt, subtype = "FLAC", "PCM_24"
    else:
        width = {"PCM_16": 2, "PCM_24": 3, "PCM_32": 4, "FLOAT": 4, "DOUBLE": 8}[subtype]
        fmt = "RF64" if data.size * width > 2 ** 32 - 1024 else "WAV"
    with atomic_path(path) as tmp:
        if start_utc_ns is None:
            sf.write(str(tmp), data, int(round(sample_rate_hz)), subtype=subtype, format=fmt)
            return
        buffer = io.BytesIO()
        sf.write(buffer, data, int(round(sample_rate_hz)), subtype=subtype, format="WAV")
        day_ns = 86_400 * 10 ** 9
        midnight_ns = start_utc_ns - start_utc_ns % day_ns
        when = np.datetime64(int(start_utc_ns), "ns").astype("datetime64[s]").item()
        chunk = bwf.bext_chunk(
            time_reference_samples=int(round((start_utc_ns - midnight_ns) * 1e-9
                                             * sample_rate_hz)),
            origination_date=when.strftime("%Y-%m-%d"), origination_time=when.strftime("%H:%M:%S"),
            description="flyover simulated recording")
        Path(tmp).write_bytes(bwf.insert_chunks(buffer.getvalue(), {b"bext": chunk}))


def _sniff(path: Path) -> bool:
    with open(path, "rb") as fh:
        head = fh.read(12)
    return (head[:4] in (b"RIFF", b"RF64") and head[8:12] == b"WAVE") or head[:4] in (b"riff",
                                                                                       b"fLaC")


register(Reader("recording", "WAV/RF64/W64/FLAC", (".wav", ".rf64", ".w64", ".flac"),
                recording_info, _sniff))

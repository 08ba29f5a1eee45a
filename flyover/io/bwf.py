"""Broadcast WAV (EBU Tech 3285): the ``bext`` chunk's time reference, and iXML where present.

A Broadcast WAV file is a WAV file with a ``bext`` chunk. Its fixed part (602 bytes, version 1
and 2; little-endian) is::

    offset  size  field
         0   256  Description (ASCII, NUL-padded)
       256    32  Originator
       288    32  OriginatorReference
       320    10  OriginationDate  'yyyy-mm-dd' (any of - _ : space . as separators)
       330     8  OriginationTime  'hh-mm-ss'   (same separators)
       338     4  TimeReferenceLow   } samples since midnight of the first sample,
       342     4  TimeReferenceHigh  } a 64-bit count at the file's sample rate
       346     2  Version
       348    64  UMID (SMPTE 330M)
       412    10  LoudnessValue, LoudnessRange, MaxTruePeakLevel, MaxMomentaryLoudness,
                  MaxShortTermLoudness (int16 each, version 2)
       422   180  Reserved
       602     -  CodingHistory (ASCII, to the end of the chunk)

The time reference counts samples since midnight of the recorder's clock; the standard does not
say which time zone that clock keeps. flyover takes it as UTC (field recorders synchronised to
GNSS keep UTC); a recorder on local time needs the pass's ``clock_offset_s``. The day is the
origination date, moved by one day where the time reference and the origination time lie more
than 12 h apart (a take started before midnight and written after it).

iXML (an XML chunk written by many field recorders) gives the track names and, where there is no
``bext`` chunk, the time reference (``TIMESTAMP_SAMPLES_SINCE_MIDNIGHT_HI``/``_LO`` with
``TIMESTAMP_SAMPLE_RATE``).
"""

from __future__ import annotations

import datetime as dt
import re
import struct
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from fractions import Fraction

BEXT_FIXED_BYTES = 602
_SEPARATORS = r"[-_: .]"


@dataclass(frozen=True)
class BextInfo:
    """The fields of a ``bext`` chunk that flyover uses (see the module notes for the layout)."""

    description: str
    originator: str
    originator_reference: str
    origination_date: str
    origination_time: str
    time_reference_samples: int
    version: int
    coding_history: str


def _text(raw: bytes) -> str:
    return raw.split(b"\0", 1)[0].decode("ascii", errors="replace").strip()


def parse_bext(body: bytes) -> BextInfo:
    """Decode a ``bext`` chunk body (at least the 602-byte fixed part)."""
    if len(body) < BEXT_FIXED_BYTES - 190:  # version 0 files stop after the UMID's reserve
        raise ValueError(f"bext chunk of {len(body)} bytes is shorter than its fixed part")
    low, high, version = struct.unpack_from("<IIH", body, 338)
    return BextInfo(_text(body[0:256]), _text(body[256:288]), _text(body[288:320]),
                    _text(body[320:330]), _text(body[330:338]), (high << 32) | low, version,
                    _text(body[BEXT_FIXED_BYTES:]))


def bext_chunk(*, time_reference_samples: int, origination_date: str, origination_time: str,
               description: str = "", originator: str = "flyover", version: int = 2,
               coding_history: str = "") -> bytes:
    """A ``bext`` chunk body laid out as EBU Tech 3285 specifies (for writers and tests)."""
    body = bytearray(BEXT_FIXED_BYTES)
    body[0:256] = description.encode("ascii")[:256].ljust(256, b"\0")
    body[256:288] = originator.encode("ascii")[:32].ljust(32, b"\0")
    body[320:330] = origination_date.encode("ascii")[:10].ljust(10, b"\0")
    body[330:338] = origination_time.encode("ascii")[:8].ljust(8, b"\0")
    struct.pack_into("<IIH", body, 338, time_reference_samples & 0xFFFFFFFF,
                     time_reference_samples >> 32, version)
    history = coding_history.encode("ascii")
    return bytes(body) + history + (b"\0" if len(history) % 2 else b"")


def _parse_date(text: str) -> dt.date:
    parts = re.split(_SEPARATORS, text)
    if len(parts) != 3:
        raise ValueError(f"origination date '{text}' is not yyyy-mm-dd")
    return dt.date(int(parts[0]), int(parts[1]), int(parts[2]))


def _parse_seconds(text: str) -> int | None:
    parts = re.split(_SEPARATORS, text)
    if len(parts) != 3 or not all(p.isdigit() for p in parts):
        return None
    return int(parts[0]) * 3600 + int(parts[1]) * 60 + int(parts[2])


def start_utc_ns(date_text: str, time_text: str, samples_since_midnight: int,
                 sample_rate_hz: float) -> int:
    """UTC (ns since the Unix epoch) of the first sample from a date and a time reference.

    Parameters
    ----------
    date_text, time_text : str
        Origination date and time as written in the chunk.
    samples_since_midnight : int
        The time reference.
    sample_rate_hz : float
        The file's sample rate (the unit of the time reference).
    """
    day = _parse_date(date_text)
    since_midnight_s = samples_since_midnight / sample_rate_hz
    written_s = _parse_seconds(time_text)
    if written_s is not None:
        if since_midnight_s - written_s > 43200:
            day -= dt.timedelta(days=1)   # started late in the evening, written after midnight
        elif written_s - since_midnight_s > 43200:
            day += dt.timedelta(days=1)
    midnight_s = int(dt.datetime(day.year, day.month, day.day,
                                 tzinfo=dt.timezone.utc).timestamp())
    # Exact rational arithmetic: a day of samples in ns passes float's 53 bits.
    offset_ns = Fraction(int(samples_since_midnight)) * 10 ** 9 / Fraction(sample_rate_hz)
    return midnight_s * 10 ** 9 + int(round(offset_ns))


@dataclass(frozen=True)
class IxmlInfo:
    """What flyover reads from an iXML chunk."""

    track_names: tuple[str, ...]
    time_reference_samples: int | None
    time_reference_rate_hz: float | None
    date: str | None


def parse_ixml(body: bytes) -> IxmlInfo:
    """Track names (in channel order) and the time reference of an iXML chunk."""
    root = ET.fromstring(body.split(b"\0", 1)[0].decode("utf-8", errors="replace").strip())

    def find(tag):
        el = root.find(f".//{tag}")
        return el.text.strip() if el is not None and el.text else None

    tracks = []
    for tr in root.findall(".//TRACK_LIST/TRACK"):
        idx = tr.findtext("CHANNEL_INDEX")
        tracks.append((int(idx) if idx and idx.strip().isdigit() else len(tracks) + 1,
                       (tr.findtext("NAME") or "").strip()))
    names = tuple(name for _, name in sorted(tracks))
    hi = find("TIMESTAMP_SAMPLES_SINCE_MIDNIGHT_HI")
    lo = find("TIMESTAMP_SAMPLES_SINCE_MIDNIGHT_LO")
    if lo is None:
        hi, lo = find("BWF_TIME_REFERENCE_HIGH"), find("BWF_TIME_REFERENCE_LOW")
    samples = (int(hi or 0) << 32) | int(lo) if lo is not None else None
    rate = find("TIMESTAMP_SAMPLE_RATE") or find("FILE_SAMPLE_RATE")
    return IxmlInfo(names, samples, float(rate) if rate else None, find("BWF_ORIGINATION_DATE"))


def insert_chunks(wav_bytes: bytes, chunks: dict[bytes, bytes]) -> bytes:
    """A RIFF WAVE file with chunks added before its data chunk (sizes updated)."""
    if wav_bytes[:4] != b"RIFF" or wav_bytes[8:12] != b"WAVE":
        raise ValueError("not a RIFF WAVE file")
    pos = 12
    while wav_bytes[pos:pos + 4] != b"data":
        size = struct.unpack_from("<I", wav_bytes, pos + 4)[0]
        pos += 8 + size + size % 2
    extra = b"".join(cid + struct.pack("<I", len(body)) + body + b"\0" * (len(body) % 2)
                     for cid, body in chunks.items())
    out = wav_bytes[:pos] + extra + wav_bytes[pos:]
    return out[:4] + struct.pack("<I", len(out) - 8) + out[8:]

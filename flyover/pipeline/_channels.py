"""A pass's recorders mapped onto its layout: which channel of which recorder each microphone
is, and each recorder's clock (typed, from a timing channel, or from the alignment)."""

from __future__ import annotations

import numpy as np

from flyover.io.recorders import JoinedRecording
from flyover.io.readers.layout_csv import ArrayLayout
from flyover.campaign import ArraySpec, PassSpec, RecorderSpec
from flyover.model.errors import FlyoverInputError, suggest
from flyover.model.timebase import RecordingClock
from flyover.sync.timecode import TimingFit, measure_clock, measure_clock_over


def recorder_channel(value, stream: JoinedRecording, where: str) -> int:
    """0-based channel of a recording from a 1-based index or a channel name."""
    if isinstance(value, str):
        names = list(stream.channel_names)
        matches = [k for k, n in enumerate(names) if n == value or n.split("/")[-1] == value]
        if len(matches) != 1:
            raise FlyoverInputError(
                f"no channel named '{value}' in the recording" if not matches else
                f"several channels named '{value}' in the recording", where,
                "one of " + ", ".join(repr(n) for n in names) if names else
                "a channel number (this file has no channel names)",
                f"'{value}' in {stream.path.name}", suggest(value, names))
        return matches[0]
    if not 1 <= int(value) <= stream.n_channels:
        raise FlyoverInputError("recorder channel out of range", where,
                                f"a channel from 1 to {stream.n_channels} of {stream.path.name}",
                                f"{value}")
    return int(value) - 1


def channel_maps(array: ArraySpec, spec: PassSpec, layout: ArrayLayout,
                  streams: list[JoinedRecording], where: str):
    """Per recorder: layout rows of its microphones, their 0-based recording channels, and its
    timing channels by name (0-based). Every microphone is on exactly one recorder channel."""
    row_of = {int(c): k for k, c in enumerate(layout.channel)}
    owner: dict[int, str] = {}
    out = []
    for r, stream in zip(spec.recorders, streams):
        at = f"{where}, recorder '{r.name}'"
        timing = {str(t): recorder_channel(t, stream, f"{at}, timing_channel")
                  for t in r.timing_channels}
        if r.channels is None:  # one recorder: recording channel k is layout channel k
            extra = set(array.extra_channels) | {t + 1 for t in timing.values()}
            expected = set(layout.channel.tolist()) | extra
            if expected != set(range(1, stream.n_channels + 1)) or extra & set(row_of):
                raise FlyoverInputError(
                    "layout and recording disagree on the channels", str(stream.path),
                    f"{len(layout.channel)} microphone channels as in {array.layout}"
                    + (f" plus extra channels {sorted(extra)}" if extra else ""),
                    f"{stream.n_channels} channels in the recording",
                    "give one layout row per microphone channel, and list channels that are "
                    "not microphones (a PPS or timecode track) in array.extra_channels")
            pairs = [(int(c), int(c)) for c in layout.channel]
        else:
            pairs = list(r.channels)
        mics, chans, used = [], [], {}
        for lay, rec in pairs:
            if lay not in row_of:
                raise FlyoverInputError("a mapped channel is not in the layout",
                                        f"{at}, channels", f"channels of {array.layout}",
                                        f"layout channel {lay}")
            if lay in owner:
                raise FlyoverInputError(
                    f"layout channel {lay} is mapped twice", f"{at}, channels",
                    "each microphone on exactly one recorder channel",
                    f"also on recorder '{owner[lay]}'" if owner[lay] != r.name else
                    "twice on this recorder")
            ch = recorder_channel(rec, stream, f"{at}, channels.{lay}")
            if ch in used or ch in timing.values():
                raise FlyoverInputError(
                    f"recorder channel {rec} is mapped twice", f"{at}, channels",
                    "each recorder channel used once",
                    f"layout channel {lay} and " + (f"layout channel {used[ch]}" if ch in used
                                                    else "the timing channel"))
            owner[lay], used[ch] = r.name, lay
            mics.append(row_of[lay])
            chans.append(ch)
        if not mics:
            raise FlyoverInputError("a recorder records no microphone", f"{at}, channels",
                                    "at least one layout channel")
        order = np.argsort(mics)
        out.append((np.asarray(mics)[order], np.asarray(chans)[order], timing))
    missing = sorted(set(row_of) - set(owner))
    if missing:
        raise FlyoverInputError("layout channels mapped to no recorder", where,
                                "every microphone of the layout on one recorder channel",
                                f"no recorder channel for layout channel(s) {missing}",
                                "add them to a recorder's channels, or remove them from the "
                                "layout")
    return out


def recorder_clock(r: RecorderSpec, stream: JoinedRecording, timing: dict[str, int],
                    common_offset_s: float, measured, where: str, *, span_utc_ns=None):
    """A recorder's clock: measured from its timing channels, or its start time (typed, else
    from its files) with its offset and rate error; plus the pass's common offset.

    ``measured`` is a :class:`TimingFit` or a mapping with ``start_utc_ns`` and ``drift_ppm``
    from an earlier measurement, or None to decode the timing channels here: over the pass's
    span (``span_utc_ns``, with a margin) when the recorder's own start places it, else over the
    whole recording.
    """
    fs = stream.sample_rate_hz
    typed = r.start_utc_ns
    own = typed if typed is not None else stream.start_utc_ns
    if timing:
        fit = measured if isinstance(measured, TimingFit) else None
        if measured is None:
            channels = {name: (lambda first, n, ch=ch: stream.read(first, n, [ch])[0])
                        for name, ch in timing.items()}
            stretch = _timing_stretch(stream, own, span_utc_ns)
            fit = (measure_clock(channels, stream.n_frames, fs, own, where=where)
                   if stretch is None else
                   measure_clock_over(channels, *stretch, fs, own, where=where))
        start, drift = ((fit.start_utc_ns, fit.drift_ppm) if fit is not None else
                        (int(measured["start_utc_ns"]), float(measured["drift_ppm"])))
        return RecordingClock(start, common_offset_s, fs, drift), fit, "timing channel"
    if own is None:
        raise FlyoverInputError(
            "no start time for the recorder", where,
            "recording_start_utc (or start_utc), a file with a time reference (Broadcast WAV, "
            "TDMS), or an IRIG-B timing channel", f"none in {stream.path.name}")
    source = "typed start" if typed is not None else stream.time_reference
    return (RecordingClock(own, r.clock_offset_s + common_offset_s, fs, r.rate_error_ppm),
            None, source)


# The timing channels of a pass cut from a long recording are decoded over its span and this
# much either side: room for a recorder's own clock being seconds off, and for the fit.
TIMING_MARGIN_S = 10.0


def _timing_stretch(stream: JoinedRecording, own_ns, span_utc_ns) -> tuple[int, int] | None:
    """The frames (first, count) of a span by the recorder's own clock, with the margin; None
    for the whole recording (no span, no own start, or a span that reaches past both ends)."""
    if span_utc_ns is None or own_ns is None:
        return None
    fs = stream.sample_rate_hz
    lo = max(0, int((span_utc_ns[0] - own_ns) / 1e9 * fs - TIMING_MARGIN_S * fs))
    hi = min(stream.n_frames, int((span_utc_ns[1] - own_ns) / 1e9 * fs + TIMING_MARGIN_S * fs))
    if hi - lo < 2 * TIMING_MARGIN_S * fs or (lo == 0 and hi == stream.n_frames):
        return None
    return lo, hi - lo

"""Load everything one pass needs, checked, as core objects."""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from flyover.geometry.overview import pass_geometry
from flyover.acoustics.atmosphere import Atmosphere
from flyover.acoustics.weather import weather_flags, weather_over
from flyover.geometry.track import (TrackModel, antenna_to_origin, fit_track,
                                    heading_through_air)
from flyover.geometry.windows import polar_angle_deg
from flyover.io.readers import read
from flyover.io.recorders import JoinedRecording, join_files
from flyover.io.readers.layout_csv import ArrayLayout
from flyover.io.results.alignment import read_alignment
from flyover.campaign import (ArraySpec, Campaign, PassSpec, RecorderSpec, RotorSpec,
                              pass_array)
from flyover.model.flightdata import TrackSamples
from flyover.model.errors import FlyoverInputError
from flyover.model.timebase import ArrayClock, RecordingClock, iso_utc
from flyover.pipeline._channels import channel_maps, recorder_clock
from flyover.sync.timecode import TimingFit


@dataclass(frozen=True)
class RecorderInputs:
    """One recorder of a pass, opened and mapped.

    Attributes
    ----------
    spec : RecorderSpec
    recording : JoinedRecording
        Its files as one stream.
    mics : ndarray of int
        Rows of the layout (microphones) it recorded.
    channels : ndarray of int
        0-based channel of the recording for each of those microphones.
    clock : RecordingClock
        Its clock (before the pass's common offset).
    timing : TimingFit or None
        The clock measured from its timing channel(s), when it has one.
    start_source : str
        Where its start time came from.
    """

    spec: RecorderSpec
    recording: JoinedRecording
    mics: np.ndarray
    channels: np.ndarray
    clock: RecordingClock
    timing: TimingFit | None
    start_source: str


@dataclass(frozen=True)
class PassInputs:
    """A pass's inputs, validated and converted.

    Attributes
    ----------
    spec : PassSpec
    layout : ArrayLayout
    pa_per_unit : ndarray, shape (n_mics,)
        Calibration of each layout microphone (layout order).
    recorders : tuple of RecorderInputs
    clock : ArrayClock
        Every microphone's sample clock on the pass epoch (the first recorder's corrected start).
    track : TrackModel
        Times in seconds after the clock's epoch (the body origin's path).
    weights : ndarray, shape (n_mics,)
        1 for microphones used, 0 for excluded ones.
    atmosphere : Atmosphere
        The pass's: typed, or the weather file's mean over the analysed stretch.
    track_samples : TrackSamples
        The track file's samples over the recording (as read: antenna positions).
    rotors : tuple of RotorSpeeds
        The campaign's rotors with their speeds from the track file (empty without).
    weather : dict or None
        The weather file's summary over the pass (:func:`flyover.acoustics.weather.weather_over`)
        with its ``flags``; None when the atmosphere was typed.
    array : ArraySpec or None
        The array the pass was flown over (its own or the campaign's).
    """

    spec: PassSpec
    layout: ArrayLayout
    pa_per_unit: np.ndarray
    recorders: tuple[RecorderInputs, ...]
    clock: ArrayClock
    track: TrackModel
    weights: np.ndarray
    atmosphere: Atmosphere
    track_samples: TrackSamples
    rotors: tuple[RotorSpeeds, ...] = ()
    weather: dict | None = None
    array: ArraySpec | None = None

    @property
    def sample_rate_hz(self) -> float:
        """The recorders' nominal sample rate (one for the whole pass)."""
        return self.recorders[0].recording.sample_rate_hz

    @property
    def n_channels(self) -> int:
        return sum(r.recording.n_channels for r in self.recorders)

    @property
    def center_microphone(self) -> int:
        """The used microphone nearest the array's centre (layout row)."""
        distance = np.linalg.norm(self.layout.enu_m - self.layout.center_enu_m, axis=1)
        return int(np.argmin(np.where(self.weights > 0, distance, np.inf)))

    def holds(self, first_frame, n_frames: int) -> bool:
        """Whether every recorder holds its frames [first, first + n)."""
        return all(0 <= first_frame[r.mics[0]] and first_frame[r.mics[0]] + n_frames
                   <= r.recording.n_frames for r in self.recorders)

    def read_units(self, first_frame, n_frames: int, *, pad: bool = False) -> np.ndarray:
        """The microphones' samples in recorded units, float32 (n_mics, n_frames), row m from
        frame ``first_frame[m]`` of its recorder; ``pad`` fills frames outside a recording
        with silence instead of refusing them."""
        out = np.zeros((len(self.layout.channel), n_frames), np.float32)
        for r in self.recorders:
            first = int(first_frame[r.mics[0]])
            lo, hi = (max(0, first), min(r.recording.n_frames, first + n_frames)) if pad else (
                first, first + n_frames)
            if hi > lo:
                out[r.mics, lo - first:hi - first] = r.recording.read(lo, hi - lo, r.channels)
        return out

    def read_pressure_pa(self, first_frame, n_frames: int, *, pad: bool = False) -> np.ndarray:
        """Calibrated pressure (Pa) of the microphones, float32 (n_mics, n_frames); see
        :meth:`read_units`."""
        units = self.read_units(first_frame, n_frames, pad=pad)
        return units * self.pa_per_unit[:, None].astype(np.float32)

    def block_reader(self, margin_frames: int, *, ahead_frames: int | None = None,
                     forward: bool = False):
        """``read(first_frame, n_frames)``: :meth:`read_pressure_pa` with ``pad=True``, served
        from blocks read ``margin_frames`` wider before and ``ahead_frames`` (default the same)
        after, so that a step reading many overlapping spans (a scan over offsets, a sweep
        along the pass) reads each stretch of the files once. The values are a direct read's.
        ``forward``: the spans only move on (a sweep), so blocks that end before a span's
        start are dropped; otherwise every block is kept for the reader's life."""
        ahead = margin_frames if ahead_frames is None else ahead_frames
        blocks = []

        def read(first_frame, n_frames: int) -> np.ndarray:
            first = np.asarray(first_frame, np.int64)
            if forward:
                blocks[:] = [(lo, d) for lo, d in blocks if (lo + d.shape[1] > first).any()]
            for lo, data in blocks:
                offset = first - lo
                if offset.min() >= 0 and offset.max() + n_frames <= data.shape[1]:
                    break
            else:
                lo = first - margin_frames
                data = self.read_pressure_pa(lo, n_frames + margin_frames + ahead, pad=True)
                blocks.append((lo, data))
                offset = first - lo
            # Row by row: the microphones of one recorder share an offset, and a slice copies
            # far faster than a gather through an index array of every sample.
            out = np.empty((len(first), n_frames), data.dtype)
            for m, o in enumerate(offset):
                out[m] = data[m, o:o + n_frames]
            return out

        return read

    def read_microphone_pa(self, mic: int, first_frame: int, n_frames: int) -> np.ndarray:
        """Calibrated pressure (Pa) of one microphone (layout row), float64 (n_frames,), from
        frame ``first_frame`` of its recorder: that channel alone is read."""
        r = next(r for r in self.recorders if mic in r.mics)
        ch = r.channels[int(np.flatnonzero(r.mics == mic)[0])]
        return r.recording.read(first_frame, n_frames, [ch])[0] * float(self.pa_per_unit[mic])

    def frames_at(self, time_s: float) -> np.ndarray:
        """Per microphone, the frame of its recorder at a time (s after the epoch), floored."""
        idx = self.clock.sample_index(np.full((len(self.layout.channel), 1), float(time_s)))
        return self.clock.first_frames(idx)

    def covered_frames(self, covered_s) -> tuple[np.ndarray, int]:
        """Per microphone the first frame of its recorder within a span of seconds after the
        epoch, and the frames from there that every recorder holds."""
        first = np.maximum(self.frames_at(covered_s[0]), 0)
        last = self.frames_at(covered_s[1]) + 2
        n = min(min(r.recording.n_frames, int(last[r.mics[0]])) - int(first[r.mics[0]])
                for r in self.recorders)
        return first, max(n, 0)

    def raw_blocks(self, first_frame, n_frames: int, block_frames: int = 1 << 16):
        """The microphones' samples in recorded units over ``n_frames`` from ``first_frame``,
        block by block (float32 (n_mics, <= block_frames)): memory follows the block."""
        for start in range(0, n_frames, block_frames):
            yield self.read_units(np.asarray(first_frame) + start,
                                  min(block_frames, n_frames - start))

    @property
    def recording_span_s(self) -> tuple[float, float]:
        """First and last times (s after the epoch) at which every recorder records, within
        the pass's own span of a longer recording."""
        return common_span_s(self.clock, self.recorders, self.spec.span_utc_ns)

    def recorder_span_s(self, r: RecorderInputs) -> tuple[float, float]:
        return recorder_span_s(self.clock, r)

    @property
    def duration_s(self) -> float:
        lo, hi = self.recording_span_s
        return hi - lo

    @property
    def common_offset_s(self) -> float:
        """The clock offset common to all recorders (the pass's ``clock_offset_s``)."""
        r = self.recorders[0]
        return r.clock.clock_offset_s - r.spec.clock_offset_s


def recorder_span_s(clock: ArrayClock, r: RecorderInputs) -> tuple[float, float]:
    """First and last sample times of a recorder, seconds after the pass epoch."""
    m = r.mics[0]
    return (float(clock.start_s[m]),
            float(clock.start_s[m] + (r.recording.n_frames - 1) / clock.rate_hz[m]))


def common_span_s(clock: ArrayClock, recorders, limit_utc_ns=None) -> tuple[float, float]:
    """First and last times (s after the epoch) at which every recorder records, within
    ``limit_utc_ns`` (start, end) when given."""
    spans = [recorder_span_s(clock, r) for r in recorders]
    if limit_utc_ns is not None:
        spans.append(tuple(float(t) for t in clock.seconds_since_epoch(limit_utc_ns)))
    return max(s[0] for s in spans), min(s[1] for s in spans)


@dataclass(frozen=True)
class RotorSpeeds:
    """A rotor of the vehicle with its speed over the pass.

    Attributes
    ----------
    spec : RotorSpec
    time_s : ndarray, shape (n,)
        Seconds after the pass epoch.
    rpm : ndarray, shape (n,)
    """

    spec: RotorSpec
    time_s: np.ndarray
    rpm: np.ndarray

    def summary(self) -> dict:
        """What alignment.json records: the rotor, and its speed against time."""
        return {"rotor": self.spec.name, "motor": self.spec.motor, "blades": self.spec.blades,
                "body_m": list(self.spec.body_m), "samples": len(self.rpm),
                "rpm_mean": float(np.mean(self.rpm)) if len(self.rpm) else None,
                "blade_passing_hz_mean": (float(np.mean(self.rpm)) * self.spec.blades / 60.0
                                          if len(self.rpm) else None),
                "time_s": [round(float(t), 4) for t in self.time_s],
                "rpm": [round(float(v), 2) for v in self.rpm]}


# The track is cut to the recording and this margin before it is fitted: a whole flight's log
# may hold gaps (no fix on the ground) that have nothing to do with the pass.
TRACK_MARGIN_S = 10.0


MAX_HEIGHT_ABOVE_ARRAY_M = 600.0


MIN_TRACK_MOVEMENT_M = 1.0


def load_layout(campaign: Campaign, pass_name: str) -> ArrayLayout:
    """The layout of the array a pass was flown over; raised microphones must give their
    heights above the ground."""
    array = pass_array(campaign, pass_name)
    layout = read("layout", array.layout, site=campaign.site, height_datum=array.height_datum,
                  geoid_undulation_m=campaign.geoid_undulation_m)
    if array.mounting == "raised" and layout.mic_height_m is None:
        raise FlyoverInputError("raised microphones need their heights above the ground",
                                f"{array.layout}", "a column mic_height_m (m above the ground "
                                "under each microphone, e.g. 1.2)", "no such column",
                                "the ground's reflection is modelled from it")
    return layout


def pass_recorders(campaign: Campaign, name: str, layout: ArrayLayout, offset: float,
                   measured_clocks: dict | None = None):
    """A pass's recorders with their clocks, the array's clock over them and each
    microphone's calibration (Pa per recorded unit)."""
    spec = campaign.passes[name]
    array = pass_array(campaign, name)
    where = f"{campaign.config_path}, key passes.{name}.recording"
    streams = [join_files(r.files, where=f"{where}, recorder '{r.name}'") for r in spec.recorders]
    maps = channel_maps(array, spec, layout, streams, where)
    rates = {r.name: s.sample_rate_hz for r, s in zip(spec.recorders, streams)}
    if len(set(rates.values())) > 1:
        raise FlyoverInputError(
            "the recorders of a pass have different sample rates", where,
            "one nominal sample rate for all recorders of a pass",
            ", ".join(f"{n}: {v:g} Hz" for n, v in rates.items()),
            "set the recorders to one rate (their drifts are measured separately)")
    pa_per_unit = np.empty(len(layout.channel))
    for r, (mics, _, _) in zip(spec.recorders, maps):
        table = r.calibration or spec.calibration
        cal = read("calibration", table, channels=layout.channel[mics])
        pa_per_unit[mics] = [cal[int(c)] for c in layout.channel[mics]]
    recorders = []
    for r, stream, (mics, chans, timing) in zip(spec.recorders, streams, maps):
        clock, fit, source = recorder_clock(r, stream, timing, offset,
                                             (measured_clocks or {}).get(r.name),
                                             f"{where}, recorder '{r.name}'",
                                             span_utc_ns=spec.span_utc_ns)
        recorders.append(RecorderInputs(r, stream, mics, chans, clock, fit, source))
    mic_recorder = np.empty(len(layout.channel), int)
    for k, (mics, _, _) in enumerate(maps):
        mic_recorder[mics] = k
    clock = ArrayClock.of_recorders([r.clock for r in recorders], mic_recorder)
    return tuple(recorders), clock, pa_per_unit


def load_pass(campaign: Campaign, name: str, clock_offset_s: float | None = None,
              quality_excluded=(), measured_clocks: dict | None = None) -> PassInputs:
    """Read and check the layout, recorders, calibrations, clocks and track of one pass.

    Parameters
    ----------
    campaign : Campaign
    name : str
        Pass name.
    clock_offset_s : float, optional
        Overrides the config's common clock offset (once an 'auto' offset has been estimated).
    quality_excluded : sequence of int
        Channels the data-quality checks flagged; left out unless the config keeps them.
    measured_clocks : dict, optional
        Recorder name -> ``{"start_utc_ns", "drift_ppm"}`` already measured from its timing
        channel (the alignment's), so that later stages do not decode it again.
    """
    if name not in campaign.passes:
        raise FlyoverInputError(f"no pass named '{name}'", str(campaign.config_path),
                                f"one of {sorted(campaign.passes)}")
    spec = campaign.passes[name]
    layout = load_layout(campaign, name)
    array = pass_array(campaign, name)
    offset = clock_offset_s if clock_offset_s is not None else spec.clock_offset_s
    if offset == "auto":
        offset = 0.0  # the alignment stage estimates it; until then the recorders' times are used
    recorders, clock, pa_per_unit = pass_recorders(campaign, name, layout, float(offset),
                                                   measured_clocks)
    span = common_span_s(clock, recorders, spec.span_utc_ns)
    if spec.span_utc_ns is not None and span[1] - span[0] <= 0:
        whole = common_span_s(clock, recorders)
        raise FlyoverInputError(
            f"pass {name}'s span lies outside its recording",
            f"{campaign.config_path}, key passes.{name}.span_utc",
            "a span inside the recording, "
            + "[" + ", ".join(iso_utc(int(t)) for t in clock.utc_ns(np.array(whole))) + "]",
            "[" + ", ".join(iso_utc(int(t)) for t in spec.span_utc_ns) + "]")
    samples = _track_samples(campaign, spec, clock, span)
    track = _fit_track(spec, samples, clock, np.zeros(3))
    rotors = _rotor_speeds(campaign, spec, samples, clock)
    kept = set(array.keep_channels) | set(spec.keep_channels)
    excluded = (set(array.exclude_channels) | set(spec.exclude_channels)
                | (set(int(c) for c in quality_excluded) - kept))
    unknown = sorted(excluded - set(layout.channel.tolist()))
    if unknown:
        raise FlyoverInputError("excluded channels are not in the layout",
                                f"{campaign.config_path}, passes.{name}.exclude_channels",
                                f"channels of {array.layout}", f"{unknown}")
    weights = np.array([0.0 if int(c) in excluded else 1.0 for c in layout.channel])
    inputs = PassInputs(spec, layout, pa_per_unit, tuple(recorders), clock, track, weights,
                        spec.atmosphere, samples, rotors, array=array)
    _check_coverage(inputs)
    if campaign.weather is not None:
        atmosphere, weather = _weather_atmosphere(campaign, inputs)
        inputs = dataclasses.replace(inputs, atmosphere=atmosphere, weather=weather)
    if spec.atmosphere_profile:
        # Every straight path from the array to the vehicle crosses the layers between the
        # ground and the vehicle's height in the same shares: one uniform stand-in per pass.
        height = pass_geometry(track, layout.center_enu_m, inputs.recording_span_s).height_m
        inputs = dataclasses.replace(inputs, atmosphere=dataclasses.replace(
            inputs.atmosphere, profile=spec.atmosphere_profile).along(0.0, height))
    wind = inputs.atmosphere.wind_enu_m_s
    if samples.attitude_deg is None and np.any(wind[:2] != 0):
        # Without attitude the yaw follows the air-relative velocity, which needs the wind
        # (from the weather file, itself averaged over a stretch found from the positions).
        # Only a lever arm moves the fitted positions with the yaw; without one the fit stands.
        inputs = dataclasses.replace(inputs, track=(
            track.with_wind(wind) if spec.track_antenna_offset_m is None
            else _fit_track(spec, samples, clock, wind)))
    return inputs


def _fit_track(spec: PassSpec, samples: TrackSamples, clock: ArrayClock, wind_enu_m_s):
    """The track model of the body origin: the antenna moved by its lever arm (with the yaw
    through the air when the track has no attitude) and the wind for that yaw."""
    enu = samples.enu_m
    if spec.track_antenna_offset_m is not None:
        att = (samples.attitude_deg if samples.attitude_deg is not None
               else heading_through_air(samples.utc_ns, enu, wind_enu_m_s))
        enu = antenna_to_origin(enu, att, spec.track_antenna_offset_m)
    return fit_track(clock.seconds_since_epoch(samples.utc_ns), enu, spec.track_position_noise_m,
                     samples.attitude_deg, where=str(spec.track), wind_enu_m_s=wind_enu_m_s)


def read_track(campaign: Campaign, spec: PassSpec) -> TrackSamples:
    """The whole track file of a pass (or flight), in the site frame, on UTC."""
    return read("track", spec.track, site=campaign.site, time_scale=spec.track_time_scale,
                height_datum=spec.track_height_datum,
                geoid_undulation_m=campaign.geoid_undulation_m)


def _track_samples(campaign: Campaign, spec: PassSpec, clock: ArrayClock,
                   span_s: tuple[float, float]) -> TrackSamples:
    """The track file's samples over the recording and a margin (all of them when fewer than
    eight fall there: the coverage check then says what is wrong)."""
    samples = read_track(campaign, spec)
    near = samples.between(int(clock.utc_ns(span_s[0] - TRACK_MARGIN_S)),
                           int(clock.utc_ns(span_s[1] + TRACK_MARGIN_S)))
    return near if len(near.utc_ns) >= 8 else samples


def _rotor_speeds(campaign: Campaign, spec: PassSpec, samples: TrackSamples,
                  clock: ArrayClock) -> tuple[RotorSpeeds, ...]:
    """The campaign's rotors with their motors' speeds from a flight log. A log that logs motor
    speeds must hold every motor the rotors name; a track without any (CSV, NMEA, GPX) leaves
    the rotors without speeds."""
    if not campaign.rotors or not samples.motors:
        return ()
    logged = {m.motor: m for m in samples.motors}
    out = []
    for rotor in campaign.rotors.values():
        if rotor.motor not in logged:
            raise FlyoverInputError(
                f"rotor '{rotor.name}' names motor {rotor.motor}, which the log does not hold",
                f"{spec.track} (key vehicle.rotors.{rotor.name}.motor)",
                f"one of the logged motors {sorted(logged)}", f"{rotor.motor}")
        m = logged[rotor.motor]
        out.append(RotorSpeeds(rotor, clock.seconds_since_epoch(m.utc_ns), m.rpm))
    return tuple(out)


def analysed_stretch_s(inputs: PassInputs, max_polar_offset_deg: float) -> tuple[float, float]:
    """The stretch of the track, while every recorder records, within ``max_polar_offset_deg``
    of overhead (seconds after the epoch): what the pass's windows analyse."""
    rec = inputs.recording_span_s
    lo, hi = max(inputs.track.start_s, rec[0]), min(inputs.track.end_s, rec[1])
    t = np.arange(lo, hi, 0.02)
    polar = polar_angle_deg(inputs.track.velocity(t), inputs.track.position(t),
                            inputs.layout.center_enu_m)
    inside = t[np.abs(polar - 90.0) <= max_polar_offset_deg]
    return (float(inside[0]), float(inside[-1])) if len(inside) > 1 else (lo, hi)


def _weather_atmosphere(campaign: Campaign, inputs: PassInputs) -> tuple[Atmosphere, dict]:
    """The weather file's mean atmosphere over the analysed stretch, its summary and flags."""
    weather = campaign.weather
    lo, hi = analysed_stretch_s(inputs, campaign.analysis.max_polar_offset_deg)
    samples = read("weather", weather.path)
    atm, summary = weather_over(samples, int(inputs.clock.utc_ns(lo)),
                                int(inputs.clock.utc_ns(hi)), where=str(weather.path))
    summary["flags"] = weather_flags(summary, weather.limits,
                                     course_deg(inputs.track, 0.5 * (lo + hi)))
    summary["start_utc"], summary["end_utc"] = (iso_utc(summary.pop("start_utc_ns")),
                                                iso_utc(summary.pop("end_utc_ns")))
    return atm, summary


def _check_coverage(inputs: PassInputs) -> None:
    track, clock, spec, layout = inputs.track, inputs.clock, inputs.spec, inputs.layout
    rec_start, rec_end = inputs.recording_span_s
    if rec_end <= rec_start:
        raise FlyoverInputError(
            "the recorders of the pass never record at the same time",
            f"{spec.name}: recorders " + ", ".join(r.spec.name for r in inputs.recorders),
            "recorders whose spans overlap", "spans " + "; ".join(
                f"{r.spec.name} {utc_at(clock, a)} to {utc_at(clock, b)}"
                for r in inputs.recorders for a, b in [inputs.recorder_span_s(r)]),
            "check the recorders' start times and files")
    lo, hi = max(track.start_s, rec_start), min(track.end_s, rec_end)
    if hi <= lo:
        raise FlyoverInputError(
            "the track does not cover the recording", str(spec.track),
            f"track times overlapping the recording ({utc_at(clock, rec_start)} to "
            f"{utc_at(clock, rec_end)})",
            f"track from {utc_at(clock, track.start_s)} to {utc_at(clock, track.end_s)}",
            "check the recording start time, the clock offset and the track's time scale "
            "(GPS time is 18 s ahead of UTC)")
    t = np.linspace(lo, hi, 400)
    rel = track.position(t) - layout.center_enu_m
    moved = float(np.linalg.norm(np.ptp(rel, axis=0)))
    if moved < MIN_TRACK_MOVEMENT_M:
        raise FlyoverInputError(
            "the track never moves while recording", str(spec.track),
            f"a vehicle passing over the array (at least {MIN_TRACK_MOVEMENT_M:g} m of travel)",
            f"{moved:.2f} m of travel from {utc_at(clock, lo)} to {utc_at(clock, hi)}",
            "is this the log of a hover, or of another flight?")
    height = rel[:, 2]
    if np.max(height) < 1.0:
        raise FlyoverInputError(
            "the vehicle is never above the array", str(spec.track),
            "heights above the array (WGS84 ellipsoidal)",
            f"at most {np.max(height):.1f} m above the array centre",
            "heights above mean sea level need track_height_datum: msl and the site's "
            "geoid_undulation_m")
    if np.min(height) > MAX_HEIGHT_ABOVE_ARRAY_M:
        raise FlyoverInputError(
            "implausible height above the array", str(spec.track),
            f"a flyover below {MAX_HEIGHT_ABOVE_ARRAY_M:.0f} m above the array",
            f"at least {np.min(height):.0f} m above the array centre",
            "were the heights exported in feet, or above another datum?")
    closest = float(np.min(np.linalg.norm(rel, axis=1)))
    if closest > 2000.0:
        raise FlyoverInputError("the vehicle never comes near the array while recording",
                                str(spec.track), "a pass within 2 km of the array",
                                f"closest {closest:.0f} m")


def utc_at(clock: ArrayClock, t_s: float) -> str:
    return iso_utc(int(clock.utc_ns(t_s)))


def course_deg(track, time_s: float) -> float:
    """The ground track's direction at a time, degrees clockwise from north (0-360)."""
    v = track.velocity(np.array([time_s]))[0]
    return float(np.rad2deg(np.arctan2(v[0], v[1])) % 360.0)


def load_aligned_pass(campaign: Campaign, name: str, out_dir) -> tuple[PassInputs, dict]:
    """A pass loaded with what its alignment decided (clock offset, channels left out)."""
    alignment = read_alignment(out_dir)
    measured = {r["name"]: r for r in alignment.get("recorders", [])
                if r.get("clock_method") == "timing channel"}
    inputs = load_pass(campaign, name, float(alignment["clock_offset_s"]),
                       alignment.get("quality_excluded_channels", []), measured)
    return inputs, alignment

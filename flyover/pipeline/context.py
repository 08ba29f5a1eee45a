"""Load everything one pass needs, checked, as core objects."""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from flyover.acoustics.bands import third_octave_bands
from flyover.geometry.overview import pass_geometry
from flyover.geometry.track import TrackModel, fit_track
from flyover.imaging.dedoppler import ChainSettings, window_memory_bytes
from flyover.io.readers import Recording, read
from flyover.io.readers.layout_csv import ArrayLayout
from flyover.io.results import pass_output_bytes
from flyover.io.results.alignment import read_alignment
from flyover.model.campaign import Campaign, PassSpec
from flyover.model.errors import FlyoverInputError
from flyover.sync.timebase import RecordingClock, iso_utc


@dataclass(frozen=True)
class PassInputs:
    """A pass's inputs, validated and converted.

    Attributes
    ----------
    spec : PassSpec
    layout : ArrayLayout
    pa_per_unit : ndarray, shape (n_mics,)
        Calibration of each layout microphone (layout order).
    recording : Recording
    clock : RecordingClock
    track : TrackModel
        Times in seconds after the clock's epoch.
    weights : ndarray, shape (n_mics,)
        1 for microphones used, 0 for excluded ones.
    """

    spec: PassSpec
    layout: ArrayLayout
    pa_per_unit: np.ndarray
    recording: Recording
    clock: RecordingClock
    track: TrackModel
    weights: np.ndarray

    @property
    def channel_index(self) -> np.ndarray:
        """0-based recording channel of each microphone (layout order)."""
        return self.layout.channel - 1

    def read_pressure_pa(self, first_frame: int, n_frames: int) -> np.ndarray:
        """Calibrated pressure (Pa) of the microphones, float32 (n_mics, n_frames)."""
        units = self.recording.read(first_frame, n_frames, self.channel_index)
        return units * self.pa_per_unit[:, None].astype(np.float32)

    def covered_frames(self, covered_s) -> tuple[int, int]:
        """Frames [first, last) of the recording within a span of seconds after the epoch."""
        first = max(0, int(np.floor(self.clock.sample_index(covered_s[0]))))
        last = min(self.recording.n_frames, int(np.ceil(self.clock.sample_index(covered_s[1]))) + 1)
        return first, last

    def raw_blocks(self, first: int, last: int, block_frames: int = 1 << 16):
        """The microphones' samples in recorded units over [first, last), block by block
        (float32 (n_mics, <= block_frames)): memory follows the block, not the span."""
        for start in range(first, last, block_frames):
            yield self.recording.read(start, min(block_frames, last - start), self.channel_index)

    @property
    def recording_span_s(self) -> tuple[float, float]:
        """First and last sample times, seconds after the epoch."""
        return 0.0, float(self.clock.sample_time_s(self.recording.n_frames - 1))


MAX_HEIGHT_ABOVE_ARRAY_M = 600.0
MIN_TRACK_MOVEMENT_M = 1.0


def load_layout(campaign: Campaign) -> ArrayLayout:
    return read("layout", campaign.array.layout, site=campaign.site,
                height_datum=campaign.array.height_datum,
                geoid_undulation_m=campaign.geoid_undulation_m)


def load_pass(campaign: Campaign, name: str, clock_offset_s: float | None = None,
              quality_excluded=()) -> PassInputs:
    """Read and check the layout, calibration, recording header and track of one pass.

    Parameters
    ----------
    campaign : Campaign
    name : str
        Pass name.
    clock_offset_s : float, optional
        Overrides the config's clock offset (used once an 'auto' offset has been estimated).
    quality_excluded : sequence of int
        Channels the data-quality checks flagged; left out unless the config keeps them.
    """
    if name not in campaign.passes:
        raise FlyoverInputError(f"no pass named '{name}'", str(campaign.config_path),
                                f"one of {sorted(campaign.passes)}")
    spec = campaign.passes[name]
    layout = load_layout(campaign)
    info = read("recording", spec.recording)
    extra = set(campaign.array.extra_channels)
    expected = set(layout.channel.tolist()) | extra
    if expected != set(range(1, info.n_channels + 1)) or extra & set(layout.channel.tolist()):
        raise FlyoverInputError(
            "layout and recording disagree on the channels", str(spec.recording),
            f"{len(layout.channel)} microphone channels as in {campaign.array.layout}"
            + (f" plus extra channels {sorted(extra)}" if extra else ""),
            f"{info.n_channels} channels in the recording",
            "give one layout row per microphone channel, and list channels that are not "
            "microphones (a PPS or timecode track) in array.extra_channels")
    cal = read("calibration", spec.calibration, channels=layout.channel)
    pa_per_unit = np.array([cal[int(c)] for c in layout.channel])
    offset = clock_offset_s if clock_offset_s is not None else spec.clock_offset_s
    if offset == "auto":
        offset = 0.0  # the alignment stage estimates it; until then the header time is used
    clock = RecordingClock(spec.recording_start_utc_ns, float(offset), info.sample_rate_hz,
                           spec.rate_error_ppm)
    samples = read("track", spec.track, site=campaign.site, time_scale=spec.track_time_scale,
                   height_datum=spec.track_height_datum,
                   geoid_undulation_m=campaign.geoid_undulation_m)
    track = fit_track(clock.seconds_since_epoch(samples.utc_ns), samples.enu_m,
                      spec.track_position_noise_m, samples.attitude_deg, where=str(spec.track))
    kept = set(campaign.array.keep_channels) | set(spec.keep_channels)
    excluded = (set(campaign.array.exclude_channels) | set(spec.exclude_channels)
                | (set(int(c) for c in quality_excluded) - kept))
    unknown = sorted(excluded - set(layout.channel.tolist()))
    if unknown:
        raise FlyoverInputError("excluded channels are not in the layout",
                                f"{campaign.config_path}, passes.{name}.exclude_channels",
                                f"channels of {campaign.array.layout}", f"{unknown}")
    weights = np.array([0.0 if int(c) in excluded else 1.0 for c in layout.channel])
    _check_coverage(track, clock, info, spec, layout)
    return PassInputs(spec, layout, pa_per_unit, info, clock, track, weights)


def _check_coverage(track: TrackModel, clock: RecordingClock, info: Recording,
                    spec: PassSpec, layout: ArrayLayout) -> None:
    rec_end = float(clock.sample_time_s(info.n_frames - 1))
    lo, hi = max(track.start_s, 0.0), min(track.end_s, rec_end)
    if hi <= lo:
        raise FlyoverInputError(
            "the track does not cover the recording", str(spec.track),
            f"track times overlapping the recording ({_utc(clock, 0.0)} to "
            f"{_utc(clock, rec_end)})",
            f"track from {_utc(clock, track.start_s)} to {_utc(clock, track.end_s)}",
            "check the recording start time, the clock offset and the track's time scale "
            "(GPS time is 18 s ahead of UTC)")
    t = np.linspace(lo, hi, 400)
    rel = track.position(t) - layout.center_enu_m
    moved = float(np.linalg.norm(np.ptp(rel, axis=0)))
    if moved < MIN_TRACK_MOVEMENT_M:
        raise FlyoverInputError(
            "the track never moves while recording", str(spec.track),
            f"a vehicle passing over the array (at least {MIN_TRACK_MOVEMENT_M:g} m of travel)",
            f"{moved:.2f} m of travel from {_utc(clock, lo)} to {_utc(clock, hi)}",
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


def _utc(clock: RecordingClock, t_s: float) -> str:
    return iso_utc(int(clock.utc_ns(t_s)))


def pass_summary(inputs: PassInputs) -> dict:
    """The facts `flyover check` prints and the alignment stage records for one pass."""
    geo = pass_geometry(inputs.track, inputs.layout.center_enu_m, inputs.recording_span_s)
    clock = inputs.clock
    atm = inputs.spec.atmosphere
    return {
        "pass": inputs.spec.name,
        "channels": int(inputs.recording.n_channels),
        "channels_used": int(inputs.weights.sum()),
        "sample_rate_hz": inputs.recording.sample_rate_hz,
        "duration_s": inputs.recording.duration_s,
        "epoch_utc": iso_utc(clock.epoch_utc_ns),
        "clock_offset_s": clock.clock_offset_s,
        "clock_offset_auto": inputs.spec.clock_offset_s == "auto",
        "track_start_utc": iso_utc(int(clock.utc_ns(inputs.track.start_s))),
        "track_end_utc": iso_utc(int(clock.utc_ns(inputs.track.end_s))),
        "covered_s": [geo.covered_s[0], geo.covered_s[1]],
        "overhead_utc": iso_utc(int(clock.utc_ns(geo.closest_s))),
        "overhead_s": geo.closest_s,
        "closest_distance_m": geo.closest_m,
        "height_above_array_m": geo.height_m,
        "speed_m_s": geo.speed_m_s,
        "track_noise_estimate_m": inputs.track.residual_rms_m(),
        "speed_of_sound_m_s": atm.c_m_s,
        "array_aperture_m": inputs.layout.aperture_m,
    }


def check_memory(campaign: Campaign, inputs: PassInputs, share: float = 0.5) -> None:
    """Refuse a window or grid whose processing would need more than ``share`` of the memory."""
    an = campaign.analysis
    settings = ChainSettings(third_octave_bands(an.band_min_hz, an.band_max_hz), inputs.weights,
                             campaign.array.pressure_gain, an.interpolation)
    fs = inputs.recording.sample_rate_hz
    n_grid = int(np.prod(campaign.grid.shape))
    need = window_memory_bytes(n_grid, len(inputs.layout.channel), int(an.window_s * fs),
                               len(settings.bands), settings)
    have = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    if need > share * have:
        raise FlyoverInputError(
            "window or vehicle grid too large for the memory available",
            f"{campaign.config_path}, keys vehicle.grid and analysis.window_s",
            f"at most {share * have / 2 ** 30:.1f} GiB per window ({share:.0%} of this machine)",
            f"about {need / 2 ** 30:.1f} GiB for {campaign.grid.shape[0]} x "
            f"{campaign.grid.shape[1]} grid points, {len(inputs.layout.channel)} microphones and "
            f"{an.window_s} s windows",
            "use a coarser spacing_m, a smaller grid or a shorter window_s")


def load_aligned_pass(campaign: Campaign, name: str, out_dir) -> tuple[PassInputs, dict]:
    """A pass loaded with what its alignment decided (clock offset, channels left out)."""
    alignment = read_alignment(out_dir)
    inputs = load_pass(campaign, name, float(alignment["clock_offset_s"]),
                       alignment.get("quality_excluded_channels", []))
    return inputs, alignment


def output_bytes(campaign: Campaign, inputs: PassInputs) -> int:
    """About how many bytes the results of a pass will take."""
    an = campaign.analysis
    n_windows = int(inputs.recording.duration_s / an.hop_s) + 1
    return pass_output_bytes(n_windows, len(third_octave_bands(an.band_min_hz, an.band_max_hz)),
                             int(np.prod(campaign.grid.shape)))

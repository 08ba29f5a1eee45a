"""The campaign as plain data: what the config describes, in core types and SI units.

These dataclasses are built by :mod:`flyover.io.config` from the user's YAML file; the core and the
stages take them, never the raw config mapping.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from pathlib import Path


from flyover.acoustics.atmosphere import Atmosphere, AtmosphereLayer
from flyover.acoustics.ground import GroundSurface
from flyover.acoustics.hemisphere import HemisphereSettings
from flyover.acoustics.uncertainty import InputUncertainty
from flyover.geometry.frames import SiteFrame
from flyover.geometry.vehicle import Region, VehicleGrid
from flyover.imaging.chain import MethodTuning
from flyover.model.errors import require

# G of the source model per mounting; raised microphones see the direct path as in free field
# and the ground's reflection through its own model (flyover.acoustics.ground).
MOUNTING_GAIN = {"ground-plate": 2.0, "free-field": 1.0, "raised": 1.0}


@dataclass(frozen=True)
class ReferenceFlight:
    """The flight the single-event metrics are reconstructed for: straight and level at
    ``height_m`` (default: the reference distance) and ``speed_m_s`` (default: the pass's own)
    over an observer on a ground plate or 1.2 m above hard ground (``raised``), in the
    reference atmosphere. ``adjustment`` names the certification procedure whose simple
    height and speed adjustment of the measured levels is compared with it
    (``propeller-aeroplane``: 14 CFR 36 App. G; ``helicopter``: App. J; ``none``)."""

    height_m: float | None = None
    speed_m_s: float | None = None
    observer: str = "ground-plate"
    adjustment: str = "none"


@dataclass(frozen=True)
class AnalysisSettings:
    """How windows, bands and levels are formed.

    Attributes
    ----------
    window_s : float
        Emission-time window length.
    hop_s : float or None
        Step between windows in emission time; None with ``window_polar_step_deg``.
    band_min_hz, band_max_hz : float
        One-third-octave bands analysed (exact midbands inside this range).
    reference_distance_m : float
    reference_atmosphere : Atmosphere
    method : str
        Imaging method by name (:mod:`flyover.imaging.methods`): the headline, whose levels
        every later step uses.
    other_methods : tuple of str
        Methods run beside it, for comparison (their levels in levels_by_method.csv), on every
        pass that does not name its own (:attr:`PassSpec.other_methods` is what a pass runs).
    interpolation : str
        ``"cubic"`` (4-point Lagrange) or ``"sinc"`` (windowed sinc, band-limited).
    band_absorption : str
        The reference atmosphere's absorption over the reference distance: ``"midband"``
        (ISO 9613-1 pure tone at the exact midband) or ``"band"`` (integrated over the band,
        after SAE ARP 5534).
    diagonal_removal : bool
    max_polar_offset_deg : float
        Windows whose polar angle is further than this from 90 deg are not analysed.
    window_polar_step_deg : float or None
        Step between windows in polar angle (deg) instead of ``hop_s``: every pass's windows
        then lie at the same angles, and wide angles take few windows.
    map_dynamic_range_db : float
        Range shown under each map's peak in the figures.
    spectra_polar_deg : tuple of float
        Polar angles at which region spectra are tabulated and drawn.
    overall_band_range_hz : (float, float) or None
        Bands summed into every overall level (None: per label, the bands with a level in every
        analysed window of every pass of the label).
    reference_flight : ReferenceFlight
    uncertainty : InputUncertainty
        Standard uncertainties of the inputs behind every level's uncertainty.
    metrics_channel : int or None
        Layout channel of the microphone the single-event metrics are measured at (None: the
        used microphone nearest the array centre).
    hemisphere : HemisphereSettings
        The grid, fit and band ranges of the directivity hemispheres.
    rotor_harmonics : int
        Blade-passing harmonics fitted per rotor (k = 1..K).
    method_tuning : MethodTuning
        The imaging methods' tunables.
    comparisons : tuple of (str, str)
        Label pairs (A, B) the workflow compares, B minus A (:mod:`flyover.pipeline.compare`).
    """

    window_s: float
    hop_s: float | None
    band_min_hz: float
    band_max_hz: float
    reference_distance_m: float
    reference_atmosphere: Atmosphere
    method: str = "time-domain"
    other_methods: tuple[str, ...] = ()
    interpolation: str = "cubic"
    band_absorption: str = "midband"
    diagonal_removal: bool = True
    max_polar_offset_deg: float = 60.0
    map_dynamic_range_db: float = 15.0
    spectra_polar_deg: tuple[float, ...] = (60.0, 75.0, 90.0, 105.0, 120.0)
    metrics_channel: int | None = None
    reference_flight: ReferenceFlight = ReferenceFlight()
    uncertainty: InputUncertainty = InputUncertainty()
    overall_band_range_hz: tuple[float, float] | None = None
    hemisphere: HemisphereSettings = HemisphereSettings()
    rotor_harmonics: int = 4
    window_polar_step_deg: float | None = None
    method_tuning: MethodTuning = MethodTuning()
    comparisons: tuple[tuple[str, str], ...] = ()

    def __post_init__(self):
        require((self.hop_s is None) != (self.window_polar_step_deg is None),
                "windows need one step: in time or in polar angle",
                "analysis.hop_s / analysis.window_polar_step_deg", "exactly one of the two",
                "both" if self.hop_s is not None else "neither")
        require(self.window_s > 0 and (self.hop_s is None or self.hop_s > 0),
                "window and hop must be positive", "analysis.window_s/hop_s",
                "positive durations in seconds", f"{self.window_s}, {self.hop_s}")
        require(math.isfinite(self.reference_distance_m) and self.reference_distance_m > 0,
                "reference distance must be a positive finite distance",
                "analysis.reference_distance_m", "a distance in metres such as 100",
                f"{self.reference_distance_m}")
        require(self.band_absorption in ("midband", "band"), "unknown band absorption",
                "analysis.band_absorption", "'midband' or 'band'", f"'{self.band_absorption}'")
        require(self.interpolation in ("cubic", "sinc"), "unknown interpolation",
                "analysis.interpolation", "'cubic' or 'sinc'", f"'{self.interpolation}'")

    def window_count_bound(self, duration_s: float) -> int:
        """At most how many windows a pass of ``duration_s`` seconds is cut into."""
        if self.hop_s is None:
            return 2 * int(self.max_polar_offset_deg / self.window_polar_step_deg) + 1
        return int(duration_s / self.hop_s) + 1


@dataclass(frozen=True)
class RecorderSpec:
    """One recorder (or DAQ chassis) of a pass: its files, its channels and its clock.

    Attributes
    ----------
    name : str
    files : tuple of Path
        Its files; consecutive files of a split take are joined by their start times.
    channels : tuple of (int, int or str) pairs, or None
        (layout channel, recorder channel): the recorder channel is a 1-based index or a name
        (TDMS ``group/channel``, iXML track). None: recorder channel k is layout channel k.
    calibration : Path or None
        Its calibration table (keyed by layout channel); None: the pass's.
    start_utc_ns : int or None
        A typed start time of its first sample; None: from its files or its time code.
    clock_offset_s : float
        Its own correction, added to the pass's ``clock_offset_s``.
    rate_error_ppm : float
        Its sample-rate error when no timing channel measures it.
    timing_channels : tuple of (int or str)
        PPS and/or IRIG-B channels (detected by their content); empty for none.
    """

    name: str
    files: tuple[Path, ...]
    channels: tuple[tuple[int, int | str], ...] | None = None
    calibration: Path | None = None
    start_utc_ns: int | None = None
    clock_offset_s: float = 0.0
    rate_error_ppm: float = 0.0
    timing_channels: tuple[int | str, ...] = ()


@dataclass(frozen=True)
class PassSpec:
    """One pass of the campaign: its recorders, track, clock and atmosphere.

    ``clock_offset_s`` is common to all recorders (a number, or ``"auto"`` for the acoustic
    estimate); ``calibration`` is the pass's table for recorders without their own.
    ``atmosphere`` is None when the campaign's weather file gives it (resolved per pass when the
    pass is loaded); ``track_antenna_offset_m`` is the GNSS antenna's position in body axes
    (None: the track is the body origin's); ``array`` its own array (None: the campaign's);
    ``atmosphere_profile`` the air by height above the array (empty: uniform); ``partial``
    says the track is meant not to pass overhead (no 90 deg window), which `flyover check`
    otherwise refuses; ``span_utc_ns`` the pass's stretch (start, end; UTC ns) of a recording
    and track that hold more (None: all of it); ``other_methods`` the imaging methods run
    beside the headline on this pass (its own ``other_methods``, else the analysis's).
    """

    name: str
    recorders: tuple[RecorderSpec, ...]
    calibration: Path | None
    track: Path
    clock_offset_s: float | str
    atmosphere: Atmosphere | None
    label: str = ""
    track_time_scale: str = "utc"
    track_height_datum: str = "ellipsoidal"
    track_position_noise_m: float = 0.05
    exclude_channels: tuple[int, ...] = ()
    clock_anchor_m: tuple[float, float, float] | None = None
    clock_search_s: float = 1.0
    keep_channels: tuple[int, ...] = ()
    track_antenna_offset_m: tuple[float, float, float] | None = None
    array: ArraySpec | None = None
    atmosphere_profile: tuple[AtmosphereLayer, ...] = ()
    partial: bool = False
    span_utc_ns: tuple[int, int] | None = None
    other_methods: tuple[str, ...] = ()

    def input_files(self) -> list[Path]:
        """Every file of the pass: recordings, calibrations, the track and its own layout."""
        files = [f for r in self.recorders for f in r.files]
        files += [c for c in [self.calibration] + [r.calibration for r in self.recorders] if c]
        files += [self.array.layout] if self.array is not None else []
        return list(dict.fromkeys(files + [self.track]))

    @property
    def recording_files(self) -> list[Path]:
        return [f for r in self.recorders for f in r.files]


# What a per-pass stage may read of its pass: everything but the label, which only groups passes
# in the campaign summary (a relabelled pass re-runs the summary, not the pass), and the methods
# compared on it, which the stages that run them declare (they re-run image and levels only).
PASS_SETTINGS = tuple(f"passes.{{pass}}.{f.name}" for f in fields(PassSpec)
                      if f.name not in ("label", "other_methods"))
# What loading a pass reads (flyover.pipeline.context.load_pass): the array, the site frame, the
# rotors the track's motor speeds belong to, the weather file and the span it is averaged over.
PASS_INPUTS = ("site", "geoid_undulation_m", "array", "config_path", "rotors", "weather",
               "analysis.max_polar_offset_deg") + PASS_SETTINGS


@dataclass(frozen=True)
class RotorSpec:
    """A rotor or propeller of the vehicle: where it is, its blades, and its motor in the log.

    Attributes
    ----------
    name : str
    body_m : (float, float, float)
        Hub position in body axes.
    blades : int
    motor : int
        Its motor (ESC) number in the flight log, from 1.
    """

    name: str
    body_m: tuple[float, float, float]
    blades: int
    motor: int


@dataclass(frozen=True)
class WeatherLimits:
    """How much the weather over a pass may vary, and how windy it may be, before the pass is
    flagged. The mean-wind limits are common certification practice (12 kt mean wind and 7 kt
    crosswind, 14 CFR 36 Appendix A and ICAO Annex 16 flyover practice, from memory); the
    spreads over the pass (highest minus lowest sample) are our choice."""

    wind_mean_max_m_s: float = 6.17
    crosswind_mean_max_m_s: float = 3.6
    wind_spread_max_m_s: float = 3.0
    temperature_spread_max_k: float = 1.0


@dataclass(frozen=True)
class StoreSpec:
    """The campaign's place in a columnar store: ``folder / name / *.parquet``."""

    folder: Path
    name: str


@dataclass(frozen=True)
class SignoffLimits:
    """What a pass is held to before it is accepted (``signoff_limits`` in the campaign file;
    docs/signoff.md states each rule and its source). Breaking one flags the pass; a pass without a
    90 deg window (not meant to be partial) is rejected.

    Attributes
    ----------
    clock_uncertainty_max_ms : float
        Standard uncertainty of the clock offset (ours: 1 ms moves the sources V x 1 ms along
        the track, 2-5 cm at drone speeds).
    channels_left_out_max_pct : float
        Microphones left out by the data-quality checks, in % of the layout's.
    windows_skipped_max_pct : float
        Planned windows not analysed.
    label_height_tolerance_pct, label_speed_tolerance_pct : float
        A pass's height and speed against its label's median (ours; 14 CFR 36 App. G allows
        +-20 % of the reference height, so these are tighter).
    track_offset_max_m : float
        The acoustic track check's offset of best focus, beyond its own uncertainty.
    """

    clock_uncertainty_max_ms: float = 1.0
    channels_left_out_max_pct: float = 10.0
    windows_skipped_max_pct: float = 20.0
    label_height_tolerance_pct: float = 10.0
    label_speed_tolerance_pct: float = 5.0
    track_offset_max_m: float = 0.5


@dataclass(frozen=True)
class WeatherSpec:
    """A weather station's file for the whole campaign and the limits a pass is held to."""

    path: Path
    limits: WeatherLimits = WeatherLimits()


@dataclass(frozen=True)
class ArraySpec:
    """The microphone array: its layout file and how its microphones are mounted.

    ``plate_correction_db`` maps nominal one-third-octave midbands (Hz) to the measured response
    of the ground plates minus the ideal pressure doubling (+6.02 dB), in dB: negative where a
    plate on soft ground falls short at high frequency. Levels have it subtracted (bands not
    listed: 0). ``ground`` is the surface under ``raised`` microphones (whose heights above
    it the layout gives in a ``mic_height_m`` column).
    """

    layout: Path
    mounting: str
    height_datum: str = "ellipsoidal"
    exclude_channels: tuple[int, ...] = ()
    keep_channels: tuple[int, ...] = ()
    extra_channels: tuple[int, ...] = ()
    plate_correction_db: dict[float, float] = field(default_factory=dict)
    ground: GroundSurface | None = None

    @property
    def pressure_gain(self) -> float:
        """G of the source model: 2 for ground-plate microphones, 1 in free field."""
        return MOUNTING_GAIN[self.mounting]


@dataclass(frozen=True)
class Campaign:
    """A whole campaign as described by its config file."""

    config_path: Path
    site: SiteFrame
    geoid_undulation_m: float | None
    array: ArraySpec
    passes: dict[str, PassSpec]
    grid: VehicleGrid
    regions: dict[str, Region]
    analysis: AnalysisSettings
    output: Path
    outline_m: tuple[tuple[float, float], ...] = ()
    scenario: Path | None = None
    rotors: dict[str, RotorSpec] = field(default_factory=dict)
    weather: WeatherSpec | None = None
    weather_limits: WeatherLimits = WeatherLimits()
    signoff_limits: SignoffLimits = SignoffLimits()
    store: StoreSpec | None = None

    def input_files(self) -> list[Path]:
        """Every input file the campaign names: config, layout, weather, recordings,
        calibrations, tracks."""
        files = [self.config_path, self.array.layout] + ([self.weather.path] if self.weather
                                                         else [])
        for p in self.passes.values():
            files += p.input_files()
        return list(dict.fromkeys(files))


def pass_array(campaign: Campaign, pass_name: str) -> ArraySpec:
    """The array a pass was flown over: its own when it gives one, else the campaign's."""
    own = campaign.passes[pass_name].array
    return own if own is not None else campaign.array

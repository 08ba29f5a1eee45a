"""Read and validate a campaign config (YAML) into :class:`flyover.campaign.Campaign`."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere, AtmosphereLayer
from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.ground import GroundSurface
from flyover.geometry.frames import SiteFrame
from flyover.acoustics.hemisphere import HemisphereSettings
from flyover.acoustics.uncertainty import InputUncertainty
from flyover.imaging.methods import DEFAULT_METHOD, method_names, methods
from flyover.io.timestamps import parse_utc_ns, parse_utc_ns_array
from flyover.io.yamlfile import read_yaml, validate_mapping
from flyover.campaign import (AnalysisSettings, ArraySpec, Campaign, PassSpec,
                              RecorderSpec, ReferenceFlight, RotorSpec, SignoffLimits, StoreSpec,
                              WeatherLimits, WeatherSpec)
from flyover.geometry.vehicle import Region, VehicleGrid
from flyover.imaging.chain import MethodTuning
from flyover.model.constants import MIN_OVERALL_BANDS
from flyover.model.errors import FlyoverInputError, suggest
from flyover.model.timebase import iso_utc

# The campaign's folder in its store when the campaign file names none.
DEFAULT_STORE_NAME = "campaign"


def _span(p: dict, where: str) -> tuple[int, int] | None:
    """A pass's ``span_utc`` as UTC ns (start before end), or None."""
    if "span_utc" not in p:
        return None
    start, end = (int(v) for v in parse_utc_ns_array(p["span_utc"], where))
    if end <= start:
        raise FlyoverInputError("a span that ends before it starts", where,
                                "[start, end] with the start first", f"{p['span_utc']}")
    return start, end


def _check_shared_recordings(passes: dict, source: str) -> None:
    """Passes cut from one recording by their spans must not overlap. (Passes without a span
    may share a recording: the same flight analysed twice, under two labels or settings.)"""
    owners: dict[Path, list] = {}
    for spec in passes.values():
        if spec.span_utc_ns is None:
            continue
        for f in dict.fromkeys(spec.recording_files):
            owners.setdefault(f, []).append(spec)
    for f, specs in owners.items():
        for i, a in enumerate(specs):
            for b in specs[i + 1:]:
                if a.span_utc_ns[0] < b.span_utc_ns[1] and b.span_utc_ns[0] < a.span_utc_ns[1]:
                    raise FlyoverInputError(
                        f"passes {a.name} and {b.name} overlap in one recording",
                        f"{source}, key passes.{b.name}.span_utc",
                        f"spans of {f.name} apart",
                        f"{a.name} {_span_text(a.span_utc_ns)}, "
                        f"{b.name} {_span_text(b.span_utc_ns)}")


def _span_text(span_ns) -> str:
    return "[" + ", ".join(iso_utc(int(v)) for v in span_ns) + "]"


def _resolve_path(base: Path, value: str) -> Path:
    p = Path(value).expanduser()
    return p if p.is_absolute() else (base / p).resolve()


def _atmosphere(merged: dict, where: str) -> Atmosphere:
    for key in ("temperature_c", "relative_humidity_pct"):
        if key not in merged:
            raise FlyoverInputError(f"missing key '{where}.{key}'", "",
                                    "a value in the pass's atmosphere or in the campaign-level "
                                    "'atmosphere' default")
    return Atmosphere(**merged)


def _hemisphere(h: dict) -> HemisphereSettings:
    return HemisphereSettings(
        polar_step_deg=float(h.get("polar_step_deg", 10.0)),
        azimuth_step_deg=float(h.get("azimuth_step_deg", 10.0)),
        fit_degree=h.get("fit_degree"),
        band_ranges_hz=tuple(_range(r) for r in h.get("band_ranges_hz", ())))


def _imaging_method(name: str, source: str, key: str = "analysis.method") -> str:
    known = method_names()
    if name not in known:
        raise FlyoverInputError(f"unknown imaging method '{name}'",
                                f"{source}, key {key}",
                                f"one of {', '.join(known)}", hint=suggest(name, known))
    return name


def _other_methods(data: dict, where: dict, source: str, key: str) -> tuple[str, ...]:
    """The methods run beside the headline (``key.other_methods`` of ``where``; a pass without
    its own takes the analysis's), each once and never the headline itself."""
    analysis = data.get("analysis", {})
    if "other_methods" not in where:
        where, key = analysis, "analysis"
    headline = analysis.get("method", DEFAULT_METHOD)
    return tuple(dict.fromkeys(_imaging_method(m, source, f"{key}.other_methods")
                               for m in where.get("other_methods", ()) if m != headline))


def _reference_flight(data: dict, source: str) -> ReferenceFlight:
    """The reference flight, its certification-style adjustment named by a known class."""
    from flyover.acoustics.certification import CERTIFICATION_ADJUSTMENTS
    known = ["none", *sorted(CERTIFICATION_ADJUSTMENTS)]
    name = data.get("adjustment", "none")
    if name not in known:
        raise FlyoverInputError(f"unknown certification-style adjustment '{name}'",
                                f"{source}, key analysis.reference_flight.adjustment",
                                f"one of {', '.join(known)}", hint=suggest(name, known))
    return ReferenceFlight(**data)


def _check_methods_for_raised(analysis: AnalysisSettings, arrays, source: str) -> None:
    """Raised microphones need a headline method that models the ground's reflection (the
    comparison methods that do not are skipped for their passes, said in the image log)."""
    if not any(a.mounting == "raised" for a in arrays):
        return
    known = methods()
    if not known[analysis.method].raised_microphones:
        able = sorted(n for n, m in known.items() if m.raised_microphones)
        raise FlyoverInputError("the imaging method does not model raised microphones",
                                f"{source}, key analysis.method",
                                f"with mounting: raised, one of {', '.join(able)}",
                                analysis.method)


def _check_compared_labels(pairs, passes: dict, source: str) -> None:
    """Refuse a comparison naming a label no pass has, or a label against itself."""
    labels = sorted({p.label for p in passes.values()})
    for k, pair in enumerate(pairs):
        for label in pair:
            if label not in labels:
                raise FlyoverInputError(f"no pass is labelled '{label}'",
                                        f"{source}, key analysis.comparisons[{k}]",
                                        "labels of the campaign: " + ", ".join(labels),
                                        f"'{label}'", suggest(label, labels))
        if pair[0] == pair[1]:
            raise FlyoverInputError("a label compared with itself",
                                    f"{source}, key analysis.comparisons[{k}]",
                                    "two different labels [A, B]", f"{list(pair)}")


def _check_regions_apart(regions: dict[str, Region], grid: VehicleGrid, source: str) -> None:
    """Refuse regions that share grid points: source power integration gives each grid point to
    one region, and a shared point would count the same sound in both."""
    masks = {name: grid.axis_masks(r) for name, r in regions.items()}
    names = list(regions)
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            shared = int(np.sum(masks[a][0] & masks[b][0]) * np.sum(masks[a][1] & masks[b][1]))
            if shared:
                raise FlyoverInputError(
                    f"regions '{a}' and '{b}' overlap", f"{source}, key vehicle.regions",
                    "regions that share no grid point",
                    f"{shared} grid point(s) in both",
                    "source power integration would count their sound twice; move an edge of "
                    "one region by a grid spacing")


_SINGLE_ONLY = ("recording_start_utc", "rate_error_ppm", "timing_channel")


def _recorders(p: dict, base: Path, source: str, where: str) -> tuple[RecorderSpec, ...]:
    """The recorders of a pass: one for ``recording: <file>``, else one per list entry."""
    if isinstance(p["recording"], str):
        rec = {"name": "recorder", "files": p["recording"],
               **{k: p[k] for k in ("rate_error_ppm", "timing_channel") if k in p}}
        if "recording_start_utc" in p:
            rec["start_utc"] = p["recording_start_utc"]
        entries = [(rec, f"{where}")]
    else:
        given = [k for k in _SINGLE_ONLY if k in p]
        if given:
            raise FlyoverInputError(
                f"'{given[0]}' belongs to each recorder when a pass has a list of recorders",
                f"{source}, key {where}.{given[0]}", f"{where}.recording[k].{_RENAMED[given[0]]}",
                f"{where}.{given[0]}", "move it under the recorder it describes")
        entries = [(r, f"{where}.recording[{k}]") for k, r in enumerate(p["recording"])]
    out = []
    for r, at in entries:
        try:
            start = parse_utc_ns(r["start_utc"]) if "start_utc" in r else None
        except FlyoverInputError as exc:
            key = "recording_start_utc" if at == where else "start_utc"
            raise FlyoverInputError(exc.what, f"{source}, key {at}.{key}",
                                    exc.expected, exc.found, exc.hint) from None
        files = r["files"] if isinstance(r["files"], list) else [r["files"]]
        timing = r.get("timing_channel", ())
        timing = tuple(timing) if isinstance(timing, list) else (timing,) if timing != () else ()
        if timing and "clock_offset_s" in r:
            raise FlyoverInputError(
                "a recorder with a timing channel takes its clock from it", f"{source}, key "
                f"{at}.clock_offset_s", "no clock_offset_s beside timing_channel",
                f"clock_offset_s: {r['clock_offset_s']}",
                "remove it; a delay common to all recorders goes in the pass's clock_offset_s")
        out.append(RecorderSpec(
            name=r["name"], files=tuple(_resolve_path(base, f) for f in files),
            channels=_channel_map(r["channels"], f"{source}, key {at}.channels")
            if "channels" in r else None,
            calibration=_resolve_path(base, r["calibration"]) if "calibration" in r else None,
            start_utc_ns=start, clock_offset_s=float(r.get("clock_offset_s", 0.0)),
            rate_error_ppm=float(r.get("rate_error_ppm", 0.0)), timing_channels=timing))
    names = [r.name for r in out]
    if len(set(names)) < len(names):
        raise FlyoverInputError("two recorders of a pass share a name", f"{source}, key {where}",
                                "a different name for each recorder", f"{names}")
    if len(out) > 1 and any(r.channels is None for r in out):
        raise FlyoverInputError(
            "every recorder of a pass with several recorders needs its channel map",
            f"{source}, key {where}.recording", "channels: {layout channel: recorder channel}, "
            "e.g. {1-24: 1-24} or {25: 'Mic 25'}",
            f"none for {[r.name for r in out if r.channels is None]}")
    if "clock_offset_s" not in p and any(not r.timing_channels for r in out):
        raise FlyoverInputError(
            f"missing key '{where}.clock_offset_s'", source,
            "the clock offset of the recordings (s), 'auto', or a timing channel on every "
            "recorder", hint="see `flyover template` for a complete commented example")
    if "calibration" not in p and any(r.calibration is None for r in out):
        raise FlyoverInputError(f"missing key '{where}.calibration'", source,
                                "a calibration table for the pass, or one per recorder")
    if p.get("clock_offset_s") == "auto" and "clock_anchor_m" not in p:
        raise FlyoverInputError(
            "an automatic clock offset needs an anchor", f"{source}, key {where}",
            "clock_anchor_m: [x, y, z], the body position (m) of a source in the recording",
            "clock_offset_s: auto without clock_anchor_m",
            "a clock offset looks exactly like an along-track shift of the sources; give the "
            "body position of a known source (e.g. the propeller hub) or a number from a "
            "PPS/IRIG log")
    return tuple(out)


_RENAMED = {"recording_start_utc": "start_utc", "rate_error_ppm": "rate_error_ppm",
            "timing_channel": "timing_channel"}
_RANGE = re.compile(r"^\s*(\d+)\s*-\s*(\d+)\s*$")


def _channel_map(mapping: dict, where: str) -> tuple[tuple[int, int | str], ...]:
    """(layout channel, recorder channel) pairs from ``{layout: recorder}``; ranges such as
    ``1-24: 25-48`` map channel by channel."""
    pairs = []
    for key, value in mapping.items():
        key_range = _RANGE.match(str(key))
        if key_range:
            lo, hi = int(key_range[1]), int(key_range[2])
            value_range = _RANGE.match(str(value))
            if not value_range or int(value_range[2]) - int(value_range[1]) != hi - lo or hi < lo:
                raise FlyoverInputError(
                    "a range of layout channels needs a range of recorder channels as long",
                    f"{where}.{key}", f"e.g. {key}: {1}-{hi - lo + 1}", f"{value!r}")
            first = int(value_range[1])
            pairs += [(lo + k, first + k) for k in range(hi - lo + 1)]
        elif str(key).strip().isdigit() and int(key) >= 1:
            pairs.append((int(key), value))
        else:
            raise FlyoverInputError("a channel map key is not a layout channel", where,
                                    "a channel number or a range such as 1-24", f"{key!r}")
    return tuple(pairs)


def _range(value) -> tuple[float, float]:
    return float(value[0]), float(value[1])


def _array(arr: dict, base: Path, source: str, where: str) -> ArraySpec:
    """The campaign's array, or a pass's own (a pass flown over another set-up)."""
    if "ground" in arr and arr["mounting"] != "raised":
        raise FlyoverInputError("a ground is given for microphones that are not raised",
                                f"{source}, key {where}.ground", "mounting: raised",
                                f"mounting: {arr['mounting']}",
                                "ground plates and free-field microphones see no reflection")
    ground = None
    if arr["mounting"] == "raised":
        g = arr.get("ground", {})
        ground = GroundSurface(g.get("surface", "hard"),
                               float(g.get("flow_resistivity_pa_s_m2", 200e3)),
                               g.get("impedance_model", "miki"))
    return ArraySpec(_resolve_path(base, arr["layout"]), arr["mounting"],
                     arr.get("height_datum", "ellipsoidal"),
                     tuple(arr.get("exclude_channels", ())), tuple(arr.get("keep_channels", ())),
                     tuple(arr.get("extra_channels", ())),
                     _plate_correction(arr.get("plate_correction_db", []), f"{source}, key "
                                                                           f"{where}"), ground)


def _plate_correction(pairs, source: str) -> dict[float, float]:
    """The ``array.plate_correction_db`` table ([[band_hz, dB], ...]) keyed by nominal midband;
    every band must be a nominal one-third-octave midband (IEC 61260-1), each listed once."""
    nominal = set(third_octave_bands(10.0, 20000.0).nominal_hz.tolist())
    table = {}
    for k, (band, db) in enumerate(pairs):
        if float(band) not in nominal or float(band) in table:
            raise FlyoverInputError(
                "plate correction for an unknown or repeated band",
                f"{source}.plate_correction_db, entry {k + 1}",
                "nominal one-third-octave midbands such as 1000, 1250, 1600 (Hz), each once",
                f"{band}")
        table[float(band)] = float(db)
    return table


# A flight is its recording and log; what a pass of it adds is its own.
_PASS_ONLY = ("flight", "label", "partial", "span_utc")


def _check_flight(name: str, flight, source: str) -> None:
    """Refuse a flight that gives a key of each pass (its label, span, ...)."""
    given = [k for k in _PASS_ONLY if isinstance(flight, dict) and k in flight]
    if given:
        raise FlyoverInputError(f"flight {name} gives '{given[0]}', a key of each pass",
                                f"{source}, key flights.{name}.{given[0]}",
                                "the flight's recording, track and settings; labels and spans "
                                "on its passes", given[0])


def _with_flight(p: dict, flights: dict, name: str, source: str) -> dict:
    """A pass's mapping with its flight's keys where it gives none of its own."""
    if "flight" not in p:
        return p
    flight = p["flight"]
    if flight not in flights:
        raise FlyoverInputError(f"pass {name} names no known flight", f"{source}, key "
                                f"passes.{name}.flight", "one of the keys of flights: "
                                + (", ".join(sorted(flights)) or "(none given)"), flight,
                                suggest(flight, list(flights)))
    _check_flight(flight, flights[flight], source)
    return {**flights[flight], **{k: v for k, v in p.items() if k != "flight"}}


def flights_campaign(path) -> Campaign:
    """The campaign of a file with its flights in place of its passes, each flight a pass over
    its whole recording and log (for the pass finder): read and checked as passes are. The
    campaign's comparisons, which name labels of passes, are left out."""
    path = Path(path).resolve()
    data = read_yaml(path)
    if isinstance(data, dict) and not data.get("flights"):
        raise FlyoverInputError("the campaign has no flight", f"{path}, key flights",
                                "flights: NAME: {recording: ..., track: ...} (a whole flight's "
                                "recording and flight log)", "none")
    for name, flight in data["flights"].items():
        _check_flight(name, flight, str(path))
    analysis = {k: v for k, v in data.get("analysis", {}).items() if k != "comparisons"}
    return campaign_from_mapping({**data, "analysis": analysis}, path, passes_key="flights")


def _pass_spec(name: str, p: dict, where: str, *, base: Path, source: str, data: dict,
               weather, default_atm: dict) -> PassSpec:
    """One pass (or flight) from its mapping; ``where`` is its key path (``passes.NAME``)."""
    for key in ("recording", "track"):
        if key not in p:
            raise FlyoverInputError(f"missing key '{where}.{key}'", f"{source}, key {where}",
                                    "recording and track, or flight: NAME (a flight of the "
                                    "key flights, whose recording and track the pass takes)",
                                    f"keys {sorted(p)}")
    recorders = _recorders(p, base, source, where)
    if weather is not None and "atmosphere" in p:
        raise FlyoverInputError("a pass types its atmosphere although the campaign has a "
                                "weather file", f"{source}, key {where}.atmosphere",
                                "the weather file's means over the pass, or typed numbers "
                                "without a weather file", "both",
                                "drop one of them (the campaign-level 'atmosphere' may "
                                "still give what the station does not measure)")
    return PassSpec(
        name=name,
        recorders=recorders,
        calibration=_resolve_path(base, p["calibration"]) if "calibration" in p else None,
        track=_resolve_path(base, p["track"]),
        clock_offset_s=p.get("clock_offset_s", 0.0),
        atmosphere=None if weather is not None else _atmosphere(
            {**default_atm, **p.get("atmosphere", {})}, f"{where}.atmosphere"),
        label=p.get("label", ""),
        partial=bool(p.get("partial", False)),
        track_time_scale=p.get("track_time_scale", "utc"),
        track_height_datum=p.get("track_height_datum", "ellipsoidal"),
        track_position_noise_m=float(p.get("track_position_noise_m", 0.05)),
        exclude_channels=tuple(p.get("exclude_channels", ())),
        clock_anchor_m=tuple(p["clock_anchor_m"]) if "clock_anchor_m" in p else None,
        clock_search_s=float(p.get("clock_search_s", 1.0)),
        keep_channels=tuple(p.get("keep_channels", ())),
        track_antenna_offset_m=(tuple(float(v) for v in p["track_antenna_offset_m"])
                                if "track_antenna_offset_m" in p else None),
        array=_array(p["array"], base, source, f"{where}.array") if "array" in p else None,
        atmosphere_profile=tuple(AtmosphereLayer(**k) for k in p.get(
            "atmosphere_profile", data.get("atmosphere_profile", ()))),
        span_utc_ns=_span(p, f"{source}, key {where}.span_utc"),
        other_methods=_other_methods(data, p, source, where),
    )


def load_campaign(path) -> Campaign:
    """Read, validate and convert a campaign config file.

    Relative paths in the file are taken relative to the file's folder.

    Raises
    ------
    FlyoverInputError
        With the key path, the expected and the found value.
    """
    path = Path(path).resolve()
    data = read_yaml(path)
    return campaign_from_mapping(data, path)


def campaign_from_mapping(data: dict, path: Path, *, passes_key: str = "passes") -> Campaign:
    """Build a :class:`Campaign` from a parsed mapping (``path`` locates relative files;
    ``passes_key='flights'`` takes the flights as its passes)."""
    source = str(path)
    validate_mapping(data, "campaign", source)
    base = path.parent
    site_cfg = data["site"]
    site = SiteFrame(site_cfg["origin_lat_deg"], site_cfg["origin_lon_deg"],
                     site_cfg["origin_height_m"])
    array = _array(data["array"], base, source, "array")
    default_atm = data.get("atmosphere", {})
    weather = None
    weather_limits = WeatherLimits(**data.get("weather_limits", {}))
    if "weather" in data:
        weather = WeatherSpec(_resolve_path(base, data["weather"]), weather_limits)
    flights = data.get("flights", {})
    passes = {name: _pass_spec(name, _with_flight(p, flights, name, source),
                               f"{passes_key}.{name}", base=base, source=source, data=data,
                               weather=weather, default_atm=default_atm)
              for name, p in data.get(passes_key, {}).items()}
    if not passes:
        raise FlyoverInputError("the campaign has no pass", f"{source}, key passes",
                                "at least one pass", "none",
                                "with flights given, 'flyover find-passes' lists their passes "
                                "ready to paste" if flights else "")
    _check_shared_recordings(passes, source)
    geoid = site_cfg.get("geoid_undulation_m")
    needs_geoid = array.height_datum == "msl" or any(
        ps.track_height_datum == "msl" for ps in passes.values())
    if needs_geoid and geoid is None:
        raise FlyoverInputError(
            "heights above mean sea level need the geoid undulation", f"{source}, key site",
            "site.geoid_undulation_m (metres of the geoid above the WGS84 ellipsoid at the site)",
            "none", "flyover does not guess it: PROJ without a geoid grid silently leaves heights "
                    "unchanged; take N from a survey or a geoid model for the site")
    veh = data["vehicle"]
    g = veh["grid"]
    grid = VehicleGrid(_range(g["x_m"]), _range(g["y_m"]), float(g["spacing_m"]),
                       float(g.get("z_m", 0.0)))
    regions = {name: Region(name, _range(r["x_m"]), _range(r["y_m"]), grid.z_m,
                            float(r.get("convective_exponent", 2.0)))
               for name, r in veh["regions"].items()}
    for r in regions.values():
        c = r.center_m
        if not (grid.x_m[0] <= c[0] <= grid.x_m[1] and grid.y_m[0] <= c[1] <= grid.y_m[1]):
            raise FlyoverInputError(f"region '{r.name}' lies outside the vehicle grid",
                                    f"{source}, key vehicle.regions.{r.name}",
                                    f"x within {list(grid.x_m)} and y within {list(grid.y_m)}",
                                    f"centre at x = {c[0]}, y = {c[1]}")
        if not all(m.any() for m in grid.axis_masks(r)):
            raise FlyoverInputError(f"region '{r.name}' holds no grid point",
                                    f"{source}, key vehicle.regions.{r.name}",
                                    f"a rectangle at least one grid spacing "
                                    f"({grid.spacing_m} m) wide that covers grid points",
                                    f"x_m {list(r.x_m)}, y_m {list(r.y_m)}",
                                    "widen the region or refine vehicle.grid.spacing_m")
    an = data["analysis"]
    ref = an["reference_atmosphere"]
    analysis = AnalysisSettings(
        window_s=float(an["window_s"]),
        hop_s=float(an["hop_s"]) if "hop_s" in an else None,
        window_polar_step_deg=(float(an["window_polar_step_deg"])
                               if "window_polar_step_deg" in an else None),
        band_min_hz=float(an["band_min_hz"]), band_max_hz=float(an["band_max_hz"]),
        reference_distance_m=float(an["reference_distance_m"]),
        reference_atmosphere=Atmosphere(ref["temperature_c"], ref["relative_humidity_pct"],
                                        ref.get("pressure_kpa", 101.325)),
        method=_imaging_method(an.get("method", DEFAULT_METHOD), source),
        other_methods=_other_methods(data, data.get("analysis", {}), source, "analysis"),
        interpolation=an.get("interpolation", "cubic"),
        band_absorption=an.get("band_absorption", "midband"),
        diagonal_removal=bool(an.get("diagonal_removal", True)),
        max_polar_offset_deg=float(an.get("max_polar_offset_deg", 60.0)),
        map_dynamic_range_db=float(an.get("map_dynamic_range_db", 15.0)),
        spectra_polar_deg=tuple(float(v) for v in an.get("spectra_polar_deg",
                                                          (60.0, 75.0, 90.0, 105.0, 120.0))),
        metrics_channel=an.get("metrics_channel"),
        reference_flight=_reference_flight(an.get("reference_flight", {}), source),
        uncertainty=InputUncertainty(**an.get("uncertainty", {})),
        overall_band_range_hz=(_range(an["overall_band_range_hz"])
                               if "overall_band_range_hz" in an else None),
        hemisphere=_hemisphere(an.get("hemisphere", {})),
        rotor_harmonics=int(an.get("rotor_harmonics", 4)),
        method_tuning=MethodTuning(**an.get("method_tuning", {})),
        comparisons=tuple((str(a), str(b)) for a, b in an.get("comparisons", ())),
    )
    if analysis.band_min_hz > analysis.band_max_hz:
        raise FlyoverInputError("band range inverted", f"{source}, key analysis.band_min_hz",
                                "band_min_hz <= band_max_hz",
                                f"{analysis.band_min_hz} > {analysis.band_max_hz}")
    if len(third_octave_bands(analysis.band_min_hz, analysis.band_max_hz)) == 0:
        raise FlyoverInputError("no one-third-octave band in the band range",
                                f"{source}, keys analysis.band_min_hz/band_max_hz",
                                "a range holding at least one exact midband (IEC 61260-1: "
                                "1000 * 10^(k/10) Hz)",
                                f"{analysis.band_min_hz} to {analysis.band_max_hz} Hz",
                                "widen the range, e.g. to the next nominal bands")
    chosen = analysis.overall_band_range_hz
    if chosen is not None and len(third_octave_bands(*chosen)) < MIN_OVERALL_BANDS:
        raise FlyoverInputError("the overall band range holds fewer than "
                                f"{MIN_OVERALL_BANDS} one-third-octave bands",
                                f"{source}, key analysis.overall_band_range_hz",
                                f"a range of at least {MIN_OVERALL_BANDS} bands, low to high "
                                "(a sum over fewer is not an overall level)",
                                f"{list(chosen)}: "
                                f"{len(third_octave_bands(*chosen))} band(s)",
                                "leave it out to take each label's range from the levels "
                                "near overhead")
    _check_compared_labels(analysis.comparisons, passes, source)
    _check_regions_apart(regions, grid, source)
    _check_methods_for_raised(analysis, [array] + [p.array for p in passes.values() if p.array],
                              source)
    outline = tuple(_range(v) for v in veh.get("outline_m", ()))
    scenario = _resolve_path(base, data["scenario"]) if "scenario" in data else None
    rotors = {n: RotorSpec(n, tuple(float(v) for v in r["body_m"]), int(r["blades"]),
                           int(r["motor"])) for n, r in veh.get("rotors", {}).items()}
    output = _resolve_path(base, data["output"])
    store = data.get("store", {})
    # A fixed default name: results must not depend on the campaign file's own name.
    folder = _resolve_path(base, store["folder"]) if "folder" in store else output / "store"
    name = store.get("name", DEFAULT_STORE_NAME)
    return Campaign(path, site, None if geoid is None else float(geoid), array, passes, grid,
                    regions, analysis, output, outline, scenario, rotors, weather,
                    weather_limits, SignoffLimits(**data.get("signoff_limits", {})),
                    StoreSpec(folder, name))

"""Stage: validate a campaign and every input file it names; summarise each pass."""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import numpy as np

from flyover.acoustics.bands import third_octave_bands
from flyover.imaging.reception import ACCURATE_FRACTION
from flyover.imaging.planning import band_resolution, separable_from_hz
from flyover.campaign import Campaign
from flyover.model.errors import FlyoverInputError
from flyover.model.signoff import label_findings
from flyover.pipeline._facts import pass_summary
from flyover.pipeline._resources import check_memory, output_bytes
from flyover.pipeline.context import PassInputs, load_pass

def check_campaign(campaign: Campaign) -> list[dict]:
    """Check everything a run will need and summarise each pass.

    Raises :class:`FlyoverInputError` on the first problem: the output folder, every file of
    every pass (headers, tables, tracks), the set-up as a whole (sample rates, windows and bands
    against the recordings, memory) and the samples of the span each pass uses.
    """
    check_output_folder(campaign)
    loaded = [load_pass(campaign, name) for name in campaign.passes]
    rates = {p.spec.name: p.sample_rate_hz for p in loaded}
    if len(set(rates.values())) > 1:
        raise FlyoverInputError(
            "passes that share the array layout have different sample rates",
            str(campaign.config_path), "one sample rate for the campaign's recordings",
            ", ".join(f"{n}: {r:g} Hz" for n, r in rates.items()),
            "a recorder setting changed between passes; resample or split the campaign")
    summaries = []
    for p in loaded:
        check_memory(campaign, p)
        summary = pass_summary(p)
        _check_against_recording(campaign, p)
        _check_overhead(campaign, p, summary)
        _check_samples(p, summary["covered_s"])
        summary["warnings"] = _band_warnings(campaign, summary)
        summary["separation"] = _separation(campaign, p, summary)
        summaries.append(summary)
    _label_warnings(campaign, summaries)
    _check_free_space(campaign, sum(output_bytes(campaign, p) for p in loaded))
    return summaries


def _band_warnings(campaign: Campaign, summary: dict) -> list[str]:
    """Bands whose received upper edge passes the interpolation's accurate range in the windows
    furthest ahead of the vehicle (received frequency f / (1 - M cos theta))."""
    an = campaign.analysis
    bands = third_octave_bands(an.band_min_hz, an.band_max_hz)
    limit = ACCURATE_FRACTION[an.interpolation] * summary["sample_rate_hz"]
    mach = summary["speed_m_s"] / summary["speed_of_sound_m_s"]
    theta = np.deg2rad(90.0 - an.max_polar_offset_deg)
    received = bands.upper_hz / (1.0 - mach * np.cos(theta))
    over = bands.nominal_hz[received > limit]
    if not len(over):
        return []
    return [f"bands from {over[0]:g} Hz are received above the {an.interpolation} "
            f"interpolation's accurate range ({limit:.0f} Hz) in the windows "
            f"{an.max_polar_offset_deg:g} deg ahead of overhead: they will be marked invalid "
            "there (interpolation: sinc reaches 0.4 fs)"]


def _label_warnings(campaign: Campaign, summaries: list[dict]) -> None:
    """Passes of one label whose height or speed is off the label's median by more than the
    sign-off's tolerances (``signoff_limits``; added to each such pass's warnings)."""
    found = label_findings({s["pass"]: s["height_above_array_m"] for s in summaries},
                           {s["pass"]: s["speed_m_s"] for s in summaries},
                           {s["pass"]: campaign.passes[s["pass"]].label for s in summaries},
                           campaign.signoff_limits)
    for s in summaries:
        s["warnings"] += [f.text for f in found[s["pass"]]]


def _check_against_recording(campaign: Campaign, inputs: PassInputs) -> None:
    """Windows and bands that the recording can hold."""
    an = campaign.analysis
    fs = inputs.sample_rate_hz
    if an.window_s > inputs.duration_s:
        raise FlyoverInputError(
            "the analysis window is longer than the recording",
            f"{campaign.config_path}, key analysis.window_s",
            f"at most the {inputs.duration_s:.2f} s recorded in pass {inputs.spec.name}",
            f"{an.window_s} s", "use a shorter window_s (0.25-1 s is usual for drones)")
    top = third_octave_bands(an.band_min_hz, an.band_max_hz).upper_hz[-1]
    if top > fs / 2:
        raise FlyoverInputError(
            "bands above what the recording's sample rate can hold",
            f"{campaign.config_path}, key analysis.band_max_hz",
            f"bands whose upper edge lies below half the sample rate ({fs / 2:g} Hz)",
            f"the band up to {top:.0f} Hz for pass {inputs.spec.name} at {fs:g} Hz",
            "lower band_max_hz")


def _check_overhead(campaign: Campaign, inputs: PassInputs, summary: dict) -> None:
    """A pass must give its 90 deg window: the track and the recording must hold the closest
    approach with half a window either side (and the sound of the later half's travel time),
    unless the campaign marks the pass ``partial``."""
    name = inputs.spec.name
    if inputs.spec.partial:
        return
    half = campaign.analysis.window_s / 2
    lo, hi = summary["covered_s"]
    t = summary["overhead_s"]
    travel = summary["closest_distance_m"] / summary["speed_of_sound_m_s"]
    if summary["reaches_overhead"] and t - half >= lo and t + half + travel <= hi:
        return
    where = (f"the track covers {lo:.2f} to {hi:.2f} s of the recording and is nearest the "
             f"array centre ({summary['closest_distance_m']:.1f} m) at {t:.2f} s")
    why = ("the vehicle is still approaching (or already leaving) at an end of the span"
           if not summary["reaches_overhead"] else
           f"less than half a window ({half:g} s) of it lies on one side of overhead")
    raise FlyoverInputError(
        f"pass {name} gives no 90 deg window: {why}",
        f"{campaign.config_path}, key passes.{name}.track ({inputs.spec.track.name})",
        "a track and recording that hold the closest approach over the array with half a "
        "window either side", where,
        f"check the track file and the recording's span; if the pass is meant to stop short of "
        f"overhead, set passes.{name}.partial: true")


def _check_samples(inputs: PassInputs, covered_s) -> None:
    """Finite samples everywhere in the span the pass uses, and not a silent recording."""
    first, n = inputs.covered_frames(covered_s)
    peak = 0.0
    # The reader refuses NaN or Inf samples, naming the channel and the frame.
    for block in inputs.raw_blocks(first, n):
        peak = max(peak, float(np.max(np.abs(block))))
    if peak == 0.0:
        raise FlyoverInputError(
            "the recording holds only zeros where the track covers it",
            ", ".join(str(p) for r in inputs.recorders for p in r.recording.paths),
            "sound on the microphone channels", f"all {len(inputs.layout.channel)} channels "
            f"silent over the {n} frames the track covers",
            "was the recorder armed, or the wrong file or channels chosen?")


def _check_free_space(campaign: Campaign, need_bytes: int) -> None:
    """Refuse a run whose results would not fit on the output folder's disk."""
    out = Path(campaign.output)
    existing = next(p for p in (out, *out.parents) if p.exists())
    free = shutil.disk_usage(existing).free
    if free < need_bytes:
        raise FlyoverInputError(
            "not enough free space for the results", f"{campaign.config_path}, key output",
            f"about {need_bytes / 2 ** 20:.0f} MiB free on the disk of {existing}",
            f"{free / 2 ** 20:.0f} MiB free", "free some space or choose another output folder")


def check_output_folder(campaign: Campaign) -> None:
    """Refuse an output folder that cannot be made, written, or that would mix with inputs."""
    out = Path(campaign.output)
    where = f"{campaign.config_path}, key output"
    existing = next(p for p in (out, *out.parents) if p.exists())
    if not existing.is_dir():
        raise FlyoverInputError(
            "the output folder is a file" if existing == out else
            "the output folder lies below a file", where, "a folder path", f"{existing} is a file")
    for f in campaign.input_files():
        if f == out or out in f.parents:
            raise FlyoverInputError(
                "the output folder holds an input file", where,
                "an output folder apart from the inputs (results are written in it)",
                f"{f} is inside {out}", "use a folder of its own, e.g. output: results")
    try:
        tempfile.TemporaryFile(dir=existing).close()
    except OSError as exc:
        raise FlyoverInputError("the output folder cannot be written", where,
                                f"a writable folder at {out}",
                                f"{existing}: {exc.strerror}") from None


def format_summary(campaign: Campaign, summaries: list[dict]) -> str:
    """Human-readable text of :func:`check_campaign`'s result."""
    lines = [f"campaign {campaign.config_path}",
             f"  array: {summaries[0]['microphones']} microphones, aperture "
             f"{summaries[0]['array_aperture_m']:.2f} m, {campaign.array.mounting}",
             f"  grid: {campaign.grid.shape[0]} x {campaign.grid.shape[1]} points at "
             f"{campaign.grid.spacing_m} m; regions: {', '.join(campaign.regions)}"]
    for s in summaries:
        clock = ("clock offset auto: the workflow estimates it from the anchor"
                 if s["clock_offset_auto"] else f"clock offset {s['clock_offset_s']:+.3f} s")
        lines += [
            f"  {s['pass']} ({campaign.passes[s['pass']].label or 'no label'}): "
            f"{s['channels_used']}/{s['microphones']} microphones used "
            f"({s['channels']} channels recorded), {s['duration_s']:.2f} s at "
            f"{s['sample_rate_hz']:.0f} Hz",
            *_recorder_lines(s),
            f"    recording from {s['epoch_utc']} ({clock}); "
            f"track {s['track_start_utc']} to {s['track_end_utc']}",
            *_array_lines(s),
            *_separation_lines(s),
            *_track_lines(s),
            f"    track covers {s['covered_s'][1] - s['covered_s'][0]:.2f} s of the recording; "
            f"overhead at {s['overhead_utc']} (t = {s['overhead_s']:.2f} s)",
            f"    closest {s['closest_distance_m']:.1f} m, "
            f"height {s['height_above_array_m']:.1f} m, "
            f"speed {s['speed_m_s']:.1f} m/s, c = {s['speed_of_sound_m_s']:.2f} m/s, "
            f"track noise ~{s['track_noise_estimate_m'] * 100:.1f} cm"]
        lines += [f"    warning: {w}" for w in s.get("warnings", [])]
    lines.append("all inputs are valid")
    return "\n".join(lines)


def _separation(campaign: Campaign, inputs: PassInputs, summary: dict) -> dict | None:
    """From which analysed band the two closest region centres separate at the pass's closest
    approach (:mod:`flyover.imaging.planning`, the array frozen under the vehicle)."""
    centres = [r.center_m for r in campaign.regions.values()]
    names = list(campaign.regions)
    if len(centres) < 2:
        return None
    pairs = [(i, j) for i in range(len(centres)) for j in range(i + 1, len(centres))]
    i, j = min(pairs, key=lambda ij: np.linalg.norm(centres[ij[0]][:2] - centres[ij[1]][:2]))
    an = campaign.analysis
    v = inputs.track.velocity(np.array([summary["overhead_s"]]))[0]
    rows = band_resolution(inputs.layout.enu_m[inputs.weights > 0],
                           summary["closest_distance_m"],
                           third_octave_bands(an.band_min_hz, an.band_max_hz),
                           c_m_s=inputs.atmosphere.c_m_s,
                           points_body_m=[centres[i], centres[j]],
                           heading_deg=float(np.rad2deg(np.arctan2(v[0], v[1]))),
                           side_lobes=False)
    return {"regions": [names[i], names[j]], "from_hz": separable_from_hz(rows)}


def _array_lines(s: dict) -> list[str]:
    """A pass flown over its own array: its layout, mounting and ground."""
    a = s["array"]
    if not a["own_array"]:
        return []
    text = f"    own array {a['layout']}: {a['mounting']}"
    if a["mounting"] == "raised":
        lo, hi = a["mic_height_m"]
        text += (f" {lo:.2f} m" if lo == hi else f" {lo:.2f}-{hi:.2f} m") + f" over {a['ground']}"
    return [text]


def _separation_lines(s: dict) -> list[str]:
    sep = s.get("separation")
    if not sep:
        return []
    a, b = sep["regions"]
    return [f"    {a} and {b} separable from {sep['from_hz']:g} Hz at the closest approach"
            if sep["from_hz"] else
            f"    {a} and {b} not separable in the analysed bands at the closest approach"]


def _track_lines(s: dict) -> list[str]:
    """The track's source, rate, span, contents and noise; rotor speeds; the weather."""
    t = s["track"]
    lever = (f", antenna at {t['antenna_offset_m']} m in body axes"
             if t["antenna_offset_m"] is not None else "")
    lines = [f"    track file {t['file']}: {t['source']}, {t['rate_hz']:.1f} Hz, {t['samples']} "
             f"samples from {t['start_utc']} to {t['end_utc']}; holds "
             f"{', '.join(t['holds'])}; position noise ~"
             f"{t['position_noise_estimate_m'] * 100:.1f} cm{lever}"]
    lines += [f"      {n}" for n in t["notes"]]
    lines.append(f"      yaw from the {t['heading_source']}; crab angle "
                 f"{t['crab_angle_deg']:+.1f} deg overhead")
    for r in s["rotors"]:
        lines.append(f"    rotor {r['rotor']} (motor {r['motor']}, {r['blades']} blades): "
                     f"{r['samples']} speed samples, mean {r['rpm_mean']:.0f} rpm, blade "
                     f"passing {r['blade_passing_hz_mean']:.1f} Hz")
    a, w = s["atmosphere"], s["weather"]
    if w is not None:
        lines.append(f"    weather file: {w['samples']} samples over {w['start_utc']} to "
                     f"{w['end_utc']}: {a['temperature_c']:.1f} C (spread "
                     f"{w['temperature_spread_k']:.1f} K), {a['relative_humidity_pct']:.0f} %, "
                     f"wind {a['wind_speed_m_s']:.1f} m/s from {a['wind_from_deg']:.0f} deg "
                     f"(spread {w['wind_speed_spread_m_s']:.1f} m/s)")
        lines += [f"    warning: weather {f}" for f in w["flags"]]
    if a.get("profile_layers"):
        lo, hi = a["profile_span_m"]
        lines.append(f"    atmosphere profile: {a['profile_layers']} layers over {lo:.0f}-"
                     f"{hi:.0f} m: c {a['speed_of_sound_m_s']:.1f} m/s, wind "
                     f"{a['wind_speed_m_s']:.1f} m/s from {a['wind_from_deg']:.0f} deg along "
                     "the paths")
    return lines


def _recorder_lines(s: dict) -> list[str]:
    """Each recorder of a pass: files, channels, span on the pass's time base, clock; and how
    the recorders' spans overlap."""
    lines = []
    for r in s["recorders"]:
        files = (f"{len(r['files'])} {r['format']} files ({r['files'][0]} ... {r['files'][-1]})"
                 if len(r["files"]) > 1 else f"{r['format']} file {r['files'][0]}")
        residual = r.get("timing_residual_rms_us", float("nan"))
        clock = {"timing channel": f"clock from its {r.get('timing_kind', 'timing channel')}: "
                                   f"drift {r['drift_ppm']:+.2f} ppm, residual "
                                   f"{residual:.1f} us rms",
                 "acoustic": "clock offset estimated acoustically",
                 "given": f"clock as given ({r['start_source'] or 'typed start'})"
                 }[r["clock_method"]]
        if r["offset_s"] is not None and r["clock_method"] == "timing channel":
            clock += f"; its own clock was off by {-r['offset_s']:+.4f} s"
        lines += [f"    recorder '{r['name']}': {files}, {r['channels']} channels "
                  f"(microphones {r['layout_channels']}), from {r['start_utc']} for "
                  f"{r['duration_s']:.2f} s (t = {r['span_s'][0]:.3f} to {r['span_s'][1]:.3f} s)",
                  f"      {clock}"]
        lines += [f"      timing: {e}" for e in r.get("timing_events", [])]
    if len(s["recorders"]) > 1:
        lo = max(r["span_s"][0] for r in s["recorders"])
        hi = min(r["span_s"][1] for r in s["recorders"])
        lines.append(f"    all recorders record together from t = {lo:.3f} s to {hi:.3f} s "
                     f"({max(hi - lo, 0.0):.2f} s)")
    return lines

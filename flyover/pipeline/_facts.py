"""What a pass is, in plain numbers: the summaries that alignment.json, the checks and the
report print (pass geometry, mounting, track, recorders)."""

from __future__ import annotations

import numpy as np

from flyover.geometry.overview import pass_geometry
from flyover.model.timebase import iso_utc
from flyover.pipeline.context import PassInputs, RecorderInputs, course_deg


def pass_summary(inputs: PassInputs) -> dict:
    """The facts `flyover check` prints and the alignment stage records for one pass."""
    geo = pass_geometry(inputs.track, inputs.layout.center_enu_m, inputs.recording_span_s)
    clock = inputs.clock
    atm = inputs.atmosphere
    return {
        "pass": inputs.spec.name,
        "channels": int(inputs.n_channels),
        "microphones": len(inputs.layout.channel),
        "channels_used": int(inputs.weights.sum()),
        "sample_rate_hz": inputs.sample_rate_hz,
        "duration_s": inputs.duration_s,
        "epoch_utc": iso_utc(clock.epoch_utc_ns),
        "clock_offset_s": inputs.common_offset_s,
        "clock_offset_auto": inputs.spec.clock_offset_s == "auto",
        "recorders": [recorder_summary(inputs, r) for r in inputs.recorders],
        "track_start_utc": iso_utc(int(clock.utc_ns(inputs.track.start_s))),
        "track_end_utc": iso_utc(int(clock.utc_ns(inputs.track.end_s))),
        "covered_s": [geo.covered_s[0], geo.covered_s[1]],
        "overhead_utc": iso_utc(int(clock.utc_ns(geo.closest_s))),
        "overhead_s": geo.closest_s,
        "reaches_overhead": geo.reaches_overhead,
        "closest_distance_m": geo.closest_m,
        "height_above_array_m": geo.height_m,
        "speed_m_s": geo.speed_m_s,
        "course_deg": course_deg(inputs.track, geo.closest_s),
        "track_noise_estimate_m": inputs.track.residual_rms_m(),
        "speed_of_sound_m_s": atm.c_m_s,
        "array_aperture_m": inputs.layout.aperture_m,
        "array_center_enu_m": [float(v) for v in inputs.layout.center_enu_m],
        "array": mounting_summary(inputs),
        "atmosphere": {"temperature_c": atm.temperature_c,
                       "relative_humidity_pct": atm.relative_humidity_pct,
                       "pressure_kpa": atm.pressure_kpa, "wind_speed_m_s": atm.wind_speed_m_s,
                       "wind_from_deg": atm.wind_from_deg,
                       "speed_of_sound_m_s": atm.speed_of_sound_m_s,
                       "source": "typed" if inputs.weather is None else "weather file",
                       "profile_layers": len(atm.profile),
                       "profile_span_m": list(atm.span_m) if atm.span_m else None},
        "weather": inputs.weather,
        "track": track_summary(inputs),
        "rotors": [r.summary() for r in inputs.rotors],
    }


def mounting_summary(inputs: PassInputs) -> dict:
    """The array the pass was flown over: its layout file, mounting and the ground."""
    array, layout = inputs.array, inputs.layout
    out = {"layout": array.layout.name, "mounting": array.mounting,
           "own_array": inputs.spec.array is not None}
    if array.mounting == "raised":
        out["ground"] = array.ground.describe()
        out["mic_height_m"] = [float(layout.mic_height_m.min()), float(layout.mic_height_m.max())]
    if array.plate_correction_db:
        out["plate_correction_db"] = {f"{k:g}": v for k, v in array.plate_correction_db.items()}
    return out


def track_summary(inputs: PassInputs) -> dict:
    """The track file's source, rate, span over the pass, what it holds and what was dropped."""
    s = inputs.track_samples
    return {"file": inputs.spec.track.name, "source": s.source, "rate_hz": s.rate_hz(),
            "start_utc": iso_utc(int(s.utc_ns[0])), "end_utc": iso_utc(int(s.utc_ns[-1])),
            "samples": len(s.utc_ns), "holds": s.holds, "notes": list(s.notes),
            "antenna_offset_m": (list(inputs.spec.track_antenna_offset_m)
                                 if inputs.spec.track_antenna_offset_m is not None else None),
            "position_noise_estimate_m": inputs.track.residual_rms_m(),
            "heading_source": inputs.track.heading_source,
            "crab_angle_deg": crab_angle_deg(inputs.track, pass_geometry(
                inputs.track, inputs.layout.center_enu_m, inputs.recording_span_s).closest_s)}


def crab_angle_deg(track, time_s: float) -> float:
    """Yaw minus the ground track's direction at a time, in degrees from -180 to 180."""
    course = course_deg(track, time_s)
    return float((track.attitude_deg(np.array([time_s]))[0, 0] - course + 180.0) % 360.0 - 180.0)


def recorder_summary(inputs: PassInputs, r: RecorderInputs) -> dict:
    """One recorder's facts: files, channels, span on the pass epoch, and its clock."""
    span = inputs.recorder_span_s(r)
    lay = inputs.layout.channel[r.mics]
    out = {
        "name": r.spec.name,
        "files": [p.name for p in r.recording.paths],
        "format": r.recording.format,
        "channels": int(r.recording.n_channels),
        "microphones": len(r.mics),
        "layout_channels": _ranges(lay),
        "sample_rate_hz": r.recording.sample_rate_hz,
        "duration_s": r.recording.duration_s,
        "start_utc": iso_utc(int(inputs.clock.utc_ns(span[0]))),
        "span_s": [span[0], span[1]],
        "clock_method": ("timing channel" if r.spec.timing_channels else
                         "acoustic" if inputs.spec.clock_offset_s == "auto" else "given"),
        "start_source": r.start_source,
        "start_utc_ns": int(r.clock.start_utc_ns),
        "drift_ppm": r.clock.rate_error_ppm,
        # Given clocks: the stated offset, uncertainty unknown (the acoustic estimate and the
        # timing channels give theirs).
        "offset_uncertainty_s": None,
    }
    own = r.spec.start_utc_ns if r.spec.start_utc_ns is not None else r.recording.start_utc_ns
    # The correction that the recorder's own time of its first sample needed (None for a
    # recorder with no time of its own, timed by IRIG-B alone).
    out["offset_s"] = None if own is None else (r.clock.epoch_utc_ns - own) / 1e9
    if r.timing is not None:
        out["offset_uncertainty_s"] = r.timing.start_uncertainty_s
        t = r.timing
        out.update(timing_kind=t.kind, timing_edges=t.n_edges,
                   timing_residual_rms_us=t.residual_rms_s * 1e6,
                   timing_residual_max_us=t.residual_max_s * 1e6,
                   start_uncertainty_us=t.start_uncertainty_s * 1e6,
                   drift_uncertainty_ppm=t.drift_uncertainty_ppm, timing_events=list(t.events))
    return out


def _ranges(channels) -> str:
    """'1-24, 30' from a list of channel numbers."""
    c = sorted(int(v) for v in channels)
    parts, lo = [], c[0]
    for a, b in zip(c, c[1:] + [None]):
        if b != a + 1:
            parts.append(f"{lo}-{a}" if a > lo else f"{a}")
            lo = b
    return ", ".join(parts)

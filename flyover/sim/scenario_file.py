"""Read a simulation scenario (YAML) into :class:`flyover.simulate.Scenario`."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from flyover.acoustics.atmosphere import Atmosphere, AtmosphereLayer
from flyover.forward.moving_source import (Broadband, DipoleLike, PointSource, RotorTones,
                                           ShaftSpeed, Tone)
from flyover.geometry.frames import SiteFrame
from flyover.io.yamlfile import read_yaml, validate_mapping
from flyover.io.timestamps import parse_utc_ns
from flyover.acoustics.ground import GroundSurface
from flyover.campaign import MOUNTING_GAIN
from flyover.model.errors import FlyoverInputError, suggest
from flyover.sim.scenario import PassScenario, RecorderScenario, Scenario, spiral_layout


def shaft_speed(value) -> ShaftSpeed:
    """A constant rpm, or ``[[time_s, rpm], ...]`` knots (seconds after the pass epoch)."""
    if isinstance(value, (int, float)):
        return ShaftSpeed.constant(float(value))
    return ShaftSpeed(tuple(float(t) for t, _ in value), tuple(float(r) for _, r in value))


def load_scenario(path) -> tuple[Scenario, SiteFrame, dict]:
    """Read a scenario file.

    Returns
    -------
    scenario : Scenario
    site : SiteFrame
    raw : dict
        The parsed mapping (its ``campaign`` block and formats are used by the writer).
    """
    path = Path(path).resolve()
    data = read_yaml(path)
    validate_mapping(data, "scenario", str(path))
    s = data["site"]
    site = SiteFrame(s["origin_lat_deg"], s["origin_lon_deg"], s["origin_height_m"])
    a = data["array"]
    mics_enu = spiral_layout(a["arms"], a["per_arm"], a["r_min_m"], a["r_max_m"],
                         a.get("twist_deg", 120.0))
    mics_enu[:, 2] = a.get("height_m", 0.0)
    sources = []
    for k, src in enumerate(data["sources"]):
        tones = tuple(Tone(t["frequency_hz"], t["level_db"], np.deg2rad(t.get("phase_deg", 0.0)))
                      for t in src.get("tones", ()))
        bb = src.get("broadband")
        broadband = None if bb is None else Broadband(
            bb["level_1khz_db"], bb.get("slope_db_per_octave", 0.0), bb.get("min_hz", 40.0),
            bb.get("max_hz", 8000.0))
        pattern = src.get("directivity")
        rotor = src.get("rotor")
        sources.append(PointSource(
            src["name"], tuple(src["body_m"]), tones, broadband, src.get("seed", 1000 + k),
            None if pattern is None else DipoleLike(tuple(pattern["axis_body"]),
                                                    pattern["dipole_fraction"]),
            None if rotor is None else RotorTones(
                int(rotor["blades"]), shaft_speed(rotor["rpm"]), tuple(rotor["harmonics_db"]),
                float(rotor.get("jitter_deg", 0.0)), int(rotor.get("motor", 1)),
                int(rotor.get("seed", 500 + k))),
            float(src.get("convective_exponent", 2.0))))
    passes = []
    for k, (name, p) in enumerate(data["passes"].items()):
        passes.append(PassScenario(
            name=name, label=p.get("label", ""), speed_m_s=p["speed_m_s"], height_m=p["height_m"],
            heading_deg=p["heading_deg"], duration_s=p["duration_s"],
            overhead_s=p.get("overhead_s", p["duration_s"] / 2.0),
            recording_start_utc_ns=parse_utc_ns(p["recording_start_utc"]),
            clock_offset_s=p.get("clock_offset_s", 0.0),
            atmosphere=Atmosphere(**p["atmosphere"], profile=tuple(
                AtmosphereLayer(**k) for k in p.get("atmosphere_profile", ()))),
            cross_offset_m=p.get("cross_offset_m", 0.0),
            gain_db=dict(p.get("gain_db", {})), pitch_deg=p.get("pitch_deg", 0.0),
            seed=p.get("seed", 10 * (k + 1)),
            recorders=tuple(RecorderScenario(
                name=r["name"], microphones=tuple(range(r["microphones"][0],
                                                        r["microphones"][1] + 1)),
                format=r.get("format", "wav"), file_s=r.get("file_s"),
                start_after_s=r.get("start_after_s", 0.0),
                clock_error_s=r.get("clock_error_s", 0.0), drift_ppm=r.get("drift_ppm", 0.0),
                timing=tuple(r.get("timing", ()))) for r in p.get("recorders", ())),
            track_format=p.get("track_format", "csv"),
            rotor_rpm={name: shaft_speed(v) for name, v in p.get("rotor_rpm", {}).items()},
            mic_height_m=p.get("mic_height_m"),
            ground=GroundSurface(**p["ground"]) if "ground" in p else None,
            track_attitude=bool(p.get("track_attitude", True))))
    for ps in passes:
        mics = [m for r in ps.recorders for m in r.microphones]
        if ps.recorders and sorted(mics) != list(range(1, len(mics_enu) + 1)):
            raise FlyoverInputError(
                "the recorders of a simulated pass must record every microphone once",
                f"{path}, key passes.{ps.name}.recorders",
                f"microphone ranges covering 1-{len(mics_enu)} without overlap",
                ", ".join(f"{r.name}: {r.microphones[0]}-{r.microphones[-1]}"
                          for r in ps.recorders))
    rec, gnss = data["recording"], data["gnss"]
    names = [s.name for s in sources]
    for ps in passes:
        for key in ps.gain_db:
            if key not in names:
                raise FlyoverInputError(f"gain for unknown source '{key}'",
                                        f"{path}, key passes.{ps.name}.gain_db",
                                        f"one of {names}", hint=suggest(key, names))
    scenario = Scenario(
        name=data.get("name", path.stem), mic_enu_m=mics_enu,
        pressure_gain=MOUNTING_GAIN[a["mounting"]], sources=tuple(sources), passes=tuple(passes),
        sample_rate_hz=float(rec["sample_rate_hz"]), noise_spl_db=float(rec["noise_spl_db"]),
        pa_per_unit=float(rec["pa_per_unit"]),
        calibration_spread_db=float(rec.get("calibration_spread_db", 0.0)),
        gnss_rate_hz=float(gnss["rate_hz"]), gnss_noise_m=float(gnss["noise_m"]),
        weather=data.get("weather"))
    return scenario, site, data

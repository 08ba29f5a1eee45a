"""Stage: write a whole simulated campaign (recordings, layout, calibrations, tracks, truth)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import yaml

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.reference import level_1m_db
from flyover.io.atomic import write_text
from flyover.io.csvtable import write_csv
from flyover.io.readers.soundfile_recording import write_recording
from flyover.io.readers.tdms_recording import write_tdms
from flyover.sim.scenario_file import load_scenario
from flyover.model.errors import FlyoverInputError
from flyover.sim.flightlogs import ESC_REPORT, px4_topics, write_ulog
from flyover.sim.scenario import pass_microphones, PassScenario, pass_source, simulate_pass
from flyover.sim.timing import irig_b_signal, pps_signal
from flyover.model.timebase import iso_utc


def pass_files(out_dir: Path, ps: PassScenario, fmt: str = "wav",
               sample_rate_hz: float | None = None) -> dict:
    """Where the simulator writes the files of one pass: ``recording`` (one path) or
    ``recorders`` (name -> list of paths), ``calibration``, ``track`` and, for raised
    microphones, ``layout``."""
    base = Path(out_dir) / ps.name
    files = {"calibration": base / "calibration.csv",
             "track": base / f"track{TRACK_SUFFIX[ps.track_format]}"}
    if ps.mic_height_m is not None:      # raised microphones: the pass's own layout
        files["layout"] = base / "layout.csv"
    if not ps.recorders:
        return {"recording": base / f"recording.{fmt}", **files}
    n = int(round(ps.duration_s * sample_rate_hz))
    recs = {}
    for r in ps.recorders:
        per = n if r.file_s is None else int(round(r.file_s * sample_rate_hz))
        ext = "tdms" if r.format == "tdms" else "wav"
        recs[r.name] = [base / f"{r.name}-{k + 1:02d}.{ext}" for k in range(-(-n // per))]
    return {"recorders": recs, **files}


TRACK_SUFFIX = {"csv": ".csv", "ulog": ".ulg"}
DEMO_GEOID_M = 47.6    # geoid height the simulated autopilot reports (its log has both heights)
WEATHER_FILE = "weather.csv"
TIMING_NOISE = 0.001   # full-scale units, on timing channels whose pulses are 0.5
RPM_NOISE = 5.0        # rpm, 1-sigma scatter of an ESC's speed reading


def _write_recorders(ps: PassScenario, sim, fs: float, subtype: str, paths: dict) -> None:
    """Each recorder's microphones and timing channels, split into its files, stamped by its
    own (wrong) clock."""
    n = sim.units.shape[1]
    base_s = ps.epoch_utc_ns // 1_000_000_000
    after_base = (ps.epoch_utc_ns - base_s * 1_000_000_000) / 1e9
    for r in ps.recorders:
        true_t = after_base + r.start_after_s + np.arange(n) / (fs * r.rate_factor)
        rng = np.random.default_rng(ps.seed + 3)
        # A little noise on the timing inputs too (about 54 dB under the pulses).
        timing = [(pps_signal(true_t, rise_s=1.0 / fs) if kind == "pps" else
                   irig_b_signal(true_t, base_s, form=kind.split("-")[-1], rise_s=1.0 / fs))
                  + rng.normal(0.0, TIMING_NOISE, n) for kind in r.timing]
        data = np.vstack([sim.units[np.asarray(r.microphones) - 1]]
                         + [np.asarray(t, np.float32)[None] for t in timing])
        names = [f"Mic {m:02d}" for m in r.microphones] + [t.upper() for t in r.timing]
        own_ns = ps.epoch_utc_ns + int(round((r.start_after_s + r.clock_error_s) * 1e9))
        files = paths[r.name]
        per = -(-n // len(files))
        for k, path in enumerate(files):
            part = data[:, k * per:(k + 1) * per]
            stamp = own_ns + int(round(k * per / fs * 1e9))   # its clock counts nominal samples
            if r.format == "tdms":
                write_tdms(path, part, fs, stamp, names)
            else:
                write_recording(path, part, fs, subtype,
                                start_utc_ns=stamp if r.format == "bwf" else None)


def _write_track(path, ps: PassScenario, sim, site, sources) -> None:
    """The pass's GNSS track as the scenario says it was logged: flyover's CSV, or a PX4 ULog
    with the attitude and the speeds of the rotors' motors (with an ESC's reading scatter)."""
    utc = ps.epoch_utc_ns + np.round(sim.gnss_time_s * 1e9).astype(np.int64)
    lat, lon, h = site.to_wgs84(sim.gnss_enu_m)
    att = sim.gnss_attitude_deg
    if ps.track_format == "ulog":
        rng = np.random.default_rng(ps.seed + 4)
        rotors = sorted((s.rotor for s in (pass_source(src, ps) for src in sources)
                         if s.rotor is not None), key=lambda r: r.motor)
        if rotors and [r.motor for r in rotors] != list(range(1, len(rotors) + 1)):
            raise FlyoverInputError("the simulated rotors' motors must be numbered 1, 2, ...",
                                    f"pass {ps.name}", "motors 1 to n",
                                    f"{[r.motor for r in rotors]}")
        rpm = np.array([r.speed.rpm_at(sim.gnss_time_s) + rng.normal(0.0, RPM_NOISE, len(utc))
                        for r in rotors]) if rotors else None
        write_ulog(path, px4_topics(utc, lat, lon, h, att, geoid_m=DEMO_GEOID_M, rpm=rpm),
                   nested=ESC_REPORT)
        return
    columns = {"time_utc": [iso_utc(int(u)) for u in utc], "lat_deg": lat, "lon_deg": lon,
               "height_m": h}
    if ps.track_attitude:
        columns.update(roll_deg=att[:, 2], pitch_deg=att[:, 1], yaw_deg=att[:, 0])
    write_csv(path, pd.DataFrame(columns), float_format="%.9f")


def _write_layout(path, mic_enu_m, site, mic_height_m: float | None = None) -> None:
    """A surveyed layout (WGS84), with each microphone's height above the ground if raised."""
    lat, lon, h = site.to_wgs84(mic_enu_m)
    columns = {"channel": np.arange(1, len(mic_enu_m) + 1), "lat_deg": lat, "lon_deg": lon,
               "height_m": h}
    if mic_height_m is not None:
        columns["mic_height_m"] = np.full(len(mic_enu_m), mic_height_m)
    write_csv(path, pd.DataFrame(columns), float_format="%.9f")


def write_weather(path, scenario) -> None:
    """A weather mast's 1 Hz log over the whole campaign: each pass's atmosphere over its pass
    (plus the scenario's scatter), moving linearly between passes."""
    cfg = scenario.weather
    rate = float(cfg.get("rate_hz", 1.0))
    rng = np.random.default_rng(int(cfg.get("seed", 7)))
    passes = sorted(scenario.passes, key=lambda p: p.epoch_utc_ns)
    margin_ns = 60 * 1_000_000_000
    t = np.arange(passes[0].epoch_utc_ns - margin_ns,
                  passes[-1].epoch_utc_ns + int(passes[-1].duration_s * 1e9) + margin_ns,
                  int(1e9 / rate))
    keys = [p.epoch_utc_ns + int(0.5 * p.duration_s * 1e9) for p in passes]

    def along(values):
        return np.interp(t, keys, values)

    a = [p.atmosphere for p in passes]
    wind = np.array([[x.wind_speed_m_s * np.sin(np.deg2rad(x.wind_from_deg)),
                      x.wind_speed_m_s * np.cos(np.deg2rad(x.wind_from_deg))] for x in a])
    east, north = along(wind[:, 0]), along(wind[:, 1])
    speed = np.abs(np.hypot(east, north) + rng.normal(0, cfg.get("wind_sd_m_s", 0.0), len(t)))
    direction = np.mod(np.rad2deg(np.arctan2(east, north))
                       + rng.normal(0, cfg.get("direction_sd_deg", 0.0), len(t)), 360.0)
    write_csv(path, pd.DataFrame({
        "time_utc": [iso_utc(int(v)) for v in t],
        "temperature_c": along([x.temperature_c for x in a])
        + rng.normal(0, cfg.get("temperature_sd_k", 0.0), len(t)),
        "relative_humidity_pct": along([x.relative_humidity_pct for x in a]),
        "pressure_kpa": along([x.pressure_kpa for x in a]),
        "wind_speed_m_s": speed, "wind_from_deg": direction, "sensor_height_m": 10.0}),
        float_format="%.3f")


def write_campaign(scenario_path, out_dir, progress=print, *, workers: int = 1) -> None:
    """Simulate every pass of a scenario and write the files a real campaign would have.

    Writes ``layout.csv``, ``<pass>/recording.wav|flac``, ``<pass>/calibration.csv``,
    ``<pass>/track.csv``, ``truth.csv`` (band levels of each source at 1 m) and, when the scenario
    has a ``campaign`` block, a ready ``campaign.yaml``. With ``workers`` > 1 the passes are
    simulated that many at a time, each in a process of its own (the files are the same).
    """
    scenario, site, raw = load_scenario(scenario_path)
    out = Path(out_dir)
    _write_layout(out / "layout.csv", scenario.mic_enu_m, site)
    names = [ps.name for ps in scenario.passes]
    rows = {}
    if workers <= 1 or len(names) <= 1:
        for name in names:
            rows[name] = _write_pass(scenario_path, out, name)
            progress(f"simulated {name}: {len(scenario.mic_enu_m)} microphones")
    else:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor, as_completed

        import numba
        # Each process takes its share of the cores for its compiled kernels. A fresh
        # interpreter per process: forking after numba's threads have started is unsafe.
        with ProcessPoolExecutor(min(workers, len(names)),
                                 mp_context=multiprocessing.get_context("spawn"),
                                 initializer=_share_threads,
                                 initargs=(max(1, numba.config.NUMBA_NUM_THREADS // workers),)
                                 ) as pool:
            # The longest passes first, so that no core waits alone at the end.
            futures = {pool.submit(_write_pass, scenario_path, out, ps.name): ps.name
                       for ps in sorted(scenario.passes, key=_simulation_cost, reverse=True)}
            try:
                for future in as_completed(futures):
                    rows[futures[future]] = future.result()
                    progress(f"simulated {futures[future]}: {len(scenario.mic_enu_m)} "
                             "microphones")
            except BaseException:
                pool.shutdown(cancel_futures=True)
                raise
    truth_rows = [row for name in names for row in rows[name]]
    write_csv(out / "truth.csv", pd.DataFrame(truth_rows), float_format="%.4f")
    if scenario.weather is not None:
        write_weather(out / WEATHER_FILE, scenario)
    if "campaign" in raw:
        fmt = raw["recording"].get("format", "wav")
        write_text(out / "campaign.yaml", yaml.safe_dump(_campaign_mapping(scenario, raw, fmt),
                                                         sort_keys=False))


def _simulation_cost(ps: PassScenario) -> float:
    """A pass's relative cost to simulate: its duration, twice over raised microphones (the
    reflected path too)."""
    return ps.duration_s * (1.0 if ps.mic_height_m is None else 2.0)


def _share_threads(threads: int) -> None:
    import numba
    numba.set_num_threads(threads)


def _write_pass(scenario_path, out: Path, name: str) -> list[dict]:
    """Simulate one pass of the scenario and write its files; its rows of the truth table."""
    scenario, site, raw = load_scenario(scenario_path)
    ps = next(p for p in scenario.passes if p.name == name)
    fmt = raw["recording"].get("format", "wav")
    subtype = raw["recording"].get("subtype", "FLOAT")
    n_mics = len(scenario.mic_enu_m)
    sim = simulate_pass(scenario, ps)
    files = pass_files(out, ps, fmt, scenario.sample_rate_hz)
    peak = float(np.max(np.abs(sim.units)))
    if peak >= 1.0:
        raise FlyoverInputError(f"simulated pass {ps.name} clips", str(scenario_path),
                                "a peak below full scale", f"{peak:.2f} of full scale",
                                "raise recording.pa_per_unit in the scenario")
    if ps.recorders:
        _write_recorders(ps, sim, scenario.sample_rate_hz, subtype, files["recorders"])
    else:
        write_recording(files["recording"], sim.units, scenario.sample_rate_hz, subtype)
    write_csv(files["calibration"], pd.DataFrame({"channel": np.arange(1, n_mics + 1),
                                                  "pa_per_unit": sim.pa_per_unit}),
              float_format="%.9g")
    _write_track(files["track"], ps, sim, site, scenario.sources)
    if "layout" in files:
        _write_layout(files["layout"], pass_microphones(scenario, ps)[0], site, ps.mic_height_m)
    bands = third_octave_bands(20, 10000)
    rows = []
    for src in scenario.sources:
        power = src.band_power_pa2(bands, ps.gain_db.get(src.name, 0.0))
        rows += [{"pass": ps.name, "source": src.name, "band_hz": bands.nominal_hz[k],
                  "level_1m_db": level_1m_db(power[k])} for k in np.flatnonzero(power > 0)]
    return rows


def _campaign_mapping(scenario, raw, fmt) -> dict:
    camp = dict(raw["campaign"])
    camp = {"site": raw["site"], "array": {"layout": "layout.csv",
                                           "mounting": raw["array"]["mounting"]}, **camp}
    camp["passes"] = {ps.name: _pass_mapping(scenario, raw, ps, fmt) for ps in scenario.passes}
    if scenario.weather is not None:
        camp["weather"] = WEATHER_FILE
        for p in camp["passes"].values():
            p.pop("atmosphere")
    camp.setdefault("output", "results")
    return camp


def _pass_mapping(scenario, raw, ps: PassScenario, fmt) -> dict:
    """A pass of the generated campaign file: what an engineer would type for these files."""
    files = pass_files(Path("."), ps, fmt, scenario.sample_rate_hz)
    out = {"label": ps.label}
    if not ps.recorders:
        out.update(recording=str(files["recording"]),
                   recording_start_utc=iso_utc(ps.recording_start_utc_ns),
                   clock_offset_s=ps.clock_offset_s)
    else:
        recorders = []
        for r in ps.recorders:
            n_mic = len(r.microphones)
            entry = {"name": r.name, "files": [str(f) for f in files["recorders"][r.name]],
                     "channels": {f"{m}": k + 1 for k, m in enumerate(r.microphones)}}
            if list(r.microphones) == list(range(r.microphones[0], r.microphones[-1] + 1)):
                entry["channels"] = {f"{r.microphones[0]}-{r.microphones[-1]}": f"1-{n_mic}"}
            if r.timing:
                entry["timing_channel"] = ([t.upper() for t in r.timing] if r.format == "tdms"
                                           else [n_mic + k + 1 for k in range(len(r.timing))])
            else:
                entry["clock_offset_s"] = -r.clock_error_s
            if r.format == "wav" and not any(t.startswith("irig") for t in r.timing):
                # A plain WAV carries no time (an IRIG-B channel would): the engineer types it.
                own_ns = ps.epoch_utc_ns + int(round((r.start_after_s + r.clock_error_s) * 1e9))
                entry["start_utc"] = iso_utc(own_ns)
            recorders.append(entry)
        out["recording"] = recorders
        if not all(r.timing for r in ps.recorders):
            out["clock_offset_s"] = 0.0
    out.update(calibration=str(files["calibration"]), track=str(files["track"]),
               track_position_noise_m=max(scenario.gnss_noise_m, 1e-3),
               atmosphere=raw["passes"][ps.name]["atmosphere"])
    if "layout" in files:
        g = ps.ground
        out["array"] = {"layout": str(files["layout"]), "mounting": "raised",
                        "ground": {"surface": g.surface,
                                   "flow_resistivity_pa_s_m2": g.flow_resistivity_pa_s_m2,
                                   "impedance_model": g.impedance_model}}
    return out

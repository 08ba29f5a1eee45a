"""Stage: the single-event metrics of a pass as received at its reference microphone (LAFmax,
LASmax, LAE over the 10 dB-down interval, LAeq) with the level and band histories."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.bands import third_octave_bands
from flyover.acoustics.certification import CERTIFICATION_ADJUSTMENTS
from flyover.acoustics.metrics import (EventMetrics, a_weighted, band_level_history,
                                      event_metrics, lae_shortfall_db, metrics_of_mean_square)
from flyover.acoustics.reconstruct import (RAISED_MICROPHONE_M, Directivity, energy_sum,
                                          received_history, reference_flight)
from flyover.io.figures import level_history_figure, save_figure
from flyover.io.results.event_metrics import (BAND_HISTORY, EVENT_METRICS, LEVEL_HISTORY,
                                              LEVEL_HISTORY_FIGURE, RECONSTRUCTED)
from flyover.io.results.levels import LEVELS
from flyover.campaign import PASS_INPUTS, Campaign
from flyover.model.constants import TOTAL
from flyover.model.errors import FlyoverInputError
from flyover.model.reads import guarded
from flyover.pipeline._facts import pass_summary
from flyover.pipeline.context import PassInputs, load_aligned_pass
from flyover.model.timebase import iso_utc

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = PASS_INPUTS + ("analysis.metrics_channel", "analysis.reference_flight",
                       "analysis.reference_distance_m", "analysis.reference_atmosphere",
                       "analysis.band_min_hz", "analysis.band_max_hz", "regions")
ENVELOPE_RATE_HZ = 100.0    # reconstructed mean-square histories, sampled every 10 ms

HISTORY_STEP_S = 0.01
BAND_BLOCK_S = 0.5


def reference_microphone(campaign: Campaign, inputs: PassInputs) -> int:
    """Layout row of the microphone the metrics are measured at: the campaign's
    ``analysis.metrics_channel``, else the used microphone nearest the array centre."""
    chosen = campaign.analysis.metrics_channel
    channels = inputs.layout.channel.tolist()
    if chosen is not None:
        if chosen not in channels:
            raise FlyoverInputError("the metrics channel is not in the layout",
                                    f"{campaign.config_path}, key analysis.metrics_channel",
                                    f"one of the layout's channels {channels[0]}-{channels[-1]}",
                                    f"{chosen}")
        return channels.index(chosen)
    used = np.flatnonzero(inputs.weights > 0)
    d = np.linalg.norm(inputs.layout.enu_m[used] - inputs.layout.center_enu_m, axis=1)
    return int(used[np.argmin(d)])


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write event_metrics.csv, level_history.csv, band_history.csv and level_history.png."""
    campaign = guarded(campaign, READS, stage="metrics", pass_name=pass_name)
    out_dir = Path(out_dir)
    inputs, _ = load_aligned_pass(campaign, pass_name, out_dir)
    mic = reference_microphone(campaign, inputs)
    summary = pass_summary(inputs)
    first, n = inputs.covered_frames(summary["covered_s"])
    pressure = inputs.read_microphone_pa(mic, int(first[mic]), n)
    fs = float(inputs.clock.rate_hz[mic])          # the recorder's true rate: true seconds
    t0 = float(inputs.clock.start_s[mic] + first[mic] / fs)
    metrics, history = event_metrics(pressure, fs)
    # The closest approach as the reference microphone hears it.
    closest_s = (summary["overhead_s"] + summary["closest_distance_m"]
                 / summary["speed_of_sound_m_s"] - t0)

    def utc(t_s):
        return iso_utc(int(inputs.clock.utc_ns(t0 + t_s)))

    row = {"channel": int(inputs.layout.channel[mic]),
           "lafmax_db": metrics.lafmax_db, "lafmax_utc": utc(metrics.lafmax_s),
           "lasmax_db": metrics.lasmax_db, "lasmax_utc": utc(metrics.lasmax_s),
           "lae_db": metrics.lae_db,
           "ten_db_down_start_utc": utc(metrics.ten_db_down_s[0]),
           "ten_db_down_end_utc": utc(metrics.ten_db_down_s[1]),
           "ten_db_down_s": metrics.ten_db_down_duration_s,
           "ten_db_down_complete": metrics.ten_db_down_complete,
           "lae_shortfall_db": lae_shortfall_db(
               metrics, history, closest_s=closest_s,
               closest_distance_m=summary["closest_distance_m"], speed_m_s=summary["speed_m_s"]),
           "laeq_db": metrics.laeq_db, "laeq_duration_s": metrics.laeq_duration_s,
           "as_measured": inputs.array.mounting}
    EVENT_METRICS.write(out_dir, pd.DataFrame([row]))
    step = max(1, int(round(HISTORY_STEP_S * fs)))
    k = np.arange(0, n, step)
    level_history = pd.DataFrame({"time_utc": [utc(v) for v in k / fs], "time_s": t0 + k / fs,
                                  "laf_db": history["LAF"][k], "las_db": history["LAS"][k]})
    LEVEL_HISTORY.write(out_dir, level_history)
    bands = third_octave_bands(25.0, min(10000.0, 0.45 * fs))
    centre_s, levels = band_level_history(pressure, fs, bands, BAND_BLOCK_S)
    band_history = pd.DataFrame({
        "time_utc": np.repeat([utc(c) for c in centre_s], len(bands)),
        "time_s": np.repeat(t0 + centre_s, len(bands)),
        "band_hz": np.tile(bands.nominal_hz, len(centre_s)),
        "level_db": levels.ravel()})
    BAND_HISTORY.write(out_dir, band_history)
    figure_row = dict(row, ten_db_down_start_s=t0 + metrics.ten_db_down_s[0],
                      ten_db_down_end_s=t0 + metrics.ten_db_down_s[1])
    save_figure(level_history_figure(level_history, band_history, figure_row, pass_name),
                LEVEL_HISTORY_FIGURE.path(out_dir))
    RECONSTRUCTED.write(out_dir, reconstruction_table(
        campaign, inputs, summary, LEVELS.read(out_dir), pressure, fs, mic, (t0, t0 + n / fs),
        (metrics, row["lae_shortfall_db"])))


def directivities(levels: pd.DataFrame) -> dict[str, Directivity]:
    """Each component's band levels at 1 m against polar angle from a pass's levels table,
    with the convective exponent they were formed with."""
    out = {}
    if len(levels) == 0:
        return out
    bands = third_octave_bands(levels["band_hz"].min(), levels["band_hz"].max())
    for region, g in levels.groupby("region", sort=False):
        wide = g.pivot_table(index="polar_angle_deg", columns="band_hz", values="level_1m_db",
                             aggfunc="first", dropna=False).reindex(columns=bands.nominal_hz)
        wide = wide.sort_index()
        exponent = (float(g["convective_exponent"].iloc[0]) if "convective_exponent" in g
                    else 2.0)
        out[region] = Directivity(wide.index.to_numpy(float), bands.center_hz,
                                  wide.to_numpy(float), exponent)
    return out


def covered_stretch(env) -> slice | None:
    """The longest stretch of a reconstructed mean-square history that the directivity covers
    (None where it covers none)."""
    ok = np.isfinite(env)
    if not ok.any():
        return None
    edges = np.flatnonzero(np.diff(np.r_[0, ok.astype(int), 0]))
    starts, stops = edges[::2], edges[1::2]
    k = int(np.argmax(stops - starts))
    return slice(int(starts[k]), int(stops[k]))


def reconstruction_table(campaign: Campaign, inputs: PassInputs, summary: dict,
                         levels: pd.DataFrame, pressure, fs: float, mic: int, span_s,
                         full: tuple[EventMetrics, float]) -> pd.DataFrame:
    """LASmax and LAE per component: rebuilt on the measured path at the measured microphone
    (against the measurement in the analysed bands: the check of the reconstruction), for the
    reference flight, and the measured levels (``full``: all frequencies) with
    certification-style adjustments, and its LAE shortfall. ``summary`` is the pass's
    :func:`pass_summary`."""
    full, full_shortfall_db = full
    an = campaign.analysis
    ref = an.reference_flight
    height_t, speed_t = summary["height_above_array_m"], summary["speed_m_s"]
    height_r = ref.height_m or an.reference_distance_m
    speed_r = ref.speed_m_s or speed_t
    bands = third_octave_bands(an.band_min_hz, an.band_max_hz)
    # The measurement in the analysed bands, A-weighted once for the whole span and its stretch.
    p2_band = a_weighted(pressure, fs, (bands.lower_hz[0], bands.upper_hz[-1])) ** 2
    c_t = summary["speed_of_sound_m_s"]
    closest_t = summary["overhead_s"] + summary["closest_distance_m"] / c_t   # as heard

    def metrics_of(p2, rate_hz, start_s, closest_s, distance_m, speed_m_s):
        """Metrics of a mean-square history starting at ``start_s`` and their LAE
        shortfall, the closest approach heard at ``closest_s``."""
        m, history = metrics_of_mean_square(p2, rate_hz)
        return m, lae_shortfall_db(m, history, closest_s=closest_s - start_s,
                                   closest_distance_m=distance_m, speed_m_s=speed_m_s)

    measured = metrics_of(p2_band, fs, span_s[0], closest_t, summary["closest_distance_m"],
                          speed_t)
    mounting, gain = inputs.array.mounting, inputs.array.pressure_gain
    rows = [_row("measured", "total", measured, height_t, speed_t, mounting,
                 f"channel {inputs.layout.channel[mic]}, {bands.nominal_hz[0]:g}-"
                 f"{bands.nominal_hz[-1]:g} Hz bands only")]
    dirs = directivities(levels)
    centres = {name: r.center_m for name, r in campaign.regions.items()}
    # Reception times whose emission the track holds.
    track, obs, c = inputs.track, inputs.layout.enu_m[mic], inputs.atmosphere.c_m_s
    first = track.start_s + np.linalg.norm(track.position(track.start_s) - obs) / c + 0.1
    measured_path = dict(track=track, observer_enu_m=obs,
                         reception_s=np.arange(max(span_s[0], first), min(span_s[1], track.end_s),
                                               1 / ENVELOPE_RATE_HZ),
                         atmosphere=inputs.atmosphere, pressure_gain=gain)
    duration = 2 * height_r * np.tan(np.deg2rad(85.0)) / speed_r    # 85 deg either side
    reach_s = np.hypot(height_r, speed_r * duration / 2) / an.reference_atmosphere.c_m_s
    raised = ref.observer == "raised"
    reference = dict(track=reference_flight(height_r, speed_r,
                                            duration_s=duration + 2 * reach_s + 2.0),
                     observer_enu_m=[0.0, 0.0, RAISED_MICROPHONE_M if raised else 0.0],
                     reception_s=np.arange(-duration / 2, duration / 2, 1 / ENVELOPE_RATE_HZ),
                     atmosphere=an.reference_atmosphere, pressure_gain=1.0 if raised else 2.0,
                     ground_image=raised)
    reference_closest_s = height_r / an.reference_atmosphere.c_m_s    # overhead at t = 0
    for route, kw, h, v, obs, closest_s, distance_m in (
            ("rebuilt on the measured path", measured_path, height_t, speed_t, mounting,
             closest_t, summary["closest_distance_m"]),
            ("reference flight", reference, height_r, speed_r, ref.observer,
             reference_closest_s, height_r)):
        envs = {name: received_history(d, body_m=centres.get(name, np.zeros(3)), **kw)
                .a_weighted_mean_square() for name, d in dirs.items()}
        parts = [e for name, e in envs.items() if name != TOTAL]
        if parts:
            envs["components"] = energy_sum(parts)
        for name, env in envs.items():
            stretch = covered_stretch(env)
            if stretch is None:
                continue
            t = kw["reception_s"][stretch]
            m = metrics_of(env[stretch], ENVELOPE_RATE_HZ, t[0], closest_s, distance_m, v)
            rows.append(_row(route, name, m, h, v, obs, "from the measured directivity"))
            if route.startswith("rebuilt") and name == TOTAL:
                # The like-for-like check: the measurement over the stretch the
                # reconstruction covers (the directivity's angles may end before 10 dB down).
                k0, k1 = (int(round((v_s - span_s[0]) * fs)) for v_s in (t[0], t[-1]))
                k0 = max(k0, 0)
                rows.append(_row("measured over the rebuilt stretch", TOTAL,
                                 metrics_of(p2_band[k0:k1 + 1], fs, span_s[0] + k0 / fs,
                                            closest_s, distance_m, v),
                                 h, v, obs,
                                 f"{t[0] - span_s[0]:.2f} to {t[-1] - span_s[0]:.2f} s of the "
                                 "measured span, the analysed bands only"))
    table = pd.DataFrame(rows, columns=RECONSTRUCTED.column_names)
    rule = CERTIFICATION_ADJUSTMENTS.get(ref.adjustment)
    if rule is None:
        return table
    lateral_m = np.sqrt(max(summary["closest_distance_m"] ** 2 - height_t ** 2, 0.0))
    window = rule.window_note(height_t, height_r, speed_t, speed_r, lateral_m)
    adjusted = rule.adjusted(full, height_t, height_r, speed_t, speed_r)
    table.loc[len(table)] = _row("adjusted measurement", "total", (adjusted, full_shortfall_db),
                                 height_r, speed_r, mounting,
                                 f"all frequencies; {rule.text}{window}")
    # The like-for-like route: the measurement in the analysed bands (as the reconstruction
    # holds), adjusted the same way.
    adjusted_bands = rule.adjusted(measured[0], height_t, height_r, speed_t, speed_r)
    table.loc[len(table)] = _row("adjusted measurement, analysed bands", "total",
                                 (adjusted_bands, measured[1]), height_r, speed_r, mounting,
                                 f"{bands.nominal_hz[0]:g}-{bands.nominal_hz[-1]:g} Hz bands "
                                 f"only; {rule.text}{window}")
    rebuilt = table[(table["route"] == "reference flight") & (table["component"] == TOTAL)]
    if len(rebuilt):
        r = rebuilt.iloc[0]
        alike = ref.observer == mounting
        table.loc[len(table)] = {
            "route": "reference flight minus adjusted measurement", "component": TOTAL,
            "lasmax_db": r["lasmax_db"] - adjusted_bands.lasmax_db if alike else np.nan,
            "lae_db": r["lae_db"] - adjusted_bands.lae_db if alike else np.nan,
            "ten_db_down_s": (r["ten_db_down_s"] - adjusted_bands.ten_db_down_duration_s
                              if alike else np.nan),
            "complete": bool(r["complete"]) and adjusted_bands.ten_db_down_complete,
            "lae_shortfall_db": max(r["lae_shortfall_db"], measured[1]),
            "height_m": height_r, "speed_m_s": speed_r, "observer": ref.observer,
            "note": ("the two routes to the reference flight compared like for like: the "
                     "analysed bands, one mounting" if alike else
                     f"no difference: the reference observer ({ref.observer}) and the array's "
                     f"microphones ({mounting}) hear the ground differently")}
    return table


def _row(route, component, metrics: tuple[EventMetrics, float], height, speed, observer,
         note) -> dict:
    """A table row from metrics and their LAE shortfall (dB)."""
    m, shortfall_db = metrics
    return {"route": route, "component": component, "lasmax_db": m.lasmax_db,
            "lae_db": m.lae_db, "ten_db_down_s": m.ten_db_down_duration_s,
            "complete": m.ten_db_down_complete, "lae_shortfall_db": shortfall_db,
            "height_m": height, "speed_m_s": speed,
            "observer": observer, "note": note}

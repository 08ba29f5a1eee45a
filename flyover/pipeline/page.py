"""Stage: one pass's page, ``PASS/pass.html``: its conditions, clocks, metrics, data quality,
track, maps, spectra, tones and narrowband spectra, self-contained (the campaign report links to
it, so that the report grows with the labels, not the passes)."""

from __future__ import annotations

import html
from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.orders import SEPARATION_CORRELATION
from flyover.acoustics.uncertainty import Z90
from flyover.campaign import Campaign
from flyover.io.atomic import write_text
from flyover.io.html_page import (embedded_image, figure_html, html_document, lae_text,
                                  number_text, table_html)
from flyover.io.results import pass_page, qc
from flyover.io.results import report as report_file
from flyover.io.results.alignment import clock_uncertainty_s, pass_atmosphere, read_alignment
from flyover.io.results.directivity import DIRECTIVITY_FIGURE
from flyover.io.results.event_metrics import EVENT_METRICS, LEVEL_HISTORY_FIGURE, RECONSTRUCTED
from flyover.io.results.maps import (FIGURE_FOLDER, figure_windows, method_figures,
                                     window_figure_name)
from flyover.io.results.narrowband import NARROWBAND_FIGURE
from flyover.io.results.rotor_tones import ROTOR_TONES, ROTOR_TONES_FIGURE
from flyover.io.results.spectra import SPECTRA_FIGURE
from flyover.io.results.windows import WINDOWS
from flyover.model.reads import guarded

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("passes.{pass}.label", "passes.{pass}.track_position_noise_m", "analysis.method",
         "analysis.uncertainty", "analysis.map_dynamic_range_db")


def run(campaign: Campaign, pass_name: str, out_dir: Path) -> None:
    """Write the pass's page from the results already in its folder."""
    campaign = guarded(campaign, READS, stage="page", pass_name=pass_name)
    out_dir = Path(out_dir)
    write_text(out_dir / pass_page.NAME, html_document(
        f"flyover pass {pass_name}",
        pass_body(campaign, pass_name, out_dir)))


def _array_text(array: dict) -> str:
    """The array a pass was flown over, in words."""
    if not array:
        return "campaign array"
    text = f"{array['layout']}, {array['mounting']}"
    if array["mounting"] == "raised":
        lo, hi = array["mic_height_m"]
        text += f" {lo:.2f}-{hi:.2f} m over {array['ground']}"
    if array.get("plate_correction_db"):
        text += ", plate correction " + ", ".join(f"{b} Hz {v:+.1f} dB" for b, v in
                                                 array["plate_correction_db"].items())
    return text


def _profile_text(atmosphere: dict) -> str:
    """A layered atmosphere's stand-in, in words (the table above gives its values)."""
    if not atmosphere.get("profile_layers"):
        return "uniform"
    lo, hi = atmosphere["profile_span_m"]
    return (f"{atmosphere['profile_layers']} layers, averaged over {lo:.0f}-{hi:.0f} m above "
            "the array (absorption, travel-time speed of sound, wind)")


def pass_body(campaign: Campaign, name: str, d: Path) -> str:
    """The page's body: everything one pass's folder holds, in words, tables and figures."""
    al = read_alignment(d)
    spec = campaign.passes[name]
    atm = pass_atmosphere(al)
    windows = WINDOWS.read(d)
    done = windows[windows["status"] == "analysed"]
    warnings = []
    for q in al.get("channel_quality", []):
        if q["verdict"] != "ok":
            kept = q["channel"] not in al.get("quality_excluded_channels", [])
            warnings.append(f"channel {q['channel']}: {q['verdict']} "
                            f"({q['level_re_median_db']:+.1f} dB re array median, "
                            f"{q['level_re_neighbours_db']:+.1f} dB re neighbours)"
                            + ("; kept by the config" if kept else "; left out of beamforming"))
    skipped = windows[windows["status"] == "skipped"]
    if len(skipped):
        warnings.append(f"{len(skipped)} window(s) skipped: "
                        + "; ".join(sorted(set(skipped["reason"].astype(str)))))
    weather = al.get("weather") or {}
    for flag in weather.get("flags", []):
        warnings.append(f"weather over the pass: {flag} (the levels use the mean; fly again or "
                        "justify)")
    tq = al.get("track_quality", {})
    if tq.get("position_noise_estimate_m", 0) > 3 * spec.track_position_noise_m:
        warnings.append(f"track noise estimate {tq['position_noise_estimate_m']:.3f} m is over "
                        f"three times the stated {spec.track_position_noise_m} m")
    given = "clock_offset_uncertainty_s" not in al and not any(
        r.get("clock_method") == "timing channel" for r in al.get("recorders", []))
    clock_u_ms = 1000.0 * clock_uncertainty_s(al, campaign.analysis.uncertainty.clock_s)
    used, mics = al["channels_used"], al.get("microphones", al["channels"])
    timing = int(al["channels"]) - int(mics)
    conditions = pd.DataFrame([{
        "label": spec.label, "temperature (C)": f"{atm.temperature_c:.1f}",
        "humidity (%)": f"{atm.relative_humidity_pct:.0f}",
        "pressure (kPa)": f"{atm.pressure_kpa:.2f}",
        "wind (m/s)": f"{atm.wind_speed_m_s:.1f}", "wind from (deg)": f"{atm.wind_from_deg:.0f}",
        "speed of sound (m/s)": f"{atm.c_m_s:.1f}",
        "clock offset (s)": f"{al['clock_offset_s']:+.4f}",
        "clock offset from": al.get("clock_offset_source", "config"),
        "clock offset uncertainty (ms)": (f"{clock_u_ms:.2f}" + (
            " (stated for a clock given by hand: analysis.uncertainty.clock_s)" if given
            else "")),
        "overhead (UTC)": al["overhead_utc"], "closest (m)": f"{al['closest_distance_m']:.1f}",
        "height (m)": f"{al['height_above_array_m']:.1f}", "speed (m/s)": f"{al['speed_m_s']:.1f}",
        "microphones used": f"{used} of {mics}" + (
            f" (the recording's {timing} other channel(s) carry timing or are unused)"
            if timing > 0 else ""),
        "array": _array_text(al.get("array", {})),
        "yaw from": al.get("track", {}).get("heading_source", "attitude in the track"),
        "crab angle overhead (deg)": f"{al.get('track', {}).get('crab_angle_deg', 0.0):+.1f}",
        "atmosphere profile": _profile_text(al["atmosphere"])}]).T.reset_index()
    conditions.columns = ["quantity", "value"]
    conditions["value"] = conditions["value"].astype(str)
    maps = [embedded_image(d / FIGURE_FOLDER / window_figure_name(w), f"maps of window {w}")
            for w in figure_windows(done["window"], done["polar_angle_deg"])]
    compared = method_figures(d)
    if compared:
        # The window nearest overhead by every method: the headline's maps, then the others'.
        w = compared[0][0]
        maps.append("<h4>Methods side by side</h4>" + embedded_image(
            d / FIGURE_FOLDER / window_figure_name(w),
            f"window {w} by {campaign.analysis.method}") + "".join(
            embedded_image(p, f"window {w} by {method}") for _, method, p in compared))
    warn_html = ("<ul>" + "".join(f'<li class="warn">{html.escape(w)}</li>' for w in warnings)
                 + "</ul>") if warnings else "<p>No data-quality warnings.</p>"
    return f"""
<h1>Pass {html.escape(name)}</h1>
<p class="muted">Label {html.escape(spec.label or "(none)")}. Its sign-off status and the
reasons for it are in the campaign report's
<a href="../{report_file.NAME}#signoff">sign-off table</a>; the numbers behind every table and
figure are the CSV files beside this page.</p>
<p class="caution"><strong>Caution.</strong> {html.escape(report_file.CAUTION)}</p>
<section class="pass" data-pass="{html.escape(name)}">
<h3>Conditions and alignment</h3>{table_html(conditions)}
<h3>Recorders and clocks</h3>{table_html(_recorder_table(al))}
<h3>Single-event metrics (as received)</h3>{table_html(_metrics_table(d))}
<h4>Reconstructed per component</h4><p class="muted">From the measured directivity at 1 m:
rebuilt on the measured path (the check against the measurement in the analysed bands), and for
the reference flight; beside them, the measured levels with the certification-style height and
speed adjustments. Incomplete means the 10 dB-down interval runs past the angles or the recording
available.</p>{table_html(_reconstruction_table(d))}
{figure_html(d, LEVEL_HISTORY_FIGURE)}
<h3>Data quality</h3>{warn_html}
<h3>Track</h3>{figure_html(d, qc.TRACK_FIGURE)}
<h3>Spectrograms</h3>{figure_html(d, qc.SPECTROGRAM_FIGURE)}
<h3>Source maps</h3><p class="muted">Windows nearest to polar angles 60, 90 and 120 deg; each
panel in dB re its own peak over {campaign.analysis.map_dynamic_range_db:g} dB.</p>{''.join(maps)}
<h3>Region spectra</h3>{figure_html(d, SPECTRA_FIGURE)}
<h3>Directivity</h3>{figure_html(d, DIRECTIVITY_FIGURE)}
<h3>Rotor tones</h3><p class="muted">Each rotor's blade-passing harmonics, fitted along its own
shaft angle from the logged speed (all rotors jointly, so rotors the map cannot tell apart are
told apart by their speeds); levels at 1 m, free field, with the noise's bias taken off and a
standard uncertainty from the fit. A harmonic whose fit column correlates above
{SEPARATION_CORRELATION:g} with another's (about half a bin apart, or speeds crossing in the
window) is not separable and has no level; over raised microphones no tone has a level (the
ground reflection at its frequency is not taken off). Band levels split into the tonal part of
the rotors whose hub lies in the region and the broadband rest: band_parts.csv.</p>
{table_html(_rotor_table(d))}
{figure_html(d, ROTOR_TONES_FIGURE)}
<h3>Narrowband spectra</h3><p class="muted">The array focused on each region's centre, in source
time, at 1 m: Welch densities of every window in narrowband.csv (the line spacing in its
resolution_hz column), with the microphones' own noise taken out; the grey line keeps every
term. Tones the maps spread over a band stand out here.</p>
{figure_html(d, NARROWBAND_FIGURE)}
</section>"""


def _rotor_table(d: Path) -> pd.DataFrame:
    """Per rotor and harmonic: its frequency, how many windows could separate it, and its level
    at 1 m in the window nearest overhead and over the pass."""
    tones = ROTOR_TONES.read(d)
    rows = []
    for (rotor, k), g in tones.groupby(["rotor", "harmonic"], sort=True):
        ok = g[g["separable"]]
        near = ok.loc[(ok["polar_angle_deg"] - 90).abs().idxmin()] if len(ok) else None
        rows.append({"rotor": rotor, "harmonic": int(k), "order": int(g["order"].iloc[0]),
                     "frequency (Hz)": f"{g['frequency_hz'].mean():.1f}",
                     "windows separable": f"{len(ok)} of {len(g)}",
                     "level at 1 m near overhead (dB)": (
                         f"{number_text(near['level_1m_db'], missing='no level')}"
                         + (f" +- {Z90 * near['uncertainty_db']:.1f}"
                            if np.isfinite(near["uncertainty_db"]) else "")
                         + f" at {near['polar_angle_deg']:.0f} deg" if near is not None
                         else "no window separates it"),
                     "range over the pass (dB)": _level_range(ok["level_1m_db"])})
    return pd.DataFrame(rows)


def _level_range(levels) -> str:
    """The lowest to the highest of the levels given, or why there is none."""
    given = pd.to_numeric(levels, errors="coerce").dropna()
    if len(given) == 0:
        return "no level in any window (rotor_tones.csv says why)" if len(levels) else ""
    return f"{given.min():.1f} to {given.max():.1f}"


def _metrics_table(d: Path) -> pd.DataFrame:
    """The pass's single-event metrics, rounded to what they can defend (0.1 dB, 0.01 s)."""
    m = EVENT_METRICS.read(d).iloc[0]
    rows = [("reference microphone", f"channel {int(m['channel'])} ({m['as_measured']})"),
            ("LAFmax (dB)", f"{m['lafmax_db']:.1f} at {m['lafmax_utc']}"),
            ("LASmax (dB)", f"{m['lasmax_db']:.1f} at {m['lasmax_utc']}"),
            ("LAE, 10 dB down (dB)", lae_text(m["lae_db"], m["ten_db_down_complete"],
                                          m["lae_shortfall_db"])),
            ("10 dB-down duration (s)", f"{m['ten_db_down_s']:.2f} from "
                                        f"{m['ten_db_down_start_utc']}"),
            ("LAeq (dB)", f"{m['laeq_db']:.1f} over {m['laeq_duration_s']:.2f} s")]
    return pd.DataFrame(rows, columns=["quantity", "value"])


def _reconstruction_table(d: Path) -> pd.DataFrame:
    """The reconstructed metrics, rounded (0.1 dB, 0.01 s)."""
    t = RECONSTRUCTED.read(d)
    return pd.DataFrame({
        "route": t["route"], "component": t["component"],
        "LASmax (dB)": t["lasmax_db"].map(lambda v: number_text(v, missing="none")),
        "LAE (dB)": [lae_text(v, c, x) for v, c, x in
                     zip(t["lae_db"], t["complete"], t["lae_shortfall_db"])],
        "10 dB down (s)": t["ten_db_down_s"].map(lambda v: number_text(v, ".2f", missing="none")),
        "complete": t["complete"].map({True: "yes", False: "no"}),
        "flight": [f"{h:.1f} m, {v:.1f} m/s, {o}" for h, v, o in
                   zip(t["height_m"], t["speed_m_s"], t["observer"])],
        "how": t["note"]})


def _recorder_table(al: dict) -> pd.DataFrame:
    """Each recorder of a pass: its files and microphones, how its clock was found, and how
    well (drift and start uncertainties, residual of the timing edges, timing events)."""
    rows = []
    for r in al.get("recorders", []):
        timed = r["clock_method"] == "timing channel"
        rows.append({
            "recorder": r["name"],
            "files": f"{len(r['files'])} {r['format']}",
            "microphones": r["layout_channels"],
            "clock": (r.get("timing_kind", "timing channel") if timed else
                      f"{r['clock_method']} ({r['start_source'] or 'typed start'})"),
            "start (UTC)": r["start_utc"],
            "offset (s)": "" if r["offset_s"] is None else f"{r['offset_s']:+.4f}",
            "offset uncertainty (us)": ("" if r["offset_uncertainty_s"] is None else
                                        f"{r['offset_uncertainty_s'] * 1e6:.1f}"),
            "drift (ppm)": (f"{r['drift_ppm']:+.2f} +- {r['drift_uncertainty_ppm']:.2f}"
                            if timed else f"{r['drift_ppm']:+.2f} (given)"),
            "edge residual rms / max (us)": (f"{r['timing_residual_rms_us']:.1f} / "
                                             f"{r['timing_residual_max_us']:.1f} "
                                             f"({r['timing_edges']} edges)" if timed else ""),
            "timing events": "; ".join(r.get("timing_events", [])) or ("none" if timed else ""),
        })
    return pd.DataFrame(rows)

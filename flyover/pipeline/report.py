"""Stage: one self-contained HTML report of the campaign (figures embedded, no external links)."""

from __future__ import annotations

import base64
import html
import re
import io
import os
import platform
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd
from PIL import Image

from flyover import __version__
from flyover.io.atomic import write_text
from flyover.io.results.alignment import clock_uncertainty_s, pass_atmosphere, read_alignment
from flyover.io.results import FigureFile, qc, viewer
from flyover.io.results import report as report_file
from flyover.io.digest import file_digest
from flyover.io.results.report import CAUTION
from flyover.io.results.campaign_tables import CAMPAIGN_FIGURE, CAMPAIGN_LEVELS, CAMPAIGN_OVERALL
from flyover.io.results.comparison import (COMPARED_METRIC_NAMES, COMPARED_METRICS,
                                           COMPARED_OVERALL, COMPARISON_FIGURE, pair_folder)
from flyover.io.results.comparison import FOLDER as COMPARISON_FOLDER
from flyover.io.results.directivity import DIRECTIVITY_FIGURE
from flyover.acoustics.orders import SEPARATION_CORRELATION
from flyover.acoustics.uncertainty import Z90
from flyover.io.results.event_metrics import EVENT_METRICS, LEVEL_HISTORY_FIGURE, RECONSTRUCTED
from flyover.io.results.maps import FIGURE_FOLDER, method_figures, window_figure_name
from flyover.io.results.narrowband import NARROWBAND_FIGURE
from flyover.io.results.rotor_tones import ROTOR_TONES, ROTOR_TONES_FIGURE
from flyover.io.results.spectra import SPECTRA_FIGURE
from flyover.io.results.hemisphere import (COVERAGE_FIGURE, HEMISPHERE, HEMISPHERE_FIGURE,
                                           label_folders)
from flyover.io.results.hemisphere import FOLDER as HEMISPHERE_FOLDER
from flyover.io.results.levels_overall import LEVELS_OVERALL
from flyover.io.results.signoff import SIGNOFF
from flyover.io.results.windows import WINDOWS
from flyover.campaign import Campaign
from flyover.model.reads import guarded

REPORT_IMAGE_QUALITY = 60  # WebP quality of the embedded figures (the PNGs keep full detail)
REPORT_IMAGE_WIDTH = 1600  # pixels at most: wider figures are scaled down for the page

_STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;color:#2b3440;background:#faf8f4;
max-width:1180px;margin:0 auto;padding:24px 28px;line-height:1.45}
h1{font-size:1.7em;margin-bottom:0}h2{border-bottom:2px solid #d08a1f;padding-bottom:4px;
margin-top:2.2em}h3{color:#1f7a78}table{border-collapse:collapse;font-size:.85em;margin:10px 0}
th,td{border:1px solid #ddd6c8;padding:3px 7px;text-align:right}th{background:#efe9dd}
td.t,th.t{text-align:left}tr.flag td,td.flag{background:#fbe3d2}h4{margin:14px 0 2px}
img{max-width:100%;border:1px solid #ddd6c8;background:white;margin:6px 0}
.caution{border-left:5px solid #b03a2e;background:#fff4ef;padding:10px 14px}.muted{color:#6b7380;font-size:.9em}.warn{color:#b03a2e}
nav a{margin-right:14px;color:#1f7a78}
"""

# What this stage reads of the campaign (flyover.model.reads): everything it reports.
READS = ("",)



def _img(path: Path, alt: str) -> str:
    """A figure embedded as lossy WebP on white, at most ``REPORT_IMAGE_WIDTH`` wide (the PNG
    stays in the results folder): about a quarter of the PNG's bytes, which keeps the demo's
    report under 5 MB."""
    if not Path(path).exists():
        return f'<p class="muted">({html.escape(alt)}: not available)</p>'
    with Image.open(path) as image:
        flat = Image.new("RGB", image.size, "white")
        rgba = image.convert("RGBA")
        flat.paste(rgba, mask=rgba.getchannel("A"))
    if flat.width > REPORT_IMAGE_WIDTH:
        flat = flat.resize((REPORT_IMAGE_WIDTH,
                            round(flat.height * REPORT_IMAGE_WIDTH / flat.width)),
                           Image.Resampling.LANCZOS)
    buffer = io.BytesIO()
    flat.save(buffer, "WEBP", quality=REPORT_IMAGE_QUALITY, method=6)
    data = base64.b64encode(buffer.getvalue()).decode("ascii")
    return f'<img alt="{html.escape(alt)}" src="data:image/webp;base64,{data}">'


def _figure(folder: Path, figure: FigureFile) -> str:
    """A declared figure of a results folder, with its caption (:func:`_img`)."""
    return _img(figure.path(folder), figure.caption)


def _num(value, fmt: str = ".1f", missing: str = "missing") -> str:
    """A number rounded for the report, or the words for a missing one (never 'nan')."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return missing
    return format(v, fmt) if np.isfinite(v) else missing


def _lae(lae_db, complete, shortfall_db) -> str:
    """An LAE for the report: a cut-short one says it is a lower bound and by about how much."""
    if bool(complete) or not np.isfinite(float(lae_db)):
        return _num(lae_db, missing="none")
    short = float(shortfall_db) if shortfall_db is not None else np.inf
    return _num(lae_db) + (f" (cut short: about {short:.1f} dB more)" if np.isfinite(short)
                           else " (cut short: a lower bound)")


def _table(df: pd.DataFrame, flag_column: str | None = None, max_rows: int = 400) -> str:
    if df is None or len(df) == 0:
        return '<p class="muted">(no rows)</p>'
    rows = []
    cols = [c for c in df.columns if c != flag_column]
    head = "".join(f'<th class="{"t" if df[c].dtype == object else ""}">{html.escape(str(c))}</th>'
                   for c in cols)
    for _, r in df.head(max_rows).iterrows():
        flag = flag_column is not None and bool(r[flag_column])
        cells = []
        for c in cols:
            v = r[c]
            if isinstance(v, (float, np.floating)):
                text = "" if not np.isfinite(v) else f"{v:.1f}" if abs(v) >= 10 else f"{v:.2f}"
                cells.append(f"<td>{text}</td>")
            else:
                cells.append(f'<td class="t">{html.escape(str(v))}</td>')
        rows.append(f'<tr class="{"flag" if flag else ""}">{"".join(cells)}</tr>')
    more = (f'<p class="muted">{len(df) - max_rows} more rows in the CSV file.</p>'
            if len(df) > max_rows else "")
    return f"<table><tr>{head}</tr>{''.join(rows)}</table>{more}"


def _level_grids(table: pd.DataFrame, group: list[str], row: str, row_text,
                 header: str) -> str:
    """Per group (label, region, ...): ``row`` down, polar bins across, the mean level in each
    cell; cells whose 90 % interval is wider than +-1.5 dB are shaded, single-pass cells are in
    italics."""
    if len(table) == 0:
        return '<p class="muted">(no levels)</p>'
    parts = []
    for key, g in table.groupby(group, sort=False):
        grid = {v: g.pivot_table(index=row, columns="polar_bin_deg", values=v, aggfunc="first")
                for v in ("mean_db", "wide_interval", "n_passes")}
        mean = grid["mean_db"]
        head = "".join(f"<th>{c:g}&deg;</th>" for c in mean.columns)
        rows = []
        for r, values in mean.iterrows():
            cells = []
            for col, v in values.items():
                if not np.isfinite(v):
                    cells.append("<td></td>")
                    continue
                text = f"{v:.1f}" if grid["n_passes"].loc[r, col] > 1 else f"<i>{v:.1f}</i>"
                cls = "flag" if bool(grid["wide_interval"].loc[r, col]) else ""
                cells.append(f'<td class="{cls}">{text}</td>')
            rows.append(f"<tr><th>{html.escape(row_text(r))}</th>{''.join(cells)}</tr>")
        title = ": ".join(html.escape(str(k)) for k in (key if isinstance(key, tuple) else (key,)))
        parts.append(f"<h4>{title}</h4><table><tr><th>{html.escape(header)}</th>{head}</tr>"
                     f"{''.join(rows)}</table>")
    return "".join(parts)


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


def _signoff_rows(out: Path) -> dict:
    """The sign-off table's rows by pass (status and reasons)."""
    table = SIGNOFF.read(out).fillna({"reasons": ""})
    return {str(r["pass"]): r for _, r in table.iterrows()}


def _signoff_table(signed: dict) -> pd.DataFrame:
    """The sign-off table for the report's top: status, reasons and headline numbers."""
    t = pd.DataFrame(list(signed.values())).fillna({"label": ""})
    return pd.DataFrame({
        "pass": t["pass"], "label": t["label"], "status": t["status"],
        "reasons": t["reasons"].map(lambda r: r or "none"),
        "height (m)": t["height_m"].map(_num), "speed (m/s)": t["speed_m_s"].map(_num),
        "closest (m)": t["closest_distance_m"].map(_num),
        "LASmax (dB)": t["lasmax_db"].map(_num),
        "LAE (dB)": [_lae(v, c, x) for v, c, x in
                     zip(t["lae_db"], t["metrics_complete"], t["lae_shortfall_db"])],
        "_flag": t["status"] != "accepted"})


def _pass_section(campaign: Campaign, name: str, out: Path, signed: dict) -> str:
    """One pass's section; ``signed`` is the sign-off row of every pass (:func:`_signoff_rows`)."""
    d = out / name
    al = read_alignment(d)
    mine = signed[name]
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
    maps = []
    if len(done):
        for target in (60.0, 90.0, 120.0):
            k = int((done["polar_angle_deg"] - target).abs().idxmin())
            w = int(done.loc[k, "window"])
            maps.append(_img(d / FIGURE_FOLDER / window_figure_name(w), f"maps of window {w}"))
    maps = list(dict.fromkeys(maps))
    compared = method_figures(d)
    if compared:
        # The window nearest overhead by every method: the headline's maps, then the others'.
        w = compared[0][0]
        maps.append("<h4>Methods side by side</h4>" + _img(
            d / FIGURE_FOLDER / window_figure_name(w),
            f"window {w} by {campaign.analysis.method}") + "".join(
            _img(p, f"window {w} by {method}") for _, method, p in compared))
    warnings = [r for r in str(mine["reasons"]).split("; ") if r] + warnings
    warn_html = ("<ul>" + "".join(f'<li class="warn">{html.escape(w)}</li>' for w in warnings)
                 + "</ul>") if warnings else "<p>No data-quality warnings.</p>"
    status = html.escape(str(mine["status"]))
    return f"""
<h2 id="pass-{html.escape(name)}">Pass {html.escape(name)}: {status}</h2>
<section class="pass" data-pass="{html.escape(name)}" data-status="{status}">
<h3>Conditions and alignment</h3>{_table(conditions)}
<h3>Recorders and clocks</h3>{_table(_recorder_table(al))}
<h3>Single-event metrics (as received)</h3>{_table(_metrics_table(d))}
<h4>Reconstructed per component</h4><p class="muted">From the measured directivity at 1 m:
rebuilt on the measured path (the check against the measurement in the analysed bands), and for
the reference flight; beside them, the measured levels with the certification-style height and
speed adjustments. Incomplete means the 10 dB-down interval runs past the angles or the recording
available.</p>{_table(_reconstruction_table(d))}
{_figure(d, LEVEL_HISTORY_FIGURE)}
<h3>Data quality</h3>{warn_html}
<h3>Track</h3>{_figure(d, qc.TRACK_FIGURE)}
<h3>Spectrograms</h3>{_figure(d, qc.SPECTROGRAM_FIGURE)}
<h3>Source maps</h3><p class="muted">Windows nearest to polar angles 60, 90 and 120 deg; each
panel in dB re its own peak over {campaign.analysis.map_dynamic_range_db:g} dB.</p>{''.join(maps)}
<h3>Region spectra</h3>{_figure(d, SPECTRA_FIGURE)}
<h3>Directivity</h3>{_figure(d, DIRECTIVITY_FIGURE)}
<h3>Rotor tones</h3><p class="muted">Each rotor's blade-passing harmonics, fitted along its own
shaft angle from the logged speed (all rotors jointly, so rotors the map cannot tell apart are
told apart by their speeds); levels at 1 m, free field, with the noise's bias taken off and a
standard uncertainty from the fit. A harmonic whose fit column correlates above
{SEPARATION_CORRELATION:g} with another's (about half a bin apart, or speeds crossing in the
window) is not separable and has no level; over raised microphones no tone has a level (the
ground reflection at its frequency is not taken off). Band levels split into the tonal part of
the rotors whose hub lies in the region and the broadband rest: band_parts.csv.</p>
{_table(_rotor_table(d))}
{_figure(d, ROTOR_TONES_FIGURE)}
<h3>Narrowband spectra</h3><p class="muted">The array focused on each region's centre, in source
time, at 1 m: Welch densities of every window in narrowband.csv (the line spacing in its
resolution_hz column), with the microphones' own noise taken out; the grey line keeps every
term. Tones the maps spread over a band stand out here.</p>
{_figure(d, NARROWBAND_FIGURE)}
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
                         f"{_num(near['level_1m_db'], missing='no level')}"
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
            ("LAE, 10 dB down (dB)", _lae(m["lae_db"], m["ten_db_down_complete"],
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
        "LASmax (dB)": t["lasmax_db"].map(lambda v: _num(v, missing="none")),
        "LAE (dB)": [_lae(v, c, x) for v, c, x in
                     zip(t["lae_db"], t["complete"], t["lae_shortfall_db"])],
        "10 dB down (s)": t["ten_db_down_s"].map(lambda v: _num(v, ".2f", missing="none")),
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


def _with_band_range(overall: pd.DataFrame) -> pd.DataFrame:
    """The campaign's overall table with each region named with its band range."""
    if len(overall) == 0:
        return overall
    return overall.assign(region=[f"{r} ({b} Hz)" for r, b in
                                  zip(overall["region"], overall["band_range_hz"])])


def _numbers_per_pass(campaign: Campaign, out: Path, signed: dict) -> pd.DataFrame:
    """Per pass: height, speed, LASmax and LAE measured, the reference flight's per component,
    and each component's overall A level nearest overhead with its band range and interval."""
    rows = []
    for name, spec in campaign.passes.items():
        d = out / name
        al = read_alignment(d)
        m = EVENT_METRICS.read(d).iloc[0]
        row = {"pass": name, "label": spec.label, "status": signed[name]["status"],
               "height (m)": f"{al['height_above_array_m']:.1f}",
               "speed (m/s)": f"{al['speed_m_s']:.1f}",
               "LASmax measured (dB)": f"{m['lasmax_db']:.1f}",
               "LAE measured (dB)": _lae(m["lae_db"], m["ten_db_down_complete"],
                                         m["lae_shortfall_db"]),
               "10 dB down (s)": f"{m['ten_db_down_s']:.2f}"}
        rec = RECONSTRUCTED.read(d)
        for _, r in rec[rec["route"] == "reference flight"].iterrows():
            row[f"{r['component']}: reference LASmax / LAE (dB)"] = (
                f"{r['lasmax_db']:.1f} / {_lae(r['lae_db'], r['complete'], r['lae_shortfall_db'])}")
        overall = LEVELS_OVERALL.read(d)
        if len(overall):
            near = overall.loc[(overall["polar_angle_deg"] - 90).abs()
                               == (overall["polar_angle_deg"] - 90).abs().min()]
            for _, r in near.iterrows():
                value = (f"{r['a_weighted_db']:.1f} +- {_num(Z90 * r['uncertainty_db'])}"
                         if np.isfinite(r["a_weighted_db"]) else f"missing: {r['note']}")
                span = (f", {r['band_range_hz']} Hz" if isinstance(r["band_range_hz"], str)
                        and r["band_range_hz"] else "")
                row[f"{r['region']}: overall A at {r['polar_angle_deg']:.0f} deg{span} "
                    "(dB)"] = value
        rows.append(row)
    return _by_column(rows, "pass")


def _by_column(rows: list[dict], key: str) -> pd.DataFrame:
    """Rows of dicts as a table with one column per ``key`` value and one row per quantity."""
    return (pd.DataFrame(rows).set_index(key).T.fillna("").rename_axis(key)
            .reset_index().rename(columns={key: "quantity"}))


def _numbers_per_label(campaign: Campaign, out: Path, overall: pd.DataFrame,
                       signed: dict) -> pd.DataFrame:
    """Per label: the passes' mean measured LASmax and LAE, and the campaign's overall A level
    per component in the 90 deg bin with its 90 % interval and band range."""
    rows = []
    labels = dict.fromkeys(p.label for p in campaign.passes.values())
    for label in labels:
        names = [n for n, p in campaign.passes.items() if p.label == label]
        status = {n: signed[n]["status"] for n in names}
        # Rejected passes are left out of the means, as of the campaign tables.
        used = [n for n in names if status[n] != "rejected"]
        m = pd.concat([EVENT_METRICS.read(out / n) for n in used]) if used else None
        cut = 0 if m is None else int((~m["ten_db_down_complete"]).sum())
        row = {"label": label or "unlabelled",
               "passes (status)": ", ".join(f"{n} ({s})" for n, s in status.items()),
               "LASmax measured, mean (dB)": ("missing: every pass rejected" if m is None else
                                              f"{m['lasmax_db'].mean():.1f}"),
               "LAE measured, mean (dB)": (
                   "missing: every pass rejected" if m is None else
                   f"{m['lae_db'].mean():.1f}"
                   + (f" ({cut} of {len(used)} cut short: a lower bound)" if cut else ""))}
        sel = overall[(overall["label"] == (label or "unlabelled"))
                      & (overall["quantity"] == "A-weighted")
                      & (overall["polar_bin_deg"] == 90.0)] if len(overall) else overall
        for _, r in sel.iterrows():
            span = (f", {r['band_range_hz']} Hz" if isinstance(r["band_range_hz"], str)
                    and r["band_range_hz"] else "")
            mean = _num(r["mean_db"], missing="")
            row[f"{r['region']}: overall A at 90 deg{span} (dB)"] = (
                f"{mean} +- {_num(r['ci_half_width_db'], missing='(one pass: no interval)')}"
                f" over {r['passes']}"
                + (f" (flagged: {r['passes_flagged']})" if isinstance(r.get("passes_flagged"), str)
                   and r["passes_flagged"] else "")
                if mean else "missing: no pass has a level")
        rows.append(row)
    return _by_column(rows, "label")


def _hemisphere_section(campaign: Campaign, out: Path) -> str:
    """Per label: what the hemispheres cover, their maps and the coverage map."""
    parts = []
    for label, folder in label_folders(p.label for p in campaign.passes.values()).items():
        dest = out / HEMISPHERE_FOLDER / folder
        table = HEMISPHERE.read(dest)
        grid = campaign.analysis.hemisphere
        cells = table.drop_duplicates(["region", "polar_deg", "azimuth_deg"])
        summary = cells.groupby("region", sort=False).agg(
            **{"covered cells": ("polar_deg", "size"),
               "polar (deg)": ("polar_deg", lambda v: f"{v.min():g} to {v.max():g}"),
               "azimuth (deg)": ("azimuth_deg", lambda v: f"{v.min():g} to {v.max():g}")})
        summary["band levels"] = table.groupby("region").size()
        summary = summary.reset_index()
        parts.append(f"""<h3>{html.escape(label or "unlabelled")}</h3>
<p class="muted">hemispheres/{html.escape(folder)}/: hemisphere.csv and hemisphere.nc (NetCDF,
CF-style units); cells of {grid.polar_step_deg:g}&deg; polar &times; {grid.azimuth_step_deg:g}&deg;
azimuth out of {len(grid.polar_deg) * len(grid.azimuth_deg)}.</p>
{_table(summary)}
{_img(HEMISPHERE_FIGURE.path(dest), f"{HEMISPHERE_FIGURE.caption} of {label}")}
{_img(COVERAGE_FIGURE.path(dest), f"{COVERAGE_FIGURE.caption} of {label}")}""")
    return "".join(parts)


def _difference_cell(r) -> str:
    """B minus A with its 90 % interval and a mark where it excludes zero; a difference
    neither side can give reads 'no value', never 'nan'."""
    if not np.isfinite(r.difference_db):
        return "no value"
    interval = (f" [{r.ci90_low_db:+.1f}, {r.ci90_high_db:+.1f}]"
                if np.isfinite(r.ci90_low_db) else "")
    return f"{r.difference_db:+.1f}{interval}" + (" *" if r.differs else "")


def _comparison_section(campaign: Campaign, out: Path) -> str:
    """Per comparison of ``analysis.comparisons``: B minus A near overhead, overall and
    A-weighted, and of the single-event metrics, with the 90 % intervals, and the figure over
    all angles."""
    if not campaign.analysis.comparisons:
        return ""
    parts = ["""<h3 id="comparisons">Comparisons</h3>
<p class="muted">B minus A per region and polar bin: the difference of the labels' mean levels
over a band range both support, with its 90 % interval (the unequal-variance t interval of the
pass-to-pass scatter with the stated uncertainties; the shared calibration cancels within the
campaign). Marked *: the interval excludes zero. No interval: fewer than two passes a side.
Band by band in comparisons/A--B/levels.csv.</p>"""]
    for label_a, label_b in campaign.analysis.comparisons:
        folder = out / COMPARISON_FOLDER / pair_folder(label_a, label_b)
        table = COMPARED_OVERALL.read(folder)
        near = table[(table["polar_bin_deg"] - 90.0).abs() <= 30.0].copy()
        near["cell"] = [_difference_cell(r) for r in near.itertuples()]
        grid = (near.pivot_table(index=["region", "quantity", "band_range_hz"],
                                 columns="polar_bin_deg", values="cell", aggfunc="first")
                .rename(columns=lambda b: f"{b:g} deg").reset_index()) if len(near) else near
        metrics = COMPARED_METRICS.read(folder)
        metrics = pd.DataFrame({
            "metric": [COMPARED_METRIC_NAMES[m] for m in metrics["metric"]],
            "B minus A (dB)": [_difference_cell(r) for r in metrics.itertuples()],
            "passes A / B": [f"{r.n_a} / {r.n_b}" for r in metrics.itertuples()]})
        parts.append(f"""<h4>{html.escape(label_b)} against {html.escape(label_a)}</h4>
{_table(grid)}
<p class="muted">Single-event metrics (comparisons/A--B/metrics.csv):</p>
{_table(metrics)}
{_figure(folder, COMPARISON_FIGURE)}""")
    return "".join(parts)


def _processing_time_s(out: Path) -> float:
    """Sum of the wall times in the workflow's benchmark files (0 when there are none)."""
    total = 0.0
    for tsv in sorted((out / "benchmarks").rglob("*.tsv")) if (out / "benchmarks").exists() else []:
        try:
            total += float(pd.read_csv(tsv, sep="\t")["s"].iloc[-1])
        except (KeyError, IndexError, ValueError, pd.errors.EmptyDataError):
            continue
    return total


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write ``report.html`` from the results already in ``out_dir``."""
    campaign = guarded(campaign, READS, stage="report")
    out = Path(out_dir)
    camp = CAMPAIGN_LEVELS.read(out)
    overall = CAMPAIGN_OVERALL.read(out)
    signed = _signoff_rows(out)
    passes = pd.DataFrame([{"pass": n, "label": p.label,
                            "temperature (C)": a.temperature_c,
                            "humidity (%)": a.relative_humidity_pct,
                            "wind (m/s)": a.wind_speed_m_s,
                            "recording": ", ".join(f.name for f in p.recording_files),
                            "track": p.track.name}
                           for n, p in campaign.passes.items()
                           for a in [pass_atmosphere(read_alignment(out / n))]])
    shown = camp[np.isfinite(camp["mean_db"])] if len(camp) else camp
    n_flags = int(shown["wide_interval"].sum()) if len(shown) else 0
    an = campaign.analysis
    base = campaign.config_path.parent
    digests = pd.DataFrame([{"file": os.path.relpath(f, base), "sha256": file_digest(f)}
                            for f in campaign.input_files()])
    versions = pd.DataFrame([{"software": "flyover", "version": __version__},
                             {"software": "python", "version": platform.python_version()}]
                            + [{"software": p, "version": _version(p)}
                               for p in runtime_dependencies()])
    now = datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    nav = " ".join(f'<a href="#pass-{html.escape(n)}">{html.escape(n)}</a>'
                   for n in campaign.passes)
    body = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta http-equiv="Content-Security-Policy" content="default-src 'none'; img-src data:; style-src 'unsafe-inline'">
<title>flyover report: {html.escape(campaign.config_path.stem)}</title>
<style>{_STYLE}</style></head><body>
<h1>Flyover campaign report</h1>
<p class="muted">{html.escape(campaign.config_path.name)} &middot; generated {now}; file paths
are relative to the campaign file's folder</p>
<p class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</p>
<nav><a href="{viewer.NAME}">interactive viewer</a><a href="#signoff">sign-off</a><a href="#summary">summary</a>{nav}<a href="#provenance">provenance</a></nav>
<h2 id="signoff">Sign-off</h2>
<section id="signoff-table">
<p class="muted">Each pass is accepted, flagged (a limit broken: its numbers stand, with the
reasons) or rejected (no number of it should be signed): the rules, their limits and sources are
in docs/signoff.md (weather_limits and signoff_limits in the campaign file set them). signoff.csv and
signoff.json hold the same with every rule's measured value and limit.</p>
{_table(_signoff_table(signed), flag_column="_flag")}
</section>
<h2 id="summary">Campaign summary</h2>
<section id="campaign-summary">
{_table(passes)}
<h3>The numbers per pass and per label</h3>
<p class="muted">Measured at each pass's metrics microphone (as it measured them); reconstructed
per component for the reference flight from the measured directivity; overall A-weighted
levels of the window nearest overhead over the label's band range, with their 90&nbsp;%
intervals. Rounded to 0.1 dB, 0.01 s and 0.1 m.</p>
{_table(_numbers_per_pass(campaign, out, signed))}
{_table(_numbers_per_label(campaign, out, overall, signed))}
<p>Levels at {an.reference_distance_m:g} m in the reference atmosphere
({an.reference_atmosphere.temperature_c:g} &deg;C, {an.reference_atmosphere.relative_humidity_pct:g} %
RH), free field, convective amplification removed. Per configuration label, region,
one-third-octave band and 10&deg; polar-angle bin: the mean over passes, its standard
deviation, the number of passes and the 90&nbsp;% interval of the mean (the Student-t interval
of the pass-to-pass scatter and the passes' stated uncertainties, combined).
Means whose interval is wider than &plusmn;1.5&nbsp;dB are shaded ({n_flags} band cells here).</p>
{_figure(out, CAMPAIGN_FIGURE)}
<h3>Overall and A-weighted levels</h3>
<p class="muted">Mean level (dB) per polar bin; shaded: interval wider than &plusmn;1.5&nbsp;dB;
italics: one pass only. Each region sums one band range per label (the column band_range_hz of
campaign_overall.csv): a window missing a band of it has no overall.</p>
{_level_grids(_with_band_range(overall), ["label", "quantity"], "region", str, "region")}
<h3>Band levels</h3>
<p class="muted">Mean level (dB) per band and polar bin; shaded: interval wider than
&plusmn;1.5&nbsp;dB; italics: one pass only; empty: not separable (a level that moves with the
unit sources' placement, or a component neither resolved nor dominant) or not measurable; a
component dominating an unresolved neighbour by 10&nbsp;dB keeps its level (levels.csv notes it
'dominant, not resolved'). All columns, with standard deviations and intervals, are in
campaign_levels.csv.</p>
{_level_grids(shown, ["label", "region"], "band_hz", lambda b: f"{b:g} Hz", "band")}
<h3 id="hemispheres">Directivity hemispheres</h3>
<p class="muted">Levels at 1 m (free field, no absorption) of each component over the emission
angles in body axes: polar from the nose across, azimuth about the body's x axis from straight
down (positive to starboard) down the page; one map per region and band range (by default the
label's overall band range). A cell holds the energetic mean of the windows of every pass of the
label that fall in it; cells no window reached stay white and are never filled in. A panel
marked FIT is a low-order spherical-harmonic fit at the covered cells, drawn beside the data
with its residual: a smoothing of the measurement, not a measurement. The coverage map shows
each pass's line across the hemisphere: the empty rows are the offsets to fly next.</p>
{_hemisphere_section(campaign, out)}
{_comparison_section(campaign, out)}
</section>
{''.join(_pass_section(campaign, n, out, signed) for n in campaign.passes)}
<h2 id="provenance">Provenance</h2>
<section id="provenance-details">
<p>Config digest (SHA-256): <code>{file_digest(campaign.config_path)}</code></p>
<p>Report written {now}; processing time of the workflow's jobs so far
{_processing_time_s(out):.0f} s.</p>
{_table(versions)}
<h3>Input files</h3>{_table(digests)}
</section>
</body></html>
"""
    write_text(out / report_file.NAME, body)


def runtime_dependencies(distribution: str = "flyover-noise") -> list[str]:
    """The distribution's own runtime requirements by name, as installed (its metadata: the
    pyproject's dependencies, extras such as the test tools left out)."""
    try:
        required = metadata.requires(distribution) or []
    except metadata.PackageNotFoundError:
        return []
    names = [re.match(r"[A-Za-z0-9_.-]+", r).group(0) for r in required
             if "extra ==" not in r]
    return list(dict.fromkeys(names))


def _version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"

"""The interactive results page (:data:`flyover.io.results.viewer.NAME`), drawn with Bokeh.

Bokeh writes one self-contained HTML file with its JavaScript inlined, the data embedded as
binary arrays and the widgets linked in the browser, so the page needs no server and makes no
request outside its folder (the listening files are referenced by relative paths). What the
widgets do is one short callback (``_REFRESH``): every view is redrawn from the embedded
tables for the pass, window, band and region chosen.
"""

from __future__ import annotations

import html
from dataclasses import dataclass

import numpy as np
import pandas as pd

from flyover.io.results.report import CAUTION

# The map's colour range under each map's peak, and the step its levels are stored in (as
# unsigned bytes: a quarter of the size of floats, finer than the eye can tell).
DYNAMIC_RANGE_DB = 15.0
STEP_DB = 0.1
FLOOR_COLOUR = "#ece6da"   # below the range, or nothing left after diagonal removal
VERDICT_COLOURS = {"resolved": "#1b7837", "dominant, not resolved": "#e08214",
                   "no level": "#b2182b"}


@dataclass(frozen=True)
class ViewerData:
    """What the page shows, gathered from a campaign's result files.

    Attributes
    ----------
    title : str
    passes : DataFrame
        pass, label, status, and the option text of the pass picker.
    windows : DataFrame
        pass, window, polar_angle_deg, time_utc, east_m, north_m, analysed (bool); per pass in
        polar-angle order.
    maps : DataFrame
        pass, window, band_hz, peak_db (dB re 20 uPa at 1 m, the map's peak) and image (uint8
        (n_y, n_x): dB under the peak in STEP_DB steps, 0 below the range).
    levels : DataFrame
        pass, window, polar_angle_deg, band_hz, region, level_db, ci90_low_db, ci90_high_db,
        verdict, note.
    regions : DataFrame
        region, x0, x1, y0, y1 (m, body axes).
    grid : dict
        x_m, y_m: the map's axes (m).
    microphones : DataFrame
        pass, east_m, north_m.
    listening : DataFrame
        pass, region ('' for the microphone), file (relative to the page).
    bands_hz : list of float
    narrowband : DataFrame
        pass, window, region, frequency_hz and psd_db (float32 arrays: dB re (20 uPa)^2/Hz at
        1 m, diagonal removed).
    harmonics : DataFrame
        pass, window, rotor, frequency_hz: the rotors' blade-passing harmonics (may be empty).
    """

    title: str
    passes: pd.DataFrame
    windows: pd.DataFrame
    maps: pd.DataFrame
    levels: pd.DataFrame
    regions: pd.DataFrame
    grid: dict
    microphones: pd.DataFrame
    listening: pd.DataFrame
    bands_hz: list
    narrowband: pd.DataFrame
    harmonics: pd.DataFrame


def stored_map(power_pa2) -> tuple[np.ndarray, float]:
    """A band map (n_x, n_y) in Pa^2 as the page stores it: uint8 (n_y, n_x) of dB under its
    peak in STEP_DB steps (0 at and below DYNAMIC_RANGE_DB under it, or where nothing is
    left), and the peak in dB re 20 uPa (NaN where the map holds no power)."""
    m = np.asarray(power_pa2, float).T
    peak = float(np.max(m)) if m.size else 0.0
    if peak <= 0:
        return np.zeros(m.shape, np.uint8), float("nan")
    with np.errstate(divide="ignore"):
        under = 10 * np.log10(np.where(m > 0, m / peak, 0.0))
    steps = np.clip(np.round((under + DYNAMIC_RANGE_DB) / STEP_DB), 0, DYNAMIC_RANGE_DB / STEP_DB)
    return steps.astype(np.uint8), 10 * np.log10(peak / 4e-10)


_REFRESH = """
// Python dicts arrive as Maps (or plain objects): read and write both alike.
const get = (m, k) => (m instanceof Map ? m.get(k) : m[k]);
const put = (m, k, v) => (m instanceof Map ? m.set(k, v) : (m[k] = v));
// Names from the campaign file go into HTML as text, and into links one path part at a time.
const esc = (t) => String(t).replace(/[&<>"']/g, (c) => `&#${c.charCodeAt(0)};`);
const href = (f) => f.split("/").map(encodeURIComponent).join("/");
const p = picker.value, band = Number(band_picker.value);
const W = windows.data, M = maps.data, L = levels.data, R = regions.data;
// The pass's windows in polar-angle order; a new pass starts at its window nearest 90 deg.
const ws = [];
for (let i = 0; i < W.pass.length; i++) if (W.pass[i] === p && W.analysed[i]) ws.push(i);
if (ws.length === 0) { status.text = `<b>${esc(p)}</b>: no analysed window`; return; }
if (get(state, "pass") !== p) {
  let best = 0;
  ws.forEach((i, k) => { if (Math.abs(W.polar_angle_deg[i] - 90) <
                             Math.abs(W.polar_angle_deg[ws[best]] - 90)) best = k; });
  put(state, "pass", p);
  slider.end = Math.max(ws.length - 1, 1);
  slider.disabled = ws.length < 2;
  if (slider.value !== best) { slider.value = best; return; }   // the slider calls back
}
const wi = ws[Math.min(slider.value, ws.length - 1)], win = W.window[wi];
const polar = W.polar_angle_deg[wi];
slider.title = `polar angle ${polar.toFixed(1)} deg (window ${win}, ${W.time_utc[wi]})`;
// The map of the window and band.
let k = -1;
for (let i = 0; i < M.pass.length; i++)
  if (M.pass[i] === p && M.window[i] === win && M.band_hz[i] === band) { k = i; break; }
if (k >= 0) {
  map_source.data = {image: [M.image[k]]};
  map_plot.title.text = Number.isFinite(M.peak_db[k])
    ? `${p}, ${band} Hz, window ${win}: peak ${M.peak_db[k].toFixed(1)} dB at 1 m`
    : `${p}, ${band} Hz, window ${win}: nothing above the microphones' own noise`;
}
// Each region's level, interval and verdict in this window and band (hover), outlined by
// verdict.
const level = {}, lo = {}, hi = {}, verdict = {}, note = {};
for (let i = 0; i < L.pass.length; i++)
  if (L.pass[i] === p && L.window[i] === win && L.band_hz[i] === band) {
    const r = L.region[i];
    level[r] = L.level_db[i]; lo[r] = L.ci90_low_db[i]; hi[r] = L.ci90_high_db[i];
    verdict[r] = L.verdict[i]; note[r] = L.note[i];
  }
const text = (v) => Number.isFinite(v) ? `${v.toFixed(1)} dB` : "none";
R.level_text = R.region.map((r) => text(level[r]));
R.interval_text = R.region.map((r) => Number.isFinite(lo[r])
  ? `${lo[r].toFixed(1)} to ${hi[r].toFixed(1)} dB` : "none");
R.verdict = R.region.map((r) => verdict[r] || "no level");
R.note = R.region.map((r) => (note[r] && note[r] !== verdict[r] ? note[r] : ""));
R.colour = R.verdict.map((v) => get(colours, v));
regions.change.emit();
// The vehicle on its track over the array.
vehicle.data = {east_m: [W.east_m[wi]], north_m: [W.north_m[wi]]};
// The pass's rows of a table's east and north columns.
const of_pass = (D) => {
  const out = {east_m: [], north_m: []};
  for (let i = 0; i < D.pass.length; i++)
    if (D.pass[i] === p) { out.east_m.push(D.east_m[i]); out.north_m.push(D.north_m[i]); }
  return out;
};
track.data = of_pass(W);
mics.data = of_pass(microphones.data);
// The clicked region: its spectrum in this window, its directivity over the pass and over
// the other passes of the label, and its sound.
const sel = regions.selected.indices;
const region = sel.length ? R.region[sel[0]] : null;
const label = get(picker_labels, p);
const spec = {band_hz: [], level_db: [], lo: [], hi: []};
const dir = {polar: [], level_db: [], lo: [], hi: []};
const others = {};
for (let i = 0; region !== null && i < L.pass.length; i++) {
  if (L.region[i] !== region || !Number.isFinite(L.level_db[i])) continue;
  if (L.pass[i] === p && L.window[i] === win) {
    spec.band_hz.push(L.band_hz[i]); spec.level_db.push(L.level_db[i]);
    spec.lo.push(L.ci90_low_db[i]); spec.hi.push(L.ci90_high_db[i]);
  }
  if (L.band_hz[i] !== band) continue;
  if (L.pass[i] === p) {
    dir.polar.push(L.polar_angle_deg[i]); dir.level_db.push(L.level_db[i]);
    dir.lo.push(L.ci90_low_db[i]); dir.hi.push(L.ci90_high_db[i]);
  } else if (get(picker_labels, L.pass[i]) === label) {
    (others[L.pass[i]] = others[L.pass[i]] || []).push([L.polar_angle_deg[i], L.level_db[i]]);
  }
}
spectrum.data = spec;
directivity.data = dir;
const N = narrowband.data, H = harmonics.data;
let dense = {frequency_hz: [], psd_db: []};
for (let i = 0; region !== null && i < N.pass.length; i++)
  if (N.pass[i] === p && N.window[i] === win && N.region[i] === region)
    dense = {frequency_hz: N.frequency_hz[i], psd_db: N.psd_db[i]};
dense_line.data = dense;
const finite = Array.from(dense.psd_db).filter(Number.isFinite);
const top = finite.length ? Math.max(...finite) : 0, bottom = top - 50;
const marks = {x0: [], y0: [], y1: [], rotor: []};
for (let i = 0; i < H.pass.length; i++)
  if (H.pass[i] === p && H.window[i] === win && finite.length) {
    marks.x0.push(H.frequency_hz[i]); marks.y0.push(bottom); marks.y1.push(top + 3);
    marks.rotor.push(H.rotor[i]);
  }
harmonic_marks.data = marks;
narrowband_plot.title.text = region === null ? "click a region for its narrowband spectrum"
  : `${region}, window ${win}: narrowband density at 1 m in source time, diagonal removed` +
    (marks.x0.length ? "; blade-passing harmonics dotted" : "");
const names = Object.keys(others).sort();
label_passes.data = {xs: names.map((q) => others[q].sort((a, b) => a[0] - b[0]).map((v) => v[0])),
                     ys: names.map((q) => others[q].sort((a, b) => a[0] - b[0]).map((v) => v[1])),
                     pass: names};
now_line.location = polar;
spectrum_plot.title.text = region === null ? "click a region on the map for its spectrum"
  : `${region}, window ${win} (${polar.toFixed(0)} deg): levels, 90 % intervals`;
directivity_plot.title.text = region === null ? "click a region on the map for its directivity"
  : `${region}, ${band} Hz: ${p} (dots) and the label's other passes (grey)`;
const files = listening.data, sounds = [];
for (let i = 0; i < files.pass.length; i++)
  if (files.pass[i] === p && (files.region[i] === "" || files.region[i] === region))
    sounds.push(`<div>${files.region[i] === "" ? "centre microphone, as received"
      : "region " + esc(files.region[i]) + ", source time, at 1 m"}<br>` +
      `<audio controls preload="none" src="${href(files.file[i])}"></audio></div>`);
audio.text = sounds.length ? sounds.join("") : "no listening files for this pass";
const why = region === null ? "" : R.note[R.region.indexOf(region)];
status.text = `<b>${esc(p)}</b> (${esc(label)}): ${get(picker_status, p)}` +
  (region === null ? "" : `; region <b>${esc(region)}</b>: ` +
   `${R.verdict[R.region.indexOf(region)]}${why ? " (" + esc(why) + ")" : ""}`);
"""


def viewer_html(data: ViewerData) -> str:
    """The page: every view and its data in one HTML text."""
    from bokeh.document import Document
    from bokeh.embed import file_html
    from bokeh.events import DocumentReady
    from bokeh.layouts import column, row
    from bokeh.models import (ColorBar, ColumnDataSource, CustomJS, Div, FixedTicker,
                              HoverTool, LinearColorMapper, Range1d, Select, Slider, Span,
                              TapTool)
    from bokeh.palettes import Cividis256
    from bokeh.plotting import figure
    from bokeh.resources import INLINE

    def source(frame, name):
        return ColumnDataSource({c: list(frame[c]) if frame[c].dtype == object
                                 else frame[c].to_numpy() for c in frame.columns}, name=name)

    x, y = np.asarray(data.grid["x_m"]), np.asarray(data.grid["y_m"])
    dx = float(x[1] - x[0]) if len(x) > 1 else 1.0
    dy = float(y[1] - y[0]) if len(y) > 1 else 1.0
    windows = source(data.windows, "windows")
    maps = ColumnDataSource({"pass": list(data.maps["pass"]),
                             "window": data.maps["window"].to_numpy(),
                             "band_hz": data.maps["band_hz"].to_numpy(),
                             "peak_db": data.maps["peak_db"].to_numpy(),
                             "image": list(data.maps["image"])}, name="maps")
    levels = source(data.levels, "levels")
    regions = ColumnDataSource(dict(source(data.regions, "").data,
                                    **{c: [""] * len(data.regions) for c in
                                       ("level_text", "interval_text", "verdict", "note")},
                                    colour=["#999999"] * len(data.regions)), name="regions")
    n_steps = int(round(DYNAMIC_RANGE_DB / STEP_DB))
    map_source = ColumnDataSource({"image": [np.zeros((len(y), len(x)), np.uint8)]},
                                  name="map_source")
    mapper = LinearColorMapper(palette=Cividis256, low=0.5, high=n_steps,
                               low_color=FLOOR_COLOUR)
    map_plot = figure(name="map_plot", width=560, height=430, match_aspect=True,
                      x_range=Range1d(x[0] - dx / 2, x[-1] + dx / 2),
                      y_range=Range1d(y[-1] + dy / 2, y[0] - dy / 2),
                      x_axis_label="x forward (m)", y_axis_label="y starboard (m)",
                      tools="pan,wheel_zoom,reset,save")
    map_plot.image(image="image", source=map_source, x=x[0] - dx / 2, y=y[0] - dy / 2,
                   dw=float(np.ptp(x)) + dx, dh=float(np.ptp(y)) + dy, color_mapper=mapper)
    ticks = np.arange(0.0, DYNAMIC_RANGE_DB + 0.1, 5.0)
    map_plot.add_layout(ColorBar(
        color_mapper=mapper, title="dB under the map's peak",
        ticker=FixedTicker(ticks=list(ticks / STEP_DB)),
        major_label_overrides={float(t / STEP_DB): f"{t - DYNAMIC_RANGE_DB:g}" for t in ticks}),
        "right")
    outlines = map_plot.quad(left="x0", right="x1", bottom="y1", top="y0", source=regions,
                             fill_alpha=0.0, line_color="colour", line_width=2.5,
                             selection_fill_alpha=0.12, selection_fill_color="white",
                             nonselection_fill_alpha=0.0, nonselection_line_alpha=0.7,
                             name="region_outlines")
    map_plot.add_tools(HoverTool(renderers=[outlines], tooltips=[
        ("region", "@region"), ("level", "@level_text"), ("90 % interval", "@interval_text"),
        ("verdict", "@verdict"), ("", "@note")]), TapTool(renderers=[outlines]))

    track_plot = figure(width=430, height=430, match_aspect=True, title="track over the array",
                        x_axis_label="east (m)", y_axis_label="north (m)",
                        tools="pan,wheel_zoom,reset")
    track = ColumnDataSource({"east_m": [], "north_m": []}, name="track")
    mics = ColumnDataSource({"east_m": [], "north_m": []}, name="mics")
    vehicle = ColumnDataSource({"east_m": [], "north_m": []}, name="vehicle")
    track_plot.line("east_m", "north_m", source=track, color="#555555")
    track_plot.scatter("east_m", "north_m", source=mics, size=4, color="#2166ac",
                       legend_label="microphones")
    track_plot.scatter("east_m", "north_m", source=vehicle, size=12, marker="triangle",
                       color="#b2182b", legend_label="vehicle at the window")
    track_plot.legend.location = "top_left"

    spectrum = ColumnDataSource({"band_hz": [], "level_db": [], "lo": [], "hi": []},
                                name="spectrum")
    spectrum_plot = figure(name="spectrum_plot", width=500, height=320, x_axis_type="log",
                           x_axis_label="one-third-octave band (Hz)",
                           y_axis_label="dB re 20 uPa", tools="pan,wheel_zoom,reset,save")
    spectrum_plot.segment("band_hz", "lo", "band_hz", "hi", source=spectrum, color="#777777")
    spectrum_plot.scatter("band_hz", "level_db", source=spectrum, size=7, color="#b35806")
    directivity = ColumnDataSource({"polar": [], "level_db": [], "lo": [], "hi": []},
                                   name="directivity")
    label_passes = ColumnDataSource({"xs": [], "ys": [], "pass": []}, name="label_passes")
    directivity_plot = figure(name="directivity_plot", width=500, height=320,
                              x_axis_label="polar angle (deg, 90 = overhead)",
                              y_axis_label="dB re 20 uPa", tools="pan,wheel_zoom,reset,save")
    directivity_plot.multi_line("xs", "ys", source=label_passes, color="#bbbbbb", line_width=1.5)
    directivity_plot.segment("polar", "lo", "polar", "hi", source=directivity, color="#777777")
    directivity_plot.scatter("polar", "level_db", source=directivity, size=7, color="#542788")
    now_line = Span(location=90.0, dimension="height", line_dash="dashed", line_color="#999999")
    directivity_plot.add_layout(now_line)
    dense_line = ColumnDataSource({"frequency_hz": [], "psd_db": []}, name="dense_line")
    harmonic_marks = ColumnDataSource({"x0": [], "y0": [], "y1": [], "rotor": []},
                                      name="harmonic_marks")
    narrowband_plot = figure(name="narrowband_plot", width=1000, height=280,
                             x_axis_label="frequency in source time (Hz)",
                             y_axis_label="dB re (20 uPa)^2/Hz", tools="pan,wheel_zoom,reset,save")
    narrowband_plot.line("frequency_hz", "psd_db", source=dense_line, color="#222222")
    narrowband_plot.segment("x0", "y0", "x0", "y1", source=harmonic_marks, color="#b35806",
                            line_dash="dotted", line_width=1.5)
    narrowband = ColumnDataSource({
        "pass": list(data.narrowband["pass"]), "window": data.narrowband["window"].to_numpy(),
        "region": list(data.narrowband["region"]),
        "frequency_hz": list(data.narrowband["frequency_hz"]),
        "psd_db": list(data.narrowband["psd_db"])}, name="narrowband")
    harmonics = source(data.harmonics, "harmonics")

    options = [(p, text) for p, text in zip(data.passes["pass"], data.passes["option"])]
    picker = Select(title="pass", options=options, value=options[0][0] if options else "",
                    name="pass_picker")
    bands = [str(float(b)) for b in data.bands_hz]
    band_picker = Select(title="band (Hz)", value=bands[len(bands) // 2] if bands else "",
                         options=[(b, f"{float(b):g}") for b in bands], name="band_picker")
    slider = Slider(start=0, end=1, value=0, step=1, title="polar angle", width=520,
                    show_value=False, name="window_slider")
    status = Div(text="", width=1000, name="status")
    audio = Div(text="", width=440, name="audio")
    listening = source(data.listening, "listening")
    microphones = source(data.microphones, "microphones")
    state = {}
    refresh = CustomJS(code=_REFRESH, args=dict(
        picker=picker, band_picker=band_picker, slider=slider, windows=windows, maps=maps,
        levels=levels, regions=regions, map_source=map_source, map_plot=map_plot,
        vehicle=vehicle, track=track, mics=mics, microphones=microphones, spectrum=spectrum,
        directivity=directivity, label_passes=label_passes, now_line=now_line,
        spectrum_plot=spectrum_plot, directivity_plot=directivity_plot, listening=listening,
        audio=audio, status=status, colours=VERDICT_COLOURS, state=state,
        narrowband=narrowband, harmonics=harmonics, dense_line=dense_line,
        harmonic_marks=harmonic_marks, narrowband_plot=narrowband_plot,
        picker_labels=dict(zip(data.passes["pass"], data.passes["label"])),
        picker_status=dict(zip(data.passes["pass"], data.passes["status"]))))
    picker.js_on_change("value", refresh)
    band_picker.js_on_change("value", refresh)
    slider.js_on_change("value", refresh)
    regions.selected.js_on_change("indices", refresh)

    legend = Div(text="Regions outlined by verdict: " + ", ".join(
        f'<span style="color:{c}"><b>{v}</b></span>' for v, c in VERDICT_COLOURS.items())
        + ". Hover a region for its level; click it for its spectrum, directivity and sound. "
        "Levels at the reference distance in the reference atmosphere; maps are the band "
        "power of the source strength at 1 m, diagonal removed.<br><b>Caution.</b> "
        + html.escape(CAUTION), width=1000)
    layout = column(Div(text=f"<h2>{data.title}</h2>"), row(picker, band_picker, slider),
                    status, legend, row(map_plot, track_plot),
                    row(spectrum_plot, directivity_plot, audio), narrowband_plot)
    doc = Document()
    doc.add_root(layout)
    doc.js_on_event(DocumentReady, refresh)
    return file_html(doc, INLINE, data.title)

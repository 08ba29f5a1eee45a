"""Stage: one self-contained HTML report of the campaign (figures embedded, no external links)."""

from __future__ import annotations

import html
import re
import os
import platform
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path
from urllib.parse import quote

import numpy as np
import pandas as pd

from flyover import __version__
from flyover.io.atomic import write_text
from flyover.io.html_page import (embedded_image, figure_html, html_document, lae_text,
                                  number_text, table_html)
from flyover.io.results.alignment import pass_atmosphere, read_alignment
from flyover.io.results import pass_page, viewer
from flyover.io.results import report as report_file
from flyover.io.digest import file_digest
from flyover.io.results.report import CAUTION
from flyover.io.results.campaign_tables import CAMPAIGN_FIGURE, CAMPAIGN_LEVELS, CAMPAIGN_OVERALL
from flyover.io.results.comparison import (COMPARED_METRIC_NAMES, COMPARED_METRICS,
                                           COMPARED_OVERALL, COMPARISON_FIGURE, pair_folder)
from flyover.io.results.comparison import FOLDER as COMPARISON_FOLDER
from flyover.acoustics.uncertainty import Z90
from flyover.io.results.event_metrics import EVENT_METRICS, RECONSTRUCTED
from flyover.io.results.hemisphere import (COVERAGE_FIGURE, HEMISPHERE, HEMISPHERE_FIGURE,
                                           label_folders)
from flyover.io.results.hemisphere import FOLDER as HEMISPHERE_FOLDER
from flyover.io.results.levels_overall import LEVELS_OVERALL
from flyover.io.results.signoff import SIGNOFF
from flyover.campaign import Campaign
from flyover.model.reads import guarded

# What this stage reads of the campaign (flyover.model.reads): everything it reports.
READS = ("",)



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
        "height (m)": t["height_m"].map(number_text), "speed (m/s)": t["speed_m_s"].map(number_text),
        "closest (m)": t["closest_distance_m"].map(number_text),
        "LASmax (dB)": t["lasmax_db"].map(number_text),
        "LAE (dB)": [lae_text(v, c, x) for v, c, x in
                     zip(t["lae_db"], t["metrics_complete"], t["lae_shortfall_db"])],
        "_flag": t["status"] != "accepted"})


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
               "LAE measured (dB)": lae_text(m["lae_db"], m["ten_db_down_complete"],
                                         m["lae_shortfall_db"]),
               "10 dB down (s)": f"{m['ten_db_down_s']:.2f}"}
        rec = RECONSTRUCTED.read(d)
        for _, r in rec[rec["route"] == "reference flight"].iterrows():
            row[f"{r['component']}: reference LASmax / LAE (dB)"] = (
                f"{r['lasmax_db']:.1f} / {lae_text(r['lae_db'], r['complete'], r['lae_shortfall_db'])}")
        overall = LEVELS_OVERALL.read(d)
        if len(overall):
            near = overall.loc[(overall["polar_angle_deg"] - 90).abs()
                               == (overall["polar_angle_deg"] - 90).abs().min()]
            for _, r in near.iterrows():
                value = (f"{r['a_weighted_db']:.1f} +- {number_text(Z90 * r['uncertainty_db'])}"
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
            mean = number_text(r["mean_db"], missing="")
            row[f"{r['region']}: overall A at 90 deg{span} (dB)"] = (
                f"{mean} +- {number_text(r['ci_half_width_db'], missing='(one pass: no interval)')}"
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
{table_html(summary)}
{embedded_image(HEMISPHERE_FIGURE.path(dest), f"{HEMISPHERE_FIGURE.caption} of {label}")}
{embedded_image(COVERAGE_FIGURE.path(dest), f"{COVERAGE_FIGURE.caption} of {label}")}""")
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
{table_html(grid)}
<p class="muted">Single-event metrics (comparisons/A--B/metrics.csv):</p>
{table_html(metrics)}
{figure_html(folder, COMPARISON_FIGURE)}""")
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
    body = f"""<h1>Flyover campaign report</h1>
<p class="muted">{html.escape(campaign.config_path.name)} &middot; generated {now}; file paths
are relative to the campaign file's folder</p>
<p class="caution"><strong>Caution.</strong> {html.escape(CAUTION)}</p>
<nav><a href="{viewer.NAME}">interactive viewer</a><a href="#signoff">sign-off</a><a href="#summary">summary</a><a href="#passes">passes</a><a href="#provenance">provenance</a></nav>
<h2 id="signoff">Sign-off</h2>
<section id="signoff-table">
<p class="muted">Each pass is accepted, flagged (a limit broken: its numbers stand, with the
reasons) or rejected (no number of it should be signed): the rules, their limits and sources are
in docs/signoff.md (weather_limits and signoff_limits in the campaign file set them). signoff.csv and
signoff.json hold the same with every rule's measured value and limit.</p>
{table_html(_signoff_table(signed), flag_column="_flag")}
</section>
<h2 id="summary">Campaign summary</h2>
<section id="campaign-summary">
{table_html(passes)}
<h3>The numbers per pass and per label</h3>
<p class="muted">Measured at each pass's metrics microphone (as it measured them); reconstructed
per component for the reference flight from the measured directivity; overall A-weighted
levels of the window nearest overhead over the label's band range, with their 90&nbsp;%
intervals. Rounded to 0.1 dB, 0.01 s and 0.1 m.</p>
{table_html(_numbers_per_pass(campaign, out, signed))}
{table_html(_numbers_per_label(campaign, out, overall, signed))}
<p>Levels at {an.reference_distance_m:g} m in the reference atmosphere
({an.reference_atmosphere.temperature_c:g} &deg;C, {an.reference_atmosphere.relative_humidity_pct:g} %
RH), free field, convective amplification removed. Per configuration label, region,
one-third-octave band and 10&deg; polar-angle bin: the mean over passes, its standard
deviation, the number of passes and the 90&nbsp;% interval of the mean (the Student-t interval
of the pass-to-pass scatter and the passes' stated uncertainties, combined).
Means whose interval is wider than &plusmn;1.5&nbsp;dB are shaded ({n_flags} band cells here).</p>
{figure_html(out, CAMPAIGN_FIGURE)}
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
<h2 id="passes">Passes</h2>
<section id="pass-pages">
<p class="muted">Each pass's conditions, clocks, single-event metrics, data quality, track,
spectrograms, source maps, spectra, directivity, rotor tones and narrowband spectra are on a page
of its own in its folder.</p>
{_pass_links(campaign, signed)}
</section>
<h2 id="provenance">Provenance</h2>
<section id="provenance-details">
<p>Config digest (SHA-256): <code>{file_digest(campaign.config_path)}</code></p>
<p>Report written {now}; processing time of the workflow's jobs so far
{_processing_time_s(out):.0f} s.</p>
{table_html(versions)}
<h3>Input files</h3>{table_html(digests)}
</section>"""
    write_text(out / report_file.NAME, html_document(
        f"flyover report: {campaign.config_path.stem}", body))


def _pass_links(campaign: Campaign, signed: dict) -> str:
    """Each pass's page (``PASS/pass.html``) with its status, in the campaign's order."""
    items = []
    for name in campaign.passes:
        status = html.escape(str(signed[name]["status"])) if name in signed else "not signed"
        items.append(f'<li data-pass="{html.escape(name)}" data-status="{status}"><a href="'
                     f'{html.escape(quote(name))}/{pass_page.NAME}">{html.escape(name)}</a> '
                     f'({html.escape(campaign.passes[name].label or "no label")}): {status}</li>')
    return f"<ul>{''.join(items)}</ul>"


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

"""Stage: the sign-off of every pass: a status (accepted, flagged, rejected), every rule it
breaks with the measured value and the limit, and its headline numbers.

The rules and their sources are stated in docs/signoff.md; the limits are the campaign's
``signoff_limits`` and ``weather_limits`` (:class:`flyover.campaign.SignoffLimits`).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from flyover.acoustics.weather import weather_findings
from flyover.io.results.alignment import clock_uncertainty_s, read_alignment
from flyover.io.results.event_metrics import EVENT_METRICS, RECONSTRUCTED
from flyover.io.results.signoff import SIGNOFF, write_signoff_json
from flyover.io.results.track_check import read_track_check
from flyover.io.results.windows import WINDOWS
from flyover.campaign import Campaign
from flyover.model.reads import guarded
from flyover.model.signoff import FLAG, REJECT, Finding, label_findings, status_of

# What this stage reads of the campaign (flyover.model.reads): its re-run fingerprint too.
READS = ("passes", "weather_limits", "signoff_limits", "analysis.uncertainty.clock_s")
# A window is the pass's 90 deg window when its polar angle is this close to overhead (the
# windows are anchored on the closest approach, whose angle is 90 deg by definition).
OVERHEAD_WINDOW_DEG = 2.0


def pass_findings(facts: dict, *, limits, weather_limits, clock_given_s: float,
                  partial: bool) -> list[Finding]:
    """The rules one pass breaks.

    Parameters
    ----------
    facts : dict
        ``alignment`` (alignment.json), ``windows`` (windows.csv), ``metrics``
        (event_metrics.csv), ``reconstructed`` (reconstructed_metrics.csv) and
        ``track_check`` (track_check.json, optional) of the pass.
    limits : SignoffLimits
    weather_limits : WeatherLimits
    clock_given_s : float
        The stated uncertainty of a clock given by hand.
    partial : bool
        The pass is meant not to reach overhead: its missing 90 deg window flags, not rejects.
    """
    al, windows = facts["alignment"], facts["windows"]
    out = []
    weather = al.get("weather") or al["atmosphere"]
    for name, value, limit, unit in weather_findings(weather, weather_limits, al["course_deg"]):
        if value > limit:
            out.append(Finding(name, round(value, 1), limit, unit, FLAG,
                               f"{name} {value:.1f} {unit} over the limit {limit:g} {unit}"))
    analysed = windows[windows["status"] == "analysed"]
    gap = (analysed["polar_angle_deg"].astype(float) - 90.0).abs()
    has_overhead = bool(al.get("reaches_overhead", True)) and bool(
        len(gap) and gap.min() <= OVERHEAD_WINDOW_DEG)
    if not has_overhead:
        why = ("the track does not reach overhead" if not al.get("reaches_overhead", True)
               else "no analysed window at 90 deg")
        out.append(Finding("90 deg window", "none", "required", "", FLAG if partial else REJECT,
                           why + (" (the pass is marked partial)" if partial else "")))
    if len(windows):
        skipped = 100.0 * (1.0 - len(analysed) / len(windows))
        if skipped > limits.windows_skipped_max_pct:
            out.append(Finding("windows skipped", round(skipped, 1),
                               limits.windows_skipped_max_pct, "%", FLAG,
                               f"{len(windows) - len(analysed)} of {len(windows)} windows "
                               f"skipped ({skipped:.0f} %, limit "
                               f"{limits.windows_skipped_max_pct:g} %)"))
    left_out = len(al.get("quality_excluded_channels", []))
    share = 100.0 * left_out / max(int(al["microphones"]), 1)
    if share > limits.channels_left_out_max_pct:
        out.append(Finding("channels left out", round(share, 1), limits.channels_left_out_max_pct,
                           "%", FLAG, f"{left_out} of {al['microphones']} microphones left out "
                           f"by the quality checks ({share:.0f} %, limit "
                           f"{limits.channels_left_out_max_pct:g} %)"))
    clock_ms = 1000.0 * clock_uncertainty_s(al, clock_given_s)
    if clock_ms > limits.clock_uncertainty_max_ms:
        out.append(Finding("clock uncertainty", round(clock_ms, 2),
                           limits.clock_uncertainty_max_ms, "ms", FLAG,
                           f"clock offset uncertain by {clock_ms:.2f} ms (limit "
                           f"{limits.clock_uncertainty_max_ms:g} ms)"))
    metrics = facts["metrics"]
    if len(metrics) and not bool(metrics["ten_db_down_complete"].iloc[0]):
        out.append(_cut_short("measured single-event metrics", metrics.iloc[0],
                              "the recording cuts the 10 dB-down interval short"))
    out += track_findings(facts.get("track_check"), limits.track_offset_max_m)
    rec = facts["reconstructed"]
    ref = rec[(rec["route"] == "reference flight") & (rec["component"] == "total")]
    if len(ref) and not bool(ref["complete"].iloc[0]):
        out.append(_cut_short("reference-flight metrics", ref.iloc[0],
                              "the measured directivity ends before 10 dB down"))
    return out


def _finite_or_none(column):
    """A table's first value, None where it is not a finite number (JSON has no inf)."""
    v = float(column.iloc[0])
    return v if np.isfinite(v) else None


def _cut_short(rule: str, row, why: str) -> Finding:
    """The finding of metrics whose 10 dB-down interval is cut short, with LAE's estimated
    shortfall (``lae_shortfall_db``)."""
    short = float(row["lae_shortfall_db"])
    if np.isfinite(short):
        return Finding(rule, round(short, 1), 0.0, "dB short", FLAG,
                       f"{why}: LAE and the duration are lower bounds, LAE about "
                       f"{short:.1f} dB short (spherical-spreading estimate)")
    return Finding(rule, "incomplete", "complete", "", FLAG,
                   f"{why} on the side of the peak: LAE and the duration are lower bounds and "
                   "the shortfall cannot be estimated")


def track_findings(check: dict | None, tolerance_m: float) -> list[Finding]:
    """The acoustic track check against its tolerance: per axis, an offset of best focus beyond
    the tolerance (plus, along-track and laterally, the anchor region's half-extent: the source
    may sit anywhere in it) or at the scan's edge flags the pass; so does a scan that cannot
    decide (no source to focus on), which then says so."""
    if check is None:
        return []
    out = []
    axes = check.get("axes", {})
    if not axes:
        return [Finding("acoustic track check", "not run", "windows near overhead", "", FLAG,
                        "the acoustic track check found no window near overhead")]
    for axis, r in axes.items():
        allowed = tolerance_m + float(check["region_half_extent_m"].get(axis, 0.0))
        if not r["decided"]:
            out.append(Finding(f"track {axis} against the sound", "undecided",
                               f"+- {allowed:.2f}", "m", FLAG,
                               f"the acoustic track check cannot decide the {axis} offset "
                               f"(best focus {r['peak_focus']:.2f}: no clear source at "
                               f"the {check['anchor']})"))
        elif r["at_edge"] or abs(r["offset_m"]) > allowed:
            beyond = " (at the scan's edge: possibly more)" if r["at_edge"] else ""
            out.append(Finding(f"track {axis} against the sound", round(r["offset_m"], 2),
                               f"+- {allowed:.2f}", "m", FLAG,
                               f"the sound is in best focus with the track moved "
                               f"{r['offset_m']:+.2f} m in {axis}{beyond} (+- "
                               f"{r['uncertainty_m']:.2f} m; tolerance {allowed:.2f} m): "
                               "check the track's heights, datum and antenna offset"))
    return out


def run(campaign: Campaign, out_dir: Path) -> None:
    """Write signoff.csv and signoff.json in the campaign's result folder."""
    campaign = guarded(campaign, READS, stage="signoff")
    out_dir = Path(out_dir)
    facts = {}
    for name in campaign.passes:
        folder = out_dir / name
        facts[name] = {"alignment": read_alignment(folder), "windows": WINDOWS.read(folder),
                       "metrics": EVENT_METRICS.read(folder),
                       "reconstructed": RECONSTRUCTED.read(folder),
                       "track_check": read_track_check(folder)}
    labels = {n: campaign.passes[n].label for n in campaign.passes}
    by_label = label_findings({n: f["alignment"]["height_above_array_m"] for n, f in facts.items()},
                              {n: f["alignment"]["speed_m_s"] for n, f in facts.items()},
                              labels, campaign.signoff_limits)
    rows, record = [], {}
    for name, f in facts.items():
        findings = pass_findings(
            f, limits=campaign.signoff_limits, weather_limits=campaign.weather_limits,
            clock_given_s=campaign.analysis.uncertainty.clock_s,
            partial=campaign.passes[name].partial) + by_label[name]
        al, m = f["alignment"], f["metrics"]
        headline = {"height_m": al["height_above_array_m"], "speed_m_s": al["speed_m_s"],
                    "closest_distance_m": al["closest_distance_m"],
                    "lasmax_db": float(m["lasmax_db"].iloc[0]) if len(m) else None,
                    "lae_db": float(m["lae_db"].iloc[0]) if len(m) else None,
                    "metrics_complete": bool(len(m)) and bool(m["ten_db_down_complete"].iloc[0]),
                    "lae_shortfall_db": _finite_or_none(m["lae_shortfall_db"]) if len(m) else None}
        status = status_of(findings)
        rows.append({"pass": name, "label": labels[name], "status": status,
                     "reasons": "; ".join(x.text for x in findings), **headline})
        record[name] = {"label": labels[name], "status": status, "headline": headline,
                        "findings": [x.as_dict() for x in findings]}
    SIGNOFF.write(out_dir, pd.DataFrame(rows, columns=SIGNOFF.column_names))
    write_signoff_json(out_dir, record)

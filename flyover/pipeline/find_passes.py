"""The passes of a flight day: every flyover of the array in each flight's log, checked against
the tolerances and against what the recording holds, written as pass entries for the campaign
file (``flyover find-passes``)."""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np
import pandas as pd

from flyover.campaign import Campaign
from flyover.geometry.flight_passes import (FoundPass, PassTolerances, find_flyovers,
                                            proposed_labels)
from flyover.io.atomic import write_text
from flyover.io.config import flights_campaign
from flyover.io.csvtable import write_csv
from flyover.model.signoff import REJECT, Finding
from flyover.model.timebase import iso_utc
from flyover.pipeline.context import common_span_s, load_layout, pass_recorders, read_track

# Reception times are placed with a nominal speed of sound: 1 % off moves them by 0.01 s at
# 300 m, well inside the span's margin.
NOMINAL_C_M_S = 343.0
# The span reaches this far beyond the stretch (emission start, last reception), at least a
# window: the windows at the extreme angles then lie inside it.
SPAN_MARGIN_S = 1.0
FILE_STEM = "found-passes"
# 10 dB down under spherical spreading (the inverse-square law, common practice): sqrt(10)
# closest distances away, sqrt(10 - 1) = 3 of them along the track.
TEN_DB_DOWN_DISTANCES = 3.0


@dataclass(frozen=True)
class FlightFlyover:
    """A flyover found in one flight, placed in UTC, with what the log and recording say.

    Attributes
    ----------
    flight : str
    found : FoundPass
        Its geometry and verdict (times relative to ``epoch_utc_ns``).
    epoch_utc_ns : int
    span_utc_ns : (int, int)
        The proposed ``span_utc``: the stretch (and the 10 dB-down interval of spherical
        spreading) from its first emission to its last reception, with a margin, kept clear
        of the neighbouring flyovers.
    covered : bool
        Whether the recording holds the whole span.
    rpm : dict
        Mean logged speed per motor over the stretch (empty without motor speeds).
    """

    flight: str
    found: FoundPass
    epoch_utc_ns: int
    span_utc_ns: tuple[int, int]
    covered: bool
    rpm: dict

    def utc_ns(self, t_s: float) -> int:
        return self.epoch_utc_ns + int(round(t_s * 1e9))

    def flight_findings(self) -> list:
        """Why the flyover was not flown as a pass (turning, climbing, speed, hovering, a log
        that stops), as the sign-off's rejections: the quick look of it says to fly again."""
        return [Finding("flown as a pass", "no", "straight, level and steady", "", REJECT,
                        f"not flown as a pass: {why}") for why in self.found.problems]

    @property
    def problems(self) -> tuple[str, ...]:
        return self.found.problems + (() if self.covered else (
            "the recording does not hold the whole span (the analysed angles and the sound's "
            "travel)",))


def find_day(campaign_path, *, flights=None, tolerances: PassTolerances = PassTolerances()):
    """Every flyover of every flight of a campaign file (its key ``flights``).

    Parameters
    ----------
    campaign_path : path-like
    flights : sequence of str, optional
        The flights to search (default: all).
    tolerances : PassTolerances
        Its ``max_polar_offset_deg`` is replaced by the campaign's analysed angles.

    Returns
    -------
    campaign : Campaign
        The campaign with its flights as passes (:func:`flyover.io.config.flights_campaign`).
    flyovers : list of FlightFlyover
    labels : list of str
        A proposed label per flyover ("" for one that is not a pass).
    """
    campaign = flights_campaign(campaign_path)
    tol = replace(tolerances, max_polar_offset_deg=campaign.analysis.max_polar_offset_deg)
    names = list(campaign.passes) if flights is None else list(flights)
    out = []
    for name in names:
        out += _flight_flyovers(campaign, name, tol)
    passes = [f for f in out if not f.problems]
    mean_rpm = [np.mean(list(f.rpm.values())) if f.rpm else np.nan for f in passes]
    proposed = iter(proposed_labels([f.found for f in passes], height_m=tol.height_m,
                                    speed_pct=tol.speed_pct, rpm=mean_rpm))
    labels = [next(proposed) if not f.problems else "" for f in out]
    return campaign, out, labels


def _flight_flyovers(campaign: Campaign, name: str, tol: PassTolerances) -> list:
    """The flyovers of one flight, with their spans, coverage and rotor speeds."""
    spec = campaign.passes[name]
    layout = load_layout(campaign, name)
    offset = 0.0 if spec.clock_offset_s == "auto" else float(spec.clock_offset_s)
    recorders, clock, _ = pass_recorders(campaign, name, layout, offset)
    rec = clock.utc_ns(np.array(common_span_s(clock, recorders)))
    samples = read_track(campaign, spec)
    epoch = int(samples.utc_ns[0])
    t = (samples.utc_ns - epoch) * 1e-9
    found = find_flyovers(t, samples.enu_m, layout.center_enu_m, tol)
    # Each span runs from the stretch's first emission to its last reception, with a margin,
    # and stops halfway to the next flyover's; its ends on whole tenths of a second.
    margin = max(SPAN_MARGIN_S, campaign.analysis.window_s)
    reach = []
    for f in found:
        # The single-event metrics need the level 10 dB under its peak: under spherical
        # spreading at three closest distances along the track either side.
        closest = float(np.hypot(f.height_m, f.offset_m))
        down = TEN_DB_DOWN_DISTANCES * closest / max(f.speed_m_s, 1e-3)
        first, last_s = min(f.start_s, f.overhead_s - down), max(f.end_s, f.overhead_s + down)
        last = [np.interp(last_s, t, samples.enu_m[:, k]) for k in range(3)]
        travel = float(np.linalg.norm(np.array(last) - layout.center_enu_m)) / NOMINAL_C_M_S
        reach.append([first - margin, last_s + travel + margin])
    for a, b in zip(reach, reach[1:]):
        if a[1] > b[0]:
            a[1] = b[0] = 0.5 * (a[1] + b[0])
    out = []
    for f, (lo, hi) in zip(found, reach):
        span = tuple(int(round((epoch + x * 1e9) / 1e8)) * 100_000_000 for x in (lo, hi))
        rpm = {}
        for m in samples.motors:
            k = (m.utc_ns >= epoch + f.start_s * 1e9) & (m.utc_ns <= epoch + f.end_s * 1e9)
            if k.any():
                rpm[m.motor] = float(np.mean(m.rpm[k]))
        out.append(FlightFlyover(name, f, epoch, span,
                                 bool(rec[0] <= span[0] and span[1] <= rec[1]), rpm))
    return out


def pass_names(flyovers: list, labels: list) -> list[str]:
    """A name per pass (``FLIGHT-01``, numbered per flight), "" for a flyover that is not one."""
    count: dict = {}
    names = []
    for f, label in zip(flyovers, labels):
        if f.problems:
            names.append("")
            continue
        count[f.flight] = count.get(f.flight, 0) + 1
        names.append(f"{f.flight}-{count[f.flight]:02d}")
    return names


def flyover_table(flyovers: list, labels: list) -> pd.DataFrame:
    """One row per flyover: where and when, as flown, its proposed span and label, or why it is
    not a pass (``found-passes.csv``)."""
    rows = []
    for f, label, name in zip(flyovers, labels, pass_names(flyovers, labels)):
        g = f.found
        rows.append({
            "flight": f.flight, "pass": name, "is_pass": not f.problems,
            "overhead_utc": iso_utc(f.utc_ns(g.overhead_s)),
            "stretch_start_utc": iso_utc(f.utc_ns(g.start_s)),
            "stretch_end_utc": iso_utc(f.utc_ns(g.end_s)),
            "span_start_utc": iso_utc(f.span_utc_ns[0]),
            "span_end_utc": iso_utc(f.span_utc_ns[1]),
            "course_deg": g.course_deg, "height_m": g.height_m, "speed_m_s": g.speed_m_s,
            "offset_m": g.offset_m,
            "rotor_rpm": " ".join(f"{k}:{v:.0f}" for k, v in sorted(f.rpm.items())),
            "recording_covers": f.covered, "label": label,
            "reasons": "; ".join(f.problems)})
    return pd.DataFrame(rows)


def pass_entries_yaml(flyovers: list, labels: list, *, source: str) -> str:
    """The passes as entries to paste under the campaign file's ``passes`` key (each naming its
    flight and span, with the proposed label), and the flyovers that are not passes, with their
    reasons, as comments."""
    lines = [f"# Passes found by flyover find-passes in {source}. Paste the entries under",
             "# 'passes:' and edit the labels; each comment gives the pass as flown over the",
             "# analysed angles.", "passes:"]
    rejected = []
    for f, label, name in zip(flyovers, labels, pass_names(flyovers, labels)):
        g = f.found
        if not name:
            rejected.append(f"#   {f.flight} at {iso_utc(f.utc_ns(g.overhead_s))}: "
                            + "; ".join(f.problems))
            continue
        rotors = (", rotors " + " ".join(f"{k}:{v:.0f} rpm" for k, v in sorted(f.rpm.items()))
                  if f.rpm else "")
        lines += [f"  {name}:   # overhead {iso_utc(f.utc_ns(g.overhead_s))}, course "
                  f"{g.course_deg:.0f} deg, height {g.height_m:.1f} m, speed {g.speed_m_s:.1f} "
                  f"m/s, offset {g.offset_m:+.1f} m{rotors}",
                  f"    flight: {f.flight}",
                  f'    span_utc: ["{iso_utc(f.span_utc_ns[0])}", "{iso_utc(f.span_utc_ns[1])}"]',
                  f"    label: {label}"]
    if rejected:
        lines += ["# Flyovers that are not passes, and why:"] + rejected
    return "\n".join(lines) + "\n"


def write_found(folder, flyovers: list, labels: list, *, source: str) -> tuple[Path, Path]:
    """Write ``found-passes.yaml`` and ``found-passes.csv`` into a folder."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    entries = folder / f"{FILE_STEM}.yaml"
    table = folder / f"{FILE_STEM}.csv"
    write_text(entries, pass_entries_yaml(flyovers, labels, source=source))
    write_csv(table, flyover_table(flyovers, labels), float_format="%.2f")
    return entries, table
